"""Bringing a settings file's presets into a library: preview first, then write.

:func:`preview_import` compares each incoming preset with the library's preset
of the same name and writes nothing. :func:`apply_import` then writes the plan
with the user's choices for conflicts.

What happens to a batch that fails mid-way: presets are written one at a
time, each atomically (a preset's file is always old or new, whole). If a
write fails (disk full, a colleague saved the same preset since the preview,
...), the import stops there with :class:`ImportStopped`: presets written
before stay written (each is a normal revision, the replaced version is in its
history), the rest are not written. Running the same import again finds the
written ones unchanged and carries on with the rest.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

from ..errors import LibraryError
from ..presets import PARAMETERS, Preset
from .library import PresetLibrary
from .records import PresetRecord
from .settings_file import SettingsDocument

#: keep_both: the incoming preset is added as "<name> (copy)"; take_theirs / skip: the library's
#: preset stays as it is; overwrite: the incoming preset becomes the library preset's next revision.
IMPORT_CHOICES: tuple[str, ...] = ("keep_both", "take_theirs", "overwrite", "skip")
_TEXT_FIELDS = ("description", "tags", "notes")


@dataclasses.dataclass(frozen=True)
class ImportItem:
    """One incoming preset and what importing it would do.

    Attributes:
        incoming: the preset from the file.
        action: ``"add"`` (name not in the library), ``"update"`` (same name and
            parameters, other description/tags/notes), ``"conflict"`` (same name,
            different parameters) or ``"unchanged"``.
        existing: the library's preset of that name, if any.
        differences: ``{field: (library value, incoming value)}``.
    """

    incoming: Preset
    action: str
    existing: PresetRecord | None = None
    differences: Mapping[str, tuple[Any, Any]] = dataclasses.field(default_factory=dict)

    @property
    def name(self) -> str:
        """The incoming preset's name."""
        return self.incoming.name


@dataclasses.dataclass(frozen=True)
class ImportPlan:
    """What importing a settings document into a library would do; nothing written yet."""

    items: tuple[ImportItem, ...]

    def by_action(self, action: str) -> tuple[ImportItem, ...]:
        """The items with ``action`` ("add", "update", "conflict" or "unchanged")."""
        return tuple(item for item in self.items if item.action == action)

    @property
    def conflicts(self) -> tuple[ImportItem, ...]:
        """Items whose name is in the library with different parameters."""
        return self.by_action("conflict")

    def lines(self) -> list[str]:
        """One line per item for a terminal, e.g. ``conflict  Greedy baseline  (temperature: 0 -> 0.2)``."""
        out = []
        for item in self.items:
            changes = "; ".join(f"{k}: {_short(a)} -> {_short(b)}" for k, (a, b) in item.differences.items())
            out.append(f"{item.action:<9}  {item.name}" + (f"  ({changes})" if changes else ""))
        return out

    def to_json(self) -> dict[str, Any]:
        """The plan as plain JSON types: ``{"items": [{"name", "action", "id", "differences"}]}``."""
        return {
            "items": [
                {
                    "name": i.name,
                    "action": i.action,
                    "id": i.existing.id if i.existing else None,
                    "differences": {k: list(v) for k, v in i.differences.items()},
                }
                for i in self.items
            ]
        }


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def preview_import(document: SettingsDocument, library: PresetLibrary) -> ImportPlan:
    """Compare a settings document with a library by preset name; writes nothing."""
    by_name: dict[str, PresetRecord] = {}
    for record in library.records():
        by_name.setdefault(record.name, record)
    items = []
    for preset in document.presets:
        existing = by_name.get(preset.name)
        if existing is None:
            items.append(ImportItem(preset, "add"))
            continue
        diff = library.diff(existing, preset)
        if any(field in PARAMETERS for field in diff):
            action = "conflict"
        else:
            action = "update" if diff else "unchanged"
        items.append(ImportItem(preset, action, existing, diff))
    return ImportPlan(tuple(items))


class ImportStopped(LibraryError):
    """An import stopped part-way; ``written`` holds the records written before the failure."""

    def __init__(self, message: str, written: tuple[PresetRecord, ...]):
        super().__init__(message)
        self.written = written


def _choices_for(plan: ImportPlan, choices: str | Mapping[str, str] | None) -> dict[str, str]:
    wanted = {}
    for item in plan.conflicts:
        choice = choices if isinstance(choices, str) or choices is None else choices.get(item.name)
        if choice is None:
            raise LibraryError(
                f"'{item.name}' is in the library with other parameters; choose one of "
                f"{', '.join(IMPORT_CHOICES)} for it. Nothing was imported."
            )
        if choice not in IMPORT_CHOICES:
            raise LibraryError(
                f"Unknown choice {choice!r} for '{item.name}'; use one of "
                f"{', '.join(IMPORT_CHOICES)}. Nothing was imported."
            )
        wanted[item.name] = choice
    return wanted


def apply_import(
    plan: ImportPlan, library: PresetLibrary, choices: str | Mapping[str, str] | None = None
) -> tuple[PresetRecord, ...]:
    """Write a previewed import into the library.

    Args:
        plan: from :func:`preview_import` on the same library.
        library: the library to write to.
        choices: for conflicts, one of :data:`IMPORT_CHOICES` for all of them, or
            ``{name: choice}``. Every conflict needs a choice.

    Returns:
        The records written, in plan order.

    Raises:
        LibraryError: when a conflict has no valid choice (nothing is written).
        ImportStopped: when a write fails part-way (see the module docstring).
    """
    wanted = _choices_for(plan, choices)
    written: list[PresetRecord] = []
    for item in plan.items:
        try:
            record = _apply_item(item, wanted.get(item.name), library)
        except LibraryError as exc:
            rest = [i.name for i in plan.items[plan.items.index(item) :] if i.action != "unchanged"]
            done = ", ".join(f"'{r.name}'" for r in written) or "none"
            raise ImportStopped(
                f"The import stopped at '{item.name}': {exc} Written before it: {done}. "
                f"Not written: {', '.join(repr(n) for n in rest)}. Importing the file again "
                "carries on where it stopped.",
                tuple(written),
            ) from exc
        if record is not None:
            written.append(record)
    return tuple(written)


def _apply_item(item: ImportItem, choice: str | None, library: PresetLibrary) -> PresetRecord | None:
    if item.action == "add":
        return library.add(item.incoming)
    existing = item.existing
    if item.action == "update" and existing is not None:
        texts = {field: getattr(item.incoming, field) for field in _TEXT_FIELDS}
        return library.save(existing.edited(existing.preset.replace(**texts)))
    if item.action == "conflict" and choice == "keep_both":
        return library.add(item.incoming.replace(name=library.unused_name(item.name, "copy")))
    if item.action == "conflict" and choice == "overwrite" and existing is not None:
        incoming = item.incoming.replace(created=existing.preset.created)
        return library.save(existing.edited(incoming))
    return None
