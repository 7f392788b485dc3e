"""The editor laid out as the preset's chain: blocks in the preset's order, off stages
folded and switched on, reordering by keys and by dragging, the figures of the
inspected step, and text that never overlaps or clips."""

from __future__ import annotations

import pytest
from PySide6.QtCore import QPoint, QRect, Qt
from PySide6.QtWidgets import QApplication, QLabel, QWidget
from test_presets_ui import retype
from test_workflow import generate, tick, untick_all, with_tokens

from samplewright.core.presets import Preset
from samplewright.core.sampling.stage_parts import chain_parts


def edit(window, preset):
    record = window.library.add(preset)
    window.library_list.select(record.id)
    assert window.editor.original == record.preset
    return record


def visible_labels(window: QWidget) -> list[tuple[QLabel, QRect]]:
    """Every shown label with text, as the part of it its ancestors let be seen (window coordinates)."""
    found = []
    for label in window.findChildren(QLabel):
        if not label.isVisible() or not label.text().strip():
            continue
        rect = QRect(label.mapTo(window, QPoint(0, 0)), label.size())
        parent = label.parentWidget()
        while parent is not None and parent is not window:
            rect = rect.intersected(QRect(parent.mapTo(window, QPoint(0, 0)), parent.size()))
            parent = parent.parentWidget()
        if not rect.isEmpty():
            found.append((label, rect))
    return found


def overlaps(window: QWidget) -> list[str]:
    """Pairs of visible labels whose rectangles intersect, and wrapped labels too short for their text."""
    labels = visible_labels(window)
    problems = []
    for i, (a, ra) in enumerate(labels):
        for b, rb in labels[i + 1 :]:
            if ra.intersects(rb):
                problems.append(f"{a.text()[:40]!r} overlaps {b.text()[:40]!r}")
        if a.wordWrap() and a.heightForWidth(a.width()) > a.height() + 1:
            problems.append(f"{a.text()[:40]!r} is clipped ({a.height()} px for {a.heightForWidth(a.width())})")
    return problems


def settle(qtbot):
    QApplication.processEvents()
    qtbot.wait(50)


def test_the_overlap_check_can_fail(qtbot):
    host = QWidget()
    qtbot.addWidget(host)
    a, b = QLabel("Ferry timetable", host), QLabel("Winter sailings", host)
    a.setGeometry(0, 0, 120, 20)
    b.setGeometry(60, 10, 120, 20)
    host.resize(300, 100)
    host.show()
    assert len(overlaps(host)) == 1
    b.move(0, 40)
    assert overlaps(host) == []


def test_blocks_follow_the_preset_order_and_off_stages_are_folded(window):
    order = ("top_k", "temperature", "penalties", "top_p", "min_p", "typical_p")
    edit(window, Preset("Timetable", temperature=0.7, top_k=30, order=order))
    chain = window.editor.chain
    shown = sorted(chain.blocks, key=lambda s: chain.blocks[s].y())
    assert tuple(shown) == order
    assert chain.blocks["top_k"].switch.isChecked() and chain.blocks["top_k"].fields.isVisible()
    assert not chain.blocks["min_p"].switch.isChecked() and not chain.blocks["min_p"].fields.isVisible()
    assert "Off" in chain.blocks["min_p"].explanation.text()
    # The penalties block holds its parts.
    assert set(chain_parts()["penalties"].fields) == set(chain.blocks["penalties"].inputs)
    # The header holds the preset's own settings, above the chain.
    header = window.editor.inputs["max_new_tokens"]
    assert header.mapTo(window.editor, QPoint(0, 0)).y() < chain.mapTo(window.editor, QPoint(0, 0)).y()


def test_switching_a_stage_on_gives_it_a_value_and_saving_keeps_it(window, qtbot):
    record = edit(window, Preset("Notice"))
    block = window.editor.chain.blocks["top_p"]
    qtbot.mouseClick(block.switch, Qt.LeftButton)
    assert block.fields.isVisible() and float(window.editor.inputs["top_p"].text()) < 1
    window.editor.save()
    saved = window.library.get(record.id).preset
    assert saved.top_p < 1
    qtbot.mouseClick(block.switch, Qt.LeftButton)
    assert not block.fields.isVisible()
    window.editor.save()
    assert window.library.get(record.id).preset.top_p == 1.0


def test_alt_arrows_move_the_focused_block(window, qtbot):
    record = edit(window, Preset("Reply"))
    block = window.editor.chain.blocks["typical_p"]
    block.setFocus()
    qtbot.keyClick(block, Qt.Key_Up, Qt.AltModifier)
    assert window.editor.stage_order()[-2:] == ("typical_p", "min_p")
    window.editor.save()
    assert window.library.get(record.id).preset.order[-2:] == ("typical_p", "min_p")


def test_a_drop_puts_the_block_where_it_lands(window):
    edit(window, Preset("Newsletter"))
    chain = window.editor.chain
    target = chain.blocks["penalties"]
    # Dropped on the top half of the first block: the last stage becomes the first.
    chain.move_to("typical_p", chain.drop_index(target.y() + 2))
    assert window.editor.stage_order()[0] == "typical_p"
    assert window.editor.is_dirty()


def test_typing_a_neutral_value_shows_the_stage_as_off(window, qtbot):
    edit(window, Preset("Warm", temperature=0.7))
    block = window.editor.chain.blocks["temperature"]
    assert block.switch.isChecked()
    retype(qtbot, window.editor.inputs["temperature"], "1")
    assert not block.switch.isChecked()
    assert block.fields.isVisible()  # still there to type into


def test_the_inspected_step_shows_what_each_stage_keeps(window, qtbot):
    untick_all(window)
    record = edit(window, Preset("Narrow", top_k=3))
    window.library_list.set_chosen([record.id])
    generate(window, qtbot, samples=2, tokens=4)
    column, row, _ = with_tokens(window, least=1, prefer_column=0)
    window.audition.inspect(column, row, 0)
    block = window.editor.chain.blocks["top_k"]
    qtbot.waitUntil(lambda: block.kept.isVisible(), timeout=10000)
    # top-k with k = 3 leaves at most three tokens (Fan et al. 2018, "Hierarchical Neural Story Generation").
    assert "keeps 3 tokens" in block.kept.text()
    assert "keeps 3 tokens" not in window.editor.chain.blocks["penalties"].kept.text()
    assert "step 1" in window.editor.kept_note.text()
    window.audition.clear_inspection()
    assert not block.kept.isVisible()


@pytest.mark.parametrize("size", [(1280, 800), (1400, 900), (1920, 1080)])
def test_no_label_overlaps_or_clips_after_an_audition_and_a_resize(window, qtbot, size):
    untick_all(window)
    tick(window, 3)
    record = window.library.get(window.library_list.chosen[0])
    window.library_list.select(record.id)
    generate(window, qtbot, samples=3, tokens=6)
    column, row, _ = with_tokens(window, least=1, prefer_column=0)
    window.audition.inspect(column, row, 0)
    qtbot.waitUntil(lambda: window.inspector.plot.shown is not None, timeout=10000)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")  # typing once reproduced the overlap
    settle(qtbot)
    assert overlaps(window) == []
    window.resize(*size)
    settle(qtbot)
    assert overlaps(window) == []
