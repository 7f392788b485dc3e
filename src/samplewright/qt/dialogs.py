"""Small dialogs: the import preview and the choice after a save conflict."""

from __future__ import annotations

from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QHeaderView,
    QLabel,
    QMessageBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from .difference_view import value_text

#: What each import choice means, in the words the dialog shows.
IMPORT_CHOICE_LABELS = {
    "keep_both": "Keep the incoming one as a copy",
    "take_theirs": "Use the library's version",
    "overwrite": "Replace it with the incoming one",
    "skip": "Skip this preset",
}
#: The buttons of the save-conflict question, by core choice name (same pattern as the import choices).
CONFLICT_CHOICE_LABELS = {
    "keep_both": "Keep mine as a copy",
    "take_theirs": "Use the library's version",
    "overwrite": "Replace it with my edits",
}
ACTION_LABELS = {
    "add": "new — will be added",
    "update": "same parameters, new notes — will be updated",
    "conflict": "same name, other parameters — choose",
    "unchanged": "already in the library",
}


class ImportPreviewDialog(QDialog):
    """Lists what importing a settings file would do; conflicts get a choice each.

    Args:
        plan: the core's ImportPlan.
        source: the file name shown in the title.
    """

    def __init__(self, plan, source: str, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle(f"Import {source}")
        self.plan = plan
        self.table = QTableWidget(len(plan.items), 3)
        self.table.setHorizontalHeaderLabels(["Preset", "What happens", "Differences"])
        self.table.setAccessibleName("Import preview")
        self.combos: dict[str, QComboBox] = {}
        for row, item in enumerate(plan.items):
            self.table.setItem(row, 0, QTableWidgetItem(item.name))
            changes = "\n".join(
                f"{k}: {value_text(a, k)} → {value_text(b, k)}" for k, (a, b) in item.differences.items()
            )
            cell = QTableWidgetItem(changes)
            cell.setToolTip(changes)  # the whole text, however narrow the column
            self.table.setItem(row, 2, cell)
            if item.action == "conflict":
                combo = QComboBox()
                for key, label in IMPORT_CHOICE_LABELS.items():
                    combo.addItem(label, key)
                combo.setAccessibleName(f"Choice for {item.name}")
                self.table.setCellWidget(row, 1, combo)
                self.combos[item.name] = combo
            else:
                self.table.setItem(row, 1, QTableWidgetItem(ACTION_LABELS.get(item.action, item.action)))
        self.table.setWordWrap(True)
        self.table.resizeColumnsToContents()
        differences = self.table.horizontalHeader()
        differences.setSectionResizeMode(2, QHeaderView.ResizeMode.Stretch)
        differences.sectionResized.connect(lambda *_: self.table.resizeRowsToContents())
        self.table.resizeRowsToContents()
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.button(QDialogButtonBox.Ok).setText("Import")
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("Nothing has been written yet. Check what will happen, then press Import."))
        layout.addWidget(self.table)
        layout.addWidget(buttons)
        self.resize(760, 360)

    def choices(self) -> dict[str, str]:
        """The chosen action for each conflicting preset, by name."""
        return {name: combo.currentData() for name, combo in self.combos.items()}


def ask_conflict_choice(parent: QWidget, message: str) -> str | None:
    """Ask how to settle a save conflict; returns a core choice name or None for "not now"."""
    box = QMessageBox(QMessageBox.Warning, "Someone else changed this preset", message, parent=parent)
    roles = {
        "keep_both": QMessageBox.AcceptRole,
        "take_theirs": QMessageBox.DestructiveRole,
        "overwrite": QMessageBox.DestructiveRole,
    }
    buttons = {box.addButton(CONFLICT_CHOICE_LABELS[key], role): key for key, role in roles.items()}
    box.addButton("Not now", QMessageBox.RejectRole)
    box.exec()
    return buttons.get(box.clickedButton())
