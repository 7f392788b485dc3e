"""The team's preset library: one JSON file per preset in a shared folder.

Layout of a library folder (see docs/library.md)::

    <library>/<id>.json                  one file per preset (records.py)
    <library>/.history/<id>/<rev>.json   the last 20 earlier revisions
    <library>/.trash/<id>.json           deleted presets, restorable
    <library>/.samplewright.lock         the write lock, and beside it a note of who holds it

Every write holds the lock and replaces files atomically (storage.py), so a
killed save leaves the old or the new version, whole. Saves are optimistic:
each record carries the revision it was loaded at, and saving over a file
whose revision has moved on raises :class:`SaveConflict` with both versions;
:meth:`PresetLibrary.resolve_conflict` applies the user's choice. Files that
are not valid presets are listed in ``skipped`` and never touched.
"""

from __future__ import annotations

import contextlib
import dataclasses
import itertools
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Literal

import platformdirs

from ..errors import LibraryError
from ..events import Emitter
from ..presets import MAX_TEXT, Preset, differences, now_iso
from .records import (
    PresetRecord,
    encode_record,
    keep_history,
    new_id,
    read_folder,
    read_history,
    read_record_file,
    record_file_name,
)
from .storage import BadContent, atomic_write, current_user, explain_os_error, folder_missing_error, hold_lock, move

HISTORY_LIMIT = 20
HISTORY_DIR = ".history"
TRASH_DIR = ".trash"
ConflictChoice = Literal["keep_both", "take_theirs", "overwrite"]
CONFLICT_CHOICES: tuple[str, ...] = ("keep_both", "take_theirs", "overwrite")
#: How many library files have been read and checked in this process (a rescan
#: re-reads only changed files); tests and diagnostics look at it.
files_parsed = 0


def starter_presets() -> tuple[Preset, ...]:
    """The presets a new library starts with: invented examples for a ferry company's
    communications team, read from ``resources/presets/starter.json`` (itself a settings
    file, so the same schema and rules check it)."""
    from importlib import resources

    from .settings_file import parse_settings  # jsonschema loads only when needed

    data = (resources.files("samplewright") / "resources" / "presets" / "starter.json").read_bytes()
    return parse_settings(data, "starter.json").presets


def default_library_dir() -> Path:
    """The personal library folder: ``$SAMPLEWRIGHT_LIBRARY_DIR``, else ``<user data>/samplewright/library``."""
    override = os.environ.get("SAMPLEWRIGHT_LIBRARY_DIR")
    if override:
        return Path(override).expanduser()
    return Path(platformdirs.user_data_dir("samplewright", appauthor=False)) / "library"


@dataclasses.dataclass(frozen=True)
class SkippedFile:
    """A file in the library folder that is not a usable preset; it is left as it is."""

    name: str
    reason: str


@dataclasses.dataclass(frozen=True)
class ChangeReport:
    """What :meth:`PresetLibrary.rescan` found changed on disk (ids, sorted)."""

    added: tuple[str, ...] = ()
    changed: tuple[str, ...] = ()
    removed: tuple[str, ...] = ()

    def __bool__(self) -> bool:
        return bool(self.added or self.changed or self.removed)


