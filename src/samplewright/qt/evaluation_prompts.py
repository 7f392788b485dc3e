"""The questions the evaluation screen asks the user, in one replaceable object (tests answer them)."""

from __future__ import annotations

from PySide6.QtWidgets import QFileDialog, QInputDialog, QMessageBox, QWidget


class Prompts:
    """Dialogs for names, texts, files and errors, parented to ``parent``."""

    def __init__(self, parent: QWidget):
        self.parent = parent

    def ask_text(self, title: str, label: str, text: str = "") -> str | None:
        """One line of text, or None when cancelled."""
        value, ok = QInputDialog.getText(self.parent, title, label, text=text)
        return value if ok else None

    def ask_long_text(self, title: str, label: str) -> str | None:
        """Several lines of text (a pasted passage), or None."""
        value, ok = QInputDialog.getMultiLineText(self.parent, title, label)
        return value if ok else None

    def ask_open_paths(self, title: str, file_filter: str) -> list[str]:
        """Files to open (possibly none)."""
        paths, _ = QFileDialog.getOpenFileNames(self.parent, title, "", file_filter)
        return list(paths)

    def ask_open_path(self, title: str, file_filter: str) -> str | None:
        """One file to open, or None."""
        path, _ = QFileDialog.getOpenFileName(self.parent, title, "", file_filter)
        return path or None

    def ask_save_path(self, title: str, file_filter: str, suggested: str = "") -> str | None:
        """Where to save, or None."""
        path, _ = QFileDialog.getSaveFileName(self.parent, title, suggested, file_filter)
        return path or None

    def confirm(self, title: str, question: str) -> bool:
        """Yes or no."""
        return QMessageBox.question(self.parent, title, question) == QMessageBox.Yes

    def show_error(self, message: str) -> None:
        """One message the user must see."""
        QMessageBox.warning(self.parent, "Samplewright", message)
