"""The passage the presets continue: typed, pasted or opened from a file.

Shows how many tokens the passage has and, when it is longer than the
model's context, shades the start that the model will not see. A compact
row below says how the model is asked: plain continuation, or an instruction
(with an optional system message) in the model's own chat template.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QColor, QTextCharFormat, QTextCursor
from PySide6.QtWidgets import (
    QComboBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QMenu,
    QPlainTextEdit,
    QTextEdit,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from ..core.framing import CONTINUATION, INSTRUCTION, MAX_FRAMING_TEXT, PLACEHOLDER, Framing

MAX_RECENT = 8
COUNT_DELAY_MS = 400
CUT_SHADE = "#D9D9D9"
NO_TEMPLATE = "This model has no chat template, so it can only continue the passage."
FRAMING_CHOICES = ((CONTINUATION, "Continue the passage"), (INSTRUCTION, "Follow an instruction"))


class QtPassagePanel(QWidget):
    """The passage editor with its file and length information.

    Signals:
        passage_settled(str): the text stopped changing for a moment (time to count tokens).
        open_requested(str): a recent file was chosen from the menu.
        framing_changed(): the way the model is asked changed (kind, instruction or system message).
    """

    passage_settled = Signal(str)
    open_requested = Signal(str)
    framing_changed = Signal()

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.source: str | None = None
        self.recent: list[str] = []
        self.editor = QPlainTextEdit()
        self.editor.setAccessibleName("Passage")
        self.editor.setPlaceholderText(
            "Type or paste the draft passage here, or open a .txt or .md file "
            "(Ctrl+O). Each preset writes its continuation of this text."
        )
        self.editor.setToolTip("The text every preset continues")
        self.title = QLabel("<b>Passage</b>")
        self.info = QLabel("")
        self.info.setAccessibleName("Passage length")
        self.info.setWordWrap(True)
        self.info.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.open_button = QToolButton()
        self.recent_button, self.recent_menu = self._menu_button("Recent", "Open a passage file used before")
        self.examples_button, self.examples_menu = self._menu_button("Examples", "Fill in one of the example passages")
        header = QHBoxLayout()
        header.addWidget(self.title)
        header.addWidget(self.info, 1)
        header.addWidget(self.open_button)
        header.addWidget(self.recent_button)
        header.addWidget(self.examples_button)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addLayout(header)
        layout.addWidget(self.editor, 1)
        layout.addLayout(self._framing_row())
        self._settle = QTimer(self)
        self._settle.setSingleShot(True)
        self._settle.setInterval(COUNT_DELAY_MS)
        self._settle.timeout.connect(lambda: self.passage_settled.emit(self.text()))
        self.editor.textChanged.connect(self._on_text_changed)

    def _framing_row(self) -> QHBoxLayout:
        """The compact "how the model is asked" row: a choice, then the instruction and system texts."""
        self.framing_choice = QComboBox()
        self.framing_choice.setAccessibleName("How the model is asked")
        for kind, label in FRAMING_CHOICES:
            self.framing_choice.addItem(label, kind)
        self.instruction_edit = QLineEdit()
        self.instruction_edit.setAccessibleName("Instruction")
        self.instruction_edit.setPlaceholderText(f"Instruction, e.g. Write a reply to this letter: {PLACEHOLDER}")
        self.instruction_edit.setToolTip(
            f"What the model is asked to do; {PLACEHOLDER} marks where the passage goes "
            "(without it the passage follows the instruction)"
        )
        self.system_edit = QLineEdit()
        self.system_edit.setAccessibleName("System message")
        self.system_edit.setPlaceholderText("System message (optional)")
        for edit in (self.instruction_edit, self.system_edit):
            edit.setMaxLength(MAX_FRAMING_TEXT)
            edit.textChanged.connect(lambda _=None: self.framing_changed.emit())
        self.framing_note = QLabel("")
        self.framing_note.setAccessibleName("Why instructions are unavailable")
        self.framing_note.setVisible(False)
        row = QHBoxLayout()
        row.addWidget(QLabel("Ask:"))
        row.addWidget(self.framing_choice)
        row.addWidget(self.instruction_edit, 2)
        row.addWidget(self.system_edit, 1)
        row.addWidget(self.framing_note, 1)
        self.framing_choice.currentIndexChanged.connect(self._on_framing_choice)
        self._on_framing_choice()
        return row

    def _on_framing_choice(self) -> None:
        instructed = self.framing_choice.currentData() == INSTRUCTION
        self.instruction_edit.setVisible(instructed)
        self.system_edit.setVisible(instructed)
        self.framing_changed.emit()

    def set_chat_template(self, available: bool) -> None:
        """Offer instructions only when the loaded model has a chat template; otherwise fall back to
        continuation (the typed instruction is kept) and say why."""
        if not available:
            self.framing_choice.setCurrentIndex(0)
        self.framing_choice.setEnabled(available)
        self.framing_choice.setToolTip("" if available else NO_TEMPLATE)
        self.framing_note.setText("" if available else NO_TEMPLATE)
        self.framing_note.setVisible(not available)

    def framing_problem(self) -> str | None:
        """Why the chosen framing cannot be used yet, or None."""
        if self.framing_choice.currentData() == INSTRUCTION and not self.instruction_edit.text().strip():
            return "The instruction is empty: write what the model should do, or choose Continue the passage."
        return None

    def framing(self) -> Framing:
        """How the model is asked (plain continuation while the instruction is unusable)."""
        if self.framing_choice.currentData() != INSTRUCTION or self.framing_problem():
            return Framing()
        return Framing(INSTRUCTION, self.system_edit.text(), self.instruction_edit.text())

    def set_framing(self, framing: Framing) -> None:
        """Show ``framing`` (an instruction is only selectable while the choice is enabled)."""
        self.instruction_edit.setText(framing.instruction)
        self.system_edit.setText(framing.system)
        if self.framing_choice.isEnabled():
            self.framing_choice.setCurrentIndex(self.framing_choice.findData(framing.kind))

    def _menu_button(self, text: str, tip: str) -> tuple[QToolButton, QMenu]:
        """A tool button that opens its own menu at once."""
        button, menu = QToolButton(), QMenu(self)
        button.setText(text)
        button.setPopupMode(QToolButton.InstantPopup)
        button.setToolTip(tip)
        button.setMenu(menu)
        return button, menu

    def set_open_action(self, action) -> None:
        """Show the window's "open passage" action as this panel's button."""
        self.open_button.setDefaultAction(action)

    def text(self) -> str:
        """The passage as typed."""
        return self.editor.toPlainText()

    def set_text(self, text: str, source: str | None = None) -> None:
        """Replace the passage; ``source`` is the file it came from (added to the recent list)."""
        self.source = source
        self.editor.setPlainText(text)
        if source:
            self.remember(source)
        self.title.setText(f"<b>Passage</b> — {Path(source).name}" if source else "<b>Passage</b>")

    def remember(self, path: str) -> None:
        """Put ``path`` first in the recent list."""
        self.recent = [path] + [p for p in self.recent if p != path]
        self.set_recent(self.recent[:MAX_RECENT])

    def set_recent(self, paths: list[str]) -> None:
        """Show ``paths`` in the Recent menu."""
        self.recent = list(paths)[:MAX_RECENT]
        self.recent_menu.clear()
        for path in self.recent:
            action = self.recent_menu.addAction(path)
            action.triggered.connect(lambda _=False, p=path: self.open_requested.emit(p))
        self.recent_button.setEnabled(bool(self.recent))

    def set_examples(self, examples: dict[str, str], choose: Callable[[str, str], None]) -> None:
        """Offer ``examples`` (title → text); ``choose(title, text)`` is called on a pick."""
        self.examples_menu.clear()
        for title, text in examples.items():
            action = self.examples_menu.addAction(title)
            action.triggered.connect(lambda _=False, t=title, x=text: choose(t, x))
        self.examples_button.setEnabled(bool(examples))

    def _on_text_changed(self) -> None:
        self.info.setText("counting tokens…" if self.text().strip() else "empty")
        self._settle.start()

    def show_note(self, text: str) -> None:
        """Say why no token count is shown (no model yet, or counting failed) and drop the shading."""
        self.info.setText(text)
        self.editor.setExtraSelections([])

    def show_length(self, tokens: int, dropped: int, context: int, cut_at: int | None, framed: bool = False) -> None:
        """Show the token count, and shade the part of the passage left out when it is too long.

        Args:
            tokens: tokens the model reads.
            dropped: tokens cut from the start to fit the context.
            context: how many passage tokens the model reads at most.
            cut_at: character offset in the passage where the kept part starts, if the cut reaches it.
            framed: the count includes the instruction and the chat template around the passage.
        """
        what = "tokens with the instruction" if framed else "tokens"
        if dropped:
            left_out = "the shaded start of the passage is" if cut_at else "the start of the instruction is"
            self.info.setText(
                f"{tokens + dropped:,} {what} — longer than the {context:,} a prompt may use: "
                f"the first {dropped:,} are left out ({left_out} not read)."
            )
        else:
            self.info.setText(f"{tokens:,} {what} (a prompt may use up to {context:,})")
        selections = []
        if dropped and cut_at:
            shade = QTextEdit.ExtraSelection()
            fmt = QTextCharFormat()
            fmt.setBackground(QColor(CUT_SHADE))
            fmt.setForeground(QColor("#6E6E6E"))
            shade.format = fmt
            cursor = QTextCursor(self.editor.document())
            cursor.setPosition(0)
            cursor.setPosition(qt_position(self.text(), cut_at), QTextCursor.KeepAnchor)
            shade.cursor = cursor
            selections.append(shade)
        self.editor.setExtraSelections(selections)


def qt_position(text: str, index: int) -> int:
    """The Qt text position of Python character ``index`` in ``text``.

    Qt counts UTF-16 code units, so a character outside the Basic Multilingual
    Plane (an emoji, say) takes two positions where Python counts one.
    """
    return len(text[: max(0, index)].encode("utf-16-le")) // 2
