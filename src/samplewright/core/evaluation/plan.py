"""What an evaluation run asks: presets × passages × N samples, one budget, one seed.

Sample i of every preset on passage j shares one random stream: the engine's
coupled sampler keys its noise by (seed, sample index, step), and the runner
gives each passage its own seed, derived from the run seed and the passage's
text hash (:func:`passage_seed`), so the streams differ between passages and
a passage keeps its stream whatever else is in the run.
"""

from __future__ import annotations

import dataclasses
import hashlib
from typing import Any

from ..errors import RequestError
from ..framing import Framing
from ..presets import Preset
from .passage_sets import PassageSet, text_hash
from .sweep import Axis

MAX_SAMPLES = 64
MAX_TOKENS = 512


def passage_seed(run_seed: int, passage_hash: str) -> int:
    """The passage's seed: the first 63 bits of SHA-256 of ``"<run seed>:<text hash>"``."""
    digest = hashlib.sha256(f"{int(run_seed)}:{passage_hash}".encode("ascii")).digest()
    return int.from_bytes(digest[:8], "big") >> 1


@dataclasses.dataclass(frozen=True)
class PresetEntry:
    """A preset of the run and, when it came from the library, its record id and revision."""

    preset: Preset
    record_id: str | None = None
    revision: int | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return {"definition": self.preset.to_dict(), "record_id": self.record_id, "revision": self.revision}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> PresetEntry:
        """The entry of its JSON form."""
        return cls(Preset.from_dict(data["definition"]), data.get("record_id"), data.get("revision"))


@dataclasses.dataclass(frozen=True)
class PassageEntry:
    """A passage of the run: its set, name, text and framing."""

    set_name: str
    name: str
    text: str
    framing: Framing = Framing()

    @property
    def text_hash(self) -> str:
        """SHA-256 of the text (hex)."""
        return text_hash(self.text)

    def label(self, several_sets: bool) -> str:
        """The passage's name, with its set when the run has several."""
        return f"{self.set_name}/{self.name}" if several_sets else self.name

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return {
            "set": self.set_name,
            "name": self.name,
            "text": self.text,
            "text_hash": self.text_hash,
            "framing": self.framing.to_dict(),
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> PassageEntry:
        """The entry of its JSON form."""
        return cls(data["set"], data["name"], data["text"], Framing.from_dict(data["framing"]))


@dataclasses.dataclass(frozen=True)
class Sweep:
    """The base preset and the varied fields of a sweep run."""

    base: Preset
    axes: tuple[Axis, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return {"base": self.base.to_dict(), "axes": [a.to_dict() for a in self.axes]}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Sweep:
        """The sweep of its JSON form."""
        return cls(Preset.from_dict(data["base"]), tuple(Axis.from_dict(a) for a in data["axes"]))


@dataclasses.dataclass(frozen=True)
class RunPlan:
    """Everything that fixes a run's samples (with the model)."""

    presets: tuple[PresetEntry, ...]
    passages: tuple[PassageEntry, ...]
    samples: int
    tokens: int
    seed: int
    sweep: Sweep | None = None

    def __post_init__(self) -> None:
        if not self.presets:
            raise RequestError("a run needs at least one preset")
        if not self.passages:
            raise RequestError("a run needs at least one passage")
        if not 1 <= int(self.samples) <= MAX_SAMPLES:
            raise RequestError(f"samples must be from 1 to {MAX_SAMPLES}, got {self.samples}")
        if not 1 <= int(self.tokens) <= MAX_TOKENS:
            raise RequestError(f"the token budget must be from 1 to {MAX_TOKENS}, got {self.tokens}")
        if int(self.seed) < 0:
            raise RequestError(f"the seed must be a whole number 0 or more, got {self.seed}")

    @property
    def several_sets(self) -> bool:
        """True when the passages come from more than one set."""
        return len({p.set_name for p in self.passages}) > 1

    def passage_labels(self) -> list[str]:
        """The passages' names as shown (with the set when there are several)."""
        return [p.label(self.several_sets) for p in self.passages]

    def row_budget(self, index: int) -> int:
        """Upper bound of the tokens one sample of preset ``index`` writes."""
        return min(self.tokens, self.presets[index].preset.max_new_tokens)

    def passage_budget(self) -> int:
        """Upper bound of the tokens written for one passage."""
        return sum(self.row_budget(i) for i in range(len(self.presets))) * self.samples

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return {
            "presets": [p.to_dict() for p in self.presets],
            "passages": [p.to_dict() for p in self.passages],
            "samples": self.samples,
            "tokens": self.tokens,
            "seed": self.seed,
            "sweep": self.sweep.to_dict() if self.sweep else None,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RunPlan:
        """The plan of its JSON form."""
        return cls(
            tuple(PresetEntry.from_dict(p) for p in data["presets"]),
            tuple(PassageEntry.from_dict(p) for p in data["passages"]),
            int(data["samples"]),
            int(data["tokens"]),
            int(data["seed"]),
            Sweep.from_dict(data["sweep"]) if data.get("sweep") else None,
        )


def passages_of(sets: list[PassageSet]) -> tuple[PassageEntry, ...]:
    """The run's passages from one or more sets, in set order then name order."""
    return tuple(PassageEntry(s.name, p.name, p.text, s.framing) for s in sets for p in s.passages)
