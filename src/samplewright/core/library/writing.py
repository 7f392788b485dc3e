"""Writing to the library under its lock: saves, conflicts, deletes and restores.

A :class:`Batch` is one locked change. It starts from the folder as it is on
disk (read under the lock, never from the library's memory), so conflicts and
taken names are decided on what colleagues have really written. Saves are
optimistic: saving over a file whose revision has moved on raises
:class:`SaveConflict` with both versions. Every file step goes through a
:class:`~.changes.FileChanges`, so a failure at any point leaves the library
as it was.

:meth:`Batch.prepare` checks a save and reserves its name without writing;
:meth:`Batch.write` writes what was prepared. An import prepares all its
presets first and writes only if every one of them can be written.
"""

from __future__ import annotations

import dataclasses
import itertools
from pathlib import Path
from typing import Literal

from ..errors import LibraryError
from ..presets import MAX_TEXT, Preset, now_iso
from .changes import FileChanges
from .history_trash import (
    HISTORY_LIMIT,
    keep_history,
    latest_known_revision,
    move_into_history,
    move_to_trash,
    trash_files,
)
from .records import PresetRecord, encode_record, new_id, read_record_file, record_file_name
from .storage import BadContent

ConflictChoice = Literal["keep_both", "take_theirs", "overwrite"]
CONFLICT_CHOICES: tuple[str, ...] = ("keep_both", "take_theirs", "overwrite")


class SaveConflict(LibraryError):
    """The preset changed (or was deleted) on disk since it was loaded.

    Attributes:
        mine: the record the caller tried to save (its edited preset, the old revision).
        theirs: the record now on disk, or None when someone deleted it.
    """

    def __init__(self, mine: PresetRecord, theirs: PresetRecord | None):
        if theirs is None:
            what = "was deleted from the library by someone else"
        else:
            what = (
                f"was changed by {theirs.modified_by or 'someone'} at {theirs.modified_at} "
                f"(now revision {theirs.revision}; you opened revision {mine.revision})"
            )
        super().__init__(
            f"'{mine.name}' {what}. Nothing was saved; choose: keep both "
            "(yours saved as a copy), take theirs, or overwrite."
        )
        self.mine = mine
        self.theirs = theirs


def unused_name(name: str, label: str, taken: set[str] | dict[str, str]) -> str:
    """``name`` with " (label)", " (label 2)", ... appended, not in ``taken``."""
    for n in itertools.count(1):
        tail = f" ({label})" if n == 1 else f" ({label} {n})"
        candidate = name[: MAX_TEXT["name"] - len(tail)].rstrip() + tail
        if candidate not in taken:
            return candidate
    raise AssertionError("unreachable")


@dataclasses.dataclass(frozen=True)
class PendingSave:
    """A save checked by :meth:`Batch.prepare`: the record to write and the one it replaces."""

    record: PresetRecord
    replaces: PresetRecord | None


