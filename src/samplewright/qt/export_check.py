"""The after-export check for transformers: run each written folder through
generate()'s own processors on the current passage and tell the user how close
it came to samplewright's chain.

The check (:func:`samplewright.core.engines.fidelity.verify_folder`) runs the
model, so it is queued on the window's engine thread like an audition: it never
runs at the same time as one (they would share the model and the cores), and
the :class:`ExportChecker` (on the UI thread) shows its plain results in the
status bar and a message.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from PySide6.QtCore import QObject, Signal
from PySide6.QtWidgets import QStatusBar

from ..core.engines.folder_check import FolderCheck
from ..core.presets import Preset
from .prompts import QtPrompts

if TYPE_CHECKING:
    from .workers import EngineThread


class ExportChecker(QObject):
    """Starts the after-export check and shows its results.

    Args:
        engine: the window's engine thread (the check is queued there).
        passage_text: returns the current passage.

    Signals:
        finished(list[FolderCheck]): the check ended (tests wait on it).
    """

    finished = Signal(object)

    def __init__(
        self,
        engine: EngineThread,
        passage_text: Callable[[], str],
        prompts: QtPrompts,
        status: QStatusBar,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.engine, self.passage_text = engine, passage_text
        self.prompts, self.status = prompts, status
        self.serial: int | None = None  # the check queued or running
        engine.worker.export_checked.connect(self._on_checked)
        engine.worker.failed.connect(self._on_failed)

    def start(self, presets: Sequence[Preset], files: Sequence[Path]) -> bool:
        """Queue a check of each written ``generation_config.json``'s folder; False (and says why)
        when it cannot start."""
        passage = self.passage_text().strip()
        why = None
        if self.engine.worker.loaded_model is None:
            why = "no model is loaded yet. Load one, then export again with the check ticked."
        elif not passage:
            why = "the passage is empty. Type or open a passage, then export again with the check ticked."
        elif self.running():
            why = "an earlier check is still running. Wait for it, then export again."
        if why is not None:
            self.prompts.show_error("The export was written but not checked", f"It was not checked because {why}")
            return False
        jobs = [(Path(path).parent, preset) for path, preset in zip(files, presets, strict=True)]
        self.status.showMessage(
            f"Checking {len(jobs)} exported preset(s) with transformers on the passage (after any audition under way)…"
        )
        self.serial = self.engine.check_export(jobs, passage)
        return True

    def running(self) -> bool:
        """True while a check is queued or runs."""
        return self.serial is not None

    def _on_checked(self, serial: int, results: list[FolderCheck]) -> None:
        if serial != self.serial:
            return
        self.serial = None
        lines = [result.line() for result in results]
        self.status.showMessage("transformers check: " + "; ".join(lines), 15000)
        self.prompts.show_info(
            "transformers check of the export",
            "Each exported folder run through transformers' generate() processors on the current passage, "
            "against samplewright's own chain:\n\n" + "\n".join(lines),
        )
        self.finished.emit(results)

    def _on_failed(self, serial: int, kind: str, message: str) -> None:
        if serial != self.serial:
            return
        self.serial = None
        self.status.showMessage("The transformers check of the export did not run.", 15000)
        if message:
            self.prompts.show_error("The export was written but not checked", message)
