"""The Help menu's windows: the user guide (the README's sections), the keyboard
shortcuts and About.

About is the installer's :mod:`.about_dialog`.
"""

from __future__ import annotations

import importlib.metadata
from collections.abc import Sequence
from pathlib import Path

from PySide6.QtWidgets import QDialog, QHeaderView, QTableWidget, QTableWidgetItem, QTextBrowser, QVBoxLayout, QWidget

#: The README sections a user needs in the window (the developers' section stays in the file).
GUIDE_SKIPS = ("For developers",)


def guide_markdown() -> str:
    """The README as Markdown, without its developer sections: the checkout's file when there is
    one (it is newer), else the copy kept in the installed package's metadata."""
    readme = Path(__file__).resolve().parents[3] / "README.md"
    try:
        text = readme.read_text(encoding="utf-8")
    except OSError:
        text = importlib.metadata.metadata("samplewright").get_payload() or ""  # type: ignore[attr-defined]
    kept, skipping = [], False
    for line in text.splitlines():
        if line.startswith("## "):
            skipping = line[3:].strip() in GUIDE_SKIPS
        if not skipping and not line.startswith("![") and "docs/screenshots/" not in line:
            kept.append(line)
    return "\n".join(kept) or "The user guide is the README file that comes with Samplewright."


def _dialog(parent: QWidget | None, title: str, body: QWidget, size: tuple[int, int]) -> QDialog:
    dialog = QDialog(parent)
    dialog.setWindowTitle(title)
    layout = QVBoxLayout(dialog)
    layout.addWidget(body)
    dialog.resize(*size)
    dialog.show()
    return dialog


def show_guide(parent: QWidget | None = None) -> QDialog:
    """Open the user guide in a window of its own (not modal: it can stay open beside the work)."""
    browser = QTextBrowser()
    browser.setOpenExternalLinks(True)
    browser.setMarkdown(guide_markdown())
    browser.setAccessibleName("User guide")
    return _dialog(parent, "Samplewright — user guide", browser, (760, 640))


def show_shortcuts(rows: Sequence[tuple[str, str, str]], parent: QWidget | None = None) -> QDialog:
    """List the keyboard shortcuts: ``rows`` of (keys, command, what it does)."""
    table = QTableWidget(len(rows), 3)
    table.setHorizontalHeaderLabels(["Keys", "Command", "What it does"])
    for r, row in enumerate(rows):
        for c, text in enumerate(row):
            item = QTableWidgetItem(text)
            item.setToolTip(text)
            table.setItem(r, c, item)
    table.verticalHeader().hide()
    table.setWordWrap(True)
    table.horizontalHeader().setSectionResizeMode(2, QHeaderView.ResizeMode.Stretch)
    table.resizeColumnsToContents()
    table.resizeRowsToContents()
    table.setAccessibleName("Keyboard shortcuts")
    return _dialog(parent, "Keyboard shortcuts", table, (720, 520))


def show_about(parent: QWidget | None = None) -> None:
    """The About box (the installer's :mod:`.about_dialog`: version, licences, notices)."""
    from .about_dialog import show_about as about

    about(parent)
