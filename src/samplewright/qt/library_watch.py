"""Keep the window's library in step with its folder while colleagues edit it.

A ``QFileSystemWatcher`` watches the library folder and each preset file in
it. Saves arrive as bursts of events (a temporary file, a rename, the lock
file), so every event restarts a short single-shot timer and the folder is
re-read once the burst is over. A slow periodic check catches what the
operating system does not report (network drives often send no events) and,
after the folder has gone, notices when it comes back.

Reading a slow network folder can take seconds, so these re-reads run
``PresetLibrary.scan_folder`` on a worker thread (one at a time; requests
made meanwhile are merged into one more reading) and apply the result with
``apply_snapshot`` here, on the window's thread, where the library emits its
events. A reading meant for a library the window has since left is dropped.
The reload command (:meth:`LibraryWatch.check_now`) still reads at once: the
user asked for it and waits for its answer.

The window's own writes need no special handling: the library already holds
what it wrote (and ``apply_snapshot`` keeps writes newer than the reading),
so the re-read that follows them finds nothing new and reports an empty change.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable
from contextlib import AbstractContextManager as ContextManager

from PySide6.QtCore import QFileSystemWatcher, QObject, QRunnable, QThreadPool, QTimer, Signal

from ..core.errors import SamplewrightError
from ..core.library.library import ChangeReport
from .workers import user_message

#: Wait this long after the last file event before re-reading the folder.
SETTLE_MS = 300
#: Re-read this often anyway (events from network drives are unreliable).
CHECK_MS = 30_000
#: While the folder is missing or unreadable, look for it this often.
RETRY_MS = 3_000
#: How many preset names a change message spells out before saying "and N more".
NAMES_SHOWN = 3

_running_lock = threading.Lock()
_running = 0


def scans_running() -> int:
    """How many folder readings started here have not finished yet (tests check it is 0)."""
    return _running


class _Delivery(QObject):
    """Carries a finished reading from the worker thread to the watch's thread (a queued signal)."""

    done = Signal(int, object, object)  # serial, FolderSnapshot or None, problem text or None


class _Scan(QRunnable):
    """One ``scan_folder`` call on a pool thread; touches nothing but the library's read side."""

    def __init__(self, library, serial: int, delivery: _Delivery):
        super().__init__()
        global _running
        self.library, self.serial, self.delivery = library, serial, delivery
        with _running_lock:
            _running += 1

    def run(self) -> None:
        global _running
        try:
            try:
                snapshot, problem = self.library.scan_folder(), None
            except Exception as error:  # SamplewrightError mostly; nothing may escape a pool thread
                snapshot, problem = None, user_message(error)
            with contextlib.suppress(RuntimeError):  # the watch is gone: nobody waits for this
                self.delivery.done.emit(self.serial, snapshot, problem)
        finally:
            with _running_lock:
                _running -= 1


class LibraryWatch(QObject):
    """Re-reads a :class:`~samplewright.core.library.library.PresetLibrary` when its folder changes.

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

    def __init__(
        self,
        library,
        settle_ms: int = SETTLE_MS,
        check_ms: int = CHECK_MS,
        parent: QObject | None = None,
        batched: Callable[[], ContextManager] = contextlib.nullcontext,
    ):
        super().__init__(parent)
        self.library = library
        self._batched = batched
        self.problem: str | None = None
        self._check_ms = check_ms
        self._watcher = QFileSystemWatcher(self)
        self._settle = QTimer(self, singleShot=True, interval=settle_ms)
        self._periodic = QTimer(self, interval=check_ms)
        # Readings run one at a time; _serial tells a reading for the current library from a stale one.
        self._pool = QThreadPool(self)
        self._pool.setMaxThreadCount(1)
        self._delivery = _Delivery(self)
        self._delivery.done.connect(self._on_scanned)
        self._serial, self._scanning, self._again, self._stopped = 0, False, False, False
        self._watcher.directoryChanged.connect(self._on_event)
        self._watcher.fileChanged.connect(self._on_event)
        self._settle.timeout.connect(self.request_check)
        self._periodic.timeout.connect(self.request_check)
        self._rewatch()
        self._periodic.start()

    def _on_event(self, _path: str) -> None:
        self._settle.start()  # restarting the timer is the debounce

    def request_check(self) -> None:
        """Re-read the folder on a worker thread; the result is applied here when it arrives.

        While a reading is under way, further requests are merged into one more reading after it.
        """
        self._settle.stop()
        if self._stopped:
            return
        if self._scanning:
            self._again = True
            return
        self._scanning, self._again = True, False
        self._pool.start(_Scan(self.library, self._serial, self._delivery))

    def _on_scanned(self, serial: int, snapshot, problem: str | None) -> None:
        self._scanning = False
        if self._stopped:
            return
        if serial == self._serial:  # else the library was switched or re-read since it began
            if problem is not None:
                self._on_failure(problem)
            else:
                self._apply(snapshot)
        if self._again:
            self.request_check()

    def check_now(self) -> ChangeReport | None:
        """Re-read the folder at once, on this thread; returns the report, or None when it could not be read."""
        self._settle.stop()
        self._serial += 1  # a reading already under way is older than this one
        try:
            snapshot = self.library.scan_folder()
        except SamplewrightError as error:
            self._on_failure(str(error))
            return None
        return self._apply(snapshot)

    def _apply(self, snapshot) -> ChangeReport | None:
        names = {record.id: record.name for record in self.library.records()}
        try:
            with self._batched():
                report = self.library.apply_snapshot(snapshot)
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
        wanted |= {
            str(folder / record.file_name) for record in self.library.records() if (folder / record.file_name).exists()
        }
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
        self._serial += 1  # a reading of the previous folder is dropped when it arrives
        self.library = library
        self.problem = None
        self._periodic.setInterval(self._check_ms)
        self._rewatch()
        self._periodic.start()

    def stop(self) -> None:
        """Stop watching (the window is closing); waits for a reading under way to end."""
        self._stopped = True
        self._serial += 1
        self._settle.stop()
        self._periodic.stop()
        self._pool.waitForDone()
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
    for verb, ids, name in (
        ("added", report.added, who),
        ("changed", report.changed, who),
        ("removed", report.removed, lambda i: f"'{names_before.get(i, i)}'"),
    ):
        if ids:
            shown = [name(i) for i in ids[:NAMES_SHOWN]]
            more = f" and {len(ids) - NAMES_SHOWN} more" if len(ids) > NAMES_SHOWN else ""
            parts.append(f"{verb} {', '.join(shown)}{more}")
    return "Library updated from its folder: " + "; ".join(parts) + "."
