"""What every target engine module shares: one step's outcome, an import's
reading, the reasons a preset and an engine disagree, and samplewright's own
chain with its ties marked (the reference every target is compared with)."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import torch

from ..presets import DEFAULT_ORDER, Preset
from ..sampling import registry
from ..sampling.chain import RowHistory, RowParams, run_chain
from .cuts import cut_on_tie

STAGE_WORDS = {
    "penalties": "the penalties",
    "temperature": "temperature",
    "top_k": "top-k",
    "top_p": "top-p",
    "min_p": "min-p",
    "typical_p": "typical sampling",
}

#: Pairs of stages whose relative order never changes the result (away from
#: ties): top-k and min-p both keep a set fixed by the logits alone, and
#: top-k's set does not change when the logits are divided by a temperature.
COMMUTING = {frozenset(("top_k", "min_p")), frozenset(("temperature", "top_k"))}


@dataclasses.dataclass(frozen=True)
class StepOutcome:
    """One next-token distribution (float64, sums to 1) and whether a cut fell on a tie."""

    probs: np.ndarray
    tie: bool


#: A chain as a function of (raw logits as a 1-D float64 tensor, history ids, generated ids).
StepFunction = Callable[[torch.Tensor, Sequence[int], Sequence[int]], StepOutcome]


@dataclasses.dataclass(frozen=True)
class Reading:
    """A foreign file read into preset fields, with what mapped and what did not.

    Attributes:
        fields: preset fields (without a name) ready for ``Preset(name=..., **fields)``.
        mapped: ``(foreign key, foreign value, what it became)`` per mapped key.
        dropped: ``(foreign key, why)`` per key that does not reach the preset.
    """

    fields: dict[str, Any]
    mapped: tuple[tuple[str, Any, str], ...]
    dropped: tuple[tuple[str, str], ...]


def active_stages(preset: Preset) -> set[str]:
    """Stage names whose parameters are not neutral in ``preset`` (neutral values: the stage registry)."""
    return {stage.name for stage in registry.stages() if not stage.is_off(preset)}


def order_reasons(preset: Preset, engine_order: Sequence[str], engine: str) -> list[str]:
    """One plain sentence per pair of active stages the engine applies in the other order."""
    active = [s for s in preset.order if s in active_stages(preset) and s in engine_order]
    reasons = []
    for i, first in enumerate(active):
        for second in active[i + 1 :]:
            if engine_order.index(first) > engine_order.index(second) and frozenset((first, second)) not in COMMUTING:
                reasons.append(
                    f"{engine} applies {STAGE_WORDS[second]} before {STAGE_WORDS[first]}; "
                    f"the preset applies {STAGE_WORDS[first]} first"
                )
    return reasons


def reorder(preset_order: Sequence[str], engine_order: Sequence[str]) -> tuple[str, ...]:
    """The engine's order, with stages the engine lacks kept at the end (they are switched off)."""
    return tuple(engine_order) + tuple(s for s in DEFAULT_ORDER if s not in engine_order)


def samplewright_step(preset: Preset) -> StepFunction:
    """Samplewright's own chain (:func:`samplewright.shape`), with ties at its cuts marked."""
    params = RowParams.from_presets([preset])

    def step(logits: torch.Tensor, history: Sequence[int], generated: Sequence[int]) -> StepOutcome:
        row = logits.to(torch.float64).reshape(1, -1)
        hist = RowHistory.build([list(history)], [list(generated)], [preset.no_repeat_ngram_size], row.shape[-1])
        out = run_chain(row, params, hist, keep_stages=True)
        tie, before = False, row[0]
        for name in preset.order:
            after = (out.after_stage or {})[name][0]
            tie = tie or cut_on_tie(name, float(getattr(preset, name, 0.0)), before, after)
            before = after
        return StepOutcome(torch.softmax(out.logits, dim=-1)[0].numpy(), tie)

    return step


def one_hot(size: int, index: int) -> np.ndarray:
    """A distribution with all its mass on ``index`` (greedy decoding)."""
    out = np.zeros(size, dtype=np.float64)
    out[index] = 1.0
    return out


def finite_number(value: Any) -> bool:
    """True for an int or float (not a bool) with a finite value."""
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(float(value))
