"""Every message box, question and file chooser the window's parts show, in one object.

Controllers receive a :class:`QtPrompts` and never call ``QMessageBox`` or
``QFileDialog`` themselves, so a test can replace one question (an attribute of
the prompts object) with a scripted answer and drive the window without a
modal dialog blocking it.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

from PySide6.QtCore import QSettings, Qt
from PySide6.QtWidgets import QAbstractButton, QDialog, QFileDialog, QInputDialog, QMessageBox, QWidget

from .dialogs import ImportPreviewDialog, ask_conflict_choice

#: The window settings key of the folder the file choosers open in.
LAST_FOLDER_KEY = "files/last_folder"


@dataclasses.dataclass(frozen=True)
class ExportChoice:
    """What the user chose in the export dialog.

    Attributes:
        target: the target's name (``samplewright``, ``transformers``, ``vllm``, ``openai-request``).
        check: run the transformers check on the current passage after writing.
    """

    target: str
    check: bool = False


class QtPrompts:
    """Messages and questions shown over ``parent`` (the main window).

    Attributes:
        last_error: the text of the last problem shown (None before the first).
        settings: where the last folder a file chooser was used in is kept (None: not kept).
    """

    def __init__(self, parent: QWidget, settings: QSettings | None = None):
        self.parent = parent
        self.settings = settings
        self.last_error: str | None = None

    def last_folder(self) -> str:
        """The folder a file chooser used last ("" before the first use)."""
        value = self.settings.value(LAST_FOLDER_KEY, "") if self.settings is not None else ""
        return str(value) if value and Path(str(value)).is_dir() else ""

    def remember_folder(self, path: str | None) -> str | None:
        """Keep the folder of ``path`` (a file or a folder) as the next chooser's start; returns ``path``."""
        if path and self.settings is not None:
            folder = Path(path) if Path(path).is_dir() else Path(path).parent
            self.settings.setValue(LAST_FOLDER_KEY, str(folder))
        return path

    def show_error(self, message: str, detail: str | None = None) -> None:
        """Show a problem in a message box (``detail``, when given, is the message and the first is the title)."""
        title, text = ("Samplewright", message) if detail is None else (message, detail)
        self.last_error = text
        QMessageBox.warning(self.parent, title, text)

    def show_info(self, title: str, text: str) -> None:
        """Show an explanation in a message box."""
        QMessageBox.information(self.parent, title, text)

    def ask_open_path(self, title: str, file_filter: str, folder: str = "") -> str | None:
        """Ask for a file to open, starting in ``folder`` (default: the last folder used); None when cancelled."""
        start = folder if folder and Path(folder).is_dir() else self.last_folder()
        path, _ = QFileDialog.getOpenFileName(self.parent, title, start, file_filter)
        return self.remember_folder(path or None)

    def ask_save_path(self, title: str, file_filter: str, suggested: str = "") -> str | None:
        """Ask for a file to write; None when cancelled."""
        last = self.last_folder()
        start = str(Path(last) / suggested) if last and not Path(suggested).is_absolute() else suggested
        path, _ = QFileDialog.getSaveFileName(self.parent, title, start, file_filter)
        return self.remember_folder(path or None)

    def choose_export_target(self, presets, add_closest) -> ExportChoice | None:
        """Show the export dialog (targets, each preset's verdict and reasons); the chosen target
        and whether to check it afterwards, or None when cancelled. ``add_closest(preset)`` is
        called for each closest expressible variant the user asks to audition."""
        from .export_dialog import ExportDialog

        dialog = ExportDialog(presets, transformers_check=True, parent=self.parent)
        dialog.closest_requested.connect(add_closest)
        if dialog.exec() != QDialog.DialogCode.Accepted:
            return None
        return ExportChoice(dialog.target(), dialog.check_requested())

    def ask_folder(self, title: str) -> str | None:
        """Ask for a folder; None when cancelled."""
        return self.remember_folder(QFileDialog.getExistingDirectory(self.parent, title, self.last_folder()) or None)

    def ask_text(self, title: str, label: str, text: str) -> str | None:
        """Ask for one line of text; None when cancelled."""
        value, ok = QInputDialog.getText(self.parent, title, label, text=text)
        return value if ok else None

    def ask_unsaved(self, name: str, problem: str | None) -> str:
        """Ask about unsaved edits: "save", "discard" or "cancel".

        Args:
            name: the edited preset's name.
            problem: why the edits cannot be saved as they are, or None.
        """
        box = QMessageBox(
            QMessageBox.Icon.Question,
            "Unsaved changes",
            f"'{name}' has changes that are not saved.",
            parent=self.parent,
        )
        if problem is None:
            box.setInformativeText("Save them to the library, discard them, or cancel and keep editing.")
            box.setStandardButtons(
                QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel
            )
            box.setDefaultButton(QMessageBox.StandardButton.Save)
        else:
            box.setInformativeText(
                f"They cannot be saved as they are: {problem}\n\nDiscard them, or cancel and correct the field."
            )
            box.setStandardButtons(QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel)
            box.setDefaultButton(QMessageBox.StandardButton.Cancel)
        answer = box.exec()
        if answer == QMessageBox.StandardButton.Save:
            return "save"
        return "discard" if answer == QMessageBox.StandardButton.Discard else "cancel"

    def offer_copy(self, title: str, text: str) -> bool:
        """Show why a save failed; True when the user wants to save a copy as a file."""
        box = QMessageBox(QMessageBox.Icon.Warning, title, text, parent=self.parent)
        copy = box.addButton("Save a copy as file…", QMessageBox.ButtonRole.AcceptRole)
        box.addButton("Not now", QMessageBox.ButtonRole.RejectRole)
        box.setDefaultButton(copy)
        box.exec()
        return box.clickedButton() is copy

    def ask_conflict_choice(self, message: str) -> str | None:
        """Ask how to settle a save conflict; a core choice name, or None for "not now"."""
        return ask_conflict_choice(self.parent, message)

    def confirm_import(self, plan, source: str) -> dict | None:
        """Show the import preview; the chosen conflict actions, or None when cancelled."""
        dialog = ImportPreviewDialog(plan, source, self.parent)
        return dialog.choices() if dialog.exec() else None

    def ask_add_starters(self, folder: Path, other_files: int) -> str:
        """Ask whether a folder without presets gets the starter presets: "add", "empty" or "cancel"."""
        box = QMessageBox(
            QMessageBox.Icon.Question,
            "No presets here",
            "This folder has no presets. Add the starter presets?",
            parent=self.parent,
        )
        detail = f"{folder}\n\nThe starter presets are examples to tune from; you can delete them later."
        if other_files:
            detail += f" The folder holds {other_files} other file(s); they are left as they are."
        box.setInformativeText(detail)
        add = box.addButton("Add the starter presets", QMessageBox.ButtonRole.AcceptRole)
        empty = box.addButton("Leave it empty", QMessageBox.ButtonRole.NoRole)
        box.addButton(QMessageBox.StandardButton.Cancel)
        box.setDefaultButton(add)
        box.exec()
        answers: dict[QAbstractButton, str] = {add: "add", empty: "empty"}
        return answers.get(box.clickedButton(), "cancel")

    def open_dialog(self, dialog: QDialog) -> QDialog:
        """Show ``dialog`` window-modal without blocking, and return it (tests drive it from there)."""
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.open()
        return dialog
