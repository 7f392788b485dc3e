"""Typed descriptions of a preset's parameters: range, default, neutral value, help.

One :class:`NumberField` per numeric parameter is the only place its range is
written down. The range check, the error message and the editor's "Allowed:"
text are all produced from it, so they cannot disagree. The stages' own
fields are declared with their stage in ``core/sampling/registry.py``; the
fields that belong to no stage (the token limit, stop strings, the order) are
declared in ``core/presets.py``.

This module imports neither torch nor Qt.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from typing import Any

from .errors import PresetError
from .text_rules import shown


def _num(value: float) -> str:
    """A bound as the user reads it: 1000000, 0.5, -2 (no exponent, no trailing .0)."""
    return str(int(value)) if float(value).is_integer() else f"{value:g}"


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _fits_float(value: Any) -> bool:
    try:
        return math.isfinite(float(value))
    except OverflowError:  # an int too large for a float
        return False


@dataclasses.dataclass(frozen=True)
class NumberField:
    """One numeric preset parameter.

    Attributes:
        name: the parameter's key in a preset (``top_p``).
        low, high: the ends of the allowed range.
        default: the value a new preset gets.
        help: one sentence on what the parameter does.
        integer: whole numbers only (a float such as 5.0 is read as 5).
        low_open, high_open: whether that end itself is excluded.
        neutral: the value at which the parameter changes nothing (its stage
            is "off"); None for a parameter that is never neutral.
    """

    name: str
    low: float
    high: float
    default: float
    help: str
    integer: bool = False
    low_open: bool = False
    high_open: bool = False
    neutral: float | None = None

    @property
    def allowed(self) -> str:
        """The allowed range in words, e.g. ``above 0 up to 1 (1 = off)``."""
        low, high = _num(self.low), _num(self.high)
        if self.integer:
            words = f"a whole number from {low} to {high}"
        elif self.low_open and self.high_open:
            words = f"above {low} and below {high}"
        elif self.low_open:
            words = f"above {low} up to {high}"
        elif self.high_open:
            words = f"{low} up to, not including, {high}"
        else:
            words = f"{low} to {high}"
        return words if self.neutral is None else f"{words} ({_num(self.neutral)} = off)"

    def contains(self, value: float) -> bool:
        """Whether ``value`` (a number) lies inside the range."""
        above = value > self.low if self.low_open else value >= self.low
        below = value < self.high if self.high_open else value <= self.high
        return above and below

    def check(self, value: Any) -> int | float:
        """The value normalised (an int for an integer field, else a float).

        Raises:
            PresetError: naming the field, the value and the allowed range.
        """
        if self.integer:
            if isinstance(value, float) and math.isfinite(value) and value.is_integer():
                value = int(value)
            if not isinstance(value, int) or isinstance(value, bool):
                raise PresetError(self.name, f"{shown(value)} is not a whole number; allowed: {self.allowed}")
        elif not _is_number(value) or not _fits_float(value):
            raise PresetError(self.name, f"{shown(value)} is not a finite number; allowed: {self.allowed}")
        if not self.contains(value):
            raise PresetError(self.name, f"{shown(value)} is out of range; allowed: {self.allowed}")
        return value if self.integer else float(value)


@dataclasses.dataclass(frozen=True)
class ListField:
    """A preset parameter that holds a list (stop strings, the stage order).

    Attributes:
        name: the parameter's key in a preset.
        default: the value a new preset gets (a tuple).
        allowed: what is allowed, in words.
        help: one sentence on what the parameter does.
        validate: checks a value and returns it normalised (a tuple), raising PresetError.
    """

    name: str
    default: tuple[str, ...]
    allowed: str
    help: str
    validate: Callable[[Any], tuple[str, ...]]

    def check(self, value: Any) -> tuple[str, ...]:
        """The value normalised; raises PresetError."""
        return self.validate(value)


Field = NumberField | ListField
