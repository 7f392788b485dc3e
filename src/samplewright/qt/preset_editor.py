"""The preset editor: every field checked as it is typed, with its meaning shown.

Each field is checked by :func:`samplewright.core.presets.validate_field`, the
same check the core applies, so the editor and the library can never
disagree. An invalid value shows the reason and the allowed range beside the
field, and Save stays disabled until every field is valid. The fields, their
help and "Allowed:" text come from the core's typed field descriptions
(``core/presets.py`` ``FIELDS``); the stage list names each stage by its label
from the stage registry.
"""

from __future__ import annotations

from typing import Any

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QListWidget,
    QPlainTextEdit,
    QPushButton,
    QScrollArea,
    QVBoxLayout,
    QWidget,
)

from ..core.fields import NumberField
from ..core.presets import FIELDS, Preset, PresetError, validate_field
from ..core.sampling import registry
from . import palette
from .difference_view import value_text

#: The core's numeric parameters, in its order, so a field added to the core appears here without an edit.
NUMBER_FIELDS = tuple(name for name, spec in FIELDS.items() if isinstance(spec, NumberField))
WHOLE_NUMBERS = tuple(name for name in NUMBER_FIELDS if getattr(FIELDS[name], "integer", False))
ERROR_STYLE = "color: #B00020;"
HELP_STYLE = "color: #505050;"


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
        form_host = QWidget()
        self.form = QFormLayout(form_host)
        self.form.setRowWrapPolicy(QFormLayout.WrapAllRows)
        self.form.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)
        self._add_line("name", "Name", "A short name the team will recognise.")
        self._add_line("description", "Description", "One line on when to use this preset.")
        self._add_line("tags", "Tags", "Words to find the preset by, separated by commas.")
        for field in NUMBER_FIELDS:
            self._add_line(field, field, FIELDS[field].help, FIELDS[field].allowed)
        self._add_text("stop", "stop", FIELDS["stop"].help + " One per line; write \\n for a line break.")
        self._add_order()
        self._add_text("notes", "Notes", "Anything the team should know: what it was tuned for, by whom.")
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(form_host)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
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

    def _add_row(self, field: str, label: str, editor: QWidget, help_text: str, allowed: str = "") -> None:
        editor.setAccessibleName(label)
        tip = help_text + (f" Allowed: {allowed}." if allowed else "")
        editor.setToolTip(tip)
        help_label = QLabel(tip)
        help_label.setWordWrap(True)
        help_label.setStyleSheet(HELP_STYLE)
        error = QLabel()
        error.setWordWrap(True)
        error.setStyleSheet(ERROR_STYLE)
        error.setAccessibleName(f"{label} problem")
        error.hide()
        box = QVBoxLayout()
        box.setSpacing(1)
        box.addWidget(editor)
        box.addWidget(error)
        box.addWidget(help_label)
        self.form.addRow(label, box)
        self.inputs[field] = editor
        self.error_labels[field] = error

    def _add_line(self, field: str, label: str, help_text: str, allowed: str = "") -> None:
        editor = QLineEdit()
        editor.textEdited.connect(lambda text, f=field: self._on_field_edited(f, text))
        self._add_row(field, label, editor, help_text, allowed)

    def _add_text(self, field: str, label: str, help_text: str) -> None:
        editor = QPlainTextEdit()
        editor.setTabChangesFocus(True)
        editor.setFixedHeight(editor.fontMetrics().lineSpacing() * 3 + 12)
        editor.textChanged.connect(lambda f=field, e=editor: self._on_field_edited(f, e.toPlainText()))
        self._add_row(field, label, editor, help_text)

    def _add_order(self) -> None:
        self.order_list = QListWidget()
        self.order_list.setDragDropMode(QAbstractItemView.InternalMove)
        rows = len(registry.names())  # every stage visible without scrolling
        self.order_list.setFixedHeight(self.order_list.fontMetrics().lineSpacing() * rows + 16)
        self.order_list.model().rowsMoved.connect(lambda *_: self._on_order_changed())
        up, down = QPushButton("Move up"), QPushButton("Move down")
        up.setToolTip("Apply the selected stage earlier")
        down.setToolTip("Apply the selected stage later")
        up.clicked.connect(lambda: self.move_stage(-1))
        down.clicked.connect(lambda: self.move_stage(+1))
        holder = QWidget()
        row = QHBoxLayout(holder)
        row.setContentsMargins(0, 0, 0, 0)
        row.addWidget(self.order_list, 1)
        column = QVBoxLayout()
        column.addWidget(up)
        column.addWidget(down)
        column.addStretch(1)
        row.addLayout(column)
        self._add_row("order", "Stage order", holder, FIELDS["order"].help + " Drag a stage, or use the buttons.")
        self.order_list.setAccessibleName("Stage order")

    # -- model → widgets ------------------------------------------------------------
    def set_preset(self, preset: Preset | None) -> None:
        """Show ``preset`` for editing (None: nothing to edit)."""
        self.original = preset
        self.errors.clear()
        shown = preset or Preset("(none)")
        for field, editor in self.inputs.items():
            if field == "order":
                continue
            text = field_text(field, getattr(shown, field))
            editor.blockSignals(True)
            if isinstance(editor, QPlainTextEdit):
                editor.setPlainText(text)
            else:
                editor.setText(text)
                editor.setCursorPosition(0)  # show a long description from its start
            editor.blockSignals(False)
            self.error_labels[field].hide()
        self.order_list.blockSignals(True)
        self.order_list.clear()
        for stage in shown.order:
            entry = registry.stage(stage)
            self.order_list.addItem(f"{entry.label}  ({stage})")
            item = self.order_list.item(self.order_list.count() - 1)
            item.setData(Qt.UserRole, stage)
            item.setToolTip(entry.summary)
        self.order_list.blockSignals(False)
        self.title.setText(
            f"<b>Editing:</b> {preset.name}" if preset else "<i>Choose a preset in the list to edit it.</i>"
        )
        self.set_notice("")
        self.setEnabled(preset is not None)
        self._update_state()

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
        self._update_state()

    def _on_order_changed(self) -> None:
        self._update_state()

    def move_stage(self, delta: int) -> None:
        """Move the selected stage ``delta`` places (negative: earlier)."""
        row = self.order_list.currentRow()
        target = row + delta
        if row < 0 or not 0 <= target < self.order_list.count():
            return
        item = self.order_list.takeItem(row)
        self.order_list.insertItem(target, item)
        self.order_list.setCurrentRow(target)
        self._on_order_changed()

    def stage_order(self) -> tuple[str, ...]:
        """The stage order as currently listed."""
        return tuple(self.order_list.item(i).data(Qt.UserRole) for i in range(self.order_list.count()))

    def edited(self) -> Preset:
        """The preset as currently typed.

        Raises:
            PresetError: when a field is invalid.
        """
        if self.original is None:
            raise PresetError("preset", "no preset is being edited")
        changes: dict[str, Any] = {"order": self.stage_order()}
        for field, editor in self.inputs.items():
            if field != "order":
                text = editor.toPlainText() if isinstance(editor, QPlainTextEdit) else editor.text()
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
        self.save_button.setEnabled(self.original is not None and valid and self.is_dirty())
        self.revert_button.setEnabled(self.original is not None and self.is_dirty())
        if self.errors:
            self.status.setText(f"<span style='{ERROR_STYLE}'>Fix {len(self.errors)} field(s) to save.</span>")
        else:
            self.status.setText("Unsaved changes." if self.is_dirty() else "")
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
