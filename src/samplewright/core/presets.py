"""Named sampling presets: their parameters, validation and plain-JSON form.

A preset says how a language model's next-token distribution is reshaped
before a token is drawn. Its meaning is defined executably by
:func:`samplewright.shape`; this module only holds and checks the numbers.

This module imports neither torch nor Qt, so editing, storing and exporting
presets stays fast.

Each numeric parameter's range, default and neutral value is one typed
:class:`~.fields.NumberField`: the stages' own in the stage registry
(``core/sampling/registry.py``), the token limit here. References for each
stage are in ``core/sampling/stages.py`` and the registry.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Mapping
from datetime import datetime, timezone
from typing import Any

from . import limits
from .errors import PresetError
from .fields import Field, ListField, NumberField
from .sampling import registry
from .text_rules import character_problem, shown, shown_plain

#: Stage names of the chain, in the order transformers' ``generate()`` applies
#: them (penalties first, then temperature, top-k, top-p, min-p, typical): the
#: built-in stages in the order the registry holds them.
DEFAULT_ORDER: tuple[str, ...] = registry.names()

MAX_TEXT = {"name": 120, "description": 2000, "notes": 10000, "tag": 60, "stop": 200}
MAX_TAGS = 32
MAX_STOPS = 16


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
    known = registry.names()  # read each time: a stage registered later counts too
    if sorted(map(str, order)) != sorted(known) or len(order) != len(known):
        raise PresetError("order", f"{shown(list(order))} must name each of {list(known)} exactly once")
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


#: Every parameter's typed description: the stages' own fields (from the stage registry, stage by
#: stage in the default order), then the token limit, the stop strings and the order.
FIELDS: dict[str, Field] = {f.name: f for f in registry.stage_fields()}
FIELDS["max_new_tokens"] = NumberField(
    "max_new_tokens",
    1,
    limits.MAX_NEW_TOKENS,
    64,
    "The longest continuation this preset writes.",
    integer=True,
)
FIELDS["stop"] = ListField(
    "stop",
    (),
    f"up to {MAX_STOPS} non-empty strings",
    "Text that ends a sample as soon as it appears in the continuation.",
    _stop,
)
FIELDS["order"] = ListField(
    "order",
    DEFAULT_ORDER,
    "each stage name exactly once",
    "The order the stages reshape the distribution in; each stage sees the previous stage's result.",
    _order,
)
PARAMETERS = tuple(FIELDS)
METADATA = ("name", "description", "tags", "notes", "created", "modified")
ALL_KEYS = METADATA + PARAMETERS


def _default(field: str) -> Any:
    return FIELDS[field].default


def validate_field(field: str, value: Any) -> Any:
    """Check one field and return its normalised value.

    Raises:
        PresetError: naming the field, the bad value and the allowed range.
    """
    if field in FIELDS:
        return FIELDS[field].check(value)
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
    temperature: float = _default("temperature")
    top_k: int = _default("top_k")
    top_p: float = _default("top_p")
    min_p: float = _default("min_p")
    typical_p: float = _default("typical_p")
    repetition_penalty: float = _default("repetition_penalty")
    frequency_penalty: float = _default("frequency_penalty")
    presence_penalty: float = _default("presence_penalty")
    no_repeat_ngram_size: int = _default("no_repeat_ngram_size")
    max_new_tokens: int = _default("max_new_tokens")
    stop: tuple[str, ...] = _default("stop")
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
        for field in registry.stage_fields():
            value = getattr(self, field.name)
            if value != field.neutral or field.name == "temperature":
                parts.append(f"{field.name}={value:g}")
        if self.order != DEFAULT_ORDER:
            parts.append("order=" + ">".join(self.order))
        return ", ".join(parts)


def differences(a: Preset, b: Preset) -> dict[str, tuple[Any, Any]]:
    """Field-by-field differences between two presets: ``{field: (a_value, b_value)}``."""
    da, db = a.to_dict(), b.to_dict()
    return {key: (da[key], db[key]) for key in ALL_KEYS if da[key] != db[key]}
