"""The trash window lists every deleted revision (issue 8, defect 1): a preset deleted, saved
again over its deletion by a colleague and deleted again shows both revisions, and each can be
restored. Expected values come from the core library read afresh from disk."""

from __future__ import annotations

from PySide6.QtCore import Qt

from samplewright import Preset
from samplewright.core.library.library import PresetLibrary, SaveConflict
from samplewright.qt.library_commands import RestoreCommand
from samplewright.qt.library_dialogs import TrashDialog


def deleted_twice(folder):
    ana = PresetLibrary(folder, user="ana", create=True, seed=False)
    record = ana.add(Preset(name="Ramp notice", temperature=0.7))
    ben = PresetLibrary(folder, user="ben", seed=False)
    ana.delete(record.id)
    try:
        ben.save(ben.get(record.id).edited(Preset(name="Ramp notice", temperature=0.2)))
    except SaveConflict as conflict:
        ben.delete(ben.resolve_conflict(conflict, "overwrite").id)
    return ana, record


def test_each_deleted_revision_has_its_row_and_can_be_restored(qtbot, tmp_path):
    library, record = deleted_twice(tmp_path / "team")
    restored = []

    def restore(chosen):
        command = RestoreCommand(library, chosen, restored.append)
        command.redo()
        restored.append(command.restored)

    dialog = TrashDialog(library, restore)
    qtbot.addWidget(dialog)
    on_disk = PresetLibrary(library.folder, seed=False).trash()
    rows = [[dialog.table.item(r, c).text() for c in range(2)] for r in range(dialog.table.rowCount())]
    assert rows == [[r.name, str(r.revision)] for r in on_disk] and len(rows) == 2
    assert "2 deleted revision(s)" in dialog.note.text()
    older = min(on_disk, key=lambda r: r.revision)
    assert dialog.table.choose(lambda r: r.revision == older.revision)
    qtbot.mouseClick(dialog.restore_button, Qt.LeftButton)
    back = PresetLibrary(library.folder, seed=False).get(record.id)
    assert back.revision == older.revision and back.preset.temperature == 0.7
    assert [r.revision for r in dialog.table.records] == [max(r.revision for r in on_disk)]
