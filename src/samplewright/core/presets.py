"""Named sampling presets: their parameters, validation and plain-JSON form.

A preset says how a language model's next-token distribution is reshaped
before a token is drawn. Its meaning is defined executably by
:func:`samplewright.shape`; this module only holds and checks the numbers.

This module imports neither torch nor Qt, so editing, storing and exporting
presets stays fast.

References for each parameter are in ``core/stages.py``.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Mapping
from datetime import datetime, timezone
from typing import Any

from .errors import SamplewrightError
from .text_rules import character_problem, shown, shown_plain

#: Stage names of the chain, in the order transformers' ``generate()`` applies
#: them (penalties first, then temperature, top-k, top-p, min-p, typical).
DEFAULT_ORDER: tuple[str, ...] = ("penalties", "temperature", "top_k", "top_p", "min_p", "typical_p")

MAX_TEXT = {"name": 120, "description": 2000, "notes": 10000, "tag": 60, "stop": 200}
MAX_TAGS = 32
#: Larger than any vocabulary; the bound keeps absurd values out of tensors.
MAX_TOP_K = 1_000_000
MAX_STOPS = 16


class PresetError(SamplewrightError, ValueError):
    """A preset field holds a value outside its allowed range, or an unknown key.

    ``field`` names the offending field (the user-facing name). Also a
    ``ValueError``, as it was before it joined the user-facing errors.
    """

    def __init__(self, field: str, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _fits_float(value: Any) -> bool:
    try:
        return math.isfinite(float(value))
    except OverflowError:  # an int too large for a float
        return False


def _number(field: str, value: Any, low: float, high: float, *, low_open=False, high_open=False, allowed: str) -> float:
    if not _is_number(value) or not _fits_float(value):
        raise PresetError(field, f"{shown(value)} is not a finite number; allowed: {allowed}")
    too_low = value <= low if low_open else value < low
    too_high = value >= high if high_open else value > high
    if too_low or too_high:
        raise PresetError(field, f"{shown(value)} is out of range; allowed: {allowed}")
    return float(value)


def _integer(field: str, value: Any, low: int, high: int | None, allowed: str) -> int:
    if isinstance(value, float) and math.isfinite(value) and value.is_integer():
        value = int(value)
    if not isinstance(value, int) or isinstance(value, bool):
        raise PresetError(field, f"{shown(value)} is not a whole number; allowed: {allowed}")
    if value < low or (high is not None and value > high):
        raise PresetError(field, f"{shown(value)} is out of range; allowed: {allowed}")
    return value


def _text(field: str, value: Any, limit: int, kind: str = "text") -> str:
    if not isinstance(value, str):
        raise PresetError(field, f"{shown(value)} is not text")
    if len(value) > limit:
        raise PresetError(field, f"text of {len(value)} characters is longer than {limit}")
    problem = character_problem(value, kind)  # kind: "line", "text" or "any" (core/text_rules.py)
    if problem:
        raise PresetError(field, problem)
    return value


def _name(value: Any) -> str:
    value = _text("name", value, MAX_TEXT["name"], "line")
    if not value.strip():
        raise PresetError("name", "a preset needs a non-empty name")
    if any(ch in value for ch in "\n\r\t"):
        raise PresetError("name", "a name is one line of text")
    return value.strip()


def _tags(value: Any) -> tuple[str, ...]:
    if isinstance(value, str) or not isinstance(value, (list, tuple)):
        raise PresetError("tags", f"{shown(value)} is not a list of text")
    if len(value) > MAX_TAGS:
        raise PresetError("tags", f"{len(value)} tags; at most {MAX_TAGS}")
    tags = []
    for tag in value:
        tag = _text("tags", tag, MAX_TEXT["tag"], "line").strip()
        if tag and tag not in tags:
            tags.append(tag)
    return tuple(tags)


def _stop(value: Any) -> tuple[str, ...]:
    if isinstance(value, str) or not isinstance(value, (list, tuple)):
        raise PresetError("stop", f"{shown(value)} is not a list of text")
    if len(value) > MAX_STOPS:
        raise PresetError("stop", f"{len(value)} stop strings; at most {MAX_STOPS}")
    stops = tuple(_text("stop", s, MAX_TEXT["stop"]) for s in value)
    if any(s == "" for s in stops):
        raise PresetError("stop", "an empty stop string would end every sample at once")
    return stops


def _order(value: Any) -> tuple[str, ...]:
    if isinstance(value, str) or not isinstance(value, (list, tuple)):
        raise PresetError("order", f"{shown(value)} is not a list of stage names")
    order = tuple(value)
    if sorted(map(str, order)) != sorted(DEFAULT_ORDER) or len(order) != len(DEFAULT_ORDER):
        raise PresetError("order", f"{shown(list(order))} must name each of {list(DEFAULT_ORDER)} exactly once")
    return order


#: RFC 3339 section 5.6 "date-time": full date, "T", full time with seconds, and an offset.
_DATE_TIME = re.compile(r"\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d{1,9})?([Zz]|[+-]\d{2}:\d{2})")


def _timestamp(field: str, value: Any) -> str:
    value = _text(field, value, 64, "line")
    try:
        if not _DATE_TIME.fullmatch(value):
            raise ValueError(value)
        datetime.fromisoformat(value.upper().replace("Z", "+00:00"))
    except ValueError:
        raise PresetError(
            field, f"{shown(value)} is not an RFC 3339 date and time (e.g. 2025-05-02T09:14:00+00:00)"
        ) from None
    return value


#: Per field: (validator, default, allowed range in words, one-sentence explanation).
FIELDS: dict[str, tuple[Any, Any, str, str]] = {
    "temperature": (
        lambda v: _number("temperature", v, 0.0, 5.0, allowed="0 to 5"),
        1.0,
        "0 to 5",
        "Divides the logits before the softmax: below 1 sharpens, above 1 flattens, 0 always takes the top token.",
    ),
    "top_k": (
        lambda v: _integer("top_k", v, 0, MAX_TOP_K, "a whole number from 0 to 1000000 (0 = off)"),
        0,
        "whole number 0 to 1000000 (0 = off)",
        "Keeps only the k most probable tokens.",
    ),
    "top_p": (
        lambda v: _number("top_p", v, 0.0, 1.0, low_open=True, allowed="above 0 up to 1 (1 = off)"),
        1.0,
        "above 0 up to 1 (1 = off)",
        "Nucleus sampling: keeps the most probable tokens until their probabilities add up to p.",
    ),
    "min_p": (
        lambda v: _number("min_p", v, 0.0, 1.0, high_open=True, allowed="0 up to, not including, 1 (0 = off)"),
        0.0,
        "0 up to, not including, 1 (0 = off)",
        "Drops every token less likely than this fraction of the top token's probability.",
    ),
    "typical_p": (
        lambda v: _number("typical_p", v, 0.0, 1.0, low_open=True, allowed="above 0 up to 1 (1 = off)"),
        1.0,
        "above 0 up to 1 (1 = off)",
        "Typical sampling: keeps the tokens whose surprise is closest to the average until they hold this mass.",
    ),
    "repetition_penalty": (
        lambda v: _number("repetition_penalty", v, 0.0, 10.0, low_open=True, allowed="above 0 up to 10 (1 = off)"),
        1.0,
        "above 0 up to 10 (1 = off)",
        "Makes every token already in the passage or sample less likely (above 1) or more likely (below 1).",
    ),
    "frequency_penalty": (
        lambda v: _number("frequency_penalty", v, -2.0, 2.0, allowed="-2 to 2 (0 = off)"),
        0.0,
        "-2 to 2 (0 = off)",
        "Lowers a token's logit by this much for each time the sample already used it.",
    ),
    "presence_penalty": (
        lambda v: _number("presence_penalty", v, -2.0, 2.0, allowed="-2 to 2 (0 = off)"),
        0.0,
        "-2 to 2 (0 = off)",
        "Lowers a token's logit by this much once the sample has used it at all.",
    ),
    "no_repeat_ngram_size": (
        lambda v: _integer("no_repeat_ngram_size", v, 0, 32, "a whole number from 0 to 32 (0 = off)"),
        0,
        "whole number 0 to 32 (0 = off)",
        "Forbids any token that would repeat a run of this many tokens already in the text.",
    ),
    "max_new_tokens": (
        lambda v: _integer("max_new_tokens", v, 1, 512, "a whole number from 1 to 512"),
        64,
        "whole number 1 to 512",
        "The longest continuation this preset writes.",
    ),
    "stop": (
        _stop,
        (),
        "up to 16 non-empty strings",
        "Text that ends a sample as soon as it appears in the continuation.",
    ),
    "order": (
        _order,
        DEFAULT_ORDER,
        "each stage name exactly once",
        "The order the stages reshape the distribution in; each stage sees the previous stage's result.",
    ),
}
PARAMETERS = tuple(FIELDS)
METADATA = ("name", "description", "tags", "notes", "created", "modified")
ALL_KEYS = METADATA + PARAMETERS


def validate_field(field: str, value: Any) -> Any:
    """Check one field and return its normalised value.

    Raises:
        PresetError: naming the field, the bad value and the allowed range.
    """
    if field in FIELDS:
        return FIELDS[field][0](value)
    if field == "name":
        return _name(value)
    if field in ("description", "notes"):
        return _text(field, value, MAX_TEXT[field], "any" if field == "notes" else "text")
    if field == "tags":
        return _tags(value)
    if field in ("created", "modified"):
        return _timestamp(field, value)
    raise PresetError(field, f"unknown preset field; known fields: {', '.join(ALL_KEYS)}")


def now_iso() -> str:
    """The current UTC time as an ISO 8601 string with seconds."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


