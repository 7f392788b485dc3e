"""Dialogs over what the library keeps of the past: a preset's history (its
earlier revisions, what differs from the current one, a way to bring one
back) and the trash (deleted presets, restorable).

The revisions, differences and deleted presets come from the core library
(``history``, ``diff``, ``trash``); bringing back and restoring are the
window's job (they go through its undo stack), so each dialog only calls the
function it was given. Both follow the library while open, so a colleague's
change shows up at once.
"""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtCore import QDateTime, Qt
from PySide6.QtWidgets import (
    QDialog,
    QDialogButtonBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from ..core.library.records import PresetRecord
from .difference_view import DifferenceTable


def when_text(iso_time: str) -> str:
    """An ISO 8601 time from a library file as local "yyyy-MM-dd HH:mm" (the text itself when unreadable)."""
    moment = QDateTime.fromString(iso_time, Qt.ISODate)
    if not moment.isValid():
        return iso_time or "—"
    return moment.toLocalTime().toString("yyyy-MM-dd HH:mm")


class RecordTable(QTableWidget):
    """A read-only table of library records, one per row, chosen a whole row at a time.

    Args:
        headers: the column titles.
        name: the accessible name.
        tip: the tooltip.
    """

    def __init__(self, headers: list[str], name: str, tip: str, parent: QWidget | None = None):
        super().__init__(0, len(headers), parent)
        self.records: list[PresetRecord] = []
        self.setHorizontalHeaderLabels(headers)
        self.setAccessibleName(name)
        self.setToolTip(tip)
        self.setEditTriggers(QTableWidget.NoEditTriggers)
        self.setSelectionBehavior(QTableWidget.SelectRows)
        self.setSelectionMode(QTableWidget.SingleSelection)
        self.verticalHeader().hide()
        self.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.horizontalHeader().setStretchLastSection(True)

    def set_records(self, records: list[PresetRecord], texts: Callable[[PresetRecord], tuple[str, ...]]) -> None:
        """Show ``records``, each row's cells given by ``texts(record)``, without announcing a choice."""
        self.records = list(records)
        self.blockSignals(True)
        self.setRowCount(len(self.records))
        for row, record in enumerate(self.records):
            for column, text in enumerate(texts(record)):
                self.setItem(row, column, QTableWidgetItem(text))
        self.resizeRowsToContents()
        self.blockSignals(False)

    def chosen(self) -> PresetRecord | None:
        """The record in the chosen row, if any."""
        rows = self.selectionModel().selectedRows()
        return self.records[rows[0].row()] if rows and rows[0].row() < len(self.records) else None

    def choose(self, wanted: Callable[[PresetRecord], bool]) -> bool:
        """Choose the first row whose record is ``wanted``; False when there is none."""
        for row, record in enumerate(self.records):
            if wanted(record):
                self.selectRow(row)
                return True
        return False


def captioned(caption: str, widget: QWidget) -> QVBoxLayout:
    """``widget`` under a bold caption that names it (also for screen readers, as its buddy)."""
    label = QLabel(f"<b>{caption}</b>")
    label.setBuddy(widget)
    column = QVBoxLayout()
    column.addWidget(label)
    column.addWidget(widget, 1)
    return column


class _FollowingDialog(QDialog):
    """A dialog that reloads when the library reports a change (subclasses define ``reload``)."""

    def __init__(self, library, parent: QWidget | None = None):
        super().__init__(parent)
        self.library = library
        for emitter in (library.added, library.changed, library.removed):
            emitter.connect(self._on_library_event)
        self._following = True
        self.finished.connect(lambda _result: self.cleanup())

    def reload(self) -> None:
        """Read what the dialog shows from the library again."""
        raise NotImplementedError

    def _on_library_event(self, record: PresetRecord) -> None:
        self.reload()

    def cleanup(self) -> None:
        """Stop following the library (called when the dialog closes)."""
        if self._following:
            self._following = False
            for emitter in (self.library.added, self.library.changed, self.library.removed):
                emitter.disconnect(self._on_library_event)


class HistoryDialog(_FollowingDialog):
    """Lists a preset's earlier revisions (number, when, who) and the differences
    between the chosen one and the current revision.

    Args:
        library: the PresetLibrary.
        record_id: the preset whose history is shown.
        bring_back: called with the chosen earlier :class:`PresetRecord`; it saves
            that revision's settings as the newest revision.

    The dialog follows the library: when the preset changes (here or by a
    colleague) the list and the differences are read again.
    """

    def __init__(
        self, library, record_id: str, bring_back: Callable[[PresetRecord], None], parent: QWidget | None = None
    ):
        super().__init__(library, parent)
        self.record_id = record_id
        self.bring_back = bring_back
        self.heading = QLabel()
        self.heading.setWordWrap(True)
        self.heading.setAccessibleName("Current revision")
        self.revisions = RecordTable(
            ["Revision", "Saved", "By"], "Earlier revisions", "Earlier revisions of this preset, newest first"
        )
        self.differences = DifferenceTable("Differences from the current revision")
        self.differences.setToolTip("The fields in which the chosen revision differs from the current one")
        self.bring_back_button = QPushButton("&Bring back this revision")
        self.bring_back_button.setToolTip(
            "Save the chosen revision's settings as the newest revision "
            "(the current one stays in the history; Ctrl+Z undoes it)"
        )
        self.bring_back_button.setAccessibleName("Bring back this revision")
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.addButton(self.bring_back_button, QDialogButtonBox.ActionRole)
        buttons.rejected.connect(self.reject)
        tables = QHBoxLayout()
        tables.addLayout(captioned("Earlier revisions", self.revisions), 2)
        tables.addLayout(captioned("What differs from the current revision", self.differences), 3)
        layout = QVBoxLayout(self)
        layout.addWidget(self.heading)
        layout.addLayout(tables, 1)
        layout.addWidget(buttons)
        self.revisions.itemSelectionChanged.connect(self._show_chosen)
        self.bring_back_button.clicked.connect(self._on_bring_back)
        self.resize(860, 420)
        self.reload()

    def current(self) -> PresetRecord | None:
        """The preset's current revision, or None when it has been deleted."""
        return next((r for r in self.library.records() if r.id == self.record_id), None)

    def reload(self) -> None:
        """Read the revisions again, keeping the chosen one when it is still listed."""
        kept = self.revisions.chosen()
        current = self.current()
        self.setWindowTitle(f"History of '{current.name}'" if current else "Preset history")
        if current is None:
            self.heading.setText(
                "This preset is no longer in the library. Restore it from the trash to see its history."
            )
        else:
            self.heading.setText(
                f"<b>{current.name}</b>: now at revision {current.revision}, saved "
                f"{when_text(current.modified_at)} by {current.modified_by or 'someone'}. "
                "Choose an earlier revision to see what it had."
            )
        self.revisions.set_records(
            self.library.history(self.record_id) if current else [],
            lambda r: (str(r.revision), when_text(r.modified_at), r.modified_by or "—"),
        )
        if not (kept and self.select_revision(kept.revision)):
            self.revisions.selectRow(0)
        self._show_chosen()

    def select_revision(self, number: int) -> bool:
        """Choose earlier revision ``number`` in the list; False when it is not listed."""
        return self.revisions.choose(lambda record: record.revision == number)

    def _show_chosen(self) -> None:
        chosen, current = self.revisions.chosen(), self.current()
        self.bring_back_button.setEnabled(chosen is not None and current is not None)
        if chosen is None or current is None:
            note = "No earlier revisions are kept yet." if current else ""
            self.differences.show_differences({}, "Earlier", "Current", note)
            return
        self.differences.show_differences(
            self.library.diff(chosen, current),
            f"Revision {chosen.revision}",
            f"Current (revision {current.revision})",
            "Same settings as the current revision.",
        )

    def _on_bring_back(self) -> None:
        chosen = self.revisions.chosen()
        if chosen is not None:
            self.bring_back(chosen)
            self.reload()

    def _on_library_event(self, record: PresetRecord) -> None:
        if record.id == self.record_id:
            self.reload()


class TrashDialog(_FollowingDialog):
    """Lists every deleted revision in the library's trash (a preset deleted twice shows both),
    with a button to restore the chosen one.

    Args:
        library: the PresetLibrary.
        restore: called with the chosen deleted :class:`PresetRecord`; it brings it back.
    """

    def __init__(self, library, restore: Callable[[PresetRecord], None], parent: QWidget | None = None):
        super().__init__(library, parent)
        self.setWindowTitle("Deleted presets")
        self.restore = restore
        self.note = QLabel()
        self.note.setWordWrap(True)
        self.note.setAccessibleName("Trash summary")
        self.table = RecordTable(
            ["Preset", "Revision", "Last saved", "By"],
            "Deleted presets",
            "Each deleted revision of the library's presets; any of them can be brought back",
        )
        self.restore_button = QPushButton("&Restore")
        self.restore_button.setAccessibleName("Restore the chosen preset")
        self.restore_button.setToolTip(
            'Put the chosen preset back into the library (a taken name gets "(restored)" added)'
        )
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.addButton(self.restore_button, QDialogButtonBox.ActionRole)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(self.note)
        layout.addWidget(self.table, 1)
        layout.addWidget(buttons)
        self.table.itemSelectionChanged.connect(self._update_button)
        self.table.itemDoubleClicked.connect(lambda _item: self._on_restore())
        self.restore_button.clicked.connect(self._on_restore)
        self.resize(560, 360)
        self.reload()

    def reload(self) -> None:
        """Read the trash again."""
        deleted = self.library.trash()
        self.note.setText(
            f"{len(deleted)} deleted revision(s). Choose one and press Restore." if deleted else "The trash is empty."
        )
        self.table.set_records(
            deleted, lambda r: (r.name, str(r.revision), when_text(r.modified_at), r.modified_by or "—")
        )
        self.table.selectRow(0)
        self._update_button()

    def select_preset(self, name: str) -> bool:
        """Choose the deleted preset called ``name``; False when it is not listed."""
        return self.table.choose(lambda record: record.name == name)

    def _update_button(self) -> None:
        self.restore_button.setEnabled(self.table.chosen() is not None)

    def _on_restore(self) -> None:
        chosen = self.table.chosen()
        if chosen is not None:
            self.restore(chosen)
            self.reload()
