"""Switching models: samples written by the old model are cleared, later requests use the new one,
and a new load cancels one still running."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from tests.conftest import build_tiny_model
from tests.qt.test_workflow import generate, tick, untick_all


@pytest.fixture(scope="module")
def other_tiny():
    """A second tiny model: same shapes, different random weights."""
    return build_tiny_model(seed=99)


@pytest.fixture
def two_model_window(qtbot, tiny_model, other_tiny, tmp_path):
    """A window whose loader gives the shared tiny model for None and the other one for "other"."""
    from samplewright.qt.main_window import MainWindow

    def load(source, progress):
        progress("Building", 0.5)
        return other_tiny if source == "other" else tiny_model

    win = MainWindow(model_loader=load, library_dir=tmp_path / "lib", config_dir=tmp_path / "cfg")
    qtbot.addWidget(win)
    win.show()
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    win.passage.set_text("The morning ferry to the island leaves the harbour")
    yield win
    win.close()


def test_switching_model_clears_old_samples_and_steps_use_new_model(two_model_window, qtbot, other_tiny):
    win = two_model_window
    untick_all(win)
    tick(win, 2)
    generate(win, qtbot, samples=2, tokens=6)
    win.audition.inspect(0, 0, 0)
    qtbot.waitUntil(lambda: win.inspector.plot.shown is not None, timeout=10000)
    old_engine = win.engine.worker._engine

    win.models.load_model("other")
    qtbot.waitUntil(
        lambda: (
            win.engine.worker._engine is not old_engine
            and win.models.load_serial is not None
            and win.model_progress.isHidden()
        ),
        timeout=20000,
    )
    assert win.session.samples == [] and win.session.presets == []
    assert win.grid.headers == [] and win.grid.view(0, 0) is None
    qtbot.waitUntil(lambda: win.inspector.plot.shown is None, timeout=5000)
    assert win.session.inspected is None
    assert not win.menu_actions["regenerate"].isEnabled()
    assert "model changed" in win.statusBar().currentMessage()

    generate(win, qtbot, samples=1, tokens=4)
    sample = next(s for column in win.session.samples for s in column if s.tokens)
    column = sample.preset_index
    win.audition.inspect(column, sample.sample_index, 0)
    qtbot.waitUntil(lambda: win.inspector.plot.shown is not None, timeout=10000)
    # The raw distribution is the new model's softmax over the passage (direct transformers forward pass).
    with torch.no_grad():
        logits = other_tiny.model(torch.tensor([win.session.passage_ids])).logits[0, -1].double()
    np.testing.assert_allclose(win.inspector.plot.shown.raw_probs, torch.softmax(logits, -1).numpy(), atol=1e-5)


def test_a_new_load_cancels_the_one_in_progress(qtbot, tiny_model, other_tiny, tmp_path):
    import threading

    from samplewright.qt.main_window import MainWindow

    started, release, built = threading.Event(), threading.Event(), []

    def load(source, progress):
        if source == "slow":
            started.set()
            release.wait(20)
            progress("Still converting", 0.5)  # the cancelled load stops here
        return other_tiny if source == "other" else tiny_model

    def engine(loaded):
        from samplewright.core.engine.engine import Engine

        built.append(loaded)
        return Engine(loaded)

    win = MainWindow(
        model_loader=load,
        engine_factory=engine,
        library_dir=tmp_path / "lib",
        config_dir=tmp_path / "cfg",
        model_source="slow",
    )
    qtbot.addWidget(win)
    failed = []
    win.engine.worker.failed.connect(lambda serial, kind, message: failed.append((serial, kind, message)))
    assert started.wait(20)
    slow_serial = win.models.load_serial
    win.models.load_model("other")
    release.set()
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    assert built == [other_tiny]
    assert (slow_serial, "load", "") in failed
    win.close()


def test_jobs_cancelled_while_queued_never_start(qtbot):
    from samplewright.core.results import AuditionRequest
    from samplewright.qt.workers import EngineWorker, StepQuery

    worker = EngineWorker(lambda *a: None, lambda loaded: None, lambda samples: {})
    failed = []
    worker.failed.connect(lambda serial, kind, message: failed.append((serial, kind, message)))
    worker.cancel_through(4)
    # With no model loaded a job that started would fail with "No model is loaded yet…".
    worker.run_audition(1, AuditionRequest("x", [], samples=1, max_new_tokens=1, seed=1))
    worker.compute_step(2, StepQuery("x", [], (), None))
    worker.count_passage(3, "x")
    worker.load_model(4, None)
    assert failed == [(1, "audition", ""), (2, "step", ""), (3, "count", ""), (4, "load", "")]
