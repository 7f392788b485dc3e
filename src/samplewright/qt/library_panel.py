"""The preset list: search, tag filter, favourites, and undoable library changes.

``QtLibraryList`` shows a :class:`~samplewright.core.library.library.PresetLibrary` and
follows its ``added``/``changed``/``removed`` events. New, duplicate, rename
and delete go through a ``QUndoStack`` (the commands are in
``library_commands.py``) so Ctrl+Z takes them back (a delete is undone by
restoring the preset from the library's trash).
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QUndoStack
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QHBoxLayout,
    QHeaderView,
    QLineEdit,
    QMenu,
    QToolButton,
    QTreeWidget,
    QTreeWidgetItem,
    QVBoxLayout,
    QWidget,
)

from ..core.limits import MAX_PRESETS
from ..core.presets import Preset
from .library_commands import AddPresetCommand, DeletePresetCommand, RenamePresetCommand

MAX_CHOSEN = MAX_PRESETS
ALL_TAGS = "All tags"
STAR, NO_STAR = "★", "☆"


class QtLibraryList(QWidget):
    """The library's presets, filterable, with a tick for "compare in the audition".

    Args:
        library: the PresetLibrary shown.
        favourites: an object with ``is_favourite(id)`` and ``set_favourite(id, bool)``.
        undo_stack: where library changes are pushed.
        report: called with a message when a change fails.

    Signals:
        current_changed(record_id or None): the highlighted preset changed.
        chosen_changed(list of ids): the ticked presets changed (at most six, in tick order).
        note(text): something to say in the status bar (e.g. that an undo restored a preset).
    """

    current_changed = Signal(object)
    chosen_changed = Signal(list)
    note = Signal(str)
    #: True while :meth:`refresh` announces the current preset (not a choice by the user).
    refreshing = False

    def __init__(
        self, library, favourites, undo_stack: QUndoStack, report: Callable[[str], None], parent: QWidget | None = None
    ):
        super().__init__(parent)
        self.library = library
        self.favourites = favourites
        self.undo_stack = undo_stack
        self.report = report
        self.chosen: list[str] = []
        # A rescan or import reports each changed preset on its own: inside batched() the rows are
        # rebuilt once, as the batch ends, so callers still find the list current when it returns.
        self._dirty = False
        self._batching = 0
        self._build()
        for emitter in (library.added, library.changed, library.removed):
            emitter.connect(self._on_library_changed)
        self.refresh()

    def _build(self) -> None:
        self.search = QLineEdit(placeholderText="Search names, notes and tags")
        self.search.setAccessibleName("Search presets")
        self.search.setClearButtonEnabled(True)
        self.tag_filter = QComboBox()
        self.tag_filter.setAccessibleName("Filter by tag")
        self.tag_filter.setToolTip("Show only presets with this tag")
        self.favourites_only = QCheckBox("★ only")
        self.favourites_only.setToolTip("Show only your favourite presets")
        self.favourites_only.setAccessibleName("Favourites only")
        self.tree = QTreeWidget()
        self.tree.setAccessibleName("Preset list")
        self.tree.setHeaderLabels(["Preset", "★"])
        self.tree.setRootIsDecorated(False)
        self.tree.setUniformRowHeights(True)
        self.tree.header().setStretchLastSection(False)
        self.tree.header().setSectionResizeMode(0, QHeaderView.Stretch)
        self.tree.header().setSectionResizeMode(1, QHeaderView.ResizeToContents)
        self.tree.setToolTip(f"Tick up to {MAX_CHOSEN} presets to compare them. Click ★ to mark a favourite.")
        filters = QHBoxLayout()
        filters.addWidget(self.tag_filter, 1)
        filters.addWidget(self.favourites_only)
        self.buttons = QHBoxLayout()
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.search)
        layout.addLayout(filters)
        layout.addWidget(self.tree, 1)
        layout.addLayout(self.buttons)
        self.search.textChanged.connect(self._apply_filter)
        self.tag_filter.currentIndexChanged.connect(self._apply_filter)
        self.favourites_only.toggled.connect(self._apply_filter)
        self.tree.itemChanged.connect(self._on_item_changed)
        self.tree.itemClicked.connect(self._on_item_clicked)
        self.tree.currentItemChanged.connect(lambda *_: self.current_changed.emit(self.current_id()))

    def add_button(self, action) -> QToolButton:
        """Show ``action`` as a button under the list."""
        button = QToolButton()
        button.setDefaultAction(action)
        button.setToolButtonStyle(Qt.ToolButtonTextOnly)
        self.buttons.addWidget(button)
        return button

    # -- showing ------------------------------------------------------------------
    def refresh(self) -> None:
        """Rebuild the rows from the library, keeping the current preset and the ticks.

        When the current preset is gone, its neighbour becomes current; the
        ``current_changed`` this emits comes with :attr:`refreshing` set, so a
        listener can tell it from the user's own choice.
        """
        self._dirty = False
        current = self.current_id()
        current_row = self.tree.indexOfTopLevelItem(self.tree.currentItem()) if current else -1
        ids = {r.id for r in self.library.records()}
        before = list(self.chosen)
        self.chosen = [i for i in self.chosen if i in ids]
        self.tree.blockSignals(True)
        self.tree.clear()
        for record in self.library.records():
            item = QTreeWidgetItem([record.name, STAR if self.favourites.is_favourite(record.id) else NO_STAR])
            item.setData(0, Qt.UserRole, record.id)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(0, Qt.Checked if record.id in self.chosen else Qt.Unchecked)
            summary = record.preset.describe()
            tags = ", ".join(record.preset.tags)
            item.setToolTip(
                0, "\n".join(x for x in (record.preset.description, summary, f"tags: {tags}" if tags else "") if x)
            )
            item.setToolTip(1, "Favourite: click to change")
            self.tree.addTopLevelItem(item)
            if record.id == current:
                self.tree.setCurrentItem(item)
        if self.tree.currentItem() is None and current_row >= 0 and self.tree.topLevelItemCount():
            # Choose the neighbour now: Qt would otherwise pick the first row later, unannounced.
            self.tree.setCurrentItem(self.tree.topLevelItem(min(current_row, self.tree.topLevelItemCount() - 1)))
        self.tree.blockSignals(False)
        self._refresh_tags()
        self._apply_filter()
        if self.chosen != before:
            self.chosen_changed.emit(list(self.chosen))
        # Re-announce the current preset: its content may have changed even when its id did not.
        self.refreshing = True
        try:
            self.current_changed.emit(self.current_id())
        finally:
            self.refreshing = False

    def _refresh_tags(self) -> None:
        tags = sorted({t for r in self.library.records() for t in r.preset.tags}, key=str.casefold)
        keep = self.tag_filter.currentText()
        self.tag_filter.blockSignals(True)
        self.tag_filter.clear()
        self.tag_filter.addItems([ALL_TAGS] + tags)
        self.tag_filter.setCurrentIndex(max(0, self.tag_filter.findText(keep)))
        self.tag_filter.blockSignals(False)

    def _apply_filter(self) -> None:
        words = self.search.text().casefold().split()
        tag = self.tag_filter.currentText()
        for item in self._items():
            preset = self.library.get(item.data(0, Qt.UserRole)).preset
            haystack = " ".join((preset.name, preset.description, preset.notes, " ".join(preset.tags))).casefold()
            visible = all(w in haystack for w in words)
            visible &= tag in ("", ALL_TAGS) or tag in preset.tags
            visible &= not self.favourites_only.isChecked() or self.favourites.is_favourite(preset_id(item))
            item.setHidden(not visible)

    def _items(self) -> list[QTreeWidgetItem]:
        return [self.tree.topLevelItem(i) for i in range(self.tree.topLevelItemCount())]

    def _on_library_changed(self, record) -> None:
        if self._batching:
            self._dirty = True
        else:
            self.refresh()

    @contextlib.contextmanager
    def batched(self) -> Iterator[None]:
        """While inside, library changes are collected and the rows rebuilt once afterwards."""
        self._batching += 1
        try:
            yield
        finally:
            self._batching -= 1
            if not self._batching and self._dirty:
                self.refresh()

    # -- user actions ---------------------------------------------------------------
    def _on_item_changed(self, item: QTreeWidgetItem, column: int) -> None:
        if column != 0:
            return
        record_id = preset_id(item)
        ticked = item.checkState(0) == Qt.Checked
        if ticked and record_id not in self.chosen:
            if len(self.chosen) >= MAX_CHOSEN:
                self.tree.blockSignals(True)
                item.setCheckState(0, Qt.Unchecked)
                self.tree.blockSignals(False)
                self.report(f"At most {MAX_CHOSEN} presets can be compared at once. Untick one first.")
                return
            self.chosen.append(record_id)
        elif not ticked and record_id in self.chosen:
            self.chosen.remove(record_id)
        else:
            return
        self.chosen_changed.emit(list(self.chosen))

    def _on_item_clicked(self, item: QTreeWidgetItem, column: int) -> None:
        if column == 1:
            self.toggle_favourite(preset_id(item))

    def toggle_favourite(self, record_id: str | None = None) -> None:
        """Mark or unmark a preset (default: the current one) as a favourite."""
        record_id = record_id or self.current_id()
        if record_id is None:
            return
        self.favourites.set_favourite(record_id, not self.favourites.is_favourite(record_id))
        for item in self._items():
            if preset_id(item) == record_id:
                item.setText(1, STAR if self.favourites.is_favourite(record_id) else NO_STAR)
        self._apply_filter()

    def set_chosen(self, ids: list[str]) -> None:
        """Tick exactly these presets (unknown ids are ignored)."""
        known = {r.id for r in self.library.records()}
        self.chosen = [i for i in ids if i in known][:MAX_CHOSEN]
        self.tree.blockSignals(True)
        for item in self._items():
            item.setCheckState(0, Qt.Checked if preset_id(item) in self.chosen else Qt.Unchecked)
        self.tree.blockSignals(False)
        self.chosen_changed.emit(list(self.chosen))

    def current_id(self) -> str | None:
        """The id of the highlighted preset, or None."""
        item = self.tree.currentItem()
        return preset_id(item) if item is not None else None

    def select(self, record_id: str, quiet: bool = False) -> None:
        """Highlight the preset with this id (``quiet``: without emitting ``current_changed``)."""
        item = next((i for i in self._items() if preset_id(i) == record_id), None)
        if item is not None:  # (a listener may rebuild the rows: touch no other item after this)
            self.tree.blockSignals(quiet)
            self.tree.setCurrentItem(item)
            self.tree.blockSignals(False)

    def set_context_actions(self, actions: list) -> None:
        """Offer ``actions`` (None for a separator) in the list's right-click menu."""
        self._context_actions = list(actions)
        self.tree.setContextMenuPolicy(Qt.CustomContextMenu)
        self.tree.customContextMenuRequested.connect(self._show_context_menu)

    def _show_context_menu(self, pos) -> None:
        item = self.tree.itemAt(pos)
        if item is not None and item is not self.tree.currentItem():
            return  # the right-click did not move the highlight here (the user kept editing)
        menu = QMenu(self)
        for action in self._context_actions:
            menu.addSeparator() if action is None else menu.addAction(action)
        menu.exec(self.tree.viewport().mapToGlobal(pos))

    def push_add(self, preset: Preset) -> str | None:
        """Add ``preset`` undoably and highlight it; returns its id (None on failure)."""
        command = AddPresetCommand(self.library, preset, self.report)
        self.undo_stack.push(command)
        if command.record_id:
            self.select(command.record_id)
        return command.record_id

    def push_delete(self, record_id: str) -> None:
        """Delete a preset undoably; undoing it ticks it again where it was and highlights it."""
        was_chosen = list(self.chosen)

        def restored(new_id: str, name: str) -> None:
            self.set_chosen([new_id if i == record_id else i for i in was_chosen])
            self.select(new_id)
            self.note.emit(f"Restored '{name}'.")

        self.undo_stack.push(DeletePresetCommand(self.library, record_id, self.report, restored))

    def push_rename(self, record_id: str, name: str) -> None:
        """Rename a preset undoably."""
        self.undo_stack.push(RenamePresetCommand(self.library, record_id, name, self.report))

    def set_library(self, library) -> None:
        """Show another library (ticks of presets not in it are dropped)."""
        self.cleanup()
        self.library = library
        for emitter in (library.added, library.changed, library.removed):
            emitter.connect(self._on_library_changed)
        self.refresh()

    def cleanup(self) -> None:
        """Stop following the library."""
        for emitter in (self.library.added, self.library.changed, self.library.removed):
            emitter.disconnect(self._on_library_changed)


def preset_id(item: QTreeWidgetItem) -> str:
    """The record id stored in a list row."""
    return item.data(0, Qt.UserRole)
