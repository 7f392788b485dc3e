"""Keep the window's library in step with its folder while colleagues edit it.

A ``QFileSystemWatcher`` watches the library folder and each preset file in
it. Saves arrive as bursts of events (a temporary file, a rename, the lock
file), so every event restarts a short single-shot timer and the folder is
re-read once the burst is over. A slow periodic check catches what the
operating system does not report (network drives often send no events) and,
after the folder has gone, notices when it comes back.

The window's own writes need no special handling: the library already holds
what it wrote, so the re-read that follows them finds nothing new and
reports an empty change.
"""
from __future__ import annotations

import contextlib
from typing import Callable, ContextManager, Optional

from PySide6.QtCore import QFileSystemWatcher, QObject, QTimer, Signal

from ..core.errors import SamplewrightError
from ..core.library import ChangeReport

#: Wait this long after the last file event before re-reading the folder.
SETTLE_MS = 300
#: Re-read this often anyway (events from network drives are unreliable).
CHECK_MS = 30_000
#: While the folder is missing or unreadable, look for it this often.
RETRY_MS = 3_000
#: How many preset names a change message spells out before saying "and N more".
NAMES_SHOWN = 3


class LibraryWatch(QObject):
    """Re-reads a :class:`~samplewright.core.library.PresetLibrary` when its folder changes.

    The library then emits ``added``/``changed``/``removed`` for each
    difference, as after any rescan, so views following it update themselves.

    Args:
        library: the library to keep current.
        settle_ms: quiet time after the last file event before re-reading.
        check_ms: interval of the periodic re-read.
        batched: a context manager the re-read runs in (the preset list's, to show the changes at once).

    Signals:
        checked(ChangeReport, dict): after each successful re-read: what changed
            (empty after this window's own writes) and the names the presets had
            before it, by id (so removed presets can be named).
        failed(str): the folder could not be read; emitted once per new problem.
            The presets in memory stay as they were.
        recovered(): the folder can be read again after a failure.
    """

    checked = Signal(object, dict)
    failed = Signal(str)
    recovered = Signal()

    def __init__(self, library, settle_ms: int = SETTLE_MS, check_ms: int = CHECK_MS,
                 parent: Optional[QObject] = None, batched: Callable[[], ContextManager] = contextlib.nullcontext):
        super().__init__(parent)
        self.library = library
        self._batched = batched
        self.problem: Optional[str] = None
        self._check_ms = check_ms
        self._watcher = QFileSystemWatcher(self)
        self._settle = QTimer(self, singleShot=True, interval=settle_ms)
        self._periodic = QTimer(self, interval=check_ms)
        self._watcher.directoryChanged.connect(self._on_event)
        self._watcher.fileChanged.connect(self._on_event)
        self._settle.timeout.connect(self.check_now)
        self._periodic.timeout.connect(self.check_now)
        self._rewatch()
        self._periodic.start()

    def _on_event(self, _path: str) -> None:
        self._settle.start()     # restarting the timer is the debounce

    def check_now(self) -> Optional[ChangeReport]:
        """Re-read the folder at once; returns the report, or None when it could not be read."""
        self._settle.stop()
        names = {record.id: record.name for record in self.library.records()}
        try:
            with self._batched():
                report = self.library.rescan()
        except SamplewrightError as error:
            self._on_failure(str(error))
            return None
        if self.problem is not None:
            self.problem = None
            self._periodic.setInterval(self._check_ms)
            self.recovered.emit()
        self._rewatch()
        self.checked.emit(report, names)
        return report

    def _on_failure(self, message: str) -> None:
        self._periodic.setInterval(min(RETRY_MS, self._check_ms))
        if message != self.problem:
            self.problem = message
            self.failed.emit(message)

    def _rewatch(self) -> None:
        """Watch the folder and its current preset files (a replaced file loses its watch)."""
        folder = self.library.folder
        wanted = {str(folder)} if folder.is_dir() else set()
        wanted |= {str(folder / record.file_name) for record in self.library.records()
                   if (folder / record.file_name).exists()}
        watched = set(self._watcher.files()) | set(self._watcher.directories())
        if watched - wanted:
            self._watcher.removePaths(sorted(watched - wanted))
        if wanted - watched:
            self._watcher.addPaths(sorted(wanted - watched))

    def watched_paths(self) -> list[str]:
        """The folder and files being watched (for tests and diagnostics)."""
        return sorted(self._watcher.files() + self._watcher.directories())

    def set_library(self, library) -> None:
        """Follow another library from now on (the previous folder is no longer watched)."""
        self._settle.stop()
        self.library = library
        self.problem = None
        self._periodic.setInterval(self._check_ms)
        self._rewatch()
        self._periodic.start()

    def stop(self) -> None:
        """Stop watching (the window is closing)."""
        self._settle.stop()
        self._periodic.stop()
        paths = self.watched_paths()
        if paths:
            self._watcher.removePaths(paths)


def describe_changes(report: ChangeReport, library, names_before: dict[str, str]) -> str:
    """One status-bar sentence naming what others added, changed and removed.

    Args:
        report: the rescan's report (assumed not empty).
        library: the library after the rescan (to look up new and changed presets).
        names_before: preset names by id from before the rescan.
    """
    def who(record_id: str) -> str:
        record = library.get(record_id)
        return f"'{record.name}'" + (f" ({record.modified_by})" if record.modified_by else "")

    parts = []
    for verb, ids, name in (("added", report.added, who), ("changed", report.changed, who),
                            ("removed", report.removed, lambda i: f"'{names_before.get(i, i)}'")):
        if ids:
            shown = [name(i) for i in ids[:NAMES_SHOWN]]
            more = f" and {len(ids) - NAMES_SHOWN} more" if len(ids) > NAMES_SHOWN else ""
            parts.append(f"{verb} {', '.join(shown)}{more}")
    return "Library updated from its folder: " + "; ".join(parts) + "."
