"""Choosing which library folder the window shows (the team's shared one, a recent
one, or the user's own), remembering it across starts, and falling back when it
has gone.

What the window shows is checked against an independent core ``PresetLibrary``
reading the same folder, as a colleague's window would.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from test_library_follow import list_names
from test_presets_ui import highlight_first, retype

from samplewright.core.library.library import PresetLibrary, default_library_dir, starter_presets
from samplewright.core.presets import Preset
from samplewright.qt.library_folder import short_folder
from samplewright.qt.main_window import MainWindow

TEAM_PRESETS = [
    Preset("Timetable change — plain", temperature=0.3, top_p=0.8),
    Preset("Ferry newsletter — chatty", temperature=1.1, top_k=60),
]


@pytest.fixture
def team_folder(tmp_path):
    """A shared folder holding two presets written by a colleague."""
    folder = tmp_path / "shared" / "ferry-team-presets"
    folder.mkdir(parents=True)
    colleague = PresetLibrary(folder, user="colleague", seed=False)
    for preset in TEAM_PRESETS:
        colleague.add(preset)
    return folder


def switch_to(window, folder):
    window.prompts.ask_folder = lambda title: str(folder)
    window.menu_actions["library_folder"].trigger()


def names_on_disk(folder):
    return [r.name for r in PresetLibrary(folder, seed=False).records()]


def reopen(qtbot, tiny_loader, tmp_path):
    """A new window with the same config folder, as at the next start (no model needed)."""
    win = MainWindow(model_loader=tiny_loader, config_dir=tmp_path / "config", load_on_start=False)
    qtbot.addWidget(win)
    return win


def test_switching_shows_the_team_folders_presets(window, qtbot, team_folder):
    own = window.library.folder
    switch_to(window, team_folder)
    assert window.errors == []
    assert window.library.folder == team_folder
    assert list_names(window) == names_on_disk(team_folder) == sorted(p.name for p in TEAM_PRESETS)
    current = PresetLibrary(team_folder).get(window.library_list.current_id())
    assert window.editor.original == current.preset  # the editor follows the new library
    assert "ferry-team-presets" in window.library_box.header.text()
    assert str(team_folder) in window.library_box.header.toolTip()
    assert "ferry-team-presets" in window.windowTitle()
    assert window.library_list.chosen and all(
        i in {r.id for r in window.library.records()} for i in window.library_list.chosen
    )
    assert window.undo_stack.count() == 0
    # The file watch now follows the team folder, not the user's own one.
    watched = window.library_watch.watched_paths()
    assert str(team_folder) in watched and str(own) not in watched
    PresetLibrary(team_folder, user="colleague").add(Preset("Quay works notice", top_k=20))
    qtbot.waitUntil(lambda: "Quay works notice" in list_names(window), timeout=5000)
    PresetLibrary(own).add(Preset("Only in my own library"))
    window.menu_actions["rescan"].trigger()
    assert "Only in my own library" not in list_names(window)


def test_favourites_work_in_the_team_library(window, tmp_path, team_folder):
    switch_to(window, team_folder)
    record = highlight_first(window)
    window.menu_actions["favourite"].trigger()
    state = json.loads((tmp_path / "config" / "state.json").read_text())
    assert record.id in state["favourites"]
    assert not (team_folder / "state.json").exists()  # kept in the user's own folder
    window.library_list.favourites_only.setChecked(True)
    tree = window.library_list.tree
    assert [
        tree.topLevelItem(i).text(0) for i in range(tree.topLevelItemCount()) if not tree.topLevelItem(i).isHidden()
    ] == [record.name]


def test_the_choice_is_reopened_at_the_next_start(window, qtbot, tiny_loader, tmp_path, team_folder):
    switch_to(window, team_folder)
    window.close()
    again = reopen(qtbot, tiny_loader, tmp_path)
    assert again.library.folder == team_folder
    assert list_names(again) == names_on_disk(team_folder)
    assert again.library_box.notice.isHidden()
    again.folders.fill_recent_menu()
    entries = again.recent_menu.actions()
    assert [a.toolTip() for a in entries] == [str(team_folder)] and entries[0].isChecked()


def test_a_removed_folder_at_start_falls_back_with_a_message(window, qtbot, tiny_loader, tmp_path, team_folder):
    switch_to(window, team_folder)
    window.close()
    backup = tmp_path / "backup"
    shutil.copytree(team_folder, backup)
    shutil.rmtree(team_folder)  # the shared drive is not there at the next start

    fallback = reopen(qtbot, tiny_loader, tmp_path)
    assert fallback.library.folder == default_library_dir()
    assert list_names(fallback) == names_on_disk(default_library_dir())
    notice = fallback.library_box.notice
    assert notice.isVisibleTo(fallback)
    assert str(team_folder) in notice.text() and "is not there" in notice.text()
    assert "your own library" in notice.text()
    assert "my own library" in fallback.library_box.header.text()
    fallback.close()

    shutil.copytree(backup, team_folder)  # back again: the remembered choice opens
    back = reopen(qtbot, tiny_loader, tmp_path)
    assert back.library.folder == team_folder and back.library_box.notice.isHidden()


def test_back_to_my_own_library(window, qtbot, tiny_loader, tmp_path, team_folder):
    own = window.library.folder
    assert not window.menu_actions["own_library"].isEnabled()
    switch_to(window, team_folder)
    assert window.menu_actions["own_library"].isEnabled()
    window.menu_actions["own_library"].trigger()
    assert window.library.folder == own
    assert list_names(window) == names_on_disk(own)
    assert "my own library" in window.library_box.header.text()
    window.close()
    assert reopen(qtbot, tiny_loader, tmp_path).library.folder == own


@pytest.mark.parametrize("answer", ["save", "discard", "cancel"])
def test_switching_asks_about_unsaved_edits_first(window, qtbot, team_folder, answer):
    record = highlight_first(window)
    own = window.library.folder
    retype(qtbot, window.editor.inputs["top_k"], "17")
    window.answers.append(answer)
    switch_to(window, team_folder)
    assert window.questions == [(record.name, None)]
    stored = PresetLibrary(own).get(record.id).preset.top_k
    if answer == "cancel":
        assert window.library.folder == own
        assert window.editor.inputs["top_k"].text() == "17" and window.editor.is_dirty()
        assert stored == record.preset.top_k
    else:
        assert window.library.folder == team_folder and not window.editor.is_dirty()
        assert stored == (17 if answer == "save" else record.preset.top_k)


@pytest.mark.parametrize("answer", ["add", "empty", "cancel"])
def test_an_empty_folder_is_offered_the_starter_presets(window, tmp_path, answer):
    empty = tmp_path / "new-team-folder"
    empty.mkdir()
    asked = []
    window.prompts.ask_add_starters = lambda folder, others: asked.append((folder, others)) or answer
    switch_to(window, empty)
    assert asked == [(empty, 0)]
    on_disk = names_on_disk(empty)
    if answer == "cancel":
        assert window.library.folder != empty and on_disk == []
        return
    assert window.library.folder == empty
    expected = sorted((p.name for p in starter_presets()), key=str.casefold) if answer == "add" else []
    assert on_disk == expected == list_names(window)


def test_a_folder_that_cannot_be_opened_keeps_the_current_library(window, tmp_path):
    own = window.library.folder
    switch_to(window, tmp_path / "unplugged-drive" / "presets")
    assert window.library.folder == own
    assert len(window.errors) == 1 and "is not there" in window.errors[0]
    assert not (tmp_path / "unplugged-drive").exists()  # a missing shared folder is never created


def test_recent_folders_switch_back_and_forth(window, tmp_path, team_folder):
    second = tmp_path / "second-team"
    second.mkdir()
    PresetLibrary(second, seed=False).add(Preset("Second team preset"))
    switch_to(window, team_folder)
    switch_to(window, second)
    window.folders.fill_recent_menu()
    entries = window.recent_menu.actions()
    assert [a.toolTip() for a in entries] == [str(second), str(team_folder)]
    entries[1].trigger()
    assert window.library.folder == team_folder
    assert list_names(window) == names_on_disk(team_folder)


def test_short_folder_names():
    home = Path.home()
    assert short_folder(home / "Sync" / "presets") == str(Path("~") / "Sync" / "presets")
    long = Path("/mnt/harbour-office-share/communications/ferry-team/2025/presets")
    shown = short_folder(long, width=30)
    assert shown.startswith("…") and shown.endswith("presets") and len(shown) <= 30
    assert short_folder(Path("/srv/presets")) == "/srv/presets"
