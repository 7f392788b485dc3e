"""What the library keeps of the past: earlier revisions and deleted presets.

Layout inside a library folder (see docs/library.md)::

    .history/<id>/<revision>.json      the last 20 revisions before the current one
    .trash/<id>.<revision>.json        every deleted revision, until someone removes it by hand

Each trashed revision keeps its own file, so deleting a preset a second time
(after a colleague saved over its deletion) never replaces the first deleted
revision. A same-named entry gets ``.2``, ``.3``, ... before ``.json``. A
revision number is given once per preset: a save takes one more than any
revision of that preset in the folder, its history or the trash, and an entry
restored as a copy moves into the history rather than disappearing.
Libraries written before this layout hold ``.trash/<id>.json``; those are read too.

The writing functions take a :class:`~.changes.FileChanges`, so a failure at
any step leaves the folder as it was.
"""

from __future__ import annotations

import contextlib
import itertools
import os
from pathlib import Path

from .changes import FileChanges
from .records import MAX_RECORD_BYTES, PresetRecord, decode_record, encode_record, record_file_name
from .storage import BadContent, folder_missing_error, read_limited

HISTORY_LIMIT = 20
HISTORY_DIR = ".history"
TRASH_DIR = ".trash"


def _existing_folder(library: Path) -> None:
    if not library.is_dir():
        raise folder_missing_error(library)


def _revision_files(folder: Path) -> list[tuple[int, Path]]:
    """``(revision, path)`` for the ``<revision>[.n].json`` files in a history folder, oldest first."""
    found = []
    with contextlib.suppress(OSError):
        for path in folder.glob("*.json"):
            head = path.name.split(".", 1)[0]
            if head.isdigit():
                found.append((int(head), path))
    return sorted(found)


def read_history(library: Path, record_id: str) -> list[PresetRecord]:
    """The revisions of ``record_id`` kept in its history, newest first.

    Raises:
        LibraryError: when the library folder is gone.
    """
    _existing_folder(library)
    found = []
    for _revision, path in _revision_files(library / HISTORY_DIR / record_id):
        with contextlib.suppress(OSError, BadContent):
            found.append(decode_record(read_limited(path, MAX_RECORD_BYTES)))
    return sorted((r for r in found if r.id == record_id), key=lambda r: -r.revision)


def keep_history(changes: FileChanges, library: Path, previous: PresetRecord, limit: int = HISTORY_LIMIT) -> None:
    """Store ``previous`` in its history and arrange for all but the newest ``limit`` revisions
    to be dropped once the whole change has succeeded."""
    folder = library / HISTORY_DIR / previous.id
    changes.make_folder(library / HISTORY_DIR)
    changes.make_folder(folder)
    data = encode_record(previous)
    kept = _revision_files(folder)
    target = folder / f"{previous.revision}.json"
    for n in itertools.count(2):
        if not target.exists():
            changes.write_new(target, data)
            kept.append((previous.revision, target))
            break
        with contextlib.suppress(OSError):
            if target.read_bytes() == data:
                break  # already kept (a save over a restored revision)
        target = folder / f"{previous.revision}.{n}.json"
    for _revision, old in sorted(kept)[:-limit]:
        changes.remove_later(old)


def move_into_history(changes: FileChanges, library: Path, record: PresetRecord, source: Path) -> None:
    """Move a trash entry of ``record`` into its preset's history (when it was restored as a
    copy): it stays kept, and its revision number is never given to another save."""
    folder = library / HISTORY_DIR / record.id
    changes.make_folder(library / HISTORY_DIR)
    changes.make_folder(folder)
    changes.move(source, _unused_entry(folder, str(record.revision)))


def trash_files(library: Path) -> list[tuple[PresetRecord, Path]]:
    """Every readable deleted revision in the trash with its file, sorted by name, id and
    newest revision first.

    Raises:
        LibraryError: when the library folder is gone.
    """
    _existing_folder(library)
    found = []
    with contextlib.suppress(OSError):
        for path in (library / TRASH_DIR).glob("*.json"):
            with contextlib.suppress(OSError, BadContent):
                record = decode_record(read_limited(path, MAX_RECORD_BYTES))
                if path.name.split(".", 1)[0] == record.id:
                    found.append((record, path))
    return sorted(found, key=lambda item: (item[0].name.casefold(), item[0].id, -item[0].revision, item[1].name))


def trash_revisions(library: Path, record_id: str) -> list[int]:
    """The revisions of ``record_id`` in the trash, read from the file names only."""
    found = []
    with contextlib.suppress(OSError):
        for path in (library / TRASH_DIR).glob(f"{record_id}.*.json"):
            head = path.name[len(record_id) + 1 :].split(".", 1)[0]
            if head.isdigit():
                found.append(int(head))
    return found


def latest_known_revision(library: Path, record_id: str) -> int:
    """The highest revision of ``record_id`` in its history or the trash (0 when none), so a
    preset saved again after its deletion never reuses a revision number."""
    history = [revision for revision, _path in _revision_files(library / HISTORY_DIR / record_id)]
    old_layout = 0
    with contextlib.suppress(OSError, BadContent):
        old_layout = decode_record(
            read_limited(library / TRASH_DIR / record_file_name(record_id), MAX_RECORD_BYTES)
        ).revision
    return max([0, old_layout, *history, *trash_revisions(library, record_id)])


def _unused_entry(folder: Path, stem: str) -> Path:
    """``folder/stem.json``, or ``stem.2.json``, ``stem.3.json`` … when taken: an entry never overwrites another."""
    target = folder / f"{stem}.json"
    for n in itertools.count(2):
        if not os.path.lexists(target):
            return target
        target = folder / f"{stem}.{n}.json"
    raise AssertionError("unreachable")


def move_to_trash(changes: FileChanges, library: Path, record_id: str, revision: int) -> Path:
    """Move the current file of ``record_id`` into the trash as its own entry; returns the entry."""
    trash = library / TRASH_DIR
    changes.make_folder(trash)
    target = _unused_entry(trash, f"{record_id}.{revision}")
    changes.move(library / record_file_name(record_id), target)
    return target
