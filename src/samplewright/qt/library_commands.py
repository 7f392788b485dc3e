"""Undoable library changes for the window's ``QUndoStack``.

Every command acts through the core :class:`~samplewright.core.library.library.PresetLibrary`,
so each step is an ordinary save, delete or restore: undoing a change writes a
new revision (or restores from the trash) and nothing is ever erased. A
command that fails reports the library's message and marks itself obsolete
instead of raising inside Qt.
"""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtGui import QUndoCommand

from ..core.errors import LibraryError, SamplewrightError
from ..core.library.library import SaveConflict
from ..core.library.records import PresetRecord
from ..core.presets import Preset


class _LibraryCommand(QUndoCommand):
    """An undoable library change; failures go to ``report`` instead of raising inside Qt."""

    def __init__(self, library, text: str, report: Callable[[str], None]):
        super().__init__(text)
        self.library = library
        self.report = report

    def _safely(self, action: Callable[[], None]) -> None:
        try:
            action()
        except SamplewrightError as error:
            self.setObsolete(True)
            self.report(str(error))


class AddPresetCommand(_LibraryCommand):
    """Add a preset; undo moves it to the trash, redo brings it back."""

    def __init__(self, library, preset: Preset, report):
        super().__init__(library, f"add '{preset.name}'", report)
        self.preset = preset
        self.record_id: str | None = None

    def redo(self):
        def act():
            record = self.library.add(self.preset) if self.record_id is None else self.library.restore(self.record_id)
            self.record_id = record.id

        self._safely(act)

    def undo(self):
        self._safely(lambda: self.library.delete(self.record_id))


class DeletePresetCommand(_LibraryCommand):
    """Move a preset to the library's trash; undo restores it."""

    def __init__(self, library, record_id: str, report, restored: Callable[[str, str], None] | None = None):
        self.name = library.get(record_id).name
        super().__init__(library, f"delete '{self.name}'", report)
        self.record_id = record_id
        self.restored = restored

    def redo(self):
        self._safely(lambda: self.library.delete(self.record_id))

    def undo(self):
        def act():
            self.record_id = self.library.restore(self.record_id).id
            if self.restored is not None:
                self.restored(self.record_id, self.name)

        self._safely(act)


class RenamePresetCommand(_LibraryCommand):
    """Give a preset a new name."""

    def __init__(self, library, record_id: str, new_name: str, report):
        self.old_name = library.get(record_id).name
        super().__init__(library, f"rename '{self.old_name}' to '{new_name}'", report)
        self.record_id = record_id
        self.new_name = new_name

    def _rename(self, name: str) -> None:
        def act():
            record = self.library.get(self.record_id)
            self.library.save(record.edited(record.preset.replace(name=name)))

        self._safely(act)

    def redo(self):
        self._rename(self.new_name)

    def undo(self):
        self._rename(self.old_name)


class BringBackCommand(_LibraryCommand):
    """Save an earlier revision's preset as the newest revision; undo saves the replaced one again."""

    def __init__(self, library, earlier: PresetRecord, report):
        super().__init__(library, f"bring back revision {earlier.revision} of '{earlier.name}'", report)
        self.record_id = earlier.id
        self.earlier = earlier.preset
        self.replaced: Preset | None = None
        self.saved: PresetRecord | None = None

    def _save(self, preset: Preset) -> None:
        current = self.library.get(self.record_id)
        if self.replaced is None:
            self.replaced = current.preset
        try:
            self.saved = self.library.save(current.edited(preset))
        except SaveConflict as conflict:
            # Someone saved in between: take in their version and let the user look again.
            self.library.resolve_conflict(conflict, "take_theirs")
            raise LibraryError(
                f"'{current.name}' was changed by someone else meanwhile, so nothing was "
                "written. The history now shows their revision too; look again and bring "
                "back the revision you want."
            ) from None

    def redo(self):
        self._safely(lambda: self._save(self.earlier))

    def undo(self):
        self._safely(lambda: self._save(self.replaced))


class RestoreCommand(_LibraryCommand):
    """Bring a preset back from the library's trash; undo moves it to the trash again."""

    def __init__(self, library, trashed: PresetRecord, report):
        super().__init__(library, f"restore '{trashed.name}'", report)
        self.record_id = trashed.id
        self.revision: int | None = trashed.revision  # the chosen one of the preset's deleted revisions
        self.restored: PresetRecord | None = None

    def redo(self):
        def act():
            self.restored = self.library.restore(self.record_id, self.revision)
            self.record_id, self.revision = self.restored.id, self.restored.revision

        self._safely(act)

    def undo(self):
        self._safely(lambda: self.library.delete(self.record_id))
