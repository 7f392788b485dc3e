"""Colours and second cues shared by every view.

Colours: the eight-colour palette of Okabe & Ito (2008), "Color Universal
Design (CUD): How to make figures and presentations that are friendly to
colorblind people" (J*Fly, University of Tokyo), which stays distinguishable
under the common forms of colour-vision deficiency. Colour is never the only
cue: each preset column carries its number, and each stage that cuts a token
is marked by its own shape and hatch as well as its colour. How each stage
marks a cut comes from the stage registry (``core/sampling/registry.py``);
this module only turns those plain names into Qt and pyqtgraph terms.
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from ..core.sampling import registry

#: Okabe & Ito (2008) colours, by their published names.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: The unshaped distribution is drawn in a neutral grey so every preset colour stands out against it.
RAW_COLOUR = "#8C8C8C"

#: Colours of the up-to-six auditioned presets, in column order. Yellow is left
#: out: it is too pale on a white background for thin bars and text.
PRESET_COLOURS = (
    OKABE_ITO["blue"],
    OKABE_ITO["orange"],
    OKABE_ITO["bluish_green"],
    OKABE_ITO["vermillion"],
    OKABE_ITO["reddish_purple"],
    OKABE_ITO["sky_blue"],
)

#: pyqtgraph symbol of each mark shape of the registry.
SHAPE_SYMBOLS = {
    "circle": "o",
    "square": "s",
    "triangle": "t1",
    "diamond": "d",
    "cross": "x",
    "star": "star",
    "hexagon": "h",
    "plus": "+",
}

#: Qt brush pattern of each hatch of the registry.
HATCH_PATTERNS = {
    "diagonal": Qt.BrushStyle.FDiagPattern,
    "back_diagonal": Qt.BrushStyle.BDiagPattern,
    "horizontal": Qt.BrushStyle.HorPattern,
    "vertical": Qt.BrushStyle.VerPattern,
    "grid": Qt.BrushStyle.CrossPattern,
    "dots": Qt.BrushStyle.Dense6Pattern,
    "diagonal_grid": Qt.BrushStyle.DiagCrossPattern,
}

#: Background of the token a sample drew at the current step.
DRAWN_HIGHLIGHT = "#F0E442"

assert set(SHAPE_SYMBOLS) == set(registry.MARK_SHAPES), "every mark shape needs a symbol"
assert set(HATCH_PATTERNS) == set(registry.HATCHES), "every hatch needs a pattern"


def preset_colour(index: int) -> str:
    """The colour of the preset in audition column ``index`` (wraps around)."""
    return PRESET_COLOURS[index % len(PRESET_COLOURS)]


#: Background and border of the pale notices (the review caution, library and editor notices).
NOTICE_BACKGROUND, NOTICE_BORDER = "#FFF4CC", OKABE_ITO["orange"]


def notice_style(object_name: str, padding: int = 3) -> str:
    """The style sheet of a pale notice label with this object name."""
    return (
        f"#{object_name} {{ background: {NOTICE_BACKGROUND}; border: 1px solid {NOTICE_BORDER}; "
        f"padding: {padding}px; }}"
    )
