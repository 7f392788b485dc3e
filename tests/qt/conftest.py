"""Qt test fixtures: offscreen platform, private folders, a window on the shared tiny
model, and a guard that fails any test leaving an engine thread running."""

from __future__ import annotations

import os
import time

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("HF_HUB_OFFLINE", "1")

import pytest


@pytest.fixture
def tiny_loaded(tiny_model):
    """The shared tiny model (tests/conftest.py)."""
    return tiny_model


@pytest.fixture
def tiny_loader(tiny_model):
    """A model loader for the window that hands out the tiny model and reports progress like the real one."""

    def load(source, progress):
        progress("Building the tiny model", 0.5)
        return tiny_model

    return load


@pytest.fixture(autouse=True)
def private_folders(tmp_path, monkeypatch):
    """Keep every test's settings and library out of the user's real folders."""
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "library"))


@pytest.fixture(autouse=True)
def no_engine_thread_left():
    """Fail a test that leaves an engine QThread or a library folder reading running
    (set up first, so it checks last)."""
    yield
    from samplewright.qt.library_watch import scans_running
    from samplewright.qt.workers import running_threads

    deadline = time.monotonic() + 5
    while (running_threads() or scans_running()) and time.monotonic() < deadline:
        time.sleep(0.05)
    left = running_threads()
    assert not left, f"{len(left)} engine thread(s) still running after the test"
    assert not scans_running(), f"{scans_running()} library folder reading(s) still running after the test"


@pytest.fixture
def window(qtbot, tiny_loader, tmp_path):
    """The main window on the tiny model, with the model loaded."""
    from samplewright.qt.main_window import MainWindow

    win = MainWindow(model_loader=tiny_loader, library_dir=tmp_path / "library", config_dir=tmp_path / "config")
    # pytest-qt closes the window before this fixture's teardown: edits left open are then discarded.
    qtbot.addWidget(win, before_close_func=discard_edits)
    win.resize(1400, 900)
    win.show()
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    win.passage.set_text("The morning ferry to the island leaves the harbour")
    errors: list[str] = []

    def capture(message, detail=None):
        errors.append(detail if detail is not None else message)
        win.prompts.last_error = errors[-1]

    # Questions and messages go through ``win.prompts``: the test replaces them with scripted answers.
    win.prompts.show_error = capture
    win.errors = errors
    # Questions about unsaved edits are answered from ``win.answers``; an unexpected one fails the test.
    win.questions, win.answers = [], []

    def answer(name, problem):
        win.questions.append((name, problem))
        assert win.answers, f"unexpected question about unsaved edits to '{name}'"
        return win.answers.pop(0)

    win.prompts.ask_unsaved = answer
    # A failed save's offer to write a copy is recorded; ``win.copy_wanted`` is the answer.
    win.offered, win.copy_wanted = [], False
    win.prompts.offer_copy = lambda title, text: win.offered.append(text) or win.copy_wanted
    yield win
    discard_edits(win)
    win.close()


def discard_edits(win):
    """Answer "discard" to the closing window's question about unsaved edits."""
    win.prompts.ask_unsaved = lambda name, problem: "discard"


@pytest.fixture
def make_window(qtbot, tiny_loader, tmp_path):
    """``make_window()`` opens a window on the tiny model without loading it, with this test's
    library and config folders (``config_dir=`` overrides), so a second call sees what the first kept."""
    from samplewright.qt.main_window import MainWindow

    def make(config_dir=None, **kwargs):
        win = MainWindow(
            model_loader=tiny_loader,
            library_dir=tmp_path / "lib",
            config_dir=config_dir or tmp_path / "cfg",
            load_on_start=False,
            **kwargs,
        )
        qtbot.addWidget(win)
        return win

    return make
