"""The model and the passage: load or switch the model with progress shown, open
passages, and show how long the passage is in the model's tokens."""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtCore import QObject, QSettings, QTimer, Signal
from PySide6.QtWidgets import QLabel, QProgressBar

from .passage_panel import COUNT_DELAY_MS, QtPassagePanel
from .prompts import QtPrompts
from .workers import EngineThread, EngineWorker, ModelInfo


def _default_loader(source, progress):
    from ..core.engine.model import load_model

    return load_model(source, progress)


def _default_engine(loaded):
    from ..core.engine.engine import Engine

    return Engine(loaded)


def _default_metrics(samples):
    from ..core.sampling.metrics import preset_metrics

    return preset_metrics(samples)


def default_worker(model_loader: Callable | None = None, engine_factory: Callable | None = None) -> EngineWorker:
    """The engine worker with the real model loader, engine and metrics, unless others are given."""
    return EngineWorker(model_loader or _default_loader, engine_factory or _default_engine, _default_metrics)


class ModelController(QObject):
    """Loads models on the engine thread and keeps the passage's token count current.

    Args:
        engine: the engine thread.
        settings: the window's settings (the model used last is kept there).
        prompts: where problems are shown.
        label, progress: the status bar's model text and loading bar.
        passage: the passage panel.

    Signals:
        model_switched(): a different model replaced the loaded one (samples of the old one are stale).
        model_ready(ModelInfo): a model is loaded and ready.
    """

    model_switched = Signal()
    model_ready = Signal(object)

    def __init__(
        self,
        engine: EngineThread,
        settings: QSettings,
        prompts: QtPrompts,
        label: QLabel,
        progress: QProgressBar,
        passage: QtPassagePanel,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.engine, self.settings, self.prompts = engine, settings, prompts
        self.label, self.progress, self.passage = label, progress, passage
        self.info: ModelInfo | None = None
        self.load_serial: int | None = None  # the newest model load asked for
        self._count_serial: int | None = None
        self._pending_source: str | None = None
        self._loaded_source: str | None = None
        worker = engine.worker
        worker.load_progress.connect(self._on_load_progress)
        worker.model_ready.connect(self._on_model_ready)
        worker.failed.connect(self._on_failed)
        worker.passage_counted.connect(self._on_passage_counted)
        passage.passage_settled.connect(self.count_passage)
        # An instruction typed key by key is counted once it rests, like the passage.
        self._framing_settle = QTimer(self)
        self._framing_settle.setSingleShot(True)
        self._framing_settle.setInterval(COUNT_DELAY_MS)
        self._framing_settle.timeout.connect(lambda: self.count_passage(self.passage.text()))
        passage.framing_changed.connect(self._framing_settle.start)
        passage.open_requested.connect(self.open_passage)

    # -- model -----------------------------------------------------------------------------
    def load_model(self, source: str | None) -> None:
        """Start loading a model on the engine thread (None = the default model); a load still
        running is cancelled first."""
        if self.load_serial is not None:
            self.engine.cancel(self.load_serial)
        self.load_serial = self.engine.load_model(source)
        self._pending_source = source
        self.progress.setRange(0, 0)
        self.progress.show()
        self.label.setText("Loading model…")

    def saved_source(self) -> str | None:
        """The model used last time (None: the default model)."""
        value = self.settings.value("model/source", "")
        return value if isinstance(value, str) and value else None

    def choose_model_folder(self) -> None:
        """Ask for a model folder and load it."""
        folder = self.prompts.ask_folder("Choose a model folder (with config.json)")
        if folder:
            self.load_model(folder)

    def choose_model_file(self) -> None:
        """Ask for a GGUF file and load it."""
        path = self.prompts.ask_open_path("Choose a GGUF model file", "GGUF models (*.gguf);;All files (*)")
        if path:
            self.load_model(path)

    def _on_load_progress(self, serial: int, message: str, fraction) -> None:
        if serial != self.load_serial:
            return
        if fraction is None:
            self.progress.setRange(0, 0)
        else:
            self.progress.setRange(0, 100)
            self.progress.setValue(int(100 * fraction))
        self.label.setText(message)

    def _on_model_ready(self, serial: int, info: ModelInfo) -> None:
        if serial != self.load_serial:
            return
        changed = self.info is not None and (self.info != info or self._loaded_source != self._pending_source)
        self.info = info
        self._loaded_source = self._pending_source
        if changed:
            self.model_switched.emit()
        self.progress.hide()
        self.label.setText(
            f"Model: {info.name} · {_count(info.n_parameters)} parameters · context {info.context_length:,} tokens"
        )
        self.label.setToolTip(f"{info.description}\n{info.source}")
        self.settings.setValue("model/source", self._pending_source or "")
        self.passage.set_chat_template(info.chat_template)
        self.model_ready.emit(info)
        self.count_passage(self.passage.text())

    def _on_failed(self, serial: int, kind: str, message: str) -> None:
        if kind == "load" and serial == self.load_serial:
            self.progress.hide()
            self.label.setText(f"Model: {self.info.name}" if self.info else "No model loaded")
            if message:
                self.prompts.show_error("The model could not be loaded", message)
        elif kind == "count" and serial == self._count_serial:
            self._count_serial = None
            if message:
                self.passage.show_note(f"The tokens could not be counted: {message}")

    # -- passage ---------------------------------------------------------------------------
    def open_passage_dialog(self) -> None:
        """Ask for a passage file and open it."""
        path = self.prompts.ask_open_path("Open a passage", "Text (*.txt *.md);;All files (*)")
        if path:
            self.open_passage(path)

    def open_passage(self, path: str) -> None:
        """Read a passage file into the passage editor."""
        from ..core.engine.passages import read_passage

        try:
            self.passage.set_text(read_passage(path), str(path))
        except Exception as error:  # PassageError and friends carry the reason
            self.prompts.show_error("The passage could not be opened", str(error))

    def count_passage(self, text: str) -> None:
        """Ask the engine how many tokens the passage has."""
        if self.info is None:
            if text.strip():
                self.passage.show_note("The token count appears once the model has loaded.")
            return
        if text.strip():
            if self._count_serial is not None:
                self.engine.cancel(self._count_serial)
            self._count_serial = self.engine.count_passage(text, self.passage.framing())

    def _on_passage_counted(self, serial: int, counted) -> None:
        if serial != self._count_serial or self.info is None:
            return
        tokens = counted.tokens
        self.passage.show_length(len(tokens.ids), tokens.dropped, tokens.limit, counted.passage_cut, counted.framed)


def _count(n: int) -> str:
    """A parameter count for people: 46,240 · 12.3 M · 135 M · 1.7 B."""
    if n >= 1e9:
        return f"{n / 1e9:.1f} B"
    if n >= 1e6:
        return f"{n / 1e6:.0f} M" if n >= 1e8 else f"{n / 1e6:.1f} M"
    return f"{n:,}"
