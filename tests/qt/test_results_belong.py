"""Samples say what they belong to (passage, folder, preset), the ↻ button and the
token limit explain themselves, undo restores a deleted preset as it was, and the
window's layout gives the samples room."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QApplication
from test_presets_ui import retype
from test_workflow import generate, tick, untick_all

from samplewright.core.presets import Preset
from samplewright.qt.audition_view import DRAFT_MARK


def two_columns(window, qtbot, presets=None, tokens=6):
    untick_all(window)
    if presets:
        ids = [window.library.add(p).id for p in presets]
        window.library_list.set_chosen(ids)
    else:
        ids = tick(window, 2)
    generate(window, qtbot, samples=2, tokens=tokens)
    return ids


def test_another_passage_dims_the_audition_and_offers_to_generate_again(window, qtbot):
    two_columns(window, qtbot)
    grid = window.grid
    assert grid.stale_banner.isHidden()
    window.passage.set_text("Winter timetable: the last sailing leaves at 18:10")
    qtbot.waitUntil(lambda: not grid.stale_banner.isHidden(), timeout=5000)
    assert "passage changed" in grid.stale_label.text()
    assert "8C8C8C" in grid.view(0, 0).styleSheet()
    qtbot.mouseClick(grid.again_button, Qt.LeftButton)
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=30000)
    assert window.session.passage.startswith("Winter timetable")
    assert grid.stale_banner.isHidden() and grid.view(0, 0).styleSheet() == ""


def test_another_library_folder_marks_the_audition(window, qtbot, tmp_path):
    from samplewright.core.library.library import PresetLibrary

    two_columns(window, qtbot)
    PresetLibrary(tmp_path / "team", create=True, seed=False).add(Preset("Team reply"))
    assert window.folders.use_library_folder(tmp_path / "team")
    assert not window.grid.stale_banner.isHidden()
    assert "another library folder" in window.grid.stale_label.text()


def test_a_changed_or_deleted_preset_marks_its_column_only(window, qtbot):
    ids = two_columns(window, qtbot)
    record = window.library.get(ids[1])
    window.library.save(record.edited(record.preset.replace(temperature=0.2)))
    headers = window.grid.headers
    assert headers[0].stale.isHidden()
    assert not headers[1].stale.isHidden() and "changed since" in headers[1].stale.text()
    window.library.delete(ids[0])
    assert "deleted" in headers[0].stale.text()
    # Writing the column again makes it current.
    qtbot.mouseClick(headers[1].regenerate, Qt.LeftButton)
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=30000)
    assert headers[1].stale.isHidden()


def test_the_draft_mark_goes_once_the_draft_is_saved(window, qtbot):
    record = window.library.add(Preset("Pier notice", temperature=1.3))
    untick_all(window)
    window.library_list.set_chosen([record.id])
    window.library_list.select(record.id)
    retype(qtbot, window.editor.inputs["temperature"], "0.6")
    generate(window, qtbot, samples=2, tokens=4)
    assert DRAFT_MARK in window.grid.headers[0].title.text()
    window.editor.save()
    assert DRAFT_MARK not in window.grid.headers[0].title.text()
    assert window.grid.headers[0].stale.isHidden()  # saved values are what the column shows


def test_new_samples_for_an_unchanged_preset_get_new_random_numbers(window, qtbot):
    # Temperature 1.5 samples widely, so new random numbers give other text (the check can fail).
    two_columns(window, qtbot, [Preset("Wide A", temperature=1.5), Preset("Wide B", temperature=1.5)], tokens=8)
    before = [s.token_ids for s in window.session.samples[1]]
    other = [s.token_ids for s in window.session.samples[0]]
    qtbot.mouseClick(window.grid.headers[1].regenerate, Qt.LeftButton)
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=30000)
    assert window.session.own_numbers(1) and not window.session.own_numbers(0)
    assert [s.token_ids for s in window.session.samples[1]] != before
    assert [s.token_ids for s in window.session.samples[0]] == other
    assert "own seed" in window.grid.headers[1].note.text()
    assert "New random numbers" in window.statusBar().currentMessage()


def test_each_column_says_which_token_limit_applied(window, qtbot):
    two_columns(window, qtbot, [Preset("Short reply", max_new_tokens=3), Preset("Newsletter")], tokens=5)
    short, long = window.grid.headers
    assert "up to 3 tokens (its own token limit)" in short.note.text()
    assert "up to 5 tokens (the audition's New tokens)" in long.note.text()
    assert "smaller" in short.note.toolTip() and "(3)" in short.note.toolTip()
    assert all(len(s.tokens) <= 3 for s in window.session.samples[0])


def test_undoing_a_delete_restores_tick_highlight_and_status(window):
    records = window.library.records()
    window.library_list.set_chosen([records[0].id, records[1].id])
    window.library_list.select(records[1].id)
    window.menu_actions["delete"].trigger()
    assert "Deleted" in window.statusBar().currentMessage()
    window.undo_action.trigger()
    assert window.library_list.chosen == [records[0].id, records[1].id]
    assert window.library_list.current_id() == records[1].id
    assert "Restored" in window.statusBar().currentMessage()


def test_a_new_preset_claims_no_neutral_settings(window, qtbot):
    window.menu_actions["new"].trigger()
    retype(qtbot, window.editor.inputs["temperature"], "0.6")
    window.editor.save()
    saved = window.library.get(window.library_list.current_id()).preset
    assert saved.temperature == 0.6 and "neutral" not in saved.description.lower()


def test_the_samples_get_the_width_and_four_columns_fit_at_1400(window, qtbot):
    from samplewright.qt.audition_view import COLUMN_WIDTH

    main = window.splitters["main"]
    before = main.sizes()
    window.resize(1900, 900)
    QApplication.processEvents()
    after = main.sizes()
    assert after[1] - before[1] > after[2] - before[2]  # the middle grew the most
    window.resize(1400, 900)
    QApplication.processEvents()
    assert window.grid.viewport().width() >= 4 * COLUMN_WIDTH + 40


def test_a_new_run_starts_at_column_one_and_a_sample_opens_whole(window, qtbot):
    untick_all(window)
    tick(window, 6)
    generate(window, qtbot, samples=2, tokens=6)
    bar = window.grid.horizontalScrollBar()
    bar.setValue(bar.maximum())
    generate(window, qtbot, samples=2, tokens=6)
    assert bar.value() == 0
    view = window.grid.view(0, 0)
    assert view.height() >= 6 * view.fontMetrics().lineSpacing()
    dialog = view.read_whole()
    assert dialog.findChild(type(view).__mro__[1]).toPlainText() == view.toPlainText()
    dialog.close()


def test_the_preset_list_shows_ten_rows_at_1400_by_900(window):
    window.resize(1400, 900)
    QApplication.processEvents()
    tree = window.library_list.tree
    row = tree.sizeHintForRow(0)
    assert row > 0 and tree.viewport().height() >= 10 * row


def test_metric_lines_explain_their_measure_and_direction(window, qtbot):
    two_columns(window, qtbot)
    lines = window.grid.headers[0].metric_lines
    assert "self-BLEU" in lines[1].text() and "Lower = more varied" in lines[1].toolTip()
    assert "distinct" in lines[0].toolTip() and "Higher = more varied" in lines[0].toolTip()


def test_examples_are_titled_and_help_has_guide_shortcuts_and_about(window):
    titles = [a.text() for a in window.passage.examples_menu.actions()]
    assert titles and all("-" not in t and t[0].isupper() for t in titles)
    help_menu = next(m for m in window.menuBar().findChildren(type(window.recent_menu)) if m.title() == "&Help")
    entries = [a.text() for a in help_menu.actions() if a.text()]
    assert entries[:2] == ["User guide", "Keyboard shortcuts"] and "About Samplewright" in entries
    from samplewright.qt import help_dialogs, window_actions

    guide = help_dialogs.guide_markdown()
    assert "## What you can do" in guide and "## For developers" not in guide
    rows = window_actions.shortcut_rows(window)
    assert ("Ctrl+Return", "Generate all") in [(k, c) for k, c, _ in rows]


def test_file_choosers_open_in_the_last_folder(window, tmp_path):
    prompts = window.prompts
    folder = tmp_path / "passages"
    folder.mkdir()
    prompts.remember_folder(str(folder / "notice.txt"))
    assert prompts.last_folder() == str(folder)


def test_an_audition_is_saved_and_reopened_after_a_restart(make_window, qtbot, tmp_path):
    first = make_window()
    first.models.load_model(None)
    qtbot.waitUntil(lambda: first.model_info is not None, timeout=20000)
    first.passage.set_text("The morning ferry to the island leaves the harbour")
    untick_all(first)
    tick(first, 2)
    generate(first, qtbot, samples=2, tokens=5)
    texts = [[v.toPlainText() for v in column] for column in first.grid.views]
    path = tmp_path / "kept.json"
    first.prompts.ask_save_path = lambda *args: str(path)
    first.menu_actions["save_audition"].trigger()
    assert path.is_file()
    first.close()
    second = make_window()
    second.prompts.ask_open_path = lambda *args: str(path)
    second.menu_actions["open_audition"].trigger()
    assert [[v.toPlainText() for v in column] for column in second.grid.views] == texts
    assert [h.name for h in second.grid.headers] == [p.name for p in first.session.presets]
    assert "Opened the audition" in second.statusBar().currentMessage()


def test_long_differences_wrap_and_keep_their_whole_text(window, qtbot, tmp_path):
    from samplewright.core.library.importing import preview_import
    from samplewright.core.library.settings_file import export_settings, read_settings
    from samplewright.qt.dialogs import ImportPreviewDialog
    from samplewright.qt.library_dialogs import HistoryDialog

    record = window.library.records()[0]
    reordered = tuple(reversed(record.preset.order))
    changed = record.preset.replace(order=reordered, notes="Tuned for the winter timetable " * 6)
    source = tmp_path / "changed.json"
    export_settings([changed], source)
    dialog = ImportPreviewDialog(preview_import(read_settings(source), window.library), source.name, window)
    qtbot.addWidget(dialog)
    dialog.show()
    QApplication.processEvents()
    cell = dialog.table.item(0, 2)
    assert " > ".join(reordered) in cell.toolTip()
    table = dialog.table
    assert table.rowHeight(0) >= table.sizeHintForRow(0)  # every line of the cell is shown
    window.library.save(record.edited(changed))
    history = HistoryDialog(window.library, record.id, lambda r: None, window)
    qtbot.addWidget(history)
    history.show()
    QApplication.processEvents()
    differences = history.differences
    order_row = next(r for r in range(differences.rowCount()) if "order" in differences.item(r, 0).text().lower())
    assert differences.item(order_row, 2).toolTip() == " > ".join(reordered)
    assert differences.rowHeight(order_row) >= differences.sizeHintForRow(order_row)


def test_help_about_opens_the_about_box(window, qtbot, monkeypatch):
    from samplewright.qt import about_dialog

    shown = []
    # The About box itself is modal; here only which box the menu opens is checked.
    monkeypatch.setattr(about_dialog.AboutDialog, "exec", lambda self: shown.append(self.windowTitle()) or 0)
    window.menu_actions["about"].trigger()
    assert shown and "Samplewright" in shown[0]
