"""The preset's chain as the editor shows it: one block per stage, in the preset's order.

Each block holds the stage's parameters, one plain line on what it does and,
when a step is inspected, how many tokens and how much of the model's
probability are left after it. A stage at its neutral values is folded as
"off" and switched on with its box. Blocks are reordered by dragging them (by
their handle or anywhere outside a field), with Alt+Up / Alt+Down on a focused
block, or with its ▲ ▼ buttons.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from PySide6.QtCore import QMimeData, QPoint, Qt, Signal
from PySide6.QtGui import QDrag
from PySide6.QtWidgets import (
    QApplication,
    QCheckBox,
    QFrame,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from ..core.presets import FIELDS
from ..core.results import StageEffect
from ..core.sampling.stage_parts import StagePart, chain_parts

STAGE_MIME = "application/x-samplewright-stage"
HELP_STYLE = "color: #505050;"
ERROR_STYLE = "color: #B00020;"
#: Shorter captions for the penalties' parts inside their block (the field keeps its name in the tooltip).
FIELD_CAPTIONS = {
    "repetition_penalty": "repetition",
    "frequency_penalty": "frequency",
    "presence_penalty": "presence",
    "no_repeat_ngram_size": "no repeat of n tokens",
    "temperature": "temperature",
    "top_k": "k",
    "top_p": "p",
    "min_p": "min-p",
    "typical_p": "mass",
}


def kept_text(kept: StageEffect) -> str:
    """What is left after a stage, in words: "keeps 12 tokens · 85.0% of the model's probability"."""
    tokens = "token" if kept.kept == 1 else "tokens"
    return f"keeps {kept.kept:,} {tokens} · {kept.kept_raw_mass:.1%} of the model's probability"


class StageBlock(QFrame):
    """One stage: its switch, its parameters, its explanation and what it keeps.

    Signals:
        move_requested(stage, delta): move this block ``delta`` places (negative: earlier).
        switch_requested(stage, on): the user switched the stage on or off.
    """

    move_requested = Signal(str, int)
    switch_requested = Signal(str, bool)

    def __init__(self, part: StagePart, on_edit: Callable[[str, str], None], parent: QWidget | None = None):
        super().__init__(parent)
        stage = part.name
        self.stage, self.part = stage, part
        self.inputs: dict[str, QLineEdit] = {}
        self.error_labels: dict[str, QLabel] = {}
        self.drag_start: QPoint | None = None
        self.setObjectName("stageBlock")
        self.setFrameShape(QFrame.Shape.StyledPanel)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.setAccessibleName(f"Stage {part.label}")
        self.setToolTip(f"{part.label}: drag to reorder, or focus it and press Alt+Up / Alt+Down")
        self.handle = QLabel("⠿")
        self.handle.setCursor(Qt.CursorShape.OpenHandCursor)
        self.handle.setToolTip("Drag to move this stage earlier or later in the chain")
        self.position = QLabel()
        self.title = QLabel(f"<b>{part.label}</b>")
        self.switch = QCheckBox("on")
        self.switch.setAccessibleName(f"{part.label} on")
        self.switch.setToolTip(f"Switch {part.label} on (a starting value you then tune) or off (changes nothing)")
        self.switch.clicked.connect(lambda checked: self.switch_requested.emit(stage, checked))
        self.switch.setEnabled(bool(part.fields))  # a stage without parameters always acts
        self.up, self.down = QToolButton(), QToolButton()
        for button, text, delta, tip in ((self.up, "▲", -1, "earlier"), (self.down, "▼", +1, "later")):
            button.setText(text)
            button.setAccessibleName(f"Move {part.label} {tip}")
            button.setToolTip(f"Apply {part.label} {tip} (Alt+{'Up' if delta < 0 else 'Down'})")
            button.clicked.connect(lambda _=False, d=delta: self.move_requested.emit(stage, d))
        top = QHBoxLayout()
        top.setContentsMargins(0, 0, 0, 0)
        for widget in (self.handle, self.position, self.title):
            top.addWidget(widget)
        top.addStretch(1)
        for widget in (self.switch, self.up, self.down):
            top.addWidget(widget)
        self.explanation = QLabel(part.explanation)
        self.explanation.setWordWrap(True)
        self.explanation.setStyleSheet(HELP_STYLE)
        self.kept = QLabel()
        self.kept.setWordWrap(True)
        self.kept.setAccessibleName(f"What {part.label} keeps")
        self.kept.hide()
        self.fields = QWidget()
        grid = QGridLayout(self.fields)
        grid.setContentsMargins(0, 0, 0, 0)
        for row, field in enumerate(part.fields):
            self._add_field(grid, row, field, on_edit)
        grid.setColumnStretch(1, 1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 4, 6, 4)
        layout.setSpacing(2)
        layout.addLayout(top)
        layout.addWidget(self.explanation)
        layout.addWidget(self.fields)
        layout.addWidget(self.kept)

    def _add_field(self, grid: QGridLayout, row: int, field: str, on_edit: Callable[[str, str], None]) -> None:
        caption = QLabel(FIELD_CAPTIONS.get(field, field))
        editor = QLineEdit()
        editor.setAccessibleName(field)
        editor.setToolTip(f"{field}: {FIELDS[field].help} Allowed: {FIELDS[field].allowed}.")
        editor.textEdited.connect(lambda text, f=field: on_edit(f, text))
        caption.setBuddy(editor)
        caption.setToolTip(editor.toolTip())
        error = QLabel()
        error.setWordWrap(True)
        error.setStyleSheet(ERROR_STYLE)
        error.setAccessibleName(f"{field} problem")
        error.hide()
        grid.addWidget(caption, 2 * row, 0)
        grid.addWidget(editor, 2 * row, 1)
        grid.addWidget(error, 2 * row + 1, 0, 1, 2)
        self.inputs[field] = editor
        self.error_labels[field] = error

    def set_place(self, index: int, count: int) -> None:
        """Show the block's place in the chain and enable the moves that exist."""
        self.position.setText(f"{index + 1}.")
        self.up.setEnabled(index > 0)
        self.down.setEnabled(index < count - 1)

    def set_on(self, on: bool, fold: bool) -> None:
        """Tick the switch; ``fold`` hides the parameters of a stage that is off."""
        self.switch.setChecked(on)
        self.fields.setVisible(on or not fold)
        off = "" if on else " <i>Off: at these values it changes nothing.</i>"
        self.explanation.setText(self.part.explanation + off)

    def show_kept(self, kept: StageEffect | None) -> None:
        """Show what is left after this stage at the inspected step (None hides it, and so does
        a stage that is off: it keeps what the stage above left)."""
        self.kept.setVisible(kept is not None and self.switch.isChecked())
        if kept is not None:
            self.kept.setText(f"At the inspected step: {kept_text(kept)}")

    # -- moving with keys and the mouse -----------------------------------------------------
    def keyPressEvent(self, event) -> None:
        if event.modifiers() & Qt.KeyboardModifier.AltModifier and event.key() in (Qt.Key.Key_Up, Qt.Key.Key_Down):
            self.move_requested.emit(self.stage, -1 if event.key() == Qt.Key.Key_Up else +1)
            return
        super().keyPressEvent(event)

    def mousePressEvent(self, event) -> None:
        if event.button() == Qt.MouseButton.LeftButton:
            self.drag_start = event.position().toPoint()
            self.setFocus()
        super().mousePressEvent(event)

    def mouseMoveEvent(self, event) -> None:
        start = self.drag_start
        if start is None or (event.position().toPoint() - start).manhattanLength() < QApplication.startDragDistance():
            return
        self.drag_start = None
        mime = QMimeData()
        mime.setData(STAGE_MIME, self.stage.encode())
        drag = QDrag(self)
        drag.setMimeData(mime)
        drag.setPixmap(self.grab())
        drag.exec(Qt.DropAction.MoveAction)


