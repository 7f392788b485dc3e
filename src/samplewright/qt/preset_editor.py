"""The preset editor: a header (name, description, tags, notes, token limit, stop
strings) above the preset's chain, one block per stage in its order
(:mod:`.chain_editor`).

Each field is checked by :func:`samplewright.core.presets.validate_field`, the
same check the core applies, so the editor and the library can never
disagree. An invalid value shows the reason and the allowed range under the
field, and Save stays disabled until every field is valid.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPlainTextEdit,
    QPushButton,
    QScrollArea,
    QVBoxLayout,
    QWidget,
)

from ..core.fields import NumberField
from ..core.presets import FIELDS, Preset, PresetError, validate_field
from ..core.results import StageEffect
from ..core.sampling.stage_parts import is_off, switched
from . import palette
from .chain_editor import ERROR_STYLE, ChainView
from .difference_view import value_text

#: The core's numeric parameters, in its order, so a field added to the core appears here without an edit.
NUMBER_FIELDS = tuple(name for name, spec in FIELDS.items() if isinstance(spec, NumberField))
WHOLE_NUMBERS = tuple(name for name in NUMBER_FIELDS if getattr(FIELDS[name], "integer", False))
#: The header's fields: (field, caption, explanation), above the chain.
HEADER_FIELDS = (
    ("name", "Name", "A short name the team will recognise."),
    ("description", "Description", "One line on when to use this preset."),
    ("tags", "Tags", "Words to find the preset by, separated by commas."),
    ("max_new_tokens", "Token limit", FIELDS["max_new_tokens"].help),
    ("stop", "Stop strings", FIELDS["stop"].help + " One per line; write \\n for a line break."),
    ("notes", "Notes", "Anything the team should know: what it was tuned for, by whom."),
)
TOKEN_LIMIT_NOTE = (
    " A run writes at most the smaller of this and the audition's New tokens; each column says which applied."
)


def parse_field(field: str, text: str) -> Any:
    """Turn the text typed for ``field`` into a validated value.

    Raises:
        PresetError: naming the field, with the reason and allowed range.
    """
    if field in NUMBER_FIELDS:
        return validate_field(field, _number(field, text.strip()))
    if field == "tags":
        return validate_field(field, [t.strip() for t in text.split(",") if t.strip()])
    if field == "stop":
        lines = [line.replace("\\n", "\n") for line in text.splitlines() if line != ""]
        return validate_field(field, lines)
    return validate_field(field, text)


def _number(field: str, text: str) -> Any:
    """The number typed for ``field``: a decimal comma is read as a point in fractional fields only,
    and only without a point, so a thousands separator is never misread."""
    allowed = FIELDS[field].allowed
    if "," in text or "_" in text:
        if field in WHOLE_NUMBERS:
            raise PresetError(field, f"'{text}': write whole numbers without separators; allowed: {allowed}")
        if "_" in text or "." in text or text.count(",") > 1:
            raise PresetError(field, f"'{text}': use one decimal point or comma and no separators; allowed: {allowed}")
    try:
        value: Any = float(text.replace(",", "."))
    except ValueError:
        raise PresetError(field, f"'{text}' is not a number; allowed: {allowed}") from None
    if field in WHOLE_NUMBERS and value.is_integer():
        value = int(value)
    return value


def field_text(field: str, value: Any) -> str:
    """The text an editor field shows for ``value``."""
    if field == "tags":
        return ", ".join(value)
    if field == "stop":
        return "\n".join(s.replace("\n", "\\n") for s in value)
    if isinstance(value, str):
        return value  # typed text is shown exactly as stored
    return value_text(value, field)


class QtPresetEditor(QWidget):
    """Edits one preset; emits the edited preset when the user saves.

    Signals:
        save_requested(Preset): Save was pressed with every field valid.
        validity_changed(bool): whether every field is currently valid.
    """

    save_requested = Signal(object)
    validity_changed = Signal(bool)

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.original: Preset | None = None
        self.errors: dict[str, str] = {}
        self.inputs: dict[str, QWidget] = {}
        self.error_labels: dict[str, QLabel] = {}
        self._build()
        self.set_preset(None)

    # -- construction -------------------------------------------------------------
    def _build(self) -> None:
        self.title = QLabel()
        self.title.setWordWrap(True)
        self.notice = QLabel()
        self.notice.setWordWrap(True)
        self.notice.setObjectName("editorNotice")
        self.notice.setAccessibleName("Editor notice")
        self.notice.setStyleSheet(palette.notice_style("editorNotice"))
        self.notice.hide()
        host = QWidget()
        column = QVBoxLayout(host)
        column.setContentsMargins(0, 0, 4, 0)
        self.form = QFormLayout()
        self.form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        self.form.setFieldGrowthPolicy(QFormLayout.FieldGrowthPolicy.AllNonFixedFieldsGrow)
        for field, caption, help_text in HEADER_FIELDS:
            multiline = field in ("stop", "notes")
            tip = help_text + (TOKEN_LIMIT_NOTE if field == "max_new_tokens" else "")
            self._add_header_field(field, caption, tip, multiline)
        column.addLayout(self.form)
        self.chain_caption = QLabel(
            "<b>Chain</b>, applied top to bottom: drag a block, or Alt+Up / Alt+Down, to reorder."
        )
        self.chain_caption.setWordWrap(True)
        self.kept_note = QLabel()
        self.kept_note.setWordWrap(True)
        self.kept_note.setAccessibleName("Chain figures note")
        self.chain = ChainView(self._on_field_edited)
        self.chain.order_changed.connect(self._update_state)
        self.chain.switch_requested.connect(self.switch_stage)
        for block in self.chain.blocks.values():
            self.inputs.update(block.inputs)
            self.error_labels.update(block.error_labels)
        column.addWidget(self.chain_caption)
        column.addWidget(self.kept_note)
        column.addWidget(self.chain)
        column.addStretch(1)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(host)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.scroll = scroll
        self.save_button = QPushButton("Save preset")
        self.save_button.setToolTip("Save the edited preset to the library (Ctrl+S)")
        self.save_button.clicked.connect(self._on_save_clicked)
        self.revert_button = QPushButton("Revert")
        self.revert_button.setToolTip("Throw away the edits and show the saved preset again")
        self.revert_button.clicked.connect(lambda: self.set_preset(self.original))
        self.status = QLabel()
        self.status.setWordWrap(True)
        buttons = QHBoxLayout()
        buttons.addWidget(self.status, 1)
        buttons.addWidget(self.revert_button)
        buttons.addWidget(self.save_button)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.title)
        layout.addWidget(self.notice)
        layout.addWidget(scroll, 1)
        layout.addLayout(buttons)
        self.show_stage_kept(None)

    def _add_header_field(self, field: str, caption: str, tip: str, multiline: bool) -> None:
        editor: QLineEdit | QPlainTextEdit
        if multiline:
            editor = QPlainTextEdit()
            editor.setTabChangesFocus(True)
            editor.setFixedHeight(editor.fontMetrics().lineSpacing() * 2 + 12)
            editor.textChanged.connect(lambda f=field, e=editor: self._on_field_edited(f, e.toPlainText()))
        else:
            editor = QLineEdit()
            editor.textEdited.connect(lambda text, f=field: self._on_field_edited(f, text))
        allowed = FIELDS[field].allowed if field in FIELDS else ""
        editor.setAccessibleName(caption)
        editor.setToolTip(tip + (f" Allowed: {allowed}." if allowed else ""))
        error = QLabel()
        error.setWordWrap(True)
        error.setStyleSheet(ERROR_STYLE)
        error.setAccessibleName(f"{caption} problem")
        error.hide()
        box = QVBoxLayout()
        box.setSpacing(1)
        box.addWidget(editor)
        box.addWidget(error)
        label = QLabel(caption)
        label.setToolTip(editor.toolTip())
        label.setBuddy(editor)
        self.form.addRow(label, box)
        self.inputs[field] = editor
        self.error_labels[field] = error

    # -- model → widgets ------------------------------------------------------------
    def set_preset(self, preset: Preset | None) -> None:
        """Show ``preset`` for editing (None: nothing to edit)."""
        self.original = preset
        self.errors.clear()
        shown = preset or Preset("(none)")
        for field, editor in self.inputs.items():
            self._show_value(field, editor, getattr(shown, field))
            self.error_labels[field].hide()
        self.chain.set_order(shown.order)
        for stage, block in self.chain.blocks.items():
            block.set_on(not is_off(shown, stage), fold=True)
        self.title.setText(
            f"<b>Editing:</b> {preset.name}" if preset else "<i>Choose a preset in the list to edit it.</i>"
        )
        self.set_notice("")
        self.setEnabled(preset is not None)
        self._update_state()

    def _show_value(self, field: str, editor: QWidget, value: Any) -> None:
        text = field_text(field, value)
        editor.blockSignals(True)
        if isinstance(editor, QPlainTextEdit):
            editor.setPlainText(text)
        elif isinstance(editor, QLineEdit):
            editor.setText(text)
            editor.setCursorPosition(0)  # show a long description from its start
        editor.blockSignals(False)

    def show_stage_kept(self, kept: Sequence[StageEffect] | None, note: str = "") -> None:
        """Show, in each block, what is left after that stage at the inspected step (None: nothing inspected).

        Args:
            kept: one entry per stage, from the step view of this preset's column.
            note: which step the figures belong to, or why there are none.
        """
        by_stage = {k.stage: k for k in kept or ()}
        for stage, block in self.chain.blocks.items():
            block.show_kept(by_stage.get(stage))
        self.kept_note.setText(
            note or "Click a token of this preset's samples to see what each stage keeps at that step."
        )
        self.kept_note.setStyleSheet("color: #505050;")
        if kept:
            # The user just clicked a step: bring the chain and its figures into view (once laid out).
            QTimer.singleShot(0, lambda: self.scroll.verticalScrollBar().setValue(self.chain_caption.y()))

    # -- widgets → model -------------------------------------------------------------
    def _on_field_edited(self, field: str, text: str) -> None:
        try:
            parse_field(field, text)
        except PresetError as error:
            self.errors[field] = str(error)
            self.error_labels[field].setText(str(error))
            self.error_labels[field].show()
        else:
            self.errors.pop(field, None)
            self.error_labels[field].hide()
        self._follow_switches()
        self._update_state()

    def _follow_switches(self) -> None:
        """Tick each stage's switch as its typed values say (a stage typed back to neutral shows as off)."""
        try:
            typed = self.edited()
        except PresetError:
            return
        for stage, block in self.chain.blocks.items():
            block.set_on(not is_off(typed, stage), fold=False)

    def switch_stage(self, stage: str, on: bool) -> None:
        """Switch ``stage`` on (its starting values) or off (its neutral values, folded)."""
        block = self.chain.blocks[stage]
        base = self.original or Preset("(none)")
        part = block.part
        values = switched(base.replace(**dict(part.neutral)), stage, True) if on else None
        for field in part.fields:
            value = getattr(values, field) if values is not None else part.neutral[field]
            self._show_value(field, block.inputs[field], value)
            self.errors.pop(field, None)
            self.error_labels[field].hide()
        block.set_on(on, fold=True)
        self._update_state()

    def move_stage(self, stage: str, delta: int) -> None:
        """Move ``stage`` ``delta`` places in the chain (negative: earlier)."""
        self.chain.move_stage(stage, delta)

    def stage_order(self) -> tuple[str, ...]:
        """The stage order as currently laid out."""
        return tuple(self.chain.order)

    def edited(self) -> Preset:
        """The preset as currently typed.

        Raises:
            PresetError: when a field is invalid.
        """
        if self.original is None:
            raise PresetError("preset", "no preset is being edited")
        changes: dict[str, Any] = {"order": self.stage_order()}
        for field, editor in self.inputs.items():
            text = editor.toPlainText() if isinstance(editor, QPlainTextEdit) else editor.text()  # type: ignore[attr-defined]
            changes[field] = parse_field(field, text)
        return self.original.replace(**changes)

    def is_dirty(self) -> bool:
        """Whether the typed values differ from the preset being edited."""
        try:
            return self.original is not None and self.edited() != self.original
        except PresetError:
            return True

    def draft_problem(self) -> str | None:
        """Why the typed values cannot be saved, or None when they can."""
        if self.errors:
            return next(iter(self.errors.values()))
        try:
            self.edited()
        except PresetError as error:
            return str(error)
        return None

    def set_notice(self, text: str) -> None:
        """Show a note above the fields (e.g. that the library changed meanwhile); "" hides it."""
        self.notice.setText(text)
        self.notice.setVisible(bool(text))

    def _update_state(self) -> None:
        valid = not self.errors
        dirty = self.is_dirty()
        self.save_button.setEnabled(self.original is not None and valid and dirty)
        self.revert_button.setEnabled(self.original is not None and dirty)
        if self.errors:
            self.status.setText(f"<span style='{ERROR_STYLE}'>Fix {len(self.errors)} field(s) to save.</span>")
        else:
            self.status.setText("Unsaved changes." if dirty else "")
        self.validity_changed.emit(valid)

    def _on_save_clicked(self) -> None:
        if self.errors:
            return
        try:
            preset = self.edited()
        except PresetError as error:
            self.status.setText(f"<span style='{ERROR_STYLE}'>{error}</span>")
            return
        self.save_requested.emit(preset)

    def save(self) -> None:
        """Save if allowed (the Ctrl+S shortcut calls this)."""
        if self.save_button.isEnabled():
            self._on_save_clicked()
