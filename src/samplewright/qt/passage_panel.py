"""The passage the presets continue: typed, pasted or opened from a file.

Shows how many tokens the passage has and, when it is longer than the
model's context, shades the start that the model will not see.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QColor, QTextCharFormat, QTextCursor
from PySide6.QtWidgets import QHBoxLayout, QLabel, QMenu, QPlainTextEdit, QTextEdit, QToolButton, QVBoxLayout, QWidget

MAX_RECENT = 8
COUNT_DELAY_MS = 400
CUT_SHADE = "#D9D9D9"


class QtPassagePanel(QWidget):
    """The passage editor with its file and length information.

    Signals:
        passage_settled(str): the text stopped changing for a moment (time to count tokens).
        open_requested(str): a recent file was chosen from the menu.
    """

    passage_settled = Signal(str)
    open_requested = Signal(str)

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
        self._settle = QTimer(self)
        self._settle.setSingleShot(True)
        self._settle.setInterval(COUNT_DELAY_MS)
        self._settle.timeout.connect(lambda: self.passage_settled.emit(self.text()))
        self.editor.textChanged.connect(self._on_text_changed)

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

    def show_length(self, tokens: int, dropped: int, context: int, cut_at: int | None) -> None:
        """Show the token count, and shade the part left out when the passage is too long.

        Args:
            tokens: tokens the model reads.
            dropped: tokens cut from the start to fit the context.
            context: how many passage tokens the model reads at most.
            cut_at: character offset where the kept part starts, if known.
        """
        if dropped:
            self.info.setText(
                f"{tokens + dropped:,} tokens — longer than the {context:,} a passage may use: "
                f"the first {dropped:,} (shaded) are left out."
            )
        else:
            self.info.setText(f"{tokens:,} tokens (a passage may use up to {context:,})")
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
