"""Nothing lost: unsaved edits are asked about before they would go, a save
conflict goes through the conflict dialog, and a library that cannot be
written keeps the edits and offers a copy as a file.

What ends up stored is read back with a second core ``PresetLibrary`` (or the
core's preset-file reader), independently of the window.
"""

from __future__ import annotations

import json
import shutil

import pytest
from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import QApplication, QMessageBox
from test_presets_ui import highlight_first, retype

from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.settings_file import check_file
from samplewright.core.presets import Preset, PresetError, validate_field
from samplewright.qt.prompts import QtPrompts


def stored(window, record_id):
    return PresetLibrary(window.library.folder).get(record_id)


def answer_next_message_box(button_text, seen, tries=250):
    """Click ``button_text`` in the next modal message box (it blocks, so poll for it from the event loop)."""

    def poll(left=tries):
        box = QApplication.activeModalWidget()
        if isinstance(box, QMessageBox):
            seen.append(
                {
                    "text": box.text(),
                    "detail": box.informativeText(),
                    "buttons": sorted(b.text().replace("&", "") for b in box.buttons()),
                }
            )
            next(b for b in box.buttons() if b.text().replace("&", "") == button_text).click()
        elif left:
            QTimer.singleShot(20, lambda: poll(left - 1))

    QTimer.singleShot(0, poll)


def click_row(qtbot, window, record_id):
    """Click a preset's row in the list with the mouse, as a user would."""
    tree = window.library_list.tree
    item = next(
        tree.topLevelItem(i)
        for i in range(tree.topLevelItemCount())
        if tree.topLevelItem(i).data(0, Qt.UserRole) == record_id
    )
    qtbot.mouseClick(tree.viewport(), Qt.LeftButton, pos=tree.visualItemRect(item).center())


@pytest.mark.parametrize("answer", ["save", "discard", "cancel"])
def test_choosing_another_preset_asks_about_unsaved_edits(window, qtbot, answer):
    record = highlight_first(window)
    other = window.library.records()[1]
    retype(qtbot, window.editor.inputs["top_k"], "17")
    window.answers.append(answer)
    click_row(qtbot, window, other.id)
    assert window.questions == [(record.name, None)]
    if answer == "cancel":
        assert window.library_list.current_id() == record.id
        assert window.editor.inputs["top_k"].text() == "17" and window.editor.is_dirty()
        assert stored(window, record.id) == record
        return
    assert window.library_list.current_id() == other.id
    assert window.editor.original == other.preset
    expected_top_k = 17 if answer == "save" else record.preset.top_k
    assert stored(window, record.id).preset.top_k == expected_top_k


def test_an_invalid_draft_can_only_be_discarded_and_says_why(window, qtbot):
    record = highlight_first(window)
    other = window.library.records()[1]
    retype(qtbot, window.editor.inputs["top_p"], "1.5")
    window.prompts.ask_unsaved = lambda name, problem: QtPrompts.ask_unsaved(window.prompts, name, problem)
    seen = []
    answer_next_message_box("Discard", seen)
    window.library_list.select(other.id)
    with pytest.raises(PresetError) as why:  # the core's own reason for refusing the value
        validate_field("top_p", 1.5)
    assert seen[0]["buttons"] == ["Cancel", "Discard"]
    assert str(why.value) in seen[0]["detail"]
    assert window.editor.original == other.preset
    assert stored(window, record.id) == record


def test_closing_the_window_asks_and_cancel_keeps_it_open(window, qtbot):
    record = highlight_first(window)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    window.answers.append("cancel")
    assert not window.close()
    assert window.isVisible() and window.editor.is_dirty()
    window.answers.append("save")
    assert window.close()
    assert stored(window, record.id).preset.temperature == 0.45


@pytest.mark.parametrize("action", ["delete", "rename"])
def test_delete_and_rename_ask_first(window, qtbot, action):
    record = highlight_first(window)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    window.prompts.ask_text = lambda *args: "Pier notice"
    window.answers.append("cancel")
    window.menu_actions[action].trigger()
    assert stored(window, record.id) == record  # cancelled: nothing happened
    window.answers.append("discard")
    window.menu_actions[action].trigger()
    library = PresetLibrary(window.library.folder)
    if action == "delete":
        assert record.id not in [r.id for r in library.records()]
    else:
        assert library.get(record.id).name == "Pier notice"
        assert library.get(record.id).preset.temperature == record.preset.temperature
    assert len(window.questions) == 2


