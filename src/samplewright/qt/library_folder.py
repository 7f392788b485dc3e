"""Which library folder the window shows: the user's own, or one the team shares.

The user can point the window at another folder (a shared drive or a synced
folder), go back to a recently used one, or return to their own library.
Switching first settles unsaved edits, then opens the folder with the core
:class:`~samplewright.core.library.library.PresetLibrary`, announces it through
:class:`LibraryInUse` (the file watch follows it) and re-points the preset list
and the editor at it. The choice is kept in the user's own
state file (``UserState.last_library``; the recent folders in its view
settings) and reopened at the next start. A remembered folder that cannot be
opened at start (an unplugged drive, no permission) falls back to the user's
own library and says which folder failed and why; the choice itself stays
remembered, so the folder opens again once it is back.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QAction, QUndoStack
from PySide6.QtWidgets import QLabel, QMenu, QSizePolicy, QStatusBar, QVBoxLayout, QWidget

from ..core.errors import LibraryError
from ..core.library.draft import Draft
from ..core.library.library import PresetLibrary, default_library_dir, starter_presets
from ..core.library.records import PresetRecord
from ..core.library.user_state import UserState
from . import palette
from .library_panel import QtLibraryList
from .prompts import QtPrompts

#: The key of the recent library folders in ``UserState.view``.
RECENT_KEY = "recent_libraries"
RECENT_LIMIT = 8
OWN_LIBRARY = "my own library"


def short_folder(folder: Path, width: int = 34) -> str:
    """``folder`` in at most about ``width`` characters: the home folder as ``~``, and
    only the last parts of a long path, after an ellipsis."""
    text = str(folder)
    try:
        text = str(Path("~") / folder.relative_to(Path.home()))
    except ValueError:
        pass
    if len(text) <= width:
        return text
    parts = Path(text).parts
    tail = parts[-1]
    for part in reversed(parts[1:-1]):
        if len(part) + len(tail) + 3 > width:
            break
        tail = os.path.join(part, tail)
    return os.path.join("…", tail)


def same_folder(a: Path, b: Path) -> bool:
    """Whether two paths name the same folder (after resolving links and ``..``)."""
    try:
        return Path(a).expanduser().resolve() == Path(b).expanduser().resolve()
    except OSError:
        return Path(a) == Path(b)


class LibraryInUse(QObject):
    """Which library the window shows; every part reads it here.

    Signals:
        switched(PresetLibrary): another library is now in use.
    """

    switched = Signal(object)

    def __init__(self, library: PresetLibrary, parent: QObject | None = None):
        super().__init__(parent)
        self.library = library

    def set(self, library: PresetLibrary) -> None:
        """Use ``library`` from now on, and say so."""
        self.library = library
        self.switched.emit(library)

    def record(self, record_id: str | None) -> PresetRecord | None:
        """The library's record with this id, or None when it has none (or the id is None)."""
        return next((r for r in self.library.records() if r.id == record_id), None) if record_id else None


def open_first_library(library_dir, user_state: UserState) -> tuple[PresetLibrary, str | None]:
    """The library at start: ``library_dir`` when given, else the one used last time,
    else the user's own (created when missing); with why the remembered one could not be opened, or None."""
    if library_dir is not None:
        return PresetLibrary(library_dir, create=True), None
    last, problem = user_state.last_library, None
    if last is not None and not same_folder(last, default_library_dir()):
        try:
            return PresetLibrary(last, create=False, seed=False), None
        except LibraryError as error:
            problem = (
                f"Your library folder could not be opened. {error}\n\nShowing your own "
                f"library instead. When the folder is back, choose it again under File ▸ "
                "Recent library folders."
            )
    return PresetLibrary(default_library_dir(), create=True), problem


class QtLibraryBox(QWidget):
    """The preset list under a header naming the library folder in use, and a notice line."""

    def __init__(self, library_list: QWidget, parent: QWidget | None = None):
        super().__init__(parent)
        self.header = QLabel()
        self.header.setAccessibleName("Library folder in use")
        # Long paths are shortened in the text; never let the header widen the panel.
        self.header.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.notice = QLabel()
        self.notice.setObjectName("libraryNotice")
        self.notice.setAccessibleName("Library notice")
        self.notice.setStyleSheet(palette.notice_style("libraryNotice"))
        self.notice.setWordWrap(True)
        self.notice.linkActivated.connect(lambda _link: self.notice.hide())
        self.notice.hide()
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.header)
        layout.addWidget(self.notice)
        layout.addWidget(library_list, 1)

    def show_notice(self, text: str) -> None:
        """Show ``text`` above the list, with a link that hides it ("" hides it now)."""
        self.notice.setText(text.replace("\n", "<br>") + " <a href='#hide'>Hide</a>")
        self.notice.setVisible(bool(text))


