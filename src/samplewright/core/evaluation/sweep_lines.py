"""The lines a sweep draws on the map: one through its values, or one per value of a grid's second field."""

from __future__ import annotations

import dataclasses

from .run import EvaluationRun
from .sweep import value_label


@dataclasses.dataclass(frozen=True)
class SweepLine:
    """Preset indices in the order of the first field's values, and each point's label."""

    label: str
    presets: tuple[int, ...]
    values: tuple[str, ...]


def sweep_lines(run: EvaluationRun) -> list[SweepLine]:
    """The run's sweep lines (none for a plain evaluation). Derived presets are in
    :func:`sweep.derived_presets` order: the second field varies fastest."""
    sweep = run.plan.sweep
    if sweep is None:
        return []
    first = sweep.axes[0]
    labels = tuple(f"{first.field}={value_label(v)}" for v in first.values)
    if len(sweep.axes) == 1:
        return [SweepLine(first.field, tuple(range(len(first.values))), labels)]
    second = sweep.axes[1]
    width = len(second.values)
    return [
        SweepLine(
            f"{second.field}={value_label(w)}",
            tuple(a * width + b for a in range(len(first.values))),
            labels,
        )
        for b, w in enumerate(second.values)
    ]
