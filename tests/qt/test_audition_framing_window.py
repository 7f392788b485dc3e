"""The passage panel's framing in the window: with a chat-template model an instruction frames the
audition (the engine reads the chat template's output, the step view follows it, a changed framing
marks the samples out of date); a model without a template offers continuation only and says why."""

from __future__ import annotations

import copy

import pytest
from PySide6.QtCore import Qt
from test_workflow import generate

from conftest import discard_edits
from samplewright.core.framing import INSTRUCTION, Framing
from samplewright.qt.passage_panel import NO_TEMPLATE

# A minimal chat template of our own (the tiny test model has none), as in the evaluation tests.
CHAT_TEMPLATE = (
    "{% for m in messages %}<|{{ m['role'] }}|>{{ m['content'] }}\n{% endfor %}"
    "{% if add_generation_prompt %}<|assistant|>{% endif %}"
)
PASSAGE = "The morning ferry to the island leaves the harbour"


@pytest.fixture
def tiny_loader(tiny_model):
    """The window's model is the tiny model with a chat template (overrides the plain loader)."""
    from samplewright.core.engine.model import model_from_parts

    tokenizer = copy.deepcopy(tiny_model.tokenizer)
    tokenizer.chat_template = CHAT_TEMPLATE
    chat = model_from_parts(tiny_model.model, tokenizer, "tiny chat model")
    return lambda source, progress: chat


def choose_instruction(window, instruction, system=""):
    panel = window.passage
    panel.framing_choice.setCurrentIndex(panel.framing_choice.findData(INSTRUCTION))
    panel.instruction_edit.setText(instruction)
    panel.system_edit.setText(system)


def test_an_instruction_frames_the_audition_and_its_step_view(window, qtbot, tiny_loader):
    panel = window.passage
    assert panel.framing_choice.isEnabled() and not panel.framing_note.isVisible()
    choose_instruction(window, "Write a notice from this draft: {passage}", "You write for the ferry office.")
    assert panel.instruction_edit.isVisible() and panel.system_edit.isVisible()
    generate(window, qtbot, samples=1, tokens=3)
    assert not window.errors
    # Reference: transformers' apply_chat_template (tokenize=True) on the same two messages.
    messages = [
        {"role": "system", "content": "You write for the ferry office."},
        {"role": "user", "content": f"Write a notice from this draft: {PASSAGE}"},
    ]
    tokenizer = tiny_loader(None, None).tokenizer  # the model the window loaded
    expected = tokenizer.apply_chat_template(messages, tokenize=True, add_generation_prompt=True)
    expected = list(expected if isinstance(expected, list) else expected["input_ids"])
    assert window.session.passage_ids == expected
    assert window.session.request.framing == panel.framing()
    window.audition.inspect(0, 0, 1)
    plot = window.inspector.plot
    qtbot.waitUntil(lambda: plot.shown is not None, timeout=10000)
    assert plot.shown.context_tokens == len(expected) + 1  # the framed prompt and the first sample token
    # Asking differently puts the samples out of date.
    panel.instruction_edit.setText("Summarise this draft: {passage}")
    assert "asked changed" in window.grid.stale_label.text()
    panel.instruction_edit.setText("Write a notice from this draft: {passage}")
    assert not window.grid.stale_banner.isVisibleTo(window.grid)


def test_an_empty_instruction_is_refused_before_generating(window, qtbot):
    choose_instruction(window, "   ")
    qtbot.mouseClick(window.controls.generate_button, Qt.LeftButton)
    assert not window.audition.running() and "instruction is empty" in window.errors[-1]


def test_a_model_without_a_chat_template_offers_continuation_only(qtbot, tiny_model, tmp_path):
    from samplewright.qt.main_window import MainWindow

    win = MainWindow(model_loader=lambda s, p: tiny_model, library_dir=tmp_path / "l", config_dir=tmp_path / "c")
    qtbot.addWidget(win, before_close_func=discard_edits)
    win.passage.set_framing(Framing(INSTRUCTION, "", "Reply: {passage}"))  # chosen before the model loads
    win.show()
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    panel = win.passage
    assert not panel.framing_choice.isEnabled() and panel.framing_choice.toolTip() == NO_TEMPLATE
    assert panel.framing_note.isVisible() and panel.framing_note.text() == NO_TEMPLATE
    assert panel.framing() == Framing() and not panel.instruction_edit.isVisible()
    assert panel.instruction_edit.text() == "Reply: {passage}"  # kept for a model that has a template
    win.close()


def test_the_token_count_follows_the_instruction(window, qtbot, tiny_loader):
    # Reference: transformers' apply_chat_template (tokenize=True): the count shown once the
    # instruction rests is the length of the rendered conversation the audition will read.
    panel = window.passage
    panel.set_text(PASSAGE)
    qtbot.waitUntil(lambda: panel.info.text().endswith(")") and "counting" not in panel.info.text(), timeout=10000)
    assert "with the instruction" not in panel.info.text()
    choose_instruction(window, "Write a notice from this draft: {passage}")
    qtbot.waitUntil(lambda: "with the instruction" in panel.info.text(), timeout=10000)
    messages = [{"role": "user", "content": f"Write a notice from this draft: {PASSAGE}"}]
    expected = tiny_loader(None, None).tokenizer.apply_chat_template(
        messages, tokenize=True, add_generation_prompt=True
    )
    expected = list(expected if isinstance(expected, list) else expected["input_ids"])
    assert panel.info.text().startswith(f"{len(expected):,} tokens with the instruction")
