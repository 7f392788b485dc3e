"""The passage sets of the library: list, create, rename, delete (to the trash), add files,
paste a passage, preview, and the demo sets as starters.

Signals:
    sets_changed(): the list was read again.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QPlainTextEdit,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import SamplewrightError
from ..core.evaluation.passage_sets import PassageSet, PassageSets, demo_sets
from ..core.framing import INSTRUCTION, Framing
from .evaluation_prompts import Prompts


class PassageSetPanel(QWidget):
    """The sets (checkable: the checked ones are evaluated) and the chosen set's passages."""

    sets_changed = Signal()

    def __init__(self, library_dir: Path, prompts: Prompts, parent: QWidget | None = None):
        super().__init__(parent)
        self.sets = PassageSets(library_dir)
        self.prompts = prompts
        self.list = QListWidget()
        self.list.setAccessibleName("Passage sets")
        self.passages = QListWidget()
        self.passages.setAccessibleName("Passages of the chosen set")
        self.preview = QPlainTextEdit()
        self.preview.setReadOnly(True)
        self.preview.setAccessibleName("Passage preview")
        self.framing = QLabel("")
        self.framing.setWordWrap(True)
        self.buttons: dict[str, QPushButton] = {}
        row1, row2 = QHBoxLayout(), QHBoxLayout()
        for key, text, slot, row in (
            ("new", "New set…", self.create_set, row1),
            ("rename", "Rename…", self.rename_set, row1),
            ("delete", "Delete", self.delete_set, row1),
            ("files", "Add files…", self.add_files, row2),
            ("paste", "Paste passage…", self.paste_passage, row2),
            ("demo", "Add demo sets", self.add_demo_sets, row2),
            ("framing", "How to ask…", self.edit_framing, row1),
        ):
            button = QPushButton(text)
            button.clicked.connect(slot)
            row.addWidget(button)
            self.buttons[key] = button
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("Passage sets (tick the ones to run)"))
        layout.addWidget(self.list, 2)
        layout.addLayout(row1)
        layout.addLayout(row2)
        layout.addWidget(self.framing)
        layout.addWidget(self.passages, 1)
        layout.addWidget(self.preview, 2)
        self.list.currentItemChanged.connect(lambda *_: self._show_set())
        self.passages.currentItemChanged.connect(lambda *_: self._show_passage())
        self.reload()

    # -- reading -------------------------------------------------------------------------------

    def reload(self, select: str | None = None) -> None:
        """Read the sets again; library sets first, then the demo sets the library lacks."""
        checked = set(self.checked_names())
        current = select or (self.list.currentItem().text() if self.list.currentItem() else None)
        self.list.clear()
        names = self.sets.names() if self.sets.library_dir.is_dir() else []
        entries = [(n, False) for n in names] + [(d.name, True) for d in demo_sets() if d.name not in names]
        for name, demo in entries:
            item = QListWidgetItem(name)
            item.setData(Qt.UserRole, demo)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(Qt.Checked if name in checked else Qt.Unchecked)
            item.setToolTip("a demo set (Add demo sets copies it into the library)" if demo else "in the library")
            if demo:
                item.setForeground(Qt.darkGray)
            self.list.addItem(item)
            if name == current:
                self.list.setCurrentItem(item)
        if self.list.currentItem() is None and self.list.count():
            self.list.setCurrentRow(0)
        self.sets_changed.emit()

    def current_set(self) -> PassageSet | None:
        """The highlighted set, read now."""
        item = self.list.currentItem()
        return self._read(item) if item is not None else None

    def _read(self, item: QListWidgetItem) -> PassageSet | None:
        if item.data(Qt.UserRole):
            return next((d for d in demo_sets() if d.name == item.text()), None)
        try:
            return self.sets.get(item.text())
        except SamplewrightError as exc:
            self.prompts.show_error(str(exc))
            return None

    def checked_names(self) -> list[str]:
        """The names of the ticked sets."""
        return [
            self.list.item(r).text() for r in range(self.list.count()) if self.list.item(r).checkState() == Qt.Checked
        ]

    def check(self, name: str, on: bool = True) -> None:
        """Tick (or untick) a set by name."""
        for r in range(self.list.count()):
            if self.list.item(r).text() == name:
                self.list.item(r).setCheckState(Qt.Checked if on else Qt.Unchecked)

    def checked_sets(self) -> list[PassageSet]:
        """The ticked sets, read now."""
        items = [self.list.item(r) for r in range(self.list.count())]
        found = [self._read(i) for i in items if i.checkState() == Qt.Checked]
        return [s for s in found if s is not None]

    def _show_set(self) -> None:
        self.passages.clear()
        self.preview.clear()
        chosen = self.current_set()
        item = self.list.currentItem()
        demo = bool(item and item.data(Qt.UserRole))
        for key in ("rename", "delete", "files", "paste", "framing"):
            self.buttons[key].setEnabled(chosen is not None and not demo)
        if chosen is None:
            self.framing.setText("")
            return
        self.framing.setText(f"How the model is asked: {chosen.framing.describe()}")
        for passage in chosen.passages:
            entry = QListWidgetItem(passage.name)
            entry.setData(Qt.UserRole, passage.text)
            self.passages.addItem(entry)
        for skipped in chosen.skipped:
            entry = QListWidgetItem(f"{skipped.name} — skipped: {skipped.reason}")
            entry.setForeground(Qt.darkRed)
            self.passages.addItem(entry)
        if self.passages.count():
            self.passages.setCurrentRow(0)

    def _show_passage(self) -> None:
        item = self.passages.currentItem()
        self.preview.setPlainText(item.data(Qt.UserRole) or "" if item is not None else "")

    # -- writing -------------------------------------------------------------------------------

    def _guard(self, job) -> None:
        try:
            job()
        except SamplewrightError as exc:
            self.prompts.show_error(str(exc))

    def create_set(self) -> None:
        """Ask for a name and create an empty set."""
        name = self.prompts.ask_text("New passage set", "Name of the set (one kind of writing):")
        if name:
            self._guard(lambda: (self.sets.create(name), self.reload(select=name.strip())))

    def rename_set(self) -> None:
        """Rename the highlighted set."""
        chosen = self.current_set()
        if chosen is None:
            return
        name = self.prompts.ask_text("Rename passage set", "New name:", chosen.name)
        if name and name != chosen.name:
            self._guard(lambda: (self.sets.rename(chosen.name, name), self.reload(select=name.strip())))

    def delete_set(self) -> None:
        """Move the highlighted set to the library's trash."""
        chosen = self.current_set()
        if chosen is not None and self.prompts.confirm(
            "Delete passage set", f"Move the set {chosen.name!r} to the library's trash?"
        ):
            self._guard(lambda: (self.sets.delete(chosen.name), self.reload()))

    def add_files(self) -> None:
        """Copy UTF-8 .txt/.md files into the highlighted set."""
        chosen = self.current_set()
        if chosen is None:
            return
        for path in self.prompts.ask_open_paths("Add passages", "Passages (*.txt *.md)"):
            self._guard(lambda p=path: self.sets.add_file(chosen.name, p))
        self.reload(select=chosen.name)

    def paste_passage(self) -> None:
        """Ask for a name and a text and add it to the highlighted set."""
        chosen = self.current_set()
        if chosen is None:
            return
        name = self.prompts.ask_text("Paste a passage", "Name of the passage:")
        if not name:
            return
        text = self.prompts.ask_long_text("Paste a passage", "The passage:")
        if text:
            self._guard(lambda: self.sets.add_passage(chosen.name, name, text))
            self.reload(select=chosen.name)

    def edit_framing(self) -> None:
        """Ask how the model is asked for this set: an instruction (with the model's chat
        template) or, left empty, plain continuation."""
        chosen = self.current_set()
        if chosen is None:
            return
        instruction = self.prompts.ask_text(
            "How the assistant is asked",
            "Instruction, with {passage} where the passage goes (empty: plain continuation):",
            chosen.framing.instruction,
        )
        if instruction is None:
            return
        if not instruction.strip():
            framing = Framing()
        else:
            system = self.prompts.ask_text(
                "How the assistant is asked", "System message (optional):", chosen.framing.system
            )
            if system is None:
                return
            framing = Framing(INSTRUCTION, system, instruction)
        self._guard(lambda: self.sets.set_framing(chosen.name, framing))
        self.reload(select=chosen.name)

    def add_demo_sets(self) -> None:
        """Copy the demo sets into the library."""
        self._guard(lambda: self.sets.add_demo_sets())
        self.reload()
