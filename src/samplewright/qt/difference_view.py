"""Field-by-field differences between two presets: a small table, and the
"Compare with…" dialog that shows two library presets side by side.

The differences themselves come from the core (``PresetLibrary.diff``); this
module only lays them out.
"""

from __future__ import annotations

from typing import Any

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QHeaderView,
    QLabel,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import LibraryError

#: Plain labels for the fields that are not sampling parameters (those keep their trade names).
FIELD_LABELS = {
    "name": "Name",
    "description": "Description",
    "tags": "Tags",
    "notes": "Notes",
    "stop": "stop",
    "order": "Stage order",
}
EMPTY = "—"


def value_text(value: Any, field: str = "") -> str:
    """A preset field's value as one short line of text: the stage order joined by ">", stop
    texts quoted (they may be spaces or line breaks), numbers without trailing zeros."""
    if isinstance(value, (list, tuple)):
        if not value:
            return EMPTY
        if field == "stop":
            return ", ".join(repr(v) for v in value)
        return (" > " if field == "order" else ", ").join(str(v) for v in value)
    if isinstance(value, float):
        return f"{value:g}"
    if value == "":
        return EMPTY
    return " ".join(str(value).split())


class DifferenceTable(QTableWidget):
    """Three columns: the field, its value on the left, its value on the right.

    Args:
        name: the accessible name of the table.
    """

    def __init__(self, name: str, parent: QWidget | None = None):
        super().__init__(0, 3, parent)
        self.setAccessibleName(name)
        self.setEditTriggers(QTableWidget.NoEditTriggers)
        self.setSelectionMode(QTableWidget.NoSelection)
        self.setWordWrap(True)
        self.verticalHeader().hide()
        header = self.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.ResizeToContents)
        header.setSectionResizeMode(1, QHeaderView.Stretch)
        header.setSectionResizeMode(2, QHeaderView.Stretch)
        self.setTextElideMode(Qt.ElideNone)
        # Long notes wrap: row heights follow the column widths, which settle only once shown.
        header.sectionResized.connect(lambda *_: self.resizeRowsToContents())

    def show_differences(self, differences: dict[str, tuple], left: str, right: str, same: str) -> None:
        """Show ``{field: (left_value, right_value)}`` under the column titles ``left`` and ``right``;
        ``same`` is the one line shown when there are no differences."""
        self.setHorizontalHeaderLabels(["Field", left, right])
        self.clearSpans()
        self.setRowCount(max(1, len(differences)))
        if not differences:
            self.setItem(0, 0, QTableWidgetItem(same))
            self.setSpan(0, 0, 1, 3)
            return
        for row, (field, (a, b)) in enumerate(differences.items()):
            for column, text in enumerate((FIELD_LABELS.get(field, field), value_text(a, field), value_text(b, field))):
                item = QTableWidgetItem(text)
                item.setToolTip(text)
                self.setItem(row, column, item)
        self.resizeRowsToContents()

    def rows(self) -> list[tuple[str, str, str]]:
        """The texts shown, row by row (an empty list when there are no differences)."""
        if self.columnSpan(0, 0) == 3:
            return []
        return [tuple(self.item(r, c).text() for c in range(3)) for r in range(self.rowCount())]


class CompareDialog(QDialog):
    """Two library presets side by side: every field in which they differ.

    Args:
        library: the PresetLibrary (its ``diff`` gives the differences).
        first_id: the preset shown on the left at first.
        second_id: the preset on the right at first (default: the next one in the list).
    """

    def __init__(self, library, first_id: str, second_id: str | None = None, parent: QWidget | None = None):
        super().__init__(parent)
        self.library = library
        self.setWindowTitle("Compare presets")
        self.first = self._chooser("First preset", "The preset shown in the middle column")
        self.second = self._chooser("Second preset", "The preset shown in the right-hand column")
        ids = [r.id for r in library.records()]
        if second_id is None and first_id in ids and len(ids) > 1:
            second_id = ids[(ids.index(first_id) + 1) % len(ids)]
        self.first.setCurrentIndex(max(0, self.first.findData(first_id)))
        self.second.setCurrentIndex(max(0, self.second.findData(second_id)))
        self.summary = QLabel()
        self.summary.setAccessibleName("Comparison summary")
        self.table = DifferenceTable("Differences between the two presets")
        self.table.setToolTip("Only the fields in which the two presets differ are listed")
        choosers = QFormLayout()
        choosers.addRow("&First:", self.first)
        choosers.addRow("&Second:", self.second)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addLayout(choosers)
        layout.addWidget(self.summary)
        layout.addWidget(self.table, 1)
        layout.addWidget(buttons)
        self.first.currentIndexChanged.connect(self.refresh)
        self.second.currentIndexChanged.connect(self.refresh)
        self.resize(640, 420)
        self.refresh()

    def _chooser(self, name: str, tip: str) -> QComboBox:
        combo = QComboBox()
        combo.setAccessibleName(name)
        combo.setToolTip(tip)
        for record in self.library.records():
            combo.addItem(record.name, record.id)
        return combo

    def refresh(self) -> None:
        """Show the differences between the two chosen presets."""
        a, b = self.first.currentData(), self.second.currentData()
        if a is None or b is None:
            self.summary.setText("The library has no presets to compare.")
            self.table.show_differences({}, "", "", "")
            return
        try:
            left, right = self.library.get(a), self.library.get(b)
        except LibraryError:  # deleted since the dialog opened, e.g. by a colleague
            known = {r.id for r in self.library.records()}
            gone = self.first.currentText() if a not in known else self.second.currentText()
            self.summary.setText(
                f"'{gone}' is no longer in the library (it was deleted). Choose another preset to compare."
            )
            self.table.show_differences({}, "", "", "")
            return
        differences = self.library.diff(left, right)
        differences.pop("name", None)  # the column titles already name them
        count = len(differences)
        self.summary.setText(
            "The same preset on both sides."
            if a == b
            else f"{count} field{'s' if count != 1 else ''} differ."
            if count
            else "These two presets have the same settings."
        )
        self.table.show_differences(differences, left.name, right.name, "No differences.")
