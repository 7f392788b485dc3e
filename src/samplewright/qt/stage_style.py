"""How the step view names and marks each sampling stage: its trade name, its
colour and the hatch of the band that shows the ranks it cut, all read from the
core's stage registry (:mod:`samplewright.core.sampling.registry`), so a new
stage is styled by its registry entry alone.
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from ..core.sampling import registry
from .palette import HATCH_PATTERNS

UNKNOWN_COLOUR = "#777777"


def stages() -> tuple[str, ...]:
    """Every registered stage, in the default chain order."""
    return registry.names()


def _entry(stage: str):
    return registry.stage(stage) if stage in registry.names() else None


def label(stage: str) -> str:
    """The trade's name of ``stage`` (its own name for an unknown one)."""
    entry = _entry(stage)
    return entry.label if entry else stage.replace("_", " ")


def colour(stage: str) -> str:
    """The colour of the band of ranks ``stage`` cut."""
    entry = _entry(stage)
    return entry.mark.colour if entry else UNKNOWN_COLOUR


def pattern(stage: str) -> Qt.BrushStyle:
    """The hatch of the band of ranks ``stage`` cut."""
    entry = _entry(stage)
    return HATCH_PATTERNS[entry.mark.hatch] if entry else Qt.BrushStyle.DiagCrossPattern