class ChainView(QWidget):
    """The stage blocks in the chain's order; a drop between blocks moves the dragged one there.

    Signals:
        order_changed(): the user moved a stage.
        switch_requested(stage, on): the user switched a stage on or off.
    """

    order_changed = Signal()
    switch_requested = Signal(str, bool)

    def __init__(self, on_edit: Callable[[str, str], None], parent: QWidget | None = None):
        super().__init__(parent)
        self.setAcceptDrops(True)
        self.setAccessibleName("Stage order")
        self.blocks = {name: StageBlock(part, on_edit) for name, part in chain_parts().items()}
        self.column = QVBoxLayout(self)
        self.column.setContentsMargins(0, 0, 0, 0)
        self.column.setSpacing(4)
        for block in self.blocks.values():
            block.move_requested.connect(self.move_stage)
            block.switch_requested.connect(self.switch_requested)
        self.order: list[str] = list(self.blocks)
        self._place()

    def set_order(self, order: Sequence[str]) -> None:
        """Lay the blocks out in ``order``."""
        self.order = list(order)
        self._place()

    def _place(self) -> None:
        for block in self.blocks.values():
            self.column.removeWidget(block)
        for index, stage in enumerate(self.order):
            self.column.insertWidget(index, self.blocks[stage])
            self.blocks[stage].set_place(index, len(self.order))

    def move_stage(self, stage: str, delta: int) -> None:
        """Move ``stage`` ``delta`` places (clamped to the chain); says so when it moved."""
        index = self.order.index(stage)
        self.move_to(stage, max(0, min(len(self.order) - 1, index + delta)))

    def move_to(self, stage: str, target: int) -> None:
        """Put ``stage`` at place ``target`` of the chain."""
        if self.order.index(stage) == target:
            return
        self.order.remove(stage)
        self.order.insert(target, stage)
        self._place()
        self.blocks[stage].setFocus()
        self.order_changed.emit()

    def drop_index(self, y: int) -> int:
        """The place a block dropped at height ``y`` (this widget's coordinates) goes to."""
        for index, stage in enumerate(self.order):
            block = self.blocks[stage]
            if y < block.y() + block.height() / 2:
                return index
        return len(self.order)

    def dragEnterEvent(self, event) -> None:
        if event.mimeData().hasFormat(STAGE_MIME):
            event.acceptProposedAction()

    def dragMoveEvent(self, event) -> None:
        if event.mimeData().hasFormat(STAGE_MIME):
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:
        stage = bytes(event.mimeData().data(STAGE_MIME).data()).decode()
        if stage not in self.order:
            return
        target = self.drop_index(int(event.position().y()))
        if target > self.order.index(stage):
            target -= 1  # the dragged block leaves its own place first
        self.move_to(stage, target)
        event.acceptProposedAction()
