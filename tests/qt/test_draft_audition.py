"""Trying unsaved edits: Generate and the step view use the editor's valid draft
of a ticked preset, mark its column, and leave the library file as it was.

Greedy decoding is checked against the model itself (a direct transformers
forward pass), and the stored preset against an independent core ``PresetLibrary``.
"""

from __future__ import annotations

import numpy as np
import torch
from test_presets_ui import retype
from test_workflow import generate

from samplewright.core.library.library import PresetLibrary
from samplewright.core.presets import Preset
from samplewright.qt.audition_view import DRAFT_MARK

WIDE = Preset("Open water — wide", temperature=1.5)


def edit_wide_preset(window):
    """Add a preset that samples widely, tick and highlight only it."""
    record = window.library.add(WIDE)
    window.library_list.set_chosen([record.id])
    window.library_list.select(record.id)
    assert window.editor.original == record.preset
    return record


def rows(window, column=0):
    return [sample.token_ids for sample in window.session.samples[column]]


def test_generate_uses_the_unsaved_draft_and_leaves_the_file(window, qtbot):
    record = edit_wide_preset(window)
    path = window.library.folder / record.file_name
    on_disk = path.read_bytes()

    generate(window, qtbot, samples=4, tokens=8)
    saved_rows = rows(window)
    # Temperature 1.5 on the saved preset: the rows differ (so the check below can fail).
    assert len({tuple(r) for r in saved_rows}) > 1
    assert DRAFT_MARK not in window.grid.headers[0].title.text()

    retype(qtbot, window.editor.inputs["temperature"], "0")
    assert window.editor.is_dirty()
    generate(window, qtbot, samples=4, tokens=8)
    assert window.errors == [] and window.questions == []
    assert window.session.presets[0].temperature == 0.0
    assert DRAFT_MARK in window.grid.headers[0].title.text()
    draft_rows = rows(window)
    # Temperature 0 is greedy: every row takes the arg-max, so all rows are the same (common practice).
    assert all(r == draft_rows[0] for r in draft_rows) and draft_rows[0]
    # ... and each token is the arg-max of the model's own logits (direct transformers forward pass).
    model = window.engine.worker._engine.loaded.model
    ids = window.session.passage_ids + draft_rows[0]
    with torch.no_grad():
        logits = model(torch.tensor([ids])).logits[0]
    start = len(window.session.passage_ids) - 1
    assert [int(logits[start + i].argmax()) for i in range(len(draft_rows[0]))] == draft_rows[0]

    # The library and its file are untouched; the edits stay in the editor.
    assert path.read_bytes() == on_disk
    assert PresetLibrary(window.library.folder).get(record.id) == record == window.library.get(record.id)
    assert window.editor.is_dirty() and window.editor.inputs["temperature"].text() == "0"


def test_the_step_view_uses_the_same_draft(window, qtbot):
    edit_wide_preset(window)
    retype(qtbot, window.editor.inputs["temperature"], "0")
    generate(window, qtbot, samples=2, tokens=6)
    sample = window.session.samples[0][0]
    assert sample.tokens
    window.audition.inspect(0, 0, 0)
    plot = window.inspector.plot
    qtbot.waitUntil(lambda: plot.shown is not None, timeout=10000)
    shaped = plot.shown.presets[0]
    # Greedy keeps exactly one token, the raw arg-max (common practice), with all the probability.
    assert shaped.kept == 1
    assert int(np.argmax(shaped.probs)) == int(np.argmax(plot.shown.raw_probs)) == sample.tokens[0].token_id
    assert shaped.probs.max() == 1.0
    assert DRAFT_MARK in window.inspector.which.text()


def test_an_invalid_draft_is_not_used(window, qtbot):
    record = edit_wide_preset(window)
    retype(qtbot, window.editor.inputs["temperature"], "7")  # outside 0–5
    window.controls.samples_spin.setValue(2)
    window.controls.tokens_spin.setValue(4)
    window.audition.generate_all()
    assert "saved version" in window.statusBar().currentMessage()
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=60000)
    assert window.session.presets[0] == record.preset
    assert DRAFT_MARK not in window.grid.headers[0].title.text()


def test_regenerate_picks_up_the_draft(window, qtbot):
    edit_wide_preset(window)
    generate(window, qtbot, samples=3, tokens=6)
    retype(qtbot, window.editor.inputs["temperature"], "0")
    window.audition.regenerate_column(0)
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=60000)
    draft_rows = rows(window)
    assert window.session.presets[0].temperature == 0.0
    assert all(r == draft_rows[0] for r in draft_rows)  # greedy (common practice)
    assert DRAFT_MARK in window.grid.headers[0].title.text()
