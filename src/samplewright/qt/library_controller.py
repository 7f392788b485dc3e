"""The shared library over time: following the folder while colleagues edit it,
a preset's history, comparing two presets, the trash, and the user's own
favourites. Bringing back a revision and restoring a deleted preset go through
the undo stack."""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtCore import QObject
from PySide6.QtGui import QUndoStack
from PySide6.QtWidgets import QStatusBar

from ..core.library.draft import Draft
from ..core.library.records import PresetRecord
from ..core.library.user_state import UserState
from .difference_view import CompareDialog
from .library_commands import BringBackCommand, RestoreCommand
from .library_dialogs import HistoryDialog, TrashDialog
from .library_folder import LibraryInUse
from .library_panel import QtLibraryList
from .library_watch import LibraryWatch, describe_changes
from .prompts import QtPrompts


class Favourites:
    """The preset list's view of the user's favourites (kept in their own state file, never shared)."""

    def __init__(self, user_state: UserState, prompts: QtPrompts):
        self.user_state, self.prompts = user_state, prompts

    def is_favourite(self, record_id: str) -> bool:
        """Whether ``record_id`` is one of this user's favourites."""
        return self.user_state.is_favourite(record_id)

    def set_favourite(self, record_id: str, on: bool) -> None:
        """Mark or unmark a favourite and keep it in the user's state file."""
        self.user_state.set_favourite(record_id, on)
        try:
            self.user_state.save()
        except Exception as error:  # LibraryError: the config folder is not writable
            self.prompts.show_error("Favourite not kept", str(error))


class LibraryController(QObject):
    """Follows the library folder and opens the history, comparison and trash dialogs.

    Args:
        in_use: which library the window shows (the file watch follows it).
        draft: the editor's draft (bringing back a revision of the edited preset asks about edits first).
        settle: asks about unsaved edits; False when the user cancelled.
        current_record: the highlighted preset's record, or None.
        library_list, undo_stack: the widgets it drives.
        prompts, status: where problems and notes are shown.
    """

    def __init__(
        self,
        in_use: LibraryInUse,
        draft: Draft,
        settle: Callable[[], bool],
        current_record: Callable[[], PresetRecord | None],
        library_list: QtLibraryList,
        undo_stack: QUndoStack,
        prompts: QtPrompts,
        status: QStatusBar,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.in_use, self.draft, self.settle, self.current_record = in_use, draft, settle, current_record
        self.library_list, self.undo_stack, self.prompts, self.status = library_list, undo_stack, prompts, status
        self.watch = LibraryWatch(in_use.library, parent=self, batched=library_list.batched)
        self.watch.checked.connect(self._on_library_checked)
        self.watch.failed.connect(self._on_library_unreadable)
        self.watch.recovered.connect(lambda: self.status.showMessage("The library folder can be read again.", 8000))
        in_use.switched.connect(self.watch.set_library)

    def _on_library_checked(self, report, names_before: dict) -> None:
        if report:
            self.status.showMessage(describe_changes(report, self.in_use.library, names_before), 15000)

    def _on_library_unreadable(self, message: str) -> None:
        # No message box: this comes from the file watch, not from something the user did.
        self.status.showMessage(f"{message} The presets shown are as last read.", 30000)

    def rescan_library(self) -> None:
        """Re-read the library folder now to pick up colleagues' changes (F5)."""
        report = self.watch.check_now()
        if report is None:
            self.prompts.show_error("The library could not be read", self.watch.problem)
        elif not report:
            self.status.showMessage("Library reloaded: nothing changed.", 5000)

    # -- dialogs ---------------------------------------------------------------------------
    def show_history(self) -> HistoryDialog | None:
        """Open the highlighted preset's history (Ctrl+H)."""
        record = self.current_record()
        if record is None:
            return None
        dialog = HistoryDialog(self.in_use.library, record.id, self.bring_back_revision, self.prompts.parent)
        self.prompts.open_dialog(dialog)
        return dialog

    def compare_presets(self) -> CompareDialog | None:
        """Open the side-by-side comparison of the highlighted preset with another one."""
        record = self.current_record()
        if record is None:
            return None
        ticked = [i for i in self.library_list.chosen if i != record.id]
        dialog = CompareDialog(self.in_use.library, record.id, ticked[0] if ticked else None, self.prompts.parent)
        self.prompts.open_dialog(dialog)
        return dialog

    def show_trash(self) -> TrashDialog:
        """Open the list of deleted presets (Ctrl+Shift+T)."""
        dialog = TrashDialog(self.in_use.library, self.restore_deleted, self.prompts.parent)
        self.prompts.open_dialog(dialog)
        return dialog

    # -- changes (undoable) -----------------------------------------------------------------
    def bring_back_revision(self, earlier: PresetRecord) -> None:
        """Save an earlier revision's settings as the preset's newest revision (Ctrl+Z undoes it)."""
        if self.draft.is_editing(earlier.id) and not self.settle():
            return
        command = BringBackCommand(self.in_use.library, earlier, self._report_library_error)
        self.undo_stack.push(command)
        if command.saved is not None:
            self.status.showMessage(
                f"Brought back revision {earlier.revision} of '{earlier.name}' as "
                f"revision {command.saved.revision}. Undo with Ctrl+Z.",
                8000,
            )

    def restore_deleted(self, trashed: PresetRecord) -> None:
        """Bring a deleted preset back from the trash and highlight it (Ctrl+Z deletes it again)."""
        command = RestoreCommand(self.in_use.library, trashed, self._report_library_error)
        self.undo_stack.push(command)
        if command.restored is not None:
            if not self.draft.dirty:  # a highlight change would first ask about the edits
                self.library_list.select(command.restored.id)
            self.status.showMessage(f"Restored '{command.restored.name}'. Undo with Ctrl+Z.", 8000)

    def _report_library_error(self, message: str) -> None:
        self.prompts.show_error("The library was not changed", message)
