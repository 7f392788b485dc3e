"""The chain as the editor shows it: each stage's label, plain explanation and
parameters, whether a preset leaves it off, and what it keeps at one step.

The editor lays a preset out as its chain, one block per stage in the
preset's order. A stage is "off" when every one of its parameters sits at the
value that changes nothing (the chain then skips it); switching it on gives it
a starting value the user then tunes. :func:`stages_kept` says, at one step,
how many tokens are left after each stage and how much of the model's own
probability they hold; stages apply in order, so each figure counts what is
left after that stage and every stage before it.

No torch and no Qt here.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence

import numpy as np

from ..presets import DEFAULT_ORDER, Preset
from ..results import StageEffect


@dataclasses.dataclass(frozen=True)
class StagePart:
    """One stage of the chain as the editor presents it.

    Attributes:
        name: the stage's name in a preset's ``order``.
        label: the trade's name, shown to the user.
        explanation: one plain line on what the stage does.
        fields: the preset fields this stage reads, in the order shown.
        neutral: the value of each field at which the stage changes nothing.
        starting: the value each field gets when the user switches the stage on.
    """

    name: str
    label: str
    explanation: str
    fields: tuple[str, ...]
    neutral: Mapping[str, float]
    starting: Mapping[str, float]


# The starting values are common practice (the middle of what teams usually try), not tuned results.
STAGE_PARTS: dict[str, StagePart] = {
    part.name: part
    for part in (
        StagePart(
            "penalties",
            "repetition penalties",
            "Makes words already used less likely, or forbids repeating a run of tokens.",
            ("repetition_penalty", "frequency_penalty", "presence_penalty", "no_repeat_ngram_size"),
            {"repetition_penalty": 1.0, "frequency_penalty": 0.0, "presence_penalty": 0.0, "no_repeat_ngram_size": 0},
            {"repetition_penalty": 1.1, "frequency_penalty": 0.0, "presence_penalty": 0.0, "no_repeat_ngram_size": 0},
        ),
        StagePart(
            "temperature",
            "temperature",
            "Sharpens (below 1) or flattens (above 1) the whole distribution; it removes no token.",
            ("temperature",),
            {"temperature": 1.0},
            {"temperature": 0.8},
        ),
        StagePart(
            "top_k",
            "top-k",
            "Keeps only the k most likely tokens.",
            ("top_k",),
            {"top_k": 0},
            {"top_k": 40},
        ),
        StagePart(
            "top_p",
            "top-p",
            "Keeps the most likely tokens until together they hold this share of the probability.",
            ("top_p",),
            {"top_p": 1.0},
            {"top_p": 0.9},
        ),
        StagePart(
            "min_p",
            "min-p",
            "Drops tokens less likely than this fraction of the most likely token.",
            ("min_p",),
            {"min_p": 0.0},
            {"min_p": 0.05},
        ),
        StagePart(
            "typical_p",
            "typical sampling",
            "Keeps the tokens about as surprising as the average, until they hold this share.",
            ("typical_p",),
            {"typical_p": 1.0},
            {"typical_p": 0.9},
        ),
    )
}
assert tuple(STAGE_PARTS) == DEFAULT_ORDER, "every stage of the chain needs its part"


def is_off(preset: Preset, stage: str) -> bool:
    """Whether ``preset`` leaves ``stage`` at the values that change nothing."""
    part = STAGE_PARTS[stage]
    return all(getattr(preset, field) == value for field, value in part.neutral.items())


def switched(preset: Preset, stage: str, on: bool) -> Preset:
    """``preset`` with ``stage`` switched off (its neutral values) or on (its starting values);
    a stage already in the wanted state is left as it is."""
    if is_off(preset, stage) != on:
        return preset
    part = STAGE_PARTS[stage]
    return preset.replace(**dict(part.starting if on else part.neutral))


def stages_kept(
    order: Sequence[str], raw_probs: np.ndarray, after_stage: Mapping[str, np.ndarray]
) -> tuple[StageEffect, ...]:
    """After each stage of ``order``: how many tokens are left and how much raw mass they hold.

    Args:
        order: the preset's stage order.
        raw_probs: the unshaped distribution (1-D).
        after_stage: the logits after each stage, by stage name (1-D; ``-inf`` = removed).
            A stage the chain skipped as neutral may be missing: it keeps what came before.
    """
    raw = np.asarray(raw_probs, dtype=np.float64)
    alive = np.ones(raw.shape, dtype=bool)
    out = []
    for name in order:
        if name in after_stage:
            alive = np.isfinite(np.asarray(after_stage[name], dtype=np.float64))
        out.append(StageEffect(name, int(alive.sum()), float(raw[alive].sum())))
    return tuple(out)
