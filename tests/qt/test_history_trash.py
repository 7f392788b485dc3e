"""A preset's history and differences, comparing two presets, and the trash.

Expected revisions and values come from the core library read afresh from
disk (a second ``PresetLibrary`` on the folder), not from the dialogs.
"""

from __future__ import annotations

from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import QApplication, QMenu
from test_presets_ui import highlight_first, retype

from samplewright.core.library.library import PresetLibrary
from samplewright.qt.difference_view import FIELD_LABELS, CompareDialog, value_text
from samplewright.qt.library_dialogs import HistoryDialog, TrashDialog, when_text


def save_temperature(window, qtbot, text):
    retype(qtbot, window.editor.inputs["temperature"], text)
    qtbot.mouseClick(window.editor.save_button, Qt.LeftButton)


def column(table, index):
    return [table.item(row, index).text() for row in range(table.rowCount())]


def test_history_lists_earlier_revisions_and_shows_the_changed_field(window, qtbot):
    record = highlight_first(window)
    first = record.preset.temperature
    save_temperature(window, qtbot, "0.35")
    save_temperature(window, qtbot, "0.6")
    assert window.library.get(record.id).revision == record.revision + 2

    window.menu_actions["history"].trigger()
    dialog = window.findChild(HistoryDialog)
    assert dialog is not None and dialog.isVisible()
    assert column(dialog.revisions, 0) == [str(record.revision + 1), str(record.revision)]
    on_disk = PresetLibrary(window.library.folder).history(record.id)
    assert column(dialog.revisions, 1) == [when_text(r.modified_at) for r in on_disk]
    assert column(dialog.revisions, 2)[0] == window.library.user

    dialog.select_revision(record.revision)
    assert dialog.differences.rows() == [("temperature", value_text(first), "0.6")]
    dialog.select_revision(record.revision + 1)
    assert dialog.differences.rows() == [("temperature", "0.35", "0.6")]
    dialog.close()


def test_bringing_back_a_revision_restores_its_value_and_can_be_undone(window, qtbot):
    record = highlight_first(window)
    first = record.preset.temperature
    save_temperature(window, qtbot, "0.35")
    save_temperature(window, qtbot, "0.6")
    dialog = window.library_tools.show_history()
    dialog.select_revision(record.revision)
    qtbot.mouseClick(dialog.bring_back_button, Qt.LeftButton)

    stored = PresetLibrary(window.library.folder).get(record.id)
    assert stored.preset.temperature == first
    assert stored.revision == record.revision + 3  # a new revision; nothing rewritten
    assert window.editor.inputs["temperature"].text() == value_text(first)
    assert column(dialog.revisions, 0)[0] == str(record.revision + 2)  # the replaced one is now history

    window.undo_action.trigger()
    stored = PresetLibrary(window.library.folder).get(record.id)
    assert stored.preset.temperature == 0.6
    assert stored.revision == record.revision + 4
    assert window.errors == []
    dialog.close()


def test_history_of_a_preset_never_changed_says_so(window):
    highlight_first(window)
    dialog = window.library_tools.show_history()
    assert dialog.revisions.rowCount() == 0
    assert not dialog.bring_back_button.isEnabled()
    assert dialog.differences.rows() == []
    dialog.close()


def test_compare_shows_the_fields_that_differ(window):
    first, second = window.library.records()[:2]
    window.library_list.select(first.id)
    window.menu_actions["compare"].trigger()
    dialog = window.findChild(CompareDialog)
    assert dialog.first.currentData() == first.id and dialog.second.currentData() == second.id
    # Expected from the presets' own stored form: every field except the name and the times.
    a, b = first.preset.to_dict(), second.preset.to_dict()
    expected = [k for k in a if a[k] != b[k] and k not in ("name", "created", "modified")]
    assert expected, "the starter presets differ"
    assert [row[0] for row in dialog.table.rows()] == [FIELD_LABELS.get(k, k) for k in expected]
    assert dialog.table.horizontalHeaderItem(1).text() == first.name
    dialog.second.setCurrentIndex(dialog.second.findData(first.id))
    assert dialog.table.rows() == []
    dialog.close()


def test_a_deleted_preset_is_restored_from_the_trash_dialog(window, qtbot):
    record = highlight_first(window)
    window.menu_actions["delete"].trigger()
    assert record.id not in [r.id for r in PresetLibrary(window.library.folder).records()]

    window.menu_actions["trash"].trigger()
    dialog = window.findChild(TrashDialog)
    assert column(dialog.table, 0) == [record.name]
    dialog.select_preset(record.name)
    qtbot.mouseClick(dialog.restore_button, Qt.LeftButton)

    back = PresetLibrary(window.library.folder).get(record.id)
    assert back.preset == record.preset
    assert window.library_list.current_id() == record.id
    assert dialog.table.records == [] and "empty" in dialog.note.text()
    window.undo_action.trigger()
    assert record.id not in [r.id for r in PresetLibrary(window.library.folder).records()]
    assert window.errors == []
    dialog.close()


def test_history_and_compare_are_in_the_presets_menu_and_the_list_menu(window, qtbot):
    presets_menu = next(a.menu() for a in window.menuBar().actions() if a.text() == "&Presets")
    for key in ("history", "compare", "trash", "save_copy"):
        assert window.menu_actions[key] in presets_menu.actions()
    assert window.menu_actions["history"].shortcut().toString() == "Ctrl+H"

    tree = window.library_list.tree
    record = window.library.records()[1]
    item = tree.topLevelItem(1)
    tree.setCurrentItem(item)
    offered = []

    def read_and_choose_history(left=250):
        menu = QApplication.activePopupWidget()
        if isinstance(menu, QMenu):
            offered.extend(a.text() for a in menu.actions() if not a.isSeparator())
            menu.close()
            next(a for a in menu.actions() if a.text() == "History…").trigger()
        elif left:
            QTimer.singleShot(20, lambda: read_and_choose_history(left - 1))

    QTimer.singleShot(0, read_and_choose_history)
    tree.customContextMenuRequested.emit(tree.visualItemRect(item).center())
    assert "History…" in offered and "Compare with…" in offered
    dialog = window.findChild(HistoryDialog)
    assert dialog is not None and dialog.record_id == record.id
    dialog.close()


def test_compare_survives_a_preset_deleted_by_a_colleague(window, qtbot):
    from samplewright.core.library.library import PresetLibrary

    first, second = window.library.records()[:2]
    window.library_list.select(first.id)
    window.menu_actions["compare"].trigger()
    dialog = window.findChild(CompareDialog)
    PresetLibrary(window.library.folder, user="colleague").delete(second.id)
    window.library_tools.rescan_library()
    assert second.id not in {r.id for r in window.library.records()}
    dialog.refresh()
    assert f"'{second.name}' is no longer in the library" in dialog.summary.text()
    assert dialog.table.rows() == []
    dialog.close()