@dataclasses.dataclass(frozen=True)
class FolderSnapshot:
    """One reading of a library folder by :meth:`PresetLibrary.scan_folder`, not yet applied.

    Attributes:
        folder: the folder read.
        generation: the library's write count when the reading began.
        records: the presets found, by id.
        skipped: the files that are not usable presets.
        parsed: the parse cache as it should be after this reading.
    """

    folder: Path
    generation: int
    records: dict[str, PresetRecord]
    skipped: tuple[SkippedFile, ...]
    parsed: dict[str, tuple[tuple[int, int, int], PresetRecord | str]]


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
        # File name -> ((mtime_ns, size, inode), the record or the reason it was skipped).
        self._parsed: dict[str, tuple[tuple[int, int, int], PresetRecord | str]] = {}
        # A count of this library's writes, and the count at each preset's latest one, so a
        # snapshot read before a write cannot undo it (apply_snapshot).
        self._generation = 0
        self._touched: dict[str, int] = {}
        self._prepare_folder(self.folder == default_library_dir() if create is None else create, seed)
        self._records, self.skipped = self._scan()

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

        It changes no records, emits nothing and never writes the parse cache; it only
        reads it. No lock is needed for that: the cache dict is replaced whole, never
        changed in place, so a reader keeps a consistent one.

        Returns:
            What the folder holds now, to hand to :meth:`apply_snapshot` on the owning thread.

        Raises:
            LibraryError: when the folder is gone or unreadable.
        """
        generation, cache = self._generation, self._parsed
        try:
            entries = sorted(os.scandir(self.folder), key=lambda e: e.name)
        except FileNotFoundError:
            raise folder_missing_error(self.folder) from None
        except OSError as exc:
            raise LibraryError(f"Could not read the library folder {self.folder}: {exc.strerror}.") from exc
        records: dict[str, PresetRecord] = {}
        skipped: list[SkippedFile] = []
        parsed: dict[str, tuple[tuple[int, int, int], PresetRecord | str]] = {}
        for entry in entries:
            if entry.name.startswith(".") or not entry.is_file():
                continue  # our own folders, lock, temporary files; hidden files of the sync tool
            try:
                outcome = self._read_entry(entry, cache, parsed)
            except FileNotFoundError:
                continue  # deleted by someone while we scanned
            except OSError as exc:
                skipped.append(SkippedFile(entry.name, f"cannot be read ({exc.strerror})"))
                continue
            if isinstance(outcome, str):
                skipped.append(SkippedFile(entry.name, outcome))
            else:
                records[outcome.id] = outcome
        return FolderSnapshot(self.folder, generation, records, tuple(skipped), parsed)

    def apply_snapshot(self, snapshot: FolderSnapshot) -> ChangeReport:
        """Take a :meth:`scan_folder` result as the library's state; report and emit the differences.

        Presets this library wrote or deleted after the snapshot began keep their state in
        memory (the snapshot may have read the folder before that write).

        Args:
            snapshot: a snapshot of this library's folder.

        Returns:
            What others added, changed or removed.

        Raises:
            LibraryError: when the snapshot is of another folder.
        """
        if snapshot.folder != self.folder:
            raise LibraryError(f"A reading of {snapshot.folder} cannot update the library in {self.folder}.")
        old = self._records
        records, parsed = dict(snapshot.records), dict(snapshot.parsed)
        newer = {i for i, generation in self._touched.items() if generation > snapshot.generation}
        for record_id in newer:
            records.pop(record_id, None)
            if record_id in old:
                records[record_id] = old[record_id]
            parsed.pop(record_file_name(record_id), None)  # read again at the next scan
        own_files = {record_file_name(i) for i in newer}
        report = ChangeReport(
            added=tuple(sorted(set(records) - set(old))),
            changed=tuple(sorted(i for i in records if i in old and records[i] != old[i])),
            removed=tuple(sorted(set(old) - set(records))),
        )
        self._records, self._parsed = records, parsed
        self.skipped = [s for s in snapshot.skipped if s.name not in own_files]
        for record_id in report.added:
            self.added.emit(records[record_id])
        for record_id in report.changed:
            self.changed.emit(records[record_id])
        for record_id in report.removed:
            self.removed.emit(old[record_id])
        return report

    def _scan(self) -> tuple[dict[str, PresetRecord], list[SkippedFile]]:
        """Read the folder now on this thread, keeping the parse cache (the records in memory stay)."""
        snapshot = self.scan_folder()
        self._parsed = snapshot.parsed
        return dict(snapshot.records), list(snapshot.skipped)

    @staticmethod
    def _read_entry(entry: os.DirEntry, cache: dict, parsed: dict) -> PresetRecord | str:
        """The record in a folder entry, or why it is skipped. The file is read again only
        when its (mtime_ns, size, inode) changed since ``cache``; atomic replacement gives a
        new inode. The outcome goes into ``parsed``; ``cache`` is only read."""
        global files_parsed
        info = entry.stat()  # before reading: a change after this is seen at the next scan
        key = (info.st_mtime_ns, info.st_size, info.st_ino)
        known = cache.get(entry.name)
        if known is not None and known[0] == key:
            outcome = known[1]
        else:
            files_parsed += 1
            try:
                outcome = read_record_file(Path(entry.path))
            except BadContent as exc:
                outcome = str(exc)
        parsed[entry.name] = (key, outcome)
        return outcome

    # -- writing -------------------------------------------------------------------------------

    def add(self, preset: Preset) -> PresetRecord:
        """Store ``preset`` as a new library preset (new id, revision 1).

        Raises:
            LibraryError: when the name is taken or the folder cannot be written.
        """
        with self._writing(f"add '{preset.name}'"):
            record = self._commit(PresetRecord(new_id(), 0, preset), expected=0)
        self._remember(record)
        return record

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
        with self._writing(f"save '{item.name}'"):
            record = self._commit(item, expected)
        self._remember(record)
        return record

    def resolve_conflict(self, conflict: SaveConflict, choice: ConflictChoice) -> PresetRecord | None:
        """Settle a :class:`SaveConflict` the way the user chose.

        Args:
            conflict: the conflict raised by :meth:`save`.
            choice: ``"keep_both"`` saves mine as a new preset named "<name> (copy)";
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
            return self.add(mine.preset.replace(name=self.unused_name(mine.name, "copy")))
        with self._writing(f"save '{mine.name}'"):
            record = self._commit(mine, expected=theirs.revision if theirs else 0)
        self._remember(record)
        return record

    def delete(self, record_id: str) -> None:
        """Move a preset's file to the library's trash (restorable with :meth:`restore`).

        Raises:
            LibraryError: when the folder cannot be written.
        """
        record = self.get(record_id)
        with self._writing(f"delete '{record.name}'"):
            trash = self.folder / TRASH_DIR
            trash.mkdir(exist_ok=True)
            with contextlib.suppress(FileNotFoundError):  # already deleted by someone else
                move(self.folder / record.file_name, trash / record.file_name)
        del self._records[record_id]
        self._touch(record_id)
        self.removed.emit(record)

    def trash(self) -> list[PresetRecord]:
        """The deleted presets that can be restored, sorted by name."""
        found = read_folder(self.folder / TRASH_DIR)
        return sorted(found, key=lambda r: (r.name.casefold(), r.id))

    def restore(self, record_id: str) -> PresetRecord:
        """Bring a deleted preset back from the trash.

        It returns under its id and name; if either is now taken, it comes back
        as a new preset named "<name> (restored)".

        Raises:
            LibraryError: when it is not in the trash or the folder cannot be written.
        """
        source = self.folder / TRASH_DIR / record_file_name(record_id)
        try:
            trashed = read_record_file(source)
        except (OSError, BadContent):
            raise LibraryError(f"No restorable preset with id {record_id} in the trash of {self.folder}.") from None
        with self._writing(f"restore '{trashed.name}'"):
            taken = {r.name for r in self._scan()[0].values()}  # under the lock, as on disk now
            if (self.folder / trashed.file_name).exists() or trashed.name in taken:
                renamed = trashed.preset.replace(name=self.unused_name(trashed.name, "restored", taken))
                record = self._commit(PresetRecord(new_id(), 0, renamed), expected=0)
                os.unlink(source)
            else:
                move(source, self.folder / trashed.file_name)
                record = trashed
        self._remember(record)
        return record

    def unused_name(self, name: str, label: str, taken: set[str] | None = None) -> str:
        """``name`` with " (label)", " (label 2)", ... appended, not used by any preset here
        (or, when given, not in ``taken``)."""
        taken = {r.name for r in self._records.values()} if taken is None else taken
        for n in itertools.count(1):
            tail = f" ({label})" if n == 1 else f" ({label} {n})"
            candidate = name[: MAX_TEXT["name"] - len(tail)].rstrip() + tail
            if candidate not in taken:
                return candidate
        raise AssertionError("unreachable")

    # -- history -------------------------------------------------------------------------------

    def history(self, record_id: str) -> list[PresetRecord]:
        """The kept earlier revisions of a preset (at most 20), newest first; the current one is :meth:`get`."""
        return read_history(self.folder / HISTORY_DIR / record_id, record_id)

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

    @contextlib.contextmanager
    def _writing(self, action: str) -> Iterator[None]:
        with hold_lock(self.folder, self.lock_timeout, self.user):
            try:
                yield
            except OSError as exc:
                raise explain_os_error(exc, self.folder, action) from exc

    def _commit(self, mine: PresetRecord, expected: int) -> PresetRecord:
        """Under the lock: write ``mine.preset`` as the next revision if the disk is at ``expected``."""
        theirs = self._read_on_disk(mine.id)
        if (theirs.revision if theirs else 0) != expected:
            raise SaveConflict(mine, theirs)
        # The folder's current names, not the ones loaded: another program may have added one since.
        if any(r.name == mine.name and r.id != mine.id for r in self._scan()[0].values()):
            raise LibraryError(f"A preset named '{mine.name}' is already in the library; choose another name.")
        now = now_iso()
        stamped = mine.preset.replace(created=mine.preset.created or now, modified=now)
        latest = max(expected, mine.revision)
        record = PresetRecord(mine.id, latest + 1, stamped, now, self.user)
        if theirs is not None:
            keep_history(self.folder / HISTORY_DIR / theirs.id, theirs, HISTORY_LIMIT)
        atomic_write(self.folder / record.file_name, encode_record(record))
        return record

    def _read_on_disk(self, record_id: str) -> PresetRecord | None:
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

    def _touch(self, record_id: str) -> None:
        self._generation += 1
        self._touched[record_id] = self._generation

    def _remember(self, record: PresetRecord) -> None:
        self._touch(record.id)
        is_new = record.id not in self._records
        self._records[record.id] = record
        (self.added if is_new else self.changed).emit(record)

    def _take_disk_version(self, record_id: str, theirs: PresetRecord | None) -> None:
        if theirs is None and record_id in self._records:
            self._touch(record_id)
            self.removed.emit(self._records.pop(record_id))
        elif theirs is not None and self._records.get(record_id) != theirs:
            self._remember(theirs)

    def _seed(self) -> None:
        with self._writing("put the starter presets into the new library"):
            for preset in starter_presets():
                record = self._commit(PresetRecord(new_id(), 0, preset), expected=0)
                self._records[record.id] = record
