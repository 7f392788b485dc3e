"""How the step view names and marks each sampling stage: its trade name, its
colour and the hatch of the band that shows the ranks it cut.

Kept in one place so it can follow the core's stage registry when that lands.
The colours are Tol's (2021) "muted" scheme (Paul Tol, "Colour Schemes",
SRON/EPS/TN/09-002), distinct from the Okabe & Ito colours of the presets, so a
band of ranks a stage cut never looks like a preset.
"""

from __future__ import annotations

from PySide6.QtCore import Qt

#: The trade's name of each stage, as the user reads it.
LABELS = {
    "penalties": "repetition penalties",
    "temperature": "temperature",
    "top_k": "top-k",
    "top_p": "top-p",
    "min_p": "min-p",
    "typical_p": "typical",
}

#: The colour of the band of ranks each stage cut.
COLOURS = {
    "penalties": "#882255",
    "temperature": "#999933",
    "top_k": "#332288",
    "top_p": "#44AA99",
    "min_p": "#CC6677",
    "typical_p": "#AA4499",
}

#: The hatch of that band: the second cue, so a stage is told apart without colour.
PATTERNS = {
    "penalties": Qt.BrushStyle.CrossPattern,
    "temperature": Qt.BrushStyle.Dense6Pattern,
    "top_k": Qt.BrushStyle.VerPattern,
    "top_p": Qt.BrushStyle.FDiagPattern,
    "min_p": Qt.BrushStyle.HorPattern,
    "typical_p": Qt.BrushStyle.BDiagPattern,
}


def stages() -> tuple[str, ...]:
    """Every stage, in the default chain order."""
    return tuple(LABELS)


def label(stage: str) -> str:
    """The trade's name of ``stage`` (its own name for an unknown one)."""
    return LABELS.get(stage, stage.replace("_", " "))


def colour(stage: str) -> str:
    """The colour of the band of ranks ``stage`` cut."""
    return COLOURS.get(stage, "#777777")


def pattern(stage: str) -> Qt.BrushStyle:
    """The hatch of the band of ranks ``stage`` cut."""
    return PATTERNS.get(stage, Qt.BrushStyle.DiagCrossPattern)
