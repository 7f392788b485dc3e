"""The team's preset library: one JSON file per preset in a shared folder.

Layout of a library folder (see docs/library.md)::

    <library>/<id>.json                      one file per preset (records.py)
    <library>/.history/<id>/<rev>.json       the last 20 earlier revisions (history_trash.py)
    <library>/.trash/<id>.<rev>.json         every deleted revision, restorable
    <library>/.samplewright.lock             the write lock, and beside it a note of who holds it

:class:`PresetLibrary` holds the presets in memory and emits what changed. The
work is done by three modules: scanning.py reads the folder (with its parse
cache), writing.py makes every change under the lock from the folder as it is
on disk (saves, conflicts, deletes, restores), history_trash.py keeps earlier
and deleted revisions. Every write holds the lock and goes through changes.py,
so a failure at any step leaves the library as it was and a killed save leaves
the old or the new version, whole. Files that are not valid presets are listed
in ``skipped`` and never touched.
"""

from __future__ import annotations

import contextlib
import os
import time
from collections.abc import Iterator
from pathlib import Path

from ..errors import LibraryError
from ..events import Emitter
from ..presets import Preset, differences
from . import scanning
from .changes import changing
from .folders import default_library_dir, starter_presets
from .history_trash import HISTORY_DIR, HISTORY_LIMIT, TRASH_DIR, read_history, trash_files
from .records import PresetRecord
from .scanning import ChangeReport, FolderSnapshot, SkippedFile
from .storage import current_user, explain_os_error, folder_missing_error, hold_lock, remove_leftovers
from .writing import CONFLICT_CHOICES, Batch, ConflictChoice, SaveConflict, unused_name

__all__ = [
    "CONFLICT_CHOICES",
    "HISTORY_DIR",
    "HISTORY_LIMIT",
    "TRASH_DIR",
    "Batch",
    "ChangeReport",
    "ConflictChoice",
    "FolderSnapshot",
    "PresetLibrary",
    "SaveConflict",
    "SkippedFile",
    "default_library_dir",
    "starter_presets",
]

#: Leftovers of killed saves are looked for at most this often (seconds) per library.
_LEFTOVER_CHECK_S = 60.0