def edit_while_a_colleague_saves(window, qtbot):
    """Type a temperature, let a colleague save top_p=0.5 meanwhile, wait until the window has read it."""
    record = highlight_first(window)
    colleague = PresetLibrary(window.library.folder, user="colleague")
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    theirs = colleague.save(colleague.get(record.id).edited(record.preset.replace(top_p=0.5)))
    qtbot.waitUntil(lambda: window.library.get(record.id).revision == theirs.revision, timeout=5000)
    return record, theirs


def test_a_colleagues_save_in_between_goes_through_the_conflict_dialog(window, qtbot):
    record, theirs = edit_while_a_colleague_saves(window, qtbot)
    # The window has picked up their save but keeps the edits, and says so.
    assert window.editor.inputs["temperature"].text() == "0.45"
    assert "colleague" in window.editor.notice.text() and window.editor.notice.isVisible()

    seen = []
    answer_next_message_box("Keep mine as a copy", seen)
    window.menu_actions["save"].trigger()
    assert seen and "colleague" in seen[0]["text"]
    library = PresetLibrary(window.library.folder)
    assert library.get(record.id) == theirs  # theirs untouched
    copy = library.find(f"{record.name} (copy)")  # mine kept as a copy
    assert copy.preset.temperature == 0.45 and copy.preset.top_p == record.preset.top_p
    assert window.library_list.current_id() == copy.id
    assert not window.editor.is_dirty()


def test_revert_after_a_colleagues_save_shows_their_version(window, qtbot):
    record, theirs = edit_while_a_colleague_saves(window, qtbot)
    qtbot.mouseClick(window.editor.revert_button, Qt.LeftButton)
    assert window.editor.original == theirs.preset
    assert window.editor.inputs["top_p"].text() == "0.5"
    retype(qtbot, window.editor.inputs["temperature"], "0.55")
    window.menu_actions["save"].trigger()  # no conflict: the edit starts from theirs
    saved = stored(window, record.id)
    assert (saved.revision, saved.preset.top_p, saved.preset.temperature) == (theirs.revision + 1, 0.5, 0.55)


def test_edits_to_a_preset_a_colleague_deleted_are_kept(window, qtbot):
    record = highlight_first(window)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    PresetLibrary(window.library.folder, user="colleague").delete(record.id)
    qtbot.waitUntil(lambda: record.id not in [r.id for r in window.library.records()], timeout=5000)
    assert window.questions == []  # no question popped up from the file watch
    assert window.editor.inputs["temperature"].text() == "0.45"
    assert "no longer in the library" in window.editor.notice.text()

    seen = []
    answer_next_message_box("Replace it with my edits", seen)
    window.menu_actions["save"].trigger()
    assert "deleted" in seen[0]["text"]
    back = stored(window, record.id)
    assert back.preset.temperature == 0.45 and back.name == record.name


def test_a_removed_library_folder_keeps_the_draft_and_offers_a_copy(window, qtbot, tmp_path):
    record = highlight_first(window)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    draft = window.editor.edited()
    shutil.rmtree(window.library.folder)
    copy_path = tmp_path / "elsewhere" / "my-draft.json"
    copy_path.parent.mkdir()
    window.prompts.ask_save_path = lambda *args: str(copy_path)
    window.copy_wanted = True
    window.menu_actions["save"].trigger()

    assert len(window.offered) == 1
    assert str(window.library.folder) in window.offered[0] and "is not there" in window.offered[0]
    assert "still in the editor" in window.offered[0]
    assert window.editor.is_dirty() and window.editor.edited() == draft
    # The copy is a valid preset file holding the draft, by the core's own reader.
    assert "a valid preset" in check_file(copy_path)
    assert Preset.from_dict(json.loads(copy_path.read_text(encoding="utf-8"))) == draft
    assert record.name in window.statusBar().currentMessage()


def test_the_saved_copy_goes_back_into_the_library_when_the_folder_returns(window, qtbot, tmp_path):
    record = highlight_first(window)
    retype(qtbot, window.editor.inputs["temperature"], "0.45")
    draft = window.editor.edited()
    backup = tmp_path / "backup"
    shutil.copytree(window.library.folder, backup)
    shutil.rmtree(window.library.folder)
    window.prompts.ask_save_path = lambda *args: str(tmp_path / "my-draft.json")
    window.copy_wanted = True
    window.menu_actions["save"].trigger()
    shutil.copytree(backup, window.library.folder)  # the drive is back
    window.menu_actions["rescan"].trigger()

    previews = []
    window.prompts.confirm_import = lambda plan, name: (
        previews.append([i.action for i in plan.items]) or {record.name: "overwrite"}
    )
    window.presets.import_settings(str(tmp_path / "my-draft.json"))
    assert previews == [["conflict"]]  # same name, other parameters: the user chooses
    assert stored(window, record.id).preset.parameters() == draft.parameters()
