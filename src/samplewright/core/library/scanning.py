"""Reading a library folder: which presets it holds and which files are skipped.

:func:`scan_folder` reads every ``<id>.json`` at the folder's top level. It keeps
a parse cache keyed by each file's (mtime_ns, size, inode), so a rescan reads
again only the files that changed; atomic replacement gives a new inode. A
file that cannot be read or is not a usable preset (a symbolic link loop, a
colleague's notes, a file of a newer version) is listed as skipped with its
reason and never touched. :func:`merge_snapshot` takes a reading as the
library's new state without undoing the library's own later writes.

Nothing here writes to the folder.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

from ..errors import LibraryError
from .records import PresetRecord, read_record_file, record_file_name
from .storage import BadContent, folder_missing_error

#: How many library files have been read and checked in this process (a rescan
#: re-reads only changed files); tests and diagnostics look at it.
files_parsed = 0

#: File name -> ((mtime_ns, size, inode), the record or the reason it was skipped).
ParseCache = dict[str, tuple[tuple[int, int, int], "PresetRecord | str"]]


@dataclasses.dataclass(frozen=True)
class SkippedFile:
    """A file in the library folder that is not a usable preset; it is left as it is."""

    name: str
    reason: str


@dataclasses.dataclass(frozen=True)
class ChangeReport:
    """What a rescan found changed on disk (ids, sorted)."""

    added: tuple[str, ...] = ()
    changed: tuple[str, ...] = ()
    removed: tuple[str, ...] = ()

    def __bool__(self) -> bool:
        return bool(self.added or self.changed or self.removed)


@dataclasses.dataclass(frozen=True)
class FolderSnapshot:
    """One reading of a library folder by :func:`scan_folder`, not yet applied.

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
    parsed: ParseCache


def scan_folder(folder: Path, cache: ParseCache, generation: int = 0) -> FolderSnapshot:
    """Read the presets in ``folder``, re-reading only files changed since ``cache``.

    ``cache`` is only read, never changed, so this is safe on another thread.

    Raises:
        LibraryError: when the folder is gone or unreadable.
    """
    try:
        entries = sorted(os.scandir(folder), key=lambda e: e.name)
    except FileNotFoundError:
        raise folder_missing_error(folder) from None
    except OSError as exc:
        raise LibraryError(f"Could not read the library folder {folder}: {exc.strerror}.") from exc
    records: dict[str, PresetRecord] = {}
    skipped: list[SkippedFile] = []
    parsed: ParseCache = {}
    for entry in entries:
        if entry.name.startswith("."):
            continue  # our own folders, lock, temporary files; hidden files of the sync tool
        try:
            if not entry.is_file():
                continue
            outcome = _read_entry(entry, cache, parsed)
        except FileNotFoundError:
            continue  # deleted by someone while we scanned
        except OSError as exc:  # a symbolic link loop, a permission, a failing drive
            skipped.append(SkippedFile(entry.name, f"cannot be read ({exc.strerror or exc})"))
            continue
        if isinstance(outcome, str):
            skipped.append(SkippedFile(entry.name, outcome))
        else:
            records[outcome.id] = outcome
    return FolderSnapshot(folder, generation, records, tuple(skipped), parsed)


def _read_entry(entry: os.DirEntry, cache: ParseCache, parsed: ParseCache) -> PresetRecord | str:
    """The record in a folder entry, or why it is skipped; the outcome goes into ``parsed``."""
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


@dataclasses.dataclass(frozen=True)
class MergedState:
    """A snapshot taken as the library's state (:func:`merge_snapshot`)."""

    records: dict[str, PresetRecord]
    parsed: ParseCache
    skipped: list[SkippedFile]
    report: ChangeReport


def merge_snapshot(old: dict[str, PresetRecord], snapshot: FolderSnapshot, touched: dict[str, int]) -> MergedState:
    """The library's state after ``snapshot``: presets the library wrote or deleted after the
    snapshot began (``touched``: id -> write count) keep their state from ``old``."""
    records, parsed = dict(snapshot.records), dict(snapshot.parsed)
    newer = {i for i, generation in touched.items() if generation > snapshot.generation}
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
    skipped = [s for s in snapshot.skipped if s.name not in own_files]
    return MergedState(records, parsed, skipped, report)
