"""The window follows the shared library folder while a colleague edits it.

The colleague is a second core ``PresetLibrary`` on the same folder, as another
person's window would be; what the window shows is checked against what that
independent instance wrote to disk.
"""

from __future__ import annotations

import dataclasses

from PySide6.QtCore import Qt
from test_presets_ui import highlight_first, retype

from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.records import encode_record
from samplewright.core.presets import Preset


def list_names(window):
    tree = window.library_list.tree
    return [tree.topLevelItem(i).text(0) for i in range(tree.topLevelItemCount())]


def colleague_of(window):
    return PresetLibrary(window.library.folder, user="colleague")


def test_list_follows_a_colleagues_add_change_and_delete(window, qtbot):
    colleague = colleague_of(window)
    added = colleague.add(Preset("Harbour closure notice", temperature=0.4, top_p=0.8))
    qtbot.waitUntil(lambda: "Harbour closure notice" in list_names(window), timeout=5000)
    assert window.library.get(added.id) == added
    assert "added 'Harbour closure notice' (colleague)" in window.statusBar().currentMessage()

    window.library_list.select(added.id)
    assert window.editor.original == added.preset
    changed = colleague.save(added.edited(added.preset.replace(temperature=0.9)))
    qtbot.waitUntil(lambda: window.library.get(added.id).revision == changed.revision, timeout=5000)
    assert window.library.get(added.id) == changed
    # The editor had no edits of its own, so it shows the colleague's version.
    assert window.editor.inputs["temperature"].text() == "0.9"
    assert "changed 'Harbour closure notice' (colleague)" in window.statusBar().currentMessage()

    colleague.delete(added.id)
    qtbot.waitUntil(lambda: "Harbour closure notice" not in list_names(window), timeout=5000)
    assert added.id not in [r.id for r in window.library.records()]
    assert "removed 'Harbour closure notice'" in window.statusBar().currentMessage()
    assert window.editor.original != changed.preset
    assert window.errors == [] and window.questions == []


def test_reload_picks_up_changes_at_once(window):
    colleague_of(window).add(Preset("Pier works notice", top_k=20))
    window.menu_actions["rescan"].trigger()
    assert "Pier works notice" in list_names(window)
    assert "added 'Pier works notice' (colleague)" in window.statusBar().currentMessage()
    window.menu_actions["rescan"].trigger()
    assert window.statusBar().currentMessage() == "Library reloaded: nothing changed."


def test_a_file_rewritten_in_place_is_picked_up(window, qtbot):
    record = window.library.records()[-1]
    path = window.library.folder / record.file_name
    assert str(path) in window.library_watch.watched_paths()
    edited = dataclasses.replace(
        record, revision=record.revision + 1, preset=record.preset.replace(top_k=7), modified_by="text editor"
    )
    with open(path, "r+b") as handle:  # in place, as a plain text editor may save
        handle.truncate(0)
        handle.write(encode_record(edited))
    qtbot.waitUntil(lambda: window.library.get(record.id).preset.top_k == 7, timeout=5000)
    assert window.library.get(record.id) == PresetLibrary(window.library.folder).get(record.id)


def test_own_saves_are_not_reported_as_someone_elses(window, qtbot):
    record = highlight_first(window)
    events = []
    for emitter in (window.library.added, window.library.changed, window.library.removed):
        emitter.connect(events.append)
    retype(qtbot, window.editor.inputs["temperature"], "0.35")
    with qtbot.waitSignal(window.library_watch.checked, timeout=5000) as blocker:
        qtbot.mouseClick(window.editor.save_button, Qt.LeftButton)
    report, _names = blocker.args
    assert not report, "the window's own save came back from the folder as a change by others"
    assert [e.id for e in events] == [record.id]  # only the save itself, no second round
    assert window.statusBar().currentMessage().startswith(f"Saved '{record.name}'")


def test_a_vanished_folder_is_reported_without_a_message_box(window, qtbot):
    import shutil

    count = len(window.library.records())
    shutil.rmtree(window.library.folder)
    qtbot.waitUntil(lambda: window.library_watch.problem is not None, timeout=5000)
    assert "is not there" in window.statusBar().currentMessage()
    assert len(list_names(window)) == count  # what was read stays listed
    assert window.errors == []


def test_a_rescan_with_many_changes_rebuilds_the_list_once(window, qtbot):
    colleague = colleague_of(window)
    window.library_watch._periodic.stop()  # only the rescan below may read the folder
    window.library_watch._settle.stop()
    for n in range(5):
        colleague.add(Preset(f"Pier update {n}", temperature=0.5 + n / 10))
    rebuilds = []
    window.library_list.current_changed.connect(
        lambda _id: rebuilds.append(1) if window.library_list.refreshing else None
    )
    window.library_tools.rescan_library()
    assert [f"Pier update {n}" for n in range(5)] == [n for n in list_names(window) if "Pier update" in n]
    assert len(rebuilds) == 1
