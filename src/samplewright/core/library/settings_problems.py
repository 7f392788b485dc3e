"""What is wrong with a settings document, in words: every schema violation with its place,
every bad value of a preset, cut to a length a terminal can show.

The JSON Schema is ``resources/settings.schema.json`` (draft 2020-12); jsonschema loads only
when a document is checked (it takes a noticeable share of the CLI's start-up).
"""

from __future__ import annotations

import functools
import itertools
import json
from collections.abc import Iterable
from importlib import resources
from typing import TYPE_CHECKING, Any

from ..presets import PresetError, validate_field
from ..text_rules import shown_plain

if TYPE_CHECKING:
    import jsonschema

#: How many problems one message lists at most.
MAX_PROBLEMS = 8


@functools.lru_cache(maxsize=1)
def schema() -> dict[str, Any]:
    """The settings file's JSON Schema (``resources/settings.schema.json``)."""
    text = (resources.files("samplewright") / "resources" / "settings.schema.json").read_text("utf-8")
    return json.loads(text)


@functools.lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    import jsonschema  # here, not at module level: it takes a noticeable share of the CLI's start-up

    return jsonschema.Draft202012Validator(schema())


def schema_problem(document: Any) -> str | None:
    """Every way ``document`` breaks the schema (up to :data:`MAX_PROBLEMS`, the most relevant
    first), each with its place (``presets[2].top_p``), joined by "; "; or None."""
    from jsonschema.exceptions import best_match, relevance

    errors = list(itertools.islice(_validator().iter_errors(document), 200))
    if not errors:
        return None
    first = best_match(errors)
    ordered = [first] + sorted((e for e in errors if e is not first), key=relevance)
    problems: list[str] = []
    for error in ordered:
        problem = f"{_place(error.absolute_path)}: {_cut(error.message, 160)}"
        if problem not in problems:
            problems.append(problem)
    more = len(problems) - MAX_PROBLEMS
    return "; ".join(problems[:MAX_PROBLEMS]) + (f"; and {more} more" if more > 0 else "")


def _place(path: Iterable[Any]) -> str:
    place = ""
    for part in path:
        place += (
            f"[{part}]" if isinstance(part, int) else (f".{shown_plain(part, 60)}" if place else shown_plain(part, 60))
        )
    return place or "the top level"


def _cut(message: str, limit: int) -> str:
    # jsonschema quotes the offending value whole; a million characters must not reach a terminal.
    return shown_plain(message, limit)


def preset_problems(mapping: Any) -> list[str]:
    """Every invalid value or unknown key of a single preset's plain-JSON form (empty when
    :meth:`Preset.from_dict` would accept it), each as "field: why"."""
    if not isinstance(mapping, dict):
        return [f"preset: expected a JSON object, got {type(mapping).__name__}"]
    problems = [] if "name" in mapping else ["name: a preset needs a name"]
    for field, value in mapping.items():
        try:
            if field in ("created", "modified") and value == "":
                continue
            validate_field(str(field), value)
        except PresetError as exc:
            problems.append(str(exc))
    return problems


def joined(problems: list[str]) -> str:
    """Problems joined by "; ", at most :data:`MAX_PROBLEMS` of them, with how many more."""
    more = len(problems) - MAX_PROBLEMS
    return "; ".join(problems[:MAX_PROBLEMS]) + (f"; and {more} more" if more > 0 else "")
