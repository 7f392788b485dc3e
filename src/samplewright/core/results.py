"""Plain data produced by the engine: generated tokens, samples, auditions
and the step view. Shared by the CLI and the window; no torch, no Qt."""

from __future__ import annotations

import dataclasses

import numpy as np

from .framing import Framing
from .limits import DEFAULT_NEW_TOKENS, DEFAULT_SAMPLES, DEFAULT_SEED
from .presets import Preset

#: Why a sample ended.
STOP_REASONS = ("length", "eos", "stop", "cancelled")


@dataclasses.dataclass(frozen=True)
class TokenStep:
    """One generated token and the distribution it was drawn from."""

    token_id: int
    text: str  # the token's own text piece
    raw_p: float  # probability under the unshaped model (temperature 1)
    p: float  # probability under the preset's shaped distribution
    kept: int  # tokens left with nonzero probability after shaping
    raw_entropy_bits: float  # entropy of the unshaped distribution
    entropy_bits: float  # entropy of the shaped distribution
    piece: bytes | None = None  # the token's own bytes, when known without the model (a reopened file)


@dataclasses.dataclass
class Sample:
    """One continuation written by one preset."""

    preset_index: int
    sample_index: int
    tokens: list[TokenStep] = dataclasses.field(default_factory=list)
    stop_reason: str | None = None  # one of STOP_REASONS once finished
    text: str = ""  # decoded continuation, cut before a stop string

    @property
    def token_ids(self) -> list[int]:
        """Generated token ids (EOS excluded)."""
        return [t.token_id for t in self.tokens]


@dataclasses.dataclass(frozen=True)
class TokenEvent:
    """Passed to the per-token callback while an audition runs."""

    preset_index: int
    sample_index: int
    step: int  # 0-based position in the sample
    token: TokenStep | None  # None when the row ended without a token (EOS)
    stop_reason: str | None  # set when this event ends the sample
    done_tokens: int  # tokens generated so far over all rows
    total_tokens: int  # upper bound of tokens for the whole audition


@dataclasses.dataclass
class AuditionRequest:
    """What to audition: one passage, several presets, N samples each.

    ``framing`` says how the model is asked: the engine encodes
    ``framing.prompt(passage, tokenizer)`` (the passage itself for plain continuation).
    """

    passage: str
    presets: list[Preset]
    samples: int = DEFAULT_SAMPLES
    max_new_tokens: int = DEFAULT_NEW_TOKENS  # budget; a row writes min(budget, preset.max_new_tokens)
    seed: int = DEFAULT_SEED
    framing: Framing = Framing()


@dataclasses.dataclass
class AuditionResult:
    """Samples per preset: ``samples[preset_index][sample_index]``."""

    request: AuditionRequest
    passage_ids: list[int]
    passage_dropped: int  # tokens cut from the start to fit the context
    samples: list[list[Sample]]
    cancelled: bool = False
    seconds: float = 0.0

    def tokens_generated(self) -> int:
        """Total number of generated tokens over all samples."""
        return sum(len(s.tokens) for row in self.samples for s in row)


@dataclasses.dataclass(frozen=True)
class TokenRow:
    """One token of the step view's top list."""

    id: int
    text: str
    raw_p: float
    p: float
    cut_by: str | None  # stage name that removed it, or None if kept


@dataclasses.dataclass(frozen=True)
class StageEffect:
    """What is left after one stage of a preset's chain at this step."""

    stage: str  # the stage's name in the preset's order
    kept: int  # tokens with nonzero probability after it
    kept_raw_mass: float  # raw probability mass of those tokens


@dataclasses.dataclass(frozen=True)
class CutRun:
    """Consecutive raw ranks (1-based, inclusive) that one stage cut, or that were kept (``stage`` None)."""

    first: int
    last: int
    stage: str | None


@dataclasses.dataclass(frozen=True)
class PresetStep:
    """How one preset reshaped the distribution at this step.

    The ``*_ranked`` arrays follow the raw ranking of the step (``StepView.ranked_ids``):
    entry ``r`` belongs to the token of raw rank ``r + 1``.
    """

    name: str
    probs: np.ndarray  # full shaped distribution (float64, vocab)
    kept: int
    kept_raw_mass: float  # raw probability mass of the kept tokens
    entropy_bits: float
    raw_entropy_bits: float
    top: list[TokenRow]  # the step's top tokens by raw probability
    order: tuple[str, ...] = ()  # the preset's stage order
    ranked: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))  # shaped p by raw rank
    cumulative: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))  # running sum of ``ranked``
    cut_ranked: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0, np.int8))  # stage index or -1
    kept_end: int = 0  # raw rank of the last kept token: where the kept set ends
    stages: tuple[StageEffect, ...] = ()  # what is left after each stage, in the preset's order

    def cut_stage(self, rank: int) -> str | None:
        """The stage that cut the token of raw ``rank`` (1-based), or None when it was kept."""
        index = int(self.cut_ranked[rank - 1])
        return None if index < 0 else self.order[index]

    def cut_runs(self) -> list[CutRun]:
        """The raw ranks split into runs kept, or cut by one stage, from rank 1 to the last."""
        codes = np.asarray(self.cut_ranked)
        if codes.size == 0:
            return []
        edges = np.flatnonzero(np.diff(codes)) + 1
        starts = np.concatenate([[0], edges])
        ends = np.concatenate([edges, [codes.size]])
        return [
            CutRun(int(a) + 1, int(b), None if codes[a] < 0 else self.order[int(codes[a])])
            for a, b in zip(starts, ends, strict=True)
        ]


@dataclasses.dataclass(frozen=True)
class StepView:
    """The next-token distribution at one step, raw and per preset."""

    raw_probs: np.ndarray  # unshaped distribution (temperature 1), float64
    raw_entropy_bits: float
    top_ids: list[int]  # top tokens by raw probability, most probable first
    top_texts: list[str]
    presets: list[PresetStep]
    context_tokens: int  # passage tokens + sample tokens before this step
    drawn_id: int | None = None  # the token the inspected sample drew here, if any
    ranked_ids: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0, np.int64))  # ids by raw rank
    raw_ranked: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))  # raw p by raw rank
    raw_cumulative: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))  # running sum of it
    ranks: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0, np.int64))  # raw rank (1-based) by id

    def rank_of(self, token_id: int) -> int:
        """The raw rank of a token (1 = most probable; ties go to the lower id)."""
        return int(self.ranks[token_id])