@dataclasses.dataclass(frozen=True)
class Preset:
    """A named set of sampling parameters.

    Instances are immutable and always valid: construction validates every
    field. Use :meth:`replace` for an edited copy.

    Raises:
        PresetError: on construction with an invalid value.
    """

    name: str
    description: str = ""
    tags: tuple[str, ...] = ()
    notes: str = ""
    created: str = ""
    modified: str = ""
    temperature: float = 1.0
    top_k: int = 0
    top_p: float = 1.0
    min_p: float = 0.0
    typical_p: float = 1.0
    repetition_penalty: float = 1.0
    frequency_penalty: float = 0.0
    presence_penalty: float = 0.0
    no_repeat_ngram_size: int = 0
    max_new_tokens: int = 64
    stop: tuple[str, ...] = ()
    order: tuple[str, ...] = DEFAULT_ORDER

    def __post_init__(self):
        for field in ALL_KEYS:
            value = getattr(self, field)
            if field in ("created", "modified") and value == "":
                continue
            object.__setattr__(self, field, validate_field(field, value))

    @classmethod
    def from_dict(cls, mapping: Mapping[str, Any]) -> Preset:
        """Build a preset from its plain-JSON form; missing parameters take their defaults.

        Raises:
            PresetError: for an unknown key (named), a missing name or an invalid value.
        """
        if not isinstance(mapping, Mapping):
            raise PresetError("preset", f"expected a JSON object, got {type(mapping).__name__}")
        unknown = [key for key in mapping if key not in ALL_KEYS]
        if unknown:
            raise PresetError(
                shown_plain(str(unknown[0]), 60), f"unknown preset field; known fields: {', '.join(ALL_KEYS)}"
            )
        if "name" not in mapping:
            raise PresetError("name", "a preset needs a name")
        return cls(**dict(mapping))

    def to_dict(self) -> dict[str, Any]:
        """The preset as plain JSON types; ``Preset.from_dict(p.to_dict()) == p``."""
        out: dict[str, Any] = {}
        for field in ALL_KEYS:
            value = getattr(self, field)
            out[field] = list(value) if isinstance(value, tuple) else value
        return out

    def parameters(self) -> dict[str, Any]:
        """Only the sampling parameters (no name or metadata), as plain JSON types."""
        full = self.to_dict()
        return {field: full[field] for field in PARAMETERS}

    def replace(self, **changes: Any) -> Preset:
        """A validated copy with ``changes`` applied."""
        unknown = [key for key in changes if key not in ALL_KEYS]
        if unknown:
            raise PresetError(unknown[0], "unknown preset field")
        return dataclasses.replace(self, **changes)

    def describe(self) -> str:
        """A short one-line summary of the parameters that are not at their neutral value."""
        parts = []
        for field in (
            "temperature",
            "top_k",
            "top_p",
            "min_p",
            "typical_p",
            "repetition_penalty",
            "frequency_penalty",
            "presence_penalty",
            "no_repeat_ngram_size",
        ):
            value = getattr(self, field)
            if value != FIELDS[field][1] or field == "temperature":
                parts.append(f"{field}={value:g}")
        if self.order != DEFAULT_ORDER:
            parts.append("order=" + ">".join(self.order))
        return ", ".join(parts)


def differences(a: Preset, b: Preset) -> dict[str, tuple[Any, Any]]:
    """Field-by-field differences between two presets: ``{field: (a_value, b_value)}``."""
    da, db = a.to_dict(), b.to_dict()
    return {key: (da[key], db[key]) for key in ALL_KEYS if da[key] != db[key]}