class LibraryFolderController(QObject):
    """Chooses the library folder the window shows and remembers the choice.

    Args:
        in_use: which library is shown (this controller switches it).
        user_state: the user's own state file (last folder, recent folders).
        draft: the editor's draft (emptied when the library changes).
        settle: asks about unsaved edits; False when the user cancelled.
        box, library_list, undo_stack: the widgets it drives.
        window: the main window (its title names the folder).
        prompts, status: where problems, questions and notes are shown.

    Signals:
        own_library_shown(bool): whether the user's own library is the one in use.
    """

    own_library_shown = Signal(bool)

    def __init__(
        self,
        in_use: LibraryInUse,
        user_state: UserState,
        draft: Draft,
        settle: Callable[[], bool],
        box: QtLibraryBox,
        library_list: QtLibraryList,
        undo_stack: QUndoStack,
        window: QWidget,
        prompts: QtPrompts,
        status: QStatusBar,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.in_use, self.user_state, self.draft, self.settle = in_use, user_state, draft, settle
        self.box, self.library_list, self.undo_stack, self.window = box, library_list, undo_stack, window
        self.prompts, self.status = prompts, status
        self.recent_menu = QMenu("Recent library folders", window)
        self.recent_menu.setToolTipsVisible(True)
        self.recent_menu.aboutToShow.connect(self.fill_recent_menu)
        self.fill_recent_menu()

    def show_library_folder(self) -> None:
        """Name the library in use in the list's header and the window title."""
        folder = self.in_use.library.folder
        own = same_folder(folder, default_library_dir())
        label = OWN_LIBRARY if own else short_folder(folder)
        self.box.header.setText(f"<b>Presets</b> · {label}")
        self.box.header.setToolTip(f"Library folder: {folder}" + (" (your own library)" if own else ""))
        self.window.setWindowTitle(f"Samplewright — {label}")
        self.own_library_shown.emit(own)

    # -- choosing ----------------------------------------------------------------------------
    def choose_library_folder(self) -> None:
        """Ask for a folder and use the library in it (e.g. the team's shared folder)."""
        folder = self.prompts.ask_folder("Choose the library folder (for example your team's shared presets folder)")
        if folder:
            self.use_library_folder(folder)

    def use_own_library(self) -> None:
        """Go back to the user's own library folder."""
        self.use_library_folder(default_library_dir())

    def use_library_folder(self, folder) -> bool:
        """Show the library in ``folder`` instead of the current one, and remember the choice.

        Unsaved edits are asked about first. A folder without presets may get the
        starter presets, if the user wants them.

        Args:
            folder: the library folder (the user's own is created when missing; any other must exist).

        Returns:
            True when the window now shows that folder.
        """
        folder = Path(folder).expanduser()
        current = self.in_use.library
        if same_folder(folder, current.folder):
            self.status.showMessage(f"Already showing the library in {folder}.", 5000)
            return True
        own = same_folder(folder, default_library_dir())
        try:
            library = PresetLibrary(folder, create=own, seed=False)
        except LibraryError as error:
            self.prompts.show_error(
                "That library folder cannot be used",
                f"{error}\n\nThe window still shows the library in {current.folder}.",
            )
            return False
        if not self.settle():
            return False
        if not library.records() and not self._fill_empty_library(library):
            return False
        self._point_at(library)
        self._remember_library(None if own else library.folder)
        count = len(library.records())
        skipped = (
            f"; {len(library.skipped)} file(s) there are not presets and were left alone" if library.skipped else ""
        )
        self.status.showMessage(f"Now showing the library in {library.folder}: {count} preset(s){skipped}.", 10000)
        return True

    def _fill_empty_library(self, library: PresetLibrary) -> bool:
        """Offer the starter presets for a library without presets; False when the user cancelled."""
        answer = self.prompts.ask_add_starters(library.folder, len(library.skipped))
        if answer == "cancel":
            return False
        if answer == "add":
            try:
                for preset in starter_presets():
                    library.add(preset)
            except LibraryError as error:
                self.prompts.show_error("The starter presets were not all added", str(error))
        return True

    def _point_at(self, library: PresetLibrary) -> None:
        """Re-point the file watch, the list and the editor at ``library`` (edits already settled)."""
        kept = [i for i in self.library_list.chosen if i in {r.id for r in library.records()}]
        self.undo_stack.clear()  # its commands act on the previous library
        self.draft.load(None)
        self.in_use.set(library)  # the file watch follows
        self.library_list.set_library(library)
        self.library_list.set_chosen(kept or [r.id for r in library.records()[:2]])
        if self.library_list.current_id() is None and library.records():
            self.library_list.select(library.records()[0].id)
        self.box.notice.hide()
        self.show_library_folder()

    def _remember_library(self, folder: Path | None) -> None:
        """Keep the choice for the next start (None: the user's own library) and in the recent list."""
        self.user_state.last_library = folder
        if folder is not None:
            recent = [str(folder)] + [p for p in self.recent_library_folders() if not same_folder(Path(p), folder)]
            self.user_state.view[RECENT_KEY] = recent[:RECENT_LIMIT]
        try:
            self.user_state.save()
        except LibraryError as error:
            self.status.showMessage(f"The library folder will not be remembered: {error}", 15000)

    # -- recent folders ----------------------------------------------------------------------
    def recent_library_folders(self) -> list[str]:
        """The library folders used lately, newest first (the user's own is not listed)."""
        recent = self.user_state.view.get(RECENT_KEY, [])
        return [p for p in recent if isinstance(p, str) and p][:RECENT_LIMIT] if isinstance(recent, list) else []

    def fill_recent_menu(self) -> None:
        """List the recent library folders in their submenu (the one in use is ticked)."""
        menu = self.recent_menu
        menu.clear()
        for path in self.recent_library_folders():
            action: QAction = menu.addAction(short_folder(Path(path), 60))
            action.setToolTip(path)
            action.setCheckable(True)
            action.setChecked(same_folder(Path(path), self.in_use.library.folder))
            action.triggered.connect(lambda _=False, p=path: self.use_library_folder(p))
        if menu.isEmpty():
            menu.addAction("(none yet)").setEnabled(False)
