"""Bringing a settings file's presets into a library: preview first, then write.

:func:`preview_import` compares each incoming preset with the library's preset
of the same name and writes nothing. :func:`apply_import` then writes the plan
with the user's choices for conflicts.

An import is whole or nothing. Holding the library's lock, every preset of
the plan is checked against the folder as it is now (a colleague may have
saved one since the preview) and the names of copies are chosen, free in the
folder and among the names the plan itself adds; only when every preset can
be written are they written. If a write then fails (a full disk, an unplugged
drive), the presets already written are taken back: nothing is imported, and
:class:`ImportStopped` says why.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

from ..errors import LibraryError
from ..presets import PARAMETERS, Preset
from .library import PresetLibrary
from .records import PresetRecord, new_id
from .settings_file import SettingsDocument
from .writing import Batch, PendingSave, SaveConflict

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


def preview_import(document: SettingsDocument, library: PresetLibrary | None) -> ImportPlan:
    """Compare a settings document with a library by preset name; writes nothing.

    Args:
        document: the presets to import.
        library: the library, or None for a library folder that is not there yet (empty).
    """
    by_name: dict[str, PresetRecord] = {}
    for record in library.records() if library is not None else ():
        by_name.setdefault(record.name, record)
    items = []
    for preset in document.presets:
        existing = by_name.get(preset.name)
        if existing is None:
            items.append(ImportItem(preset, "add"))
            continue
        diff = PresetLibrary.diff(existing, preset)
        if any(field in PARAMETERS for field in diff):
            action = "conflict"
        else:
            action = "update" if diff else "unchanged"
        items.append(ImportItem(preset, action, existing, diff))
    return ImportPlan(tuple(items))


class ImportStopped(LibraryError):
    """An import was refused or failed; nothing was imported (``written`` is empty)."""

    def __init__(self, message: str, written: tuple[PresetRecord, ...] = ()):
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
    """Write a previewed import into the library, whole or not at all.

    Args:
        plan: from :func:`preview_import` on the same library.
        library: the library to write to.
        choices: for conflicts, one of :data:`IMPORT_CHOICES` for all of them, or
            ``{name: choice}``. Every conflict needs a choice.

    Returns:
        The records written, in plan order.

    Raises:
        LibraryError: when a conflict has no valid choice (nothing is written).
        ImportStopped: when a preset cannot be written (nothing is written; see the module docstring).
    """
    wanted = _choices_for(plan, choices)
    current = ""
    try:
        with library.writing(f"import {len(plan.items)} preset(s)") as batch:
            # Names the plan keeps come first, so a copy's name avoids them too.
            order = sorted(plan.items, key=lambda item: _is_copy(item, wanted.get(item.name)))
            pending: dict[int, PendingSave] = {}
            for item in order:
                current = item.name
                prepared = _prepare_item(item, wanted.get(item.name), batch)
                if prepared is not None:
                    pending[plan.items.index(item)] = prepared
            current = ""
            return tuple(batch.write(pending[index]) for index in sorted(pending))
    except SaveConflict as exc:
        who = f"{exc.theirs.modified_by or 'someone'} changed" if exc.theirs else "someone deleted"
        raise ImportStopped(
            f"The import was refused: {who} '{exc.mine.name}' in the library since the preview. "
            "Nothing was imported; preview the import again."
        ) from exc
    except LibraryError as exc:
        at = f" at '{current}'" if current else ""
        raise ImportStopped(f"The import was refused{at}: {exc} Nothing was imported.") from exc


def _is_copy(item: ImportItem, choice: str | None) -> bool:
    return item.action == "conflict" and choice == "keep_both"


def _prepare_item(item: ImportItem, choice: str | None, batch: Batch) -> PendingSave | None:
    existing = item.existing
    if item.action == "add":
        return batch.prepare(PresetRecord(new_id(), 0, item.incoming), 0)
    if item.action == "update" and existing is not None:
        texts = {field: getattr(item.incoming, field) for field in _TEXT_FIELDS}
        return batch.prepare(existing.edited(existing.preset.replace(**texts)), existing.revision)
    if _is_copy(item, choice):
        return batch.prepare(PresetRecord(new_id(), 0, item.incoming), 0, copy_label="copy")
    if item.action == "conflict" and choice == "overwrite" and existing is not None:
        incoming = item.incoming.replace(created=existing.preset.created)
        return batch.prepare(existing.edited(incoming), existing.revision)
    return None