class PresetLibrary:
    """The presets in one library folder, kept in step with the files.

    Args:
        folder: the library folder.
        user: the name written as ``modified_by`` (default: the login name).
        lock_timeout: seconds to wait for another writer before giving up.
        create: create ``folder`` when it is missing. Otherwise that is an error (a
            missing shared folder is usually an unplugged drive); the default, None,
            creates only the personal :func:`default_library_dir`.
        seed: put the starter presets into a folder that is completely empty.

    Raises:
        LibraryError: when the folder is missing (and not ``create``) or unreadable.

    Events:
        added(record), changed(record), removed(record): emitted after this
        library's own writes and after :meth:`rescan` finds others' edits.
    """

    def __init__(
        self,
        folder: str | os.PathLike,
        *,
        user: str | None = None,
        lock_timeout: float = 5.0,
        create: bool | None = None,
        seed: bool = True,
    ):
        self.folder = Path(folder).expanduser()
        self.user = user or current_user()
        self.lock_timeout = lock_timeout
        self.added, self.changed, self.removed = Emitter(), Emitter(), Emitter()
        self._records: dict[str, PresetRecord] = {}
        self.skipped: list[SkippedFile] = []
        self._parsed: scanning.ParseCache = {}
        self._leftovers_checked = -_LEFTOVER_CHECK_S
        # A count of this library's writes, and the count at each preset's latest one, so a
        # snapshot read before a write cannot undo it (apply_snapshot).
        self._generation = 0
        self._touched: dict[str, int] = {}
        self._prepare_folder(self.folder == default_library_dir() if create is None else create, seed)
        snapshot = self.scan_folder()
        self._records, self._parsed, self.skipped = dict(snapshot.records), snapshot.parsed, list(snapshot.skipped)

    def _prepare_folder(self, create: bool, seed: bool) -> None:
        if not self.folder.is_dir():
            if not create:
                raise folder_missing_error(self.folder)
            try:
                self.folder.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise explain_os_error(exc, self.folder, "create the library folder") from exc
        try:
            empty = not any(self.folder.iterdir())
        except OSError as exc:
            raise LibraryError(f"Could not read the library folder {self.folder}: {exc.strerror}.") from exc
        if seed and empty:
            with contextlib.suppress(LibraryError):  # a read-only empty folder still opens, empty
                self._seed()

    # -- reading -------------------------------------------------------------------------------

    def records(self) -> list[PresetRecord]:
        """All presets, sorted by name (case-insensitive)."""
        return sorted(self._records.values(), key=lambda r: (r.name.casefold(), r.id))

    def presets(self) -> list[Preset]:
        """All presets' :class:`Preset` objects, sorted by name."""
        return [record.preset for record in self.records()]

    def get(self, record_id: str) -> PresetRecord:
        """The record with ``record_id``.

        Raises:
            LibraryError: when no preset has that id.
        """
        try:
            return self._records[record_id]
        except KeyError:
            raise LibraryError(f"No preset with id {record_id} in {self.folder}; it may have been deleted.") from None

    def find(self, name_or_id: str) -> PresetRecord:
        """The preset with this id, or this exact name, or this name ignoring case.

        Raises:
            LibraryError: when nothing matches, or several presets share the name.
        """
        if name_or_id in self._records:
            return self._records[name_or_id]
        wanted = name_or_id.strip()
        for same in (lambda n: n == wanted, lambda n: n.casefold() == wanted.casefold()):
            hits = [r for r in self.records() if same(r.name)]
            if len(hits) > 1:
                ids = ", ".join(r.id for r in hits)
                raise LibraryError(f"Several presets are named '{wanted}' (ids {ids}); give the id instead.")
            if hits:
                return hits[0]
        known = ", ".join(f"'{r.name}'" for r in self.records()[:12]) or "none"
        raise LibraryError(f"No preset named '{wanted}' in {self.folder}. Presets there: {known}.")

    def rescan(self) -> ChangeReport:
        """Re-read the folder, report and emit what others added, changed or removed
        (:meth:`scan_folder` then :meth:`apply_snapshot`).

        Raises:
            LibraryError: when the folder is gone or unreadable (the presets in memory stay).
        """
        return self.apply_snapshot(self.scan_folder())

    def scan_folder(self) -> FolderSnapshot:
        """Read the folder without changing this library: safe to call on another thread.

        It only reads the parse cache; the cache dict is replaced whole, never changed in
        place, so a reader keeps a consistent one.

        Raises:
            LibraryError: when the folder is gone or unreadable.
        """
        return scanning.scan_folder(self.folder, self._parsed, self._generation)

    def apply_snapshot(self, snapshot: FolderSnapshot) -> ChangeReport:
        """Take a :meth:`scan_folder` result as the library's state; report and emit the differences.

        Presets this library wrote or deleted after the snapshot began keep their state in
        memory (the snapshot may have read the folder before that write).

        Raises:
            LibraryError: when the snapshot is of another folder.
        """
        if snapshot.folder != self.folder:
            raise LibraryError(f"A reading of {snapshot.folder} cannot update the library in {self.folder}.")
        old = self._records
        merged = scanning.merge_snapshot(old, snapshot, self._touched)
        self._records, self._parsed, self.skipped = merged.records, merged.parsed, merged.skipped
        for record_id in merged.report.added:
            self.added.emit(merged.records[record_id])
        for record_id in merged.report.changed:
            self.changed.emit(merged.records[record_id])
        for record_id in merged.report.removed:
            self.removed.emit(old[record_id])
        return merged.report

    # -- writing -------------------------------------------------------------------------------

    @contextlib.contextmanager
    def writing(self, action: str) -> Iterator[Batch]:
        """Hold the lock for one change; the :class:`~.writing.Batch` starts from the folder
        as it is on disk. When the block fails, every file step is undone; when it succeeds,
        the library takes what was written and emits it.

        Args:
            action: what is done, completing "Could not ..." in an error message.

        Raises:
            LibraryError: for a busy, missing or unwritable folder (nothing changed).
        """
        with hold_lock(self.folder, self.lock_timeout, self.user):
            self._remove_leftovers()
            try:
                with changing(self.folder) as changes:
                    snapshot = self.scan_folder()
                    self._parsed = snapshot.parsed
                    batch = Batch(self.folder, self.user, dict(snapshot.records), changes)
                    yield batch
            except OSError as exc:
                raise explain_os_error(exc, self.folder, action) from exc
        for record in batch.removed:
            self._forget(record.id)
        for record in batch.written:
            self._remember(record)

    def add(self, preset: Preset) -> PresetRecord:
        """Store ``preset`` as a new library preset (new id, revision 1).

        Raises:
            LibraryError: when the name is taken or the folder cannot be written.
        """
        with self.writing(f"add '{preset.name}'") as batch:
            return batch.add(preset)

    def save(self, item: PresetRecord | Preset, expected_revision: int | None = None) -> PresetRecord:
        """Save an edited record as its next revision (a bare :class:`Preset` is added as new).

        Args:
            item: the record as loaded, holding the edited preset (``record.edited(p)``).
            expected_revision: the revision the edit started from; default ``item.revision``.

        Returns:
            The record as now stored (new revision, stamped times).

        Raises:
            SaveConflict: when the file on disk is no longer at ``expected_revision``.
            LibraryError: when the name is taken, the file on disk is not a valid
                preset, or the folder cannot be written; nothing is changed then.
        """
        if isinstance(item, Preset):
            return self.add(item)
        expected = item.revision if expected_revision is None else expected_revision
        with self.writing(f"save '{item.name}'") as batch:
            return batch.commit(item, expected)

    def resolve_conflict(self, conflict: SaveConflict, choice: ConflictChoice) -> PresetRecord | None:
        """Settle a :class:`SaveConflict` the way the user chose.

        Args:
            conflict: the conflict raised by :meth:`save`.
            choice: ``"keep_both"`` saves mine as a new preset named "<name> (copy)" (or
                "(copy 2)", ..., the first name free in the folder as it is now);
                ``"take_theirs"`` drops mine and takes the version on disk;
                ``"overwrite"`` saves mine over theirs (theirs stays in the history).

        Returns:
            The record written (the copy, or mine) or, for take_theirs, theirs
            (None when theirs was a deletion).

        Raises:
            SaveConflict: when the file changed yet again meanwhile (overwrite).
            LibraryError: for an unknown choice or a failed write.
        """
        mine, theirs = conflict.mine, conflict.theirs
        if choice not in CONFLICT_CHOICES:
            raise LibraryError(f"Unknown choice {choice!r}; use one of {', '.join(CONFLICT_CHOICES)}.")
        self._take_disk_version(mine.id, theirs)
        if choice == "take_theirs":
            return theirs
        if choice == "keep_both":
            with self.writing(f"save a copy of '{mine.name}'") as batch:
                return batch.add(mine.preset, copy_label="copy")
        with self.writing(f"save '{mine.name}'") as batch:
            return batch.commit(mine, expected=theirs.revision if theirs else 0)

    def delete(self, record_id: str) -> None:
        """Move a preset's file to the library's trash (restorable with :meth:`restore`).

        Raises:
            LibraryError: when the folder cannot be written.
        """
        record = self.get(record_id)
        with self.writing(f"delete '{record.name}'") as batch:
            batch.delete(record_id, record)
        self._forget(record_id)

    def trash(self) -> list[PresetRecord]:
        """Every deleted revision that can be restored, sorted by name, newest revision first.

        Raises:
            LibraryError: when the library folder is gone.
        """
        return [record for record, _path in trash_files(self.folder)]

    def restore(self, record_id: str, revision: int | None = None) -> PresetRecord:
        """Bring a deleted revision back from the trash (default: the newest of ``record_id``).

        It returns under its id and name; if either is now taken, it comes back
        as a new preset named "<name> (restored)".

        Raises:
            LibraryError: when it is not in the trash (saying so when a colleague restored
                it first), or the folder is gone or cannot be written.
        """
        with self.writing(f"restore preset {record_id}") as batch:
            return batch.restore(record_id, revision)

    def unused_name(self, name: str, label: str, taken: set[str] | None = None) -> str:
        """``name`` with " (label)", " (label 2)", ... appended, not used by any preset in
        memory (or, when given, not in ``taken``). Writes choose again under the lock."""
        return unused_name(name, label, {r.name for r in self._records.values()} if taken is None else taken)

    # -- history -------------------------------------------------------------------------------

    def history(self, record_id: str) -> list[PresetRecord]:
        """The kept earlier revisions of a preset (at most 20), newest first; the current one is :meth:`get`.

        Raises:
            LibraryError: when the library folder is gone.
        """
        return read_history(self.folder, record_id)

    def revision(self, record_id: str, number: int) -> PresetRecord:
        """Revision ``number`` of a preset: the current one or one kept in its history.

        Raises:
            LibraryError: when that revision is not kept.
        """
        current = self._records.get(record_id)
        if current is not None and current.revision == number:
            return current
        for record in self.history(record_id):
            if record.revision == number:
                return record
        raise LibraryError(
            f"Revision {number} of preset {record_id} is not kept "
            f"(the library keeps the last {HISTORY_LIMIT} revisions)."
        )

    @staticmethod
    def diff(a: PresetRecord | Preset, b: PresetRecord | Preset) -> dict[str, tuple]:
        """Field-by-field differences ``{field: (a_value, b_value)}`` between two presets or
        revisions, leaving out the created/modified times."""
        pa = a.preset if isinstance(a, PresetRecord) else a
        pb = b.preset if isinstance(b, PresetRecord) else b
        return {k: v for k, v in differences(pa, pb).items() if k not in ("created", "modified")}

    # -- internals -----------------------------------------------------------------------------

    def _remove_leftovers(self) -> None:
        now = time.monotonic()
        if now - self._leftovers_checked < _LEFTOVER_CHECK_S:
            return
        self._leftovers_checked = now
        history = self.folder / HISTORY_DIR
        with contextlib.suppress(OSError):
            folders = [self.folder, self.folder / TRASH_DIR, history, *(p for p in history.iterdir() if p.is_dir())]
            remove_leftovers([f for f in folders if not f.is_symlink()])

    def _touch(self, record_id: str) -> None:
        self._generation += 1
        self._touched[record_id] = self._generation

    def _remember(self, record: PresetRecord) -> None:
        self._touch(record.id)
        is_new = record.id not in self._records
        self._records[record.id] = record
        (self.added if is_new else self.changed).emit(record)

    def _forget(self, record_id: str) -> None:
        self._touch(record_id)
        record = self._records.pop(record_id, None)
        if record is not None:
            self.removed.emit(record)

    def _take_disk_version(self, record_id: str, theirs: PresetRecord | None) -> None:
        if theirs is None and record_id in self._records:
            self._forget(record_id)
        elif theirs is not None and self._records.get(record_id) != theirs:
            self._remember(theirs)

    def _seed(self) -> None:
        with self.writing("put the starter presets into the new library") as batch:
            for preset in starter_presets():
                batch.add(preset)
