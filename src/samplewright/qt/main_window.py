"""The workbench window: presets on the left, passage and audition in the
middle, the next-token view on the right, a review caution across the top.

The window only builds the layout and wires the parts together. The parts are
controllers, each given the core models and widgets it needs:
:class:`~.audition_controller.AuditionController` (runs and the step view),
:class:`~.preset_controller.PresetController` (editing, saving, import/export),
:class:`~.library_controller.LibraryController` (following the folder, history, trash),
:class:`~.library_folder.LibraryFolderController` (which folder is shown) and
:class:`~.model_controller.ModelController` (the model and the passage). They
talk through Qt signals and core model events. The commands and menus are
listed in ``window_actions.py``; questions and messages go through
:class:`~.prompts.QtPrompts`.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QSettings, Qt
from PySide6.QtGui import QAction, QKeySequence, QUndoStack
from PySide6.QtWidgets import QLabel, QMainWindow, QMenu, QProgressBar, QSplitter, QVBoxLayout, QWidget

from ..core.engine.session import AuditionSession
from ..core.library.draft import Draft
from ..core.library.user_state import UserState, default_config_dir
from . import palette, window_actions
from .audition_controller import AuditionController
from .audition_controls import QtAuditionControls
from .audition_view import QtAuditionGrid
from .evaluation_hook import EvaluationOpener
from .export_check import ExportChecker
from .library_controller import Favourites, LibraryController
from .library_dialogs import captioned
from .library_folder import LibraryFolderController, LibraryInUse, QtLibraryBox, open_first_library
from .library_panel import QtLibraryList
from .model_controller import ModelController, default_worker
from .passage_panel import QtPassagePanel
from .preset_controller import PresetController
from .preset_editor import QtPresetEditor
from .prompts import QtPrompts
from .step_inspector import QtStepInspector
from .window_state import WindowState
from .workers import EngineThread

CAUTION = (
    "⚠ Generated text can be wrong, biased or offensive. A person must review it under your "
    "team's own review policy before it is used anywhere."
)
SETTINGS_FILE = "window.ini"


class MainWindow(QMainWindow):
    """The Samplewright workbench.

    Args:
        model_loader: ``model_loader(source, progress) -> LoadedModel``; default loads the real model.
        library_dir: the preset library folder for this session (default: the one chosen last time,
            else the user's own library).
        config_dir: where window settings and favourites are kept (default: the user config folder).
        engine_factory: ``engine_factory(loaded) -> Engine``.
        model_source: the model to load first (None = the default model, or the one used last time).
        load_on_start: start loading the model at once.
    """

    def __init__(
        self,
        model_loader: Callable | None = None,
        library_dir=None,
        config_dir=None,
        engine_factory: Callable | None = None,
        model_source: str | None = None,
        load_on_start: bool = True,
        parent: QWidget | None = None,
    ):
        super().__init__(parent)
        self.setWindowTitle("Samplewright — preset audition workbench")
        self.config_dir = Path(config_dir) if config_dir else default_config_dir()
        self.settings = QSettings(str(self.config_dir / SETTINGS_FILE), QSettings.Format.IniFormat)
        self.user_state = UserState(self.config_dir)
        self.prompts = QtPrompts(self, self.settings)
        library, library_problem = open_first_library(library_dir, self.user_state)
        self.in_use = LibraryInUse(library, self)
        self.undo_stack = QUndoStack(self)
        self.session = AuditionSession()
        self.draft = Draft()
        self._closed = False
        self.engine = EngineThread(default_worker(model_loader, engine_factory), self)
        self._build_views()
        self._build_parts()
        self._build_commands()
        self._wire()
        self.state.restore_state()
        self.folders.show_library_folder()
        if library_problem:
            self.library_box.show_notice(library_problem)
        if self.user_state.problem:
            self.statusBar().showMessage(self.user_state.problem, 8000)
        if load_on_start:
            self.models.load_model(model_source if model_source is not None else self.models.saved_source())

    @property
    def library(self):
        """The preset library the window shows."""
        return self.in_use.library

    @property
    def model_info(self):
        """What is known of the loaded model, or None while none is loaded."""
        return self.models.info

    # -- construction ----------------------------------------------------------------
    def _build_views(self) -> None:
        favourites = Favourites(self.user_state, self.prompts)
        report = lambda text: self.prompts.show_error(text)  # noqa: E731 (looked up late: tests replace it)
        self.library_list = QtLibraryList(self.library, favourites, self.undo_stack, report)
        self.library_box = QtLibraryBox(self.library_list)
        self.editor = QtPresetEditor()
        self.passage = QtPassagePanel()
        self.grid = QtAuditionGrid(self.session)
        self.controls = QtAuditionControls(self.grid)
        self.inspector = QtStepInspector()
        left = QSplitter(Qt.Orientation.Vertical)
        left.addWidget(self.library_box)
        left.addWidget(_titled("Edit preset", self.editor))
        left.setStretchFactor(1, 2)
        middle = QSplitter(Qt.Orientation.Vertical)
        middle.addWidget(self.passage)
        middle.addWidget(self.controls)
        middle.setStretchFactor(1, 3)
        self.splitters = {"main": QSplitter(Qt.Orientation.Horizontal), "left": left, "middle": middle}
        main = self.splitters["main"]
        for widget in (left, middle, self.inspector):
            main.addWidget(widget)
        main.setStretchFactor(1, 4)  # the samples get the width when the window grows
        main.setStretchFactor(2, 1)
        main.setSizes([300, 780, 320])
        left.setSizes([290, 510])
        middle.setSizes([170, 600])
        self.caution = QLabel(CAUTION)
        self.caution.setObjectName("caution")
        self.caution.setWordWrap(True)
        self.caution.setAccessibleName("Review caution")
        self.caution.setStyleSheet(palette.notice_style("caution", padding=4))
        central = QWidget()
        layout = QVBoxLayout(central)
        layout.setContentsMargins(6, 6, 6, 2)
        layout.addWidget(self.caution)
        layout.addWidget(main, 1)
        self.setCentralWidget(central)
        self.model_label = QLabel("No model loaded")
        self.model_label.setAccessibleName("Model status")
        self.model_progress = QProgressBar()
        self.model_progress.setMaximumWidth(220)
        self.model_progress.setAccessibleName("Model loading progress")
        self.model_progress.hide()
        self.statusBar().addPermanentWidget(self.model_progress)
        self.statusBar().addPermanentWidget(self.model_label)

    def _build_parts(self) -> None:
        """The controllers, each with the models and widgets it drives."""
        status, prompts, undo = self.statusBar(), self.prompts, self.undo_stack
        presets_list, draft, in_use = self.library_list, self.draft, self.in_use
        self.models = ModelController(
            self.engine, self.settings, prompts, self.model_label, self.model_progress, self.passage, self
        )
        model_name = lambda: self.models.info.name if self.models.info else None  # noqa: E731
        self.export_check = ExportChecker(self.engine, self.passage.text, prompts, status, self)
        self.presets = PresetController(
            draft, in_use, self.editor, presets_list, prompts, status, model_name, self, checker=self.export_check
        )
        settle, current = self.presets.settle_draft, self.presets.current_record
        self.library_tools = LibraryController(
            in_use, draft, settle, current, presets_list, undo, prompts, status, self
        )
        self.folders = LibraryFolderController(
            in_use, self.user_state, draft, settle, self.library_box, presets_list, undo, self, prompts, status, self
        )
        views = (self.controls, self.grid, self.inspector, presets_list, self.passage)
        self.audition = AuditionController(self.session, self.engine, draft, in_use, prompts, status, *views, self)
        self.audition.model_name = model_name
        self.state = WindowState(self.settings, self, self.splitters, self.passage, self.controls, presets_list, in_use)
        self.library_watch, self.recent_menu = self.library_tools.watch, self.folders.recent_menu
        # A new screen that needs these models is built here; its menu entry is a row in window_actions.py.
        self.evaluation = EvaluationOpener(self)
        self.evaluation_window = self.evaluation.current

    def _build_commands(self) -> None:
        """The window's actions and menus (the commands themselves are listed in ``window_actions.py``)."""
        commands = window_actions.window_commands(self)
        self.menu_actions = {command.key: window_actions.make_action(self, command) for command in commands}
        self.undo_action = self.undo_stack.createUndoAction(self, "Undo")
        self.undo_action.setShortcut(QKeySequence.StandardKey.Undo)
        self.redo_action = self.undo_stack.createRedoAction(self, "Redo")
        self.redo_action.setShortcut(QKeySequence.StandardKey.Redo)
        window_actions.place_actions(self)
        extra: dict[str, QAction | QMenu] = {
            "undo": self.undo_action,
            "redo": self.redo_action,
            "recent_folders": self.recent_menu,
        }
        window_actions.build_menus(self, {**self.menu_actions, **extra})

    def _wire(self) -> None:
        """Connect the parts: what one announces, another follows."""
        self.models.model_switched.connect(self.audition.forget_old_model_samples)
        self.models.model_ready.connect(lambda info: self.audition.set_model_ready(True))
        self.audition.step_shown.connect(self.presets.show_step_figures)
        self.library_list.note.connect(lambda text: self.statusBar().showMessage(text, 6000))
        self.audition.state_changed.connect(lambda *state: window_actions.follow_audition(self.menu_actions, *state))
        self.folders.own_library_shown.connect(lambda own: self.menu_actions["own_library"].setEnabled(not own))
        self.audition.update_buttons()

    def closeEvent(self, event) -> None:
        """Ask about unsaved edits, then cancel any run, stop the engine thread and keep the window's state."""
        if not self._closed:
            if not self.presets.settle_draft():
                event.ignore()
                return
            self._closed = True
            self.state.save_state()
            self.session.abandon()
            # Waiting on the engine can take a moment (a model load stops at its next progress report).
            self.statusBar().showMessage("Closing…")
            self.hide()
            self.engine.shutdown()
            self.library_watch.stop()
            self.library_list.cleanup()
            self.grid.cleanup()
        super().closeEvent(event)


def _titled(title: str, widget: QWidget) -> QWidget:
    """``widget`` under a bold caption, as one widget for a splitter."""
    box = QWidget()
    layout = captioned(title, widget)
    layout.setContentsMargins(0, 0, 0, 0)
    box.setLayout(layout)
    return box
