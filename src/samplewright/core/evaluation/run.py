"""An evaluation run in memory: the plan, the model, the finished passages and their measures.

A run fills passage by passage; the measures of a preset are computed from the
finished passages only (:meth:`EvaluationRun.preset_summary`). The JSON form
(:meth:`EvaluationRun.to_dict`) is the run file's content (:mod:`.run_file`).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

from ..presets import now_iso
from ..results import Sample, TokenStep
from . import measures
from .pareto import pareto_front
from .plan import RunPlan

FORMAT = "samplewright-run"
FORMAT_VERSION = 1
_TOKEN_FIELDS = ("raw_p", "p", "kept", "raw_entropy_bits", "entropy_bits")


@dataclasses.dataclass
class PassageOutcome:
    """One finished passage: ``samples[preset][sample]`` and their per-sample measures."""

    prompt_tokens: int
    dropped: int
    samples: list[list[Sample]]
    seconds: float = 0.0
    tables: list[list[dict[str, float | None]]] = dataclasses.field(default_factory=list)

    def __post_init__(self) -> None:
        if not self.tables:
            self.tables = [measures.passage_table(row) for row in self.samples]


@dataclasses.dataclass(frozen=True)
class PresetSummary:
    """One preset's measures: pooled over the finished passages and per passage."""

    pooled: dict[str, measures.Estimate]
    per_passage: dict[int, dict[str, measures.Estimate]]  # passage index -> measures


@dataclasses.dataclass
class EvaluationRun:
    """A run: what was asked, with which model, and what is finished so far."""

    plan: RunPlan
    model: dict[str, Any]
    created: str = dataclasses.field(default_factory=now_iso)
    user: str = ""
    tool_version: str = ""
    outcomes: dict[int, PassageOutcome] = dataclasses.field(default_factory=dict)
    cancelled: bool = False
    path: Path | None = None
    _summaries: dict[int, PresetSummary] = dataclasses.field(default_factory=dict, repr=False, compare=False)

    @property
    def finished(self) -> bool:
        """True when every passage is done."""
        return len(self.outcomes) == len(self.plan.passages)

    def add(self, index: int, outcome: PassageOutcome) -> None:
        """Record a finished passage (the cached measures are recomputed)."""
        self.outcomes[index] = outcome
        self._summaries.clear()

    def tokens_done(self) -> int:
        """Generated tokens over the finished passages."""
        return sum(len(s.tokens) for o in self.outcomes.values() for row in o.samples for s in row)

    def preset_summary(self, preset: int) -> PresetSummary:
        """The measures of preset ``preset`` (index into ``plan.presets``), computed once per state."""
        if preset not in self._summaries:
            seed = [self.plan.seed, preset]
            done = sorted(self.outcomes)
            pooled = measures.estimates([self.outcomes[j].tables[preset] for j in done], seed)
            per = {j: measures.estimates([self.outcomes[j].tables[preset]], [*seed, 1 + j]) for j in done}
            self._summaries[preset] = PresetSummary(pooled, per)
        return self._summaries[preset]

    def pareto(self, x: str = "diversity", y: str = "coherence") -> list[bool]:
        """Per preset, whether it is on the Pareto front of measures ``x`` and ``y`` (pooled)."""
        points = [
            (self.preset_summary(i).pooled[x].value, self.preset_summary(i).pooled[y].value)
            for i in range(len(self.plan.presets))
        ]
        return pareto_front(points, (measures.HIGHER_IS_BETTER[x], measures.HIGHER_IS_BETTER[y]))

    # -- JSON ------------------------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """The run file's content, measures included."""
        labels = self.plan.passage_labels()
        return {
            "format": FORMAT,
            "version": FORMAT_VERSION,
            "created": self.created,
            "user": self.user,
            "tool_version": self.tool_version,
            "model": self.model,
            "plan": self.plan.to_dict(),
            "cancelled": self.cancelled,
            "finished": self.finished,
            "passages_done": [
                {
                    "index": j,
                    "name": labels[j],
                    "text_hash": self.plan.passages[j].text_hash,
                    "prompt_tokens": o.prompt_tokens,
                    "dropped": o.dropped,
                    "seconds": o.seconds,
                    "samples": [[sample_to_dict(s) for s in row] for row in o.samples],
                    "tables": o.tables,
                }
                for j, o in sorted(self.outcomes.items())
            ],
            "measures": self.measures_dict(),
        }

    def measures_dict(self) -> list[dict[str, Any]]:
        """Per preset: pooled and per-passage measures as plain JSON (estimates in full)."""
        labels = self.plan.passage_labels()
        out = []
        for i, entry in enumerate(self.plan.presets):
            summary = self.preset_summary(i)
            out.append(
                {
                    "name": entry.preset.name,
                    "pooled": {k: e.to_dict() for k, e in summary.pooled.items()},
                    "per_passage": [
                        {"passage": labels[j], **{k: e.to_dict() for k, e in m.items()}}
                        for j, m in sorted(summary.per_passage.items())
                    ],
                }
            )
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any], path: Path | None = None) -> EvaluationRun:
        """The run of a run file's content (measures are recomputed from the samples)."""
        plan = RunPlan.from_dict(data["plan"])
        run = cls(plan, dict(data["model"]), data["created"], data.get("user", ""), data.get("tool_version", ""))
        run.cancelled, run.path = bool(data.get("cancelled")), path
        for entry in data["passages_done"]:
            samples = [[sample_from_dict(s) for s in row] for row in entry["samples"]]
            outcome = PassageOutcome(entry["prompt_tokens"], entry["dropped"], samples, entry.get("seconds", 0.0))
            run.outcomes[int(entry["index"])] = outcome
        return run


def sample_to_dict(sample: Sample) -> dict[str, Any]:
    """A sample with its per-token records, column by column."""
    out: dict[str, Any] = {
        "preset": sample.preset_index,
        "sample": sample.sample_index,
        "stop_reason": sample.stop_reason,
        "text": sample.text,
        "token_ids": sample.token_ids,
        "pieces": [t.text for t in sample.tokens],
    }
    for name in _TOKEN_FIELDS:
        out[name] = [getattr(t, name) for t in sample.tokens]
    return out


def sample_from_dict(data: dict[str, Any]) -> Sample:
    """The sample of :func:`sample_to_dict`'s form."""
    columns = [data["token_ids"], data["pieces"], *(data[name] for name in _TOKEN_FIELDS)]
    tokens = [
        TokenStep(int(i), str(t), float(r), float(p), int(k), float(h0), float(h))
        for i, t, r, p, k, h0, h in zip(*columns, strict=True)
    ]
    return Sample(int(data["preset"]), int(data["sample"]), tokens, data["stop_reason"], str(data["text"]))