class Batch:
    """One change to the library folder, made holding its lock.

    Args:
        folder: the library folder.
        user: the name written as ``modified_by``.
        on_disk: the presets in the folder now (read under the lock), by id.
        changes: where the file steps are recorded (undone if the change fails).

    Attributes:
        written: the records written, in order; removed: the records moved to the trash.
    """

    def __init__(self, folder: Path, user: str, on_disk: dict[str, PresetRecord], changes: FileChanges):
        self.folder, self.user, self.changes = folder, user, changes
        self.names: dict[str, str] = {record.name: record.id for record in on_disk.values()}
        self.on_disk = on_disk
        self.written: list[PresetRecord] = []
        self.removed: list[PresetRecord] = []

    def read_current(self, record_id: str) -> PresetRecord | None:
        """The file of ``record_id`` as it is now, or None when there is none.

        Raises:
            LibraryError: when the file is there but not a valid preset (it is left as it is).
        """
        path = self.folder / record_file_name(record_id)
        try:
            return read_record_file(path)
        except FileNotFoundError:
            return None
        except BadContent as exc:
            raise LibraryError(
                f"The library file {path.name} is not a valid preset ({exc}); it is left as it "
                "is. Save your preset under another name or export it."
            ) from None

    def unused_name(self, name: str, label: str) -> str:
        """A name for a copy, free in the folder as it is now and in this batch."""
        return unused_name(name, label, self.names)

    def prepare(self, mine: PresetRecord, expected: int, copy_label: str | None = None) -> PendingSave:
        """Check that ``mine.preset`` can be saved as the next revision of ``mine.id``, from
        ``expected`` (0: a new preset); reserve its name. With ``copy_label``, the preset
        gets the first free name "<name> (<label>)".

        Raises:
            SaveConflict: when the file is no longer at ``expected``.
            LibraryError: when the name is taken or the file on disk is not a valid preset.
        """
        theirs = self.read_current(mine.id)
        if (theirs.revision if theirs else 0) != expected:
            raise SaveConflict(mine, theirs)
        preset = mine.preset
        if copy_label:
            preset = preset.replace(name=self.unused_name(preset.name, copy_label))
        owner = self.names.get(preset.name)
        if owner is not None and owner != mine.id:
            raise LibraryError(f"A preset named '{preset.name}' is already in the library; choose another name.")
        latest = max(expected, mine.revision)
        if latest > 0:  # never reuse a number, e.g. after a deletion or a restored older revision
            latest = max(latest, latest_known_revision(self.folder, mine.id))
        now = now_iso()
        stamped = preset.replace(created=preset.created or now, modified=now)
        record = PresetRecord(mine.id, latest + 1, stamped, now, self.user)
        for name, owner in list(self.names.items()):
            if owner == mine.id:
                del self.names[name]
        self.names[preset.name] = mine.id
        return PendingSave(record, theirs)

    def write(self, pending: PendingSave) -> PresetRecord:
        """Write a prepared save: the replaced revision into the history first, then the
        new file, the history's trim last."""
        record, theirs = pending.record, pending.replaces
        path = self.folder / record.file_name
        if theirs is not None:
            keep_history(self.changes, self.folder, theirs, HISTORY_LIMIT)
            self.changes.replace(path, encode_record(record))
        else:
            self.changes.write_new(path, encode_record(record))
        self.written.append(record)
        return record

    def commit(self, mine: PresetRecord, expected: int, copy_label: str | None = None) -> PresetRecord:
        """:meth:`prepare` then :meth:`write`."""
        return self.write(self.prepare(mine, expected, copy_label))

    def add(self, preset: Preset, copy_label: str | None = None) -> PresetRecord:
        """Write ``preset`` as a new library preset (new id, revision 1)."""
        return self.commit(PresetRecord(new_id(), 0, preset), 0, copy_label)

    def delete(self, record_id: str, loaded: PresetRecord) -> PresetRecord | None:
        """Move the file of ``record_id`` into the trash; None when someone deleted it already."""
        try:
            current = self.read_current(record_id)
        except LibraryError:
            current = loaded  # an unreadable file is trashed all the same, under the loaded revision
        else:
            if current is None:
                return None
        move_to_trash(self.changes, self.folder, record_id, current.revision)
        self.removed.append(current)
        return current

    def restore(self, record_id: str, revision: int | None) -> PresetRecord:
        """Bring a trashed revision back (the newest when ``revision`` is None).

        It returns under its id and name; if either is taken now, as a new preset
        "<name> (restored)".

        Raises:
            LibraryError: when it is not in the trash, saying so plainly when a
                colleague restored it first.
        """
        entries = [
            (record, path)
            for record, path in trash_files(self.folder)
            if record.id == record_id and revision in (None, record.revision)
        ]
        if not entries:
            raise self._not_in_trash(record_id, revision)
        trashed, source = max(entries, key=lambda item: item[0].revision)
        if (self.folder / trashed.file_name).exists() or trashed.name in self.names:
            record = self.add(trashed.preset, copy_label="restored")
            move_into_history(self.changes, self.folder, trashed, source)
            return record
        self.changes.move(source, self.folder / trashed.file_name)
        self.names[trashed.name] = trashed.id
        self.written.append(trashed)
        return trashed

    def _not_in_trash(self, record_id: str, revision: int | None) -> LibraryError:
        which = f"revision {revision} of preset {record_id}" if revision else f"preset {record_id}"
        back = self.on_disk.get(record_id)
        if back is not None and revision in (None, back.revision):
            return LibraryError(
                f"'{back.name}' was restored by someone else first: it is back in the library. Nothing was changed."
            )
        return LibraryError(
            f"The trash of {self.folder} holds no {which} any more (someone restored or removed it). "
            "Nothing was changed."
        )
