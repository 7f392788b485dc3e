"""The workbench window: presets on the left, passage and audition in the
middle, the next-token view on the right, a review caution across the top.

The window only arranges views and forwards requests: model loading,
generation and step views run on the engine thread (``workers.py``); the
audition's samples live in a core :class:`AuditionSession`.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QSettings, Qt
from PySide6.QtGui import QAction, QKeySequence, QUndoStack
from PySide6.QtWidgets import (
    QCheckBox,
    QFileDialog,
    QHBoxLayout,
    QInputDialog,
    QLabel,
    QMainWindow,
    QMenu,
    QMessageBox,
    QProgressBar,
    QPushButton,
    QSpinBox,
    QSplitter,
    QVBoxLayout,
    QWidget,
)

from ..core.engine.model import DEFAULT_NAME
from ..core.engine.session import AuditionSession
from ..core.library.user_state import UserState, default_config_dir
from . import palette
from .audition_actions import AuditionActions
from .audition_view import QtAuditionGrid
from .library_actions import LibraryActions
from .library_dialogs import captioned
from .library_folder import LibraryFolderActions
from .library_panel import QtLibraryList
from .model_actions import ModelActions
from .passage_panel import QtPassagePanel
from .preset_actions import PresetActions
from .preset_editor import QtPresetEditor
from .step_inspector import QtStepInspector
from .window_state import WindowState
from .workers import EngineThread, EngineWorker

CAUTION = (
    "⚠ Generated text can be wrong, biased or offensive. A person must review it under your "
    "team's own review policy before it is used anywhere."
)
SETTINGS_FILE = "window.ini"


def _default_loader(source, progress):
    from ..core.engine.model import load_model

    return load_model(source, progress)


def _default_engine(loaded):
    from ..core.engine.engine import Engine

    return Engine(loaded)


def _default_metrics(samples):
    from ..core.sampling.metrics import preset_metrics

    return preset_metrics(samples)


class MainWindow(
    AuditionActions, PresetActions, LibraryActions, LibraryFolderActions, ModelActions, WindowState, QMainWindow
):
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
        self.settings = QSettings(str(self.config_dir / SETTINGS_FILE), QSettings.IniFormat)
        self.user_state = UserState(self.config_dir)
        self.library = self._open_first_library(library_dir)
        self.undo_stack = QUndoStack(self)
        self.session = AuditionSession()
        self.model_info = None
        self.last_error: str | None = None
        self._closed = False
        worker = EngineWorker(model_loader or _default_loader, engine_factory or _default_engine, _default_metrics)
        self.engine = EngineThread(worker, self)
        self._build_views()
        self._init_library_watch()
        self._build_actions()
        self._build_menus()
        self._connect()
        self._init_audition_state()
        self.restore_state()
        self._show_library_folder()
        if self.library_problem:
            self._show_library_notice(self.library_problem)
        if self.user_state.problem:
            self.statusBar().showMessage(self.user_state.problem, 8000)
        if load_on_start:
            self.load_model(model_source if model_source is not None else self._saved_model_source())

    # -- construction ----------------------------------------------------------------
    def _build_views(self) -> None:
        self.library_list = QtLibraryList(self.library, self, self.undo_stack, lambda text: self.show_error(text))
        self.editor = QtPresetEditor()
        self.passage = QtPassagePanel()
        self.grid = QtAuditionGrid(self.session)
        self.inspector = QtStepInspector()
        left = QSplitter(Qt.Vertical)
        left.addWidget(self._library_box())
        left.addWidget(_titled("Edit preset", self.editor))
        left.setStretchFactor(1, 2)
        middle = QSplitter(Qt.Vertical)
        middle.addWidget(self.passage)
        middle.addWidget(self._audition_box())
        middle.setStretchFactor(1, 3)
        self.splitters = {"main": QSplitter(Qt.Horizontal), "left": left, "middle": middle}
        main = self.splitters["main"]
        for widget in (left, middle, self.inspector):
            main.addWidget(widget)
        main.setStretchFactor(1, 3)
        main.setStretchFactor(2, 2)
        main.setSizes([290, 700, 410])
        left.setSizes([210, 590])
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

    def _audition_box(self) -> QWidget:
        self.samples_spin = _spin(1, 16, 4, "Samples per preset", "How many samples each preset writes (1–16)")
        self.tokens_spin = _spin(
            1,
            512,
            48,
            "New tokens",
            "The longest continuation, in tokens; a preset's own max_new_tokens can make it shorter",
        )
        self.seed_spin = _spin(0, 2**31 - 1, 1234, "Seed", "The random seed; the same seed gives the same samples")
        self.new_seed_box = QCheckBox("new seed each run")
        self.new_seed_box.setToolTip("Pick a fresh seed for every run instead of keeping this one")
        self.generate_button = QPushButton("Generate all")
        self.stop_button = QPushButton("Stop")
        self.progress = QProgressBar()
        self.progress.setAccessibleName("Generation progress")
        self.progress.setTextVisible(True)
        self.progress.setFormat("%v / %m tokens")
        controls = QHBoxLayout()
        for label, widget in (
            ("Samples", self.samples_spin),
            ("New tokens", self.tokens_spin),
            ("Seed", self.seed_spin),
        ):
            caption = QLabel(label)
            caption.setBuddy(widget)
            controls.addWidget(caption)
            controls.addWidget(widget)
        controls.addWidget(self.new_seed_box)
        controls.addStretch(1)
        controls.addWidget(self.generate_button)
        controls.addWidget(self.stop_button)
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(QLabel("<b>Audition</b> — presets side by side; sample rows share their random draws"))
        layout.addLayout(controls)
        layout.addWidget(self.progress)
        layout.addWidget(self.grid, 1)
        return box

    def _action(self, text: str, slot: Callable, shortcut=None, tip: str = "") -> QAction:
        action = QAction(text, self)
        if shortcut is not None:
            action.setShortcut(QKeySequence(shortcut))
        action.setToolTip(f"{tip or text} ({action.shortcut().toString()})" if shortcut else (tip or text))
        action.setStatusTip(tip or text)
        action.triggered.connect(lambda _=False: slot())
        self.addAction(action)
        return action

    def _build_actions(self) -> None:
        a = self._action
        self.actions = {
            "open": a("Open passage…", self.open_passage_dialog, QKeySequence.Open, "Open a .txt or .md passage"),
            "import": a(
                "Import settings file…",
                self.import_settings,
                "Ctrl+I",
                "Bring presets from a settings file, or a preset saved as a copy",
            ),
            "export": a(
                "Export chosen presets…",
                self.export_chosen,
                "Ctrl+E",
                "Write the ticked presets to a settings file to share",
            ),
            "library_folder": a(
                "Use library folder…",
                self.choose_library_folder,
                "Ctrl+Shift+O",
                "Show the presets in another folder, for example your team's shared folder",
            ),
            "own_library": a(
                "Back to my own library",
                self.use_own_library,
                None,
                "Show the presets in your own library folder again",
            ),
            "quit": a("Quit", self.close, QKeySequence.Quit),
            "copy": a(
                "Copy sample text",
                self.copy_current_sample,
                "Ctrl+Shift+C",
                "Copy the text of the sample being inspected",
            ),
            "new": a("New preset", self.new_preset, QKeySequence.New, "Add a preset with neutral settings"),
            "duplicate": a("Duplicate preset", self.duplicate_preset, "Ctrl+D", "Copy the highlighted preset"),
            "rename": a("Rename preset…", self.rename_preset, "F2", "Give the highlighted preset a new name"),
            "delete": a(
                "Delete preset",
                self.delete_preset,
                QKeySequence.Delete,
                "Move the highlighted preset to the library's trash (undo with Ctrl+Z)",
            ),
            "favourite": a(
                "Favourite ★",
                self.library_list.toggle_favourite,
                "Ctrl+B",
                "Mark or unmark the highlighted preset as a favourite",
            ),
            "save": a("Save preset", self.editor.save, QKeySequence.Save, "Save the edited preset to the library"),
            "save_copy": a(
                "Save a copy as file…",
                self.save_copy_as_file,
                QKeySequence.SaveAs,
                "Write the edited preset, unsaved edits included, to a file of your choice",
            ),
            "history": a(
                "History…",
                self.show_history,
                "Ctrl+H",
                "Earlier revisions of the highlighted preset, what changed, and a way back",
            ),
            "compare": a(
                "Compare with…",
                self.compare_presets,
                "Ctrl+Shift+D",
                "Show the highlighted preset and another one side by side, field by field",
            ),
            "trash": a(
                "Deleted presets…",
                self.show_trash,
                "Ctrl+Shift+T",
                "List the presets deleted from this library and restore one",
            ),
            "rescan": a("Reload library", self.rescan_library, "F5", "Pick up presets others changed"),
            "generate": a("Generate all", self.generate_all, "Ctrl+Return", "Write samples for every ticked preset"),
            "regenerate": a(
                "New samples for this preset",
                self.regenerate_current,
                "Ctrl+R",
                "Write new samples for the inspected preset; the other columns stay",
            ),
            "stop": a("Stop", self.stop_generation, "Esc", "Stop the run; samples so far are kept"),
            "prev_step": a("Previous step", lambda: self.inspector.move(-1), "Alt+Left"),
            "next_step": a("Next step", lambda: self.inspector.move(+1), "Alt+Right"),
            "model_folder": a("Open model folder…", self.choose_model_folder, None, "Load a transformers model folder"),
            "model_gguf": a("Open GGUF file…", self.choose_model_file, None, "Load a .gguf model file"),
            "model_default": a(
                "Use the default model", lambda: self.load_model(None), None, f"Load the default model, {DEFAULT_NAME}"
            ),
            "legend": a("What the letters mean", self.show_legend, "F1"),
        }
        # Delete only acts in the preset list, never on text being edited elsewhere in the window.
        self.actions["delete"].setShortcutContext(Qt.WidgetWithChildrenShortcut)
        self.removeAction(self.actions["delete"])
        self.library_list.tree.addAction(self.actions["delete"])
        self.undo_action = self.undo_stack.createUndoAction(self, "Undo")
        self.undo_action.setShortcut(QKeySequence.Undo)
        self.redo_action = self.undo_stack.createRedoAction(self, "Redo")
        self.redo_action.setShortcut(QKeySequence.Redo)
        self.passage.set_open_action(self.actions["open"])
        self.generate_button.setToolTip(self.actions["generate"].toolTip())
        self.stop_button.setToolTip(self.actions["stop"].toolTip())
        for key in ("new", "duplicate", "rename", "delete"):
            self.library_list.add_button(self.actions[key]).setText(self.actions[key].text().split()[0])
        self.library_list.set_context_actions(
            [
                self.actions[k] if k else None
                for k in ("history", "compare", None, "duplicate", "rename", "delete", "favourite")
            ]
        )

    def _build_menus(self) -> None:
        bar = self.menuBar()
        menus = {
            "&File": [
                "open",
                "import",
                "export",
                None,
                "library_folder",
                self._build_recent_menu(),
                "own_library",
                None,
                "quit",
            ],
            "&Edit": [self.undo_action, self.redo_action, None, "copy"],
            "&Presets": [
                "new",
                "duplicate",
                "rename",
                "delete",
                "favourite",
                None,
                "save",
                "save_copy",
                None,
                "history",
                "compare",
                "trash",
                None,
                "rescan",
            ],
            "&Audition": ["generate", "regenerate", "stop", None, "prev_step", "next_step"],
            "&Model": ["model_folder", "model_gguf", "model_default"],
            "&Help": ["legend"],
        }
        for title, entries in menus.items():
            menu = bar.addMenu(title)
            for entry in entries:
                if entry is None:
                    menu.addSeparator()
                elif isinstance(entry, QMenu):
                    menu.addMenu(entry)
                else:
                    menu.addAction(self.actions[entry] if isinstance(entry, str) else entry)

    def _connect(self) -> None:
        self.generate_button.clicked.connect(self.generate_all)
        self.stop_button.clicked.connect(self.stop_generation)
        self.library_list.current_changed.connect(self._on_current_preset_changed)
        self.editor.save_requested.connect(self.save_edited_preset)
        self.editor.revert_button.clicked.connect(self._on_reverted)  # runs after the editor's own revert
        self.passage.passage_settled.connect(self.count_passage)
        self.passage.open_requested.connect(self.open_passage)
        worker = self.engine.worker
        worker.load_progress.connect(self._on_load_progress)
        worker.model_ready.connect(self._on_model_ready)
        worker.failed.connect(self._on_job_failed)
        worker.passage_counted.connect(self._on_passage_counted)
        self._connect_audition()

    # -- messages and questions (tests replace these) -------------------------------------
    def show_error(self, message: str, detail: str | None = None) -> None:
        """Show a problem in a message box (``detail``, when given, is the message and the first is the title)."""
        title, text = ("Samplewright", message) if detail is None else (message, detail)
        self.last_error = text
        QMessageBox.warning(self, title, text)

    def ask_open_path(self, title: str, file_filter: str) -> str | None:
        """Ask for a file to open; None when cancelled."""
        path, _ = QFileDialog.getOpenFileName(self, title, "", file_filter)
        return path or None

    def ask_save_path(self, title: str, file_filter: str, suggested: str = "") -> str | None:
        """Ask for a file to write; None when cancelled."""
        path, _ = QFileDialog.getSaveFileName(self, title, suggested, file_filter)
        return path or None

    def ask_folder(self, title: str) -> str | None:
        """Ask for a folder; None when cancelled."""
        return QFileDialog.getExistingDirectory(self, title) or None

    def ask_text(self, title: str, label: str, text: str) -> str | None:
        """Ask for one line of text; None when cancelled."""
        value, ok = QInputDialog.getText(self, title, label, text=text)
        return value if ok else None

    def show_legend(self) -> None:
        """Explain the plot's colours and letters."""
        from .palette import stage_legend

        QMessageBox.information(
            self,
            "Reading the next-token view",
            (
                "Grey bars: the model's own distribution. Coloured bars: the distribution after each preset "
                "(numbered as in the audition columns).\n\nA dashed outline with a letter marks a token a preset "
                "removed; the letter names the stage that removed it:\n"
                + stage_legend()
                + "\n\nThe shaded row with ▶ is the token the inspected sample drew."
            ),
        )

    def closeEvent(self, event) -> None:
        """Ask about unsaved edits, then cancel any run, stop the engine thread and keep the window's state."""
        if not self._closed:
            if not self.settle_draft():
                event.ignore()
                return
            self._closed = True
            self.save_state()
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


def _spin(low: int, high: int, value: int, name: str, tip: str) -> QSpinBox:
    spin = QSpinBox()
    spin.setRange(low, high)
    spin.setValue(value)
    spin.setAccessibleName(name)
    spin.setToolTip(tip)
    return spin
