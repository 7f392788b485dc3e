"""Sweeps: one or two fields of a base preset varied over a range of values.

``temperature=0.2:1.6:0.2`` is start:stop:step with the stop included;
``top_p=0.8,0.9,0.95,1`` lists the values. Two fields give a grid. Every value
becomes a derived preset named after its base and value. Values are checked
with the preset's own field validation before anything runs.
"""

from __future__ import annotations

import dataclasses
from decimal import Decimal, InvalidOperation
from typing import Any

from ..errors import RequestError
from ..presets import Preset, PresetError, validate_field

#: The fields a sweep can vary: the numeric sampling parameters.
SWEEPABLE = (
    "temperature",
    "top_k",
    "top_p",
    "min_p",
    "typical_p",
    "repetition_penalty",
    "frequency_penalty",
    "presence_penalty",
    "no_repeat_ngram_size",
    "max_new_tokens",
)
INTEGER_FIELDS = ("top_k", "no_repeat_ngram_size", "max_new_tokens")
MAX_VALUES = 64


class SweepError(RequestError):
    """A ``--vary`` spec that cannot run; the message names the field, value and range."""


@dataclasses.dataclass(frozen=True)
class Axis:
    """One varied field and its values, in order."""

    field: str
    values: tuple[float | int, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return {"field": self.field, "values": list(self.values)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Axis:
        """The axis of its JSON form."""
        return cls(str(data["field"]), tuple(data["values"]))


def _number(field: str, text: str) -> Decimal:
    try:
        value = Decimal(text.strip())
    except InvalidOperation:
        raise SweepError(f"--vary {field}: {text.strip()!r} is not a number") from None
    if not value.is_finite():
        raise SweepError(f"--vary {field}: {text.strip()!r} is not a finite number")
    return value


def _values(field: str, spec: str) -> list[Decimal]:
    if ":" in spec:
        parts = spec.split(":")
        if len(parts) != 3:
            raise SweepError(f"--vary {field}={spec}: a range is start:stop:step, e.g. 0.2:1.6:0.2")
        start, stop, step = (_number(field, p) for p in parts)
        if step <= 0 or stop < start:
            raise SweepError(f"--vary {field}={spec}: the step must be above 0 and stop at least start")
        count = int((stop - start) / step) + 1
        if count > MAX_VALUES:
            raise SweepError(f"--vary {field}={spec} gives {count} values; at most {MAX_VALUES} are allowed")
        return [start + i * step for i in range(count)]
    values = [_number(field, p) for p in spec.split(",") if p.strip()]
    if not values:
        raise SweepError(f"--vary {field}= needs values, e.g. {field}=0.8,0.9,1")
    if len(values) > MAX_VALUES:
        raise SweepError(f"--vary {field} lists {len(values)} values; at most {MAX_VALUES} are allowed")
    return values


def parse_vary(text: str) -> Axis:
    """``FIELD=SPEC`` as an axis, every value checked against the field's range.

    Raises:
        SweepError: an unknown field, a malformed spec, or a value out of range (named with the range).
    """
    field, sep, spec = text.partition("=")
    field = field.strip()
    if not sep or field not in SWEEPABLE:
        raise SweepError(f"--vary needs FIELD=SPEC with FIELD one of: {', '.join(SWEEPABLE)} (got {text!r})")
    checked: list[float | int] = []
    for value in _values(field, spec):
        whole = value == value.to_integral_value()
        number: float | int = int(value) if field in INTEGER_FIELDS and whole else float(value)
        try:
            checked.append(validate_field(field, number))
        except PresetError as exc:  # its message names the field, the value and the allowed range
            raise SweepError(f"--vary {exc}") from None
    if len(set(checked)) != len(checked):
        raise SweepError(f"--vary {field}: a value appears twice")
    return Axis(field, tuple(checked))


def value_label(value: float | int) -> str:
    """A value as written in a derived preset's name."""
    return f"{value:g}"


def derived_presets(base: Preset, axes: tuple[Axis, ...]) -> list[Preset]:
    """One preset per value (per pair of values for a grid, the second axis varying fastest).

    Raises:
        SweepError: no axis or more than two, or the same field twice.
    """
    if not 1 <= len(axes) <= 2 or len({a.field for a in axes}) != len(axes):
        raise SweepError("a sweep varies one or two different fields (--vary once or twice)")
    combos: list[tuple[tuple[str, float | int], ...]] = [((axes[0].field, v),) for v in axes[0].values]
    if len(axes) == 2:
        combos = [c + ((axes[1].field, w),) for c in combos for w in axes[1].values]
    presets = []
    for combo in combos:
        label = ", ".join(f"{f}={value_label(v)}" for f, v in combo)
        try:
            presets.append(base.replace(name=f"{base.name} · {label}"[:120], **dict(combo)))
        except PresetError as exc:
            raise SweepError(f"the derived preset {label} is not valid: {exc}") from None
    return presets
