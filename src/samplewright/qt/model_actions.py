"""The window's model and passage behaviour: load or switch the model with
progress shown, open passages, and show how long the passage is."""

from __future__ import annotations


class ModelActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`."""

    _model_serial: int | None = None
    _count_serial: int | None = None
    _pending_source: str | None = None
    _loaded_source: str | None = None

    # -- model -----------------------------------------------------------------------------
    def load_model(self, source: str | None) -> None:
        """Start loading a model on the engine thread (None = the default model); a load still
        running is cancelled first."""
        if self._model_serial is not None:
            self.engine.cancel(self._model_serial)
        self._model_serial = self.engine.load_model(source)
        self._pending_source = source
        self.model_progress.setRange(0, 0)
        self.model_progress.show()
        self.model_label.setText("Loading model…")

    def choose_model_folder(self) -> None:
        """Ask for a model folder and load it."""
        folder = self.ask_folder("Choose a model folder (with config.json)")
        if folder:
            self.load_model(folder)

    def choose_model_file(self) -> None:
        """Ask for a GGUF file and load it."""
        path = self.ask_open_path("Choose a GGUF model file", "GGUF models (*.gguf);;All files (*)")
        if path:
            self.load_model(path)

    def _on_load_progress(self, serial: int, message: str, fraction) -> None:
        if serial != self._model_serial:
            return
        if fraction is None:
            self.model_progress.setRange(0, 0)
        else:
            self.model_progress.setRange(0, 100)
            self.model_progress.setValue(int(100 * fraction))
        self.model_label.setText(message)

    def _on_model_ready(self, serial: int, info) -> None:
        if serial != self._model_serial:
            return
        changed = self.model_info is not None and (
            self.model_info != info or self._loaded_source != self._pending_source
        )
        self.model_info = info
        self._loaded_source = self._pending_source
        if changed:
            had_samples = self._last_request is not None
            self.clear_audition()
            if had_samples:
                self.statusBar().showMessage(
                    "The model changed, so the earlier samples were cleared: they were written by the old "
                    "model. Press Generate all to write new ones.",
                    10000,
                )
        self.model_progress.hide()
        self.model_label.setText(
            f"Model: {info.name} · {_count(info.n_parameters)} parameters · context {info.context_length:,} tokens"
        )
        self.model_label.setToolTip(f"{info.description}\n{info.source}")
        self.settings.setValue("model/source", self._pending_source or "")
        self._update_buttons()
        self.count_passage(self.passage.text())

    def _saved_model_source(self) -> str | None:
        return self.settings.value("model/source", "") or None

    def _on_job_failed(self, serial: int, kind: str, message: str) -> None:
        if kind == "load" and serial == self._model_serial:
            self.model_progress.hide()
            self.model_label.setText(f"Model: {self.model_info.name}" if self.model_info else "No model loaded")
            if message:
                self.show_error("The model could not be loaded", message)
        elif kind in ("audition", "step"):
            self._audition_failed(serial, kind, message)
        elif kind == "count" and serial == self._count_serial:
            self._count_serial = None
            if message:
                self.passage.show_note(f"The tokens could not be counted: {message}")

    # -- passage ---------------------------------------------------------------------------
    def open_passage_dialog(self) -> None:
        """Ask for a passage file and open it."""
        path = self.ask_open_path("Open a passage", "Text (*.txt *.md);;All files (*)")
        if path:
            self.open_passage(path)

    def open_passage(self, path: str) -> None:
        """Read a passage file into the passage editor."""
        from ..core.engine.passages import read_passage

        try:
            self.passage.set_text(read_passage(path), str(path))
        except Exception as error:  # PassageError and friends carry the reason
            self.show_error("The passage could not be opened", str(error))

    def count_passage(self, text: str) -> None:
        """Ask the engine how many tokens the passage has."""
        if self.model_info is None:
            if text.strip():
                self.passage.show_note("The token count appears once the model has loaded.")
            return
        if text.strip():
            if self._count_serial is not None:
                self.engine.cancel(self._count_serial)
            self._count_serial = self.engine.count_passage(text)

    def _on_passage_counted(self, serial: int, counted) -> None:
        if serial != self._count_serial or self.model_info is None:
            return
        self.passage.show_length(len(counted.ids), counted.dropped, counted.limit, counted.cut_at)


def _count(n: int) -> str:
    """A parameter count for people: 46,240 · 12.3 M · 135 M · 1.7 B."""
    if n >= 1e9:
        return f"{n / 1e9:.1f} B"
    if n >= 1e6:
        return f"{n / 1e6:.0f} M" if n >= 1e8 else f"{n / 1e6:.1f} M"
    return f"{n:,}"
