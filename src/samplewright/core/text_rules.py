"""Which characters a preset's text may hold, and how a value is quoted in a message.

Names and tags are printed in terminals, lists and file names, so they hold
printable text only: no control characters (ESC could send escape sequences
through ``samplewright check``), no bidirectional controls (they reorder what
is shown, Unicode Technical Report #9), no zero-width or other format
characters, no line or paragraph separators. Descriptions and stop strings may
also hold tabs and line breaks; notes may hold any character. No text may hold
a lone surrogate (U+D800 to U+DFFF): it is not a Unicode scalar value, cannot
be written as UTF-8 and would crash whatever prints it.

Nothing here imports Qt or torch.
"""

from __future__ import annotations

import re
from typing import Any

#: Characters that reorder displayed text (Unicode Standard Annex #9, "explicit directional formatting").
BIDI_CONTROLS = frozenset("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")
#: Not allowed in one-line text (names, tags): C0 and C1 controls and DEL, the soft hyphen,
#: bidirectional controls, zero-width and other invisible format characters, the line and
#: paragraph separators, the interlinear annotation marks. The same class is the settings
#: schema's pattern (resources/settings.schema.json), so both refuse the same names.
LINE_FORBIDDEN = (
    "[\\u0000-\\u001f\\u007f-\\u009f\\u00ad\\u061c\\u180e\\u200b-\\u200f"
    "\\u2028-\\u202e\\u2060-\\u2064\\u2066-\\u206f\\ufeff\\ufff9-\\ufffb]"
)
#: Not allowed in other text (descriptions, stop strings): controls other than tab and line
#: breaks, bidirectional controls, the line and paragraph separators.
TEXT_FORBIDDEN = (
    "[\\u0000-\\u0008\\u000b\\u000c\\u000e-\\u001f\\u007f-\\u009f\\u061c\\u200e\\u200f\\u2028-\\u202e\\u2066-\\u2069]"
)
_FORBIDDEN = {"line": re.compile(LINE_FORBIDDEN), "text": re.compile(TEXT_FORBIDDEN)}
#: How many characters of a value a message quotes.
QUOTE_LIMIT = 80


def shown(value: Any, limit: int = QUOTE_LIMIT) -> str:
    """``repr(value)`` cut to ``limit`` characters with "…": safe to print (repr escapes
    control characters) and short even for a million-character value."""
    if isinstance(value, (list, tuple, dict)) and len(value) > limit:
        value = type(value).__name__ + f" of {len(value)} items"
        return value
    try:
        text = repr(value)
    except RecursionError:
        return "a value nested too deeply"
    return text if len(text) <= limit else text[: limit - 1] + "…"


def shown_plain(text: str, limit: int = QUOTE_LIMIT) -> str:
    """``text`` without quotes, its control characters escaped as repr does, cut to ``limit``."""
    inner = repr(str(text))[1:-1]
    return inner if len(inner) <= limit else inner[: limit - 1] + "…"


def surrogate_problem(text: str) -> str | None:
    """Why ``text`` is not valid Unicode (a lone surrogate), or None."""
    for index, ch in enumerate(text):
        if "\ud800" <= ch <= "\udfff":
            return f"it is not valid Unicode (a lone surrogate U+{ord(ch):04X} at character {index + 1})"
    return None


def character_problem(text: str, kind: str) -> str | None:
    """Why ``text`` may not be stored as a ``kind`` of text, or None.

    Args:
        text: the text.
        kind: ``"line"`` (names, tags: printable characters only), ``"text"``
            (descriptions, stop strings: also tabs and line breaks) or ``"any"`` (notes).
    """
    problem = surrogate_problem(text)
    if problem or kind == "any":
        return problem
    found = _FORBIDDEN[kind].search(text)
    if found is None:
        return None
    ch = found.group()
    what = "a bidirectional control" if ch in BIDI_CONTROLS else "a control or invisible character"
    return f"it holds {what} (U+{ord(ch):04X} at character {found.start() + 1}); only printable text is allowed"
