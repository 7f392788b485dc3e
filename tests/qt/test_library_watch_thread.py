"""The file watch reads the library folder on a worker thread: a slow folder (a network drive)
does not stall the window, and closing the window leaves no reading running."""

from __future__ import annotations

import threading
import time

from PySide6.QtCore import QTimer

from samplewright.core.library import scanning as scanning_module
from samplewright.core.library.library import PresetLibrary
from samplewright.core.presets import Preset
from samplewright.qt.library_watch import scans_running

SLOW_READ_S = 0.5


def slow_reads(monkeypatch):
    """Make every preset file read take SLOW_READ_S, as on a slow network folder; returns the
    threads that did the reading."""
    readers: list[int] = []
    real = scanning_module.read_record_file

    def slow(path):
        readers.append(threading.get_ident())
        time.sleep(SLOW_READ_S)
        return real(path)

    monkeypatch.setattr(scanning_module, "read_record_file", slow)
    return readers


def test_the_window_keeps_serving_while_the_folder_is_read_slowly(window, qtbot, monkeypatch):
    watch = window.library_watch
    watch._periodic.stop()
    added = PresetLibrary(window.library.folder, user="colleague").add(Preset("Storm timetable", top_k=30))
    readers = slow_reads(monkeypatch)
    ticks: list[float] = []
    timer = QTimer(interval=10)
    timer.timeout.connect(lambda: ticks.append(time.monotonic()))
    timer.start()
    qtbot.wait(50)
    watch.request_check()
    qtbot.waitUntil(lambda: added.id in {r.id for r in window.library.records()}, timeout=5000)
    qtbot.wait(50)
    timer.stop()
    assert readers and threading.get_ident() not in readers  # the file was read off the window's thread
    longest = max(b - a for a, b in zip(ticks, ticks[1:], strict=False))
    # The issue asks for this timing: the event loop must not wait for the slow read.
    assert longest < SLOW_READ_S / 2, f"the window's event loop stalled {longest:.2f} s"
    assert "added 'Storm timetable' (colleague)" in window.statusBar().currentMessage()


def test_requests_during_a_reading_merge_into_one_more(window, qtbot, monkeypatch):
    watch = window.library_watch
    watch._periodic.stop()
    colleague = PresetLibrary(window.library.folder, user="colleague")
    first = colleague.add(Preset("Storm timetable", top_k=30))
    readers = slow_reads(monkeypatch)
    watch.request_check()
    second = colleague.add(Preset("Quay closure", top_k=10))  # while the first reading is under way
    for _ in range(3):
        watch.request_check()
    assert scans_running() <= 1
    qtbot.waitUntil(lambda: second.id in {r.id for r in window.library.records()}, timeout=5000)
    assert first.id in {r.id for r in window.library.records()}
    # Each new file is read once on the worker (the colleague's own reads run on this thread):
    # merged requests give one more reading, not three, and it reuses what the first one parsed.
    assert len([r for r in readers if r != threading.get_ident()]) == 2


def test_closing_the_window_leaves_no_reading_running(window, qtbot, monkeypatch):
    watch = window.library_watch
    watch._periodic.stop()
    added = PresetLibrary(window.library.folder, user="colleague").add(Preset("Storm timetable", top_k=30))
    slow_reads(monkeypatch)
    watch.request_check()
    assert scans_running() == 1
    window.close()
    assert scans_running() == 0
    qtbot.wait(100)  # a late delivery, if any, must not update the closed window
    assert added.id not in {r.id for r in window.library.records()}


def test_a_reading_of_a_folder_left_meanwhile_is_dropped(window, qtbot, monkeypatch, tmp_path):
    watch = window.library_watch
    watch._periodic.stop()
    old = window.library
    PresetLibrary(old.folder, user="colleague").add(Preset("Storm timetable", top_k=30))
    slow_reads(monkeypatch)
    watch.request_check()
    other = PresetLibrary(tmp_path / "elsewhere", create=True, seed=False)
    watch.set_library(other)
    checked = []
    watch.checked.connect(lambda report, names: checked.append(report))
    failed = []
    watch.failed.connect(failed.append)
    qtbot.waitUntil(lambda: scans_running() == 0, timeout=5000)
    qtbot.wait(100)
    assert checked == [] and failed == [] and other.records() == []
    assert "Storm timetable" not in [r.name for r in old.records()]
