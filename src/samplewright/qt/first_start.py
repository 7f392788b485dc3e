"""The first start's two moments: an unwritable model cache, and the model's one-time conversion.

:func:`offer_cache_folder` runs before the window opens: when the converted-model cache cannot be
written it says so and offers a folder of the user's choice (kept for later starts).
:func:`watch_first_conversion` shows a progress dialog while the default model is converted on
first use (what is happening, time so far); it closes itself when the model is ready.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QElapsedTimer, QSettings, Qt, QTimer, Slot
from PySide6.QtWidgets import QFileDialog, QMessageBox, QProgressDialog, QWidget

from ..core.engine import model as model_files
from ..core.library.user_state import default_config_dir

SETTINGS_FILE = "model-cache.ini"
FOLDER_KEY = "cache/folder"


def _settings(config_dir: Path | None = None) -> QSettings:
    folder = config_dir or default_config_dir()
    return QSettings(str(folder / SETTINGS_FILE), QSettings.Format.IniFormat)


def cache_problem(root: Path | None = None) -> str | None:
    """Why the converted-model cache cannot be written, or None when it can."""
    root = root or model_files.cache_root()
    try:
        root.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=root, prefix=".write-check-"):
            pass
    except OSError as error:
        return f"{root}: {error.strerror or error}"
    return None


def use_chosen_cache_folder(config_dir: Path | None = None) -> None:
    """Point the cache at the folder chosen at an earlier start, unless the environment already chose."""
    chosen = _settings(config_dir).value(FOLDER_KEY, "")
    if chosen and not os.environ.get(model_files.CACHE_ENV):
        os.environ[model_files.CACHE_ENV] = str(chosen)


def offer_cache_folder(
    parent: QWidget | None = None,
    config_dir: Path | None = None,
    ask_folder: Callable[[], str | None] | None = None,
    wants_folder: Callable[[str], bool] | None = None,
) -> str | None:
    """When the cache cannot be written, say so and offer to keep the converted model elsewhere.

    Args:
        parent: the dialogs' parent.
        config_dir: where the choice is kept (default: the user config folder).
        ask_folder: asks for a folder, None when cancelled (default: a folder dialog).
        wants_folder: ``wants_folder(problem)`` asks whether to choose a folder (default: a message box).

    Returns:
        The problem found (None when the cache is writable).
    """
    use_chosen_cache_folder(config_dir)
    problem = cache_problem()
    if problem is None:
        return None
    ask = ask_folder or (lambda: QFileDialog.getExistingDirectory(parent, "Keep the converted model in") or None)
    wants = wants_folder or (lambda reason: _ask_about_cache(reason, parent))
    while True:
        if not wants(problem):
            return problem
        folder = ask()
        if not folder:
            return problem
        again = cache_problem(Path(folder) / "models")
        if again is None:
            os.environ[model_files.CACHE_ENV] = folder
            _settings(config_dir).setValue(FOLDER_KEY, folder)
            return problem
        problem = again


def _ask_about_cache(problem: str, parent: QWidget | None) -> bool:
    box = QMessageBox(QMessageBox.Icon.Warning, "The model cache cannot be written", "", parent=parent)
    box.setText(
        f"Samplewright cannot write its model cache ({problem}). Without it the model is converted "
        "again at every start (about a minute). Choose a folder to keep the converted model in "
        "(about 540 MB), or continue without keeping it."
    )
    choose = box.addButton("Choose a folder…", QMessageBox.ButtonRole.AcceptRole)
    box.addButton("Continue without", QMessageBox.ButtonRole.RejectRole)
    box.exec()
    return box.clickedButton() is choose


def conversion_pending(source: str | None = None) -> bool:
    """Whether loading the default model will convert it first (no converted copy in the cache yet)."""
    if source:
        return False
    try:
        gguf = model_files.default_model_path()
        return not (model_files.cache_root() / model_files.cache_key(gguf) / "config.json").is_file()
    except Exception:  # a missing model is reported by the load itself
        return False


class ConversionProgress(QProgressDialog):
    """Follows the engine worker's model load: its messages, progress and the time so far."""

    def __init__(self, worker, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Preparing the model")
        self.setWindowModality(Qt.WindowModality.NonModal)
        self.setCancelButton(None)
        self.setMinimumDuration(0)
        self.setRange(0, 100)
        self.setMinimumWidth(480)
        self._message = "Preparing the built-in model for its first use"
        self._clock = QElapsedTimer()
        self._clock.start()
        self._tick = QTimer(self)
        self._tick.timeout.connect(self._show)
        self._tick.start(1000)
        worker.load_progress.connect(self.on_progress)
        worker.model_ready.connect(self.on_finished)
        worker.failed.connect(self.on_failed)
        self._show()

    @Slot(int, str, object)
    def on_progress(self, serial: int, message: str, fraction) -> None:
        """A phase of the load: its message and how far it is."""
        self._message = message
        if fraction is not None:
            self.setValue(int(100 * fraction))
        self._show()

    @Slot(int, object)
    def on_finished(self, serial: int, info) -> None:
        """The model is ready: close."""
        self.finish()

    @Slot(int, str, str)
    def on_failed(self, serial: int, kind: str, message: str) -> None:
        """A failed load closes the dialog (the window reports the failure)."""
        if kind == "load":
            self.finish()

    def finish(self) -> None:
        """Stop the clock and close."""
        self._tick.stop()
        self.close()

    def _show(self) -> None:
        seconds = self._clock.elapsed() // 1000
        self.setLabelText(
            f"{self._message}\n\n{seconds} s so far. The first start converts the built-in model once "
            "(usually under a minute); later starts take a few seconds."
        )


def watch_first_conversion(window) -> ConversionProgress | None:
    """Show :class:`ConversionProgress` over ``window`` when its first model load converts the model."""
    if not conversion_pending(window.models.saved_source()):
        return None
    dialog = ConversionProgress(window.engine.worker, window)
    dialog.show()
    return dialog
