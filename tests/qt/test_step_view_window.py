"""The step view in the window: it follows the preset being edited while its value is
typed (debounced), and samples are shown from the decoded text of all their tokens, with
each token's highlight mapped onto it (accented, CJK and emoji text)."""

from __future__ import annotations

from test_draft_audition import edit_wide_preset
from test_presets_ui import retype
from test_workflow import generate

from samplewright.core.engine.session import AuditionSession
from samplewright.core.engine.token_text import vocabulary_of
from samplewright.core.presets import Preset
from samplewright.core.results import AuditionRequest, TokenEvent, TokenStep
from samplewright.qt.audition_controller import EDITING_MARK
from samplewright.qt.audition_view import QtAuditionGrid
from samplewright.qt.distribution_plot import token_label

TEXT = "Dvořák: 渡し船 🚢 ok"


def test_the_step_view_follows_a_value_as_it_is_typed(window, qtbot):
    edit_wide_preset(window)  # temperature 1.5: every token keeps some probability
    generate(window, qtbot, samples=2, tokens=6)
    window.audition.inspect(0, 0, 0)
    plot = window.inspector.plot
    qtbot.waitUntil(lambda: plot.shown is not None, timeout=10000)
    assert plot.shown.presets[0].kept > 1 and EDITING_MARK not in plot.names[0]
    # A token picked far down the ranking is listed, labelled from the model's own vocabulary.
    far = len(plot.shown.ranked_ids)
    plot.pick_rank(far)
    far_id = int(plot.shown.ranked_ids[far - 1])
    table = window.inspector.table
    assert table.ids[-1] == far_id
    assert table.item(len(table.ids) - 1, 1).text() == token_label(window.model_info.vocabulary.label(far_id), 18)
    answers = []
    window.engine.worker.step_ready.connect(lambda serial, view: answers.append(view))
    retype(qtbot, window.editor.inputs["temperature"], "0.0")  # several keystrokes in a row
    qtbot.waitUntil(lambda: plot.shown.presets[0].kept == 1, timeout=10000)
    # Temperature 0 is greedy (common practice): one token keeps all the probability.
    assert plot.shown.presets[0].kept_end == plot.shown.rank_of(int(plot.shown.presets[0].probs.argmax()))
    assert EDITING_MARK in plot.names[0] and "unsaved edits" in window.inspector.context.text()
    qtbot.wait(400)
    assert len(answers) == 1  # the keystrokes were gathered into one new step view
    # The sample's own context is kept: the same raw distribution as before the edit.
    assert plot.shown.context_tokens == len(window.session.passage_ids)


def test_samples_show_characters_spread_over_tokens_whole(qtbot, tiny_model):
    tokenizer = tiny_model.tokenizer
    vocabulary = vocabulary_of(tokenizer, tiny_model.vocab_size)
    ids = tokenizer(TEXT, add_special_tokens=False)["input_ids"]
    session = AuditionSession()
    grid = QtAuditionGrid(session)
    qtbot.addWidget(grid)
    grid.set_vocabulary(vocabulary)
    serial = session.begin(AuditionRequest("passage", [Preset("One")], samples=1, max_new_tokens=len(ids)))
    view = grid.view(0, 0)
    for step, token_id in enumerate(ids):
        token = TokenStep(token_id, tokenizer.decode([token_id]), 0.5, 0.5, 2, 1.0, 1.0)
        session.add_events(serial, [TokenEvent(0, 0, step, token, None, step + 1, len(ids))])
        # While the run writes, the text is always the decoding of the tokens so far.
        assert view.toPlainText() == vocabulary.sample_text(ids[: step + 1]).text
    assert view.toPlainText() == tokenizer.decode(ids) == TEXT  # reference: transformers' decode
    assert "\ufffd" not in view.toPlainText()

    def highlighted(step):
        view.mark_step(step)
        (selection,) = view.extraSelections()
        cursor = selection.cursor
        return cursor.selectedText()

    r_bytes = [i for i, t in enumerate(ids) if vocabulary.bytes_of(t) in (b"\xc5", b"\x99")]
    assert [highlighted(s) for s in r_bytes] == ["ř", "ř"]  # both halves of ř light up the whole ř
    ship = [i for i, t in enumerate(ids) if vocabulary.bytes_of(t)[:1] in (b"\xf0", b"\x9f", b"\x9a", b"\xa2")]
    assert ship and all(highlighted(s) == "🚢" for s in ship)
    last = len(ids) - 1
    assert highlighted(last) == tokenizer.decode([ids[last]])  # after the emoji: Qt positions stay right
    for step in (0, r_bytes[0], ship[0], last):
        assert view.step_at(view.token_point(step)) == step  # a click finds the token again
