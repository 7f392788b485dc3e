"""The window's view of the shared library over time: following the folder
while colleagues edit it, a preset's history, comparing two presets, the
trash, and the user's own favourites. Bringing back a revision and restoring
a deleted preset go through the undo stack."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog

from ..core.library.records import PresetRecord
from .difference_view import CompareDialog
from .library_commands import BringBackCommand, RestoreCommand
from .library_dialogs import HistoryDialog, TrashDialog
from .library_watch import LibraryWatch, describe_changes


class LibraryActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`."""

    def _init_library_watch(self) -> None:
        self.library_watch = LibraryWatch(self.library, parent=self, batched=self.library_list.batched)
        self.library_watch.checked.connect(self._on_library_checked)
        self.library_watch.failed.connect(self._on_library_unreadable)
        self.library_watch.recovered.connect(
            lambda: self.statusBar().showMessage("The library folder can be read again.", 8000)
        )

    def _on_library_checked(self, report, names_before: dict) -> None:
        if report:
            self.statusBar().showMessage(describe_changes(report, self.library, names_before), 15000)

    def _on_library_unreadable(self, message: str) -> None:
        # No message box: this comes from the file watch, not from something the user did.
        self.statusBar().showMessage(f"{message} The presets shown are as last read.", 30000)

    def rescan_library(self) -> None:
        """Re-read the library folder now to pick up colleagues' changes (F5)."""
        report = self.library_watch.check_now()
        if report is None:
            self.show_error("The library could not be read", self.library_watch.problem)
        elif not report:
            self.statusBar().showMessage("Library reloaded: nothing changed.", 5000)

    # -- favourites (the library list's view of UserState) -------------------------------
    def is_favourite(self, record_id: str) -> bool:
        """Whether ``record_id`` is one of this user's favourites."""
        return self.user_state.is_favourite(record_id)

    def set_favourite(self, record_id: str, on: bool) -> None:
        """Mark or unmark a favourite and keep it in the user's state file."""
        self.user_state.set_favourite(record_id, on)
        try:
            self.user_state.save()
        except Exception as error:  # LibraryError: the config folder is not writable
            self.show_error("Favourite not kept", str(error))

    # -- dialogs ---------------------------------------------------------------------------
    def open_dialog(self, dialog: QDialog) -> QDialog:
        """Show ``dialog`` window-modal without blocking, and return it (tests drive it from there)."""
        dialog.setAttribute(Qt.WA_DeleteOnClose)
        dialog.open()
        return dialog

    def show_history(self) -> HistoryDialog | None:
        """Open the highlighted preset's history (Ctrl+H)."""
        record = self._current_record()
        if record is None:
            return None
        return self.open_dialog(HistoryDialog(self.library, record.id, self.bring_back_revision, self))

    def compare_presets(self) -> CompareDialog | None:
        """Open the side-by-side comparison of the highlighted preset with another one."""
        record = self._current_record()
        if record is None:
            return None
        ticked = [i for i in self.library_list.chosen if i != record.id]
        return self.open_dialog(CompareDialog(self.library, record.id, ticked[0] if ticked else None, self))

    def show_trash(self) -> TrashDialog:
        """Open the list of deleted presets (Ctrl+Shift+T)."""
        return self.open_dialog(TrashDialog(self.library, self.restore_deleted, self))

    # -- changes (undoable) -----------------------------------------------------------------
    def bring_back_revision(self, earlier: PresetRecord) -> None:
        """Save an earlier revision's settings as the preset's newest revision (Ctrl+Z undoes it)."""
        edited = self._edited_record
        if edited is not None and edited.id == earlier.id and not self.settle_draft():
            return
        command = BringBackCommand(self.library, earlier, self._report_library_error)
        self.undo_stack.push(command)
        if command.saved is not None:
            self.statusBar().showMessage(
                f"Brought back revision {earlier.revision} of '{earlier.name}' as "
                f"revision {command.saved.revision}. Undo with Ctrl+Z.",
                8000,
            )

    def restore_deleted(self, trashed: PresetRecord) -> None:
        """Bring a deleted preset back from the trash and highlight it (Ctrl+Z deletes it again)."""
        command = RestoreCommand(self.library, trashed, self._report_library_error)
        self.undo_stack.push(command)
        if command.restored is not None:
            if not self.editor.is_dirty():  # a highlight change would first ask about the edits
                self.library_list.select(command.restored.id)
            self.statusBar().showMessage(f"Restored '{command.restored.name}'. Undo with Ctrl+Z.", 8000)

    def _report_library_error(self, message: str) -> None:
        self.show_error("The library was not changed", message)
