"""Which library folder the window shows: the user's own, or one the team shares.

The user can point the window at another folder (a shared drive or a synced
folder), go back to a recently used one, or return to their own library.
Switching first settles unsaved edits, then opens the folder with the core
:class:`~samplewright.core.library.library.PresetLibrary` and re-points the file watch,
the preset list and the editor at it. The choice is kept in the user's own
state file (``UserState.last_library``; the recent folders in its view
settings) and reopened at the next start. A remembered folder that cannot be
opened at start (an unplugged drive, no permission) falls back to the user's
own library and says which folder failed and why; the choice itself stays
remembered, so the folder opens again once it is back.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtWidgets import QLabel, QMenu, QMessageBox, QSizePolicy, QVBoxLayout, QWidget

from ..core.errors import LibraryError
from ..core.library.library import PresetLibrary, default_library_dir, starter_presets
from . import palette

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


class LibraryFolderActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`."""

    #: Why the remembered library could not be opened at start, or None.
    library_problem: str | None = None

    # -- start -------------------------------------------------------------------------------
    def _open_first_library(self, library_dir) -> PresetLibrary:
        """The library at start: ``library_dir`` when given, else the one used last time,
        else the user's own (created when missing)."""
        if library_dir is not None:
            return PresetLibrary(library_dir, create=True)
        last = self.user_state.last_library
        if last is not None and not same_folder(last, default_library_dir()):
            try:
                return PresetLibrary(last, create=False, seed=False)
            except LibraryError as error:
                self.library_problem = (
                    f"Your library folder could not be opened. {error}\n\nShowing your own "
                    f"library instead. When the folder is back, choose it again under File ▸ "
                    "Recent library folders."
                )
        return PresetLibrary(default_library_dir(), create=True)

    def _library_box(self) -> QWidget:
        """The preset list under a header naming the library folder in use."""
        self.library_header = QLabel()
        self.library_header.setAccessibleName("Library folder in use")
        # Long paths are shortened in the text; never let the header widen the panel.
        self.library_header.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)
        self.library_notice = QLabel()
        self.library_notice.setObjectName("libraryNotice")
        self.library_notice.setAccessibleName("Library notice")
        self.library_notice.setStyleSheet(palette.notice_style("libraryNotice"))
        self.library_notice.setWordWrap(True)
        self.library_notice.linkActivated.connect(lambda _link: self.library_notice.hide())
        self.library_notice.hide()
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.library_header)
        layout.addWidget(self.library_notice)
        layout.addWidget(self.library_list, 1)
        return box

    def _show_library_folder(self) -> None:
        """Name the library in use in the list's header and the window title."""
        folder = self.library.folder
        own = same_folder(folder, default_library_dir())
        label = OWN_LIBRARY if own else short_folder(folder)
        self.library_header.setText(f"<b>Presets</b> · {label}")
        self.library_header.setToolTip(f"Library folder: {folder}" + (" (your own library)" if own else ""))
        self.setWindowTitle(f"Samplewright — {label}")
        self.actions["own_library"].setEnabled(not own)

    def _show_library_notice(self, text: str) -> None:
        self.library_notice.setText(text.replace("\n", "<br>") + " <a href='#hide'>Hide</a>")
        self.library_notice.setVisible(bool(text))

    # -- choosing ----------------------------------------------------------------------------
    def choose_library_folder(self) -> None:
        """Ask for a folder and use the library in it (e.g. the team's shared folder)."""
        folder = self.ask_folder("Choose the library folder (for example your team's shared presets folder)")
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
        if same_folder(folder, self.library.folder):
            self.statusBar().showMessage(f"Already showing the library in {folder}.", 5000)
            return True
        own = same_folder(folder, default_library_dir())
        try:
            library = PresetLibrary(folder, create=own, seed=False)
        except LibraryError as error:
            self.show_error(
                "That library folder cannot be used",
                f"{error}\n\nThe window still shows the library in {self.library.folder}.",
            )
            return False
        if not self.settle_draft():
            return False
        if not library.records() and not self._fill_empty_library(library):
            return False
        self._point_at(library)
        self._remember_library(None if own else library.folder)
        count = len(library.records())
        skipped = (
            f"; {len(library.skipped)} file(s) there are not presets and were left alone" if library.skipped else ""
        )
        self.statusBar().showMessage(f"Now showing the library in {library.folder}: {count} preset(s){skipped}.", 10000)
        return True

    def _fill_empty_library(self, library: PresetLibrary) -> bool:
        """Offer the starter presets for a library without presets; False when the user cancelled."""
        answer = self.ask_add_starters(library.folder, len(library.skipped))
        if answer == "cancel":
            return False
        if answer == "add":
            try:
                for preset in starter_presets():
                    library.add(preset)
            except LibraryError as error:
                self.show_error("The starter presets were not all added", str(error))
        return True

    def ask_add_starters(self, folder: Path, other_files: int) -> str:
        """Ask whether a folder without presets gets the starter presets:
        "add", "empty" or "cancel" (tests replace this)."""
        box = QMessageBox(
            QMessageBox.Question, "No presets here", "This folder has no presets. Add the starter presets?", parent=self
        )
        detail = f"{folder}\n\nThe starter presets are examples to tune from; you can delete them later."
        if other_files:
            detail += f" The folder holds {other_files} other file(s); they are left as they are."
        box.setInformativeText(detail)
        add = box.addButton("Add the starter presets", QMessageBox.AcceptRole)
        empty = box.addButton("Leave it empty", QMessageBox.NoRole)
        box.addButton(QMessageBox.Cancel)
        box.setDefaultButton(add)
        box.exec()
        return {add: "add", empty: "empty"}.get(box.clickedButton(), "cancel")

    def _point_at(self, library: PresetLibrary) -> None:
        """Re-point the file watch, the list and the editor at ``library`` (edits already settled)."""
        kept = [i for i in self.library_list.chosen if i in {r.id for r in library.records()}]
        self.undo_stack.clear()  # its commands act on the previous library
        self._load_into_editor(None)
        self.library = library
        self.library_watch.set_library(library)
        self.library_list.set_library(library)
        self.library_list.set_chosen(kept or [r.id for r in library.records()[:2]])
        if self.library_list.current_id() is None and library.records():
            self.library_list.select(library.records()[0].id)
        self.library_notice.hide()
        self._show_library_folder()

    def _remember_library(self, folder: Path | None) -> None:
        """Keep the choice for the next start (None: the user's own library) and in the recent list."""
        self.user_state.last_library = folder
        if folder is not None:
            recent = [str(folder)] + [p for p in self.recent_library_folders() if not same_folder(Path(p), folder)]
            self.user_state.view[RECENT_KEY] = recent[:RECENT_LIMIT]
        try:
            self.user_state.save()
        except LibraryError as error:
            self.statusBar().showMessage(f"The library folder will not be remembered: {error}", 15000)

    # -- recent folders ----------------------------------------------------------------------
    def recent_library_folders(self) -> list[str]:
        """The library folders used lately, newest first (the user's own is not listed)."""
        recent = self.user_state.view.get(RECENT_KEY, [])
        return [p for p in recent if isinstance(p, str) and p][:RECENT_LIMIT] if isinstance(recent, list) else []

    def _build_recent_menu(self) -> QMenu:
        self.recent_menu = QMenu("Recent library folders", self)
        self.recent_menu.setToolTipsVisible(True)
        self.recent_menu.aboutToShow.connect(self.fill_recent_menu)
        self.fill_recent_menu()
        return self.recent_menu

    def fill_recent_menu(self) -> None:
        """List the recent library folders in their submenu (the one in use is ticked)."""
        menu = self.recent_menu
        menu.clear()
        for path in self.recent_library_folders():
            action = menu.addAction(short_folder(Path(path), 60))
            action.setToolTip(path)
            action.setCheckable(True)
            action.setChecked(same_folder(Path(path), self.library.folder))
            action.triggered.connect(lambda _=False, p=path: self.use_library_folder(p))
        if menu.isEmpty():
            menu.addAction("(none yet)").setEnabled(False)
