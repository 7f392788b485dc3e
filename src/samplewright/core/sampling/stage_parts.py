"""The chain as the editor shows it: each stage's label, plain explanation and
parameters, whether a preset leaves it off, and what it keeps at one step.

Everything about a stage comes from its entry in :mod:`.registry` (label,
summary, fields, neutral and starting values), so a new stage needs nothing here.

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

from ..presets import Preset
from ..results import StageEffect
from . import registry


@dataclasses.dataclass(frozen=True)
class StagePart:
    """One stage of the chain as the editor presents it, read from its registry entry.

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


def part_of(stage: registry.Stage) -> StagePart:
    """The editor's view of one registry entry."""
    return StagePart(
        name=stage.name,
        label=stage.label,
        explanation=stage.summary,
        fields=tuple(f.name for f in stage.fields),
        neutral=stage.neutral,
        starting=stage.switched_on,
    )


def chain_parts() -> dict[str, StagePart]:
    """Every registered stage as the editor shows it, by name, in registration order.

    Read from the registry on each call, so a stage registered later (one entry plus its
    function) gets its block in an editor built afterwards.
    """
    return {stage.name: part_of(stage) for stage in registry.stages()}


def is_off(preset: Preset, stage: str) -> bool:
    """Whether ``preset`` leaves ``stage`` at the values that change nothing
    (a stage without parameters always acts, so it is never off)."""
    return registry.stage(stage).is_off(preset)


def switched(preset: Preset, stage: str, on: bool) -> Preset:
    """``preset`` with ``stage`` switched off (its neutral values) or on (its starting values);
    a stage already in the wanted state is left as it is."""
    if is_off(preset, stage) != on:
        return preset
    entry = registry.stage(stage)
    return preset.replace(**(entry.switched_on if on else entry.neutral))


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
