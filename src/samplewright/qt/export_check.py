"""The after-export check for transformers: run each written folder through
generate()'s own processors on the current passage and tell the user how close
it came to samplewright's chain.

The check (:func:`samplewright.core.engines.fidelity.verify_folder`) runs the
model, so it runs on a thread of its own; that thread only emits plain results
and the :class:`ExportChecker` (on the UI thread) shows them in the status bar
and a message.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from PySide6.QtCore import QObject, QThread, Signal
from PySide6.QtWidgets import QStatusBar

from ..core.presets import Preset
from .prompts import QtPrompts


@dataclasses.dataclass(frozen=True)
class FolderCheck:
    """One exported folder's check: the verdict and largest difference, or why it could not run."""

    preset: str
    folder: Path
    verdict: str | None = None
    max_tv: float | None = None
    problem: str | None = None

    def line(self) -> str:
        """One line for the user: ``name: verdict (largest difference 0.0012)``."""
        if self.problem is not None:
            return f"{self.preset}: not checked ({self.problem})"
        return f"{self.preset}: {self.verdict} (largest difference {self.max_tv:.3g})"


def check_folder(folder: Path, preset: Preset, loaded: Any, passage: str) -> FolderCheck:
    """Check one exported folder (runs the model: call it off the UI thread)."""
    from ..core.engines.fidelity import verify_folder

    try:
        measure = verify_folder(folder, preset, loaded, passage)
    except Exception as error:  # reported in the result; the other folders are still checked
        return FolderCheck(preset.name, folder, problem=str(error) or type(error).__name__)
    return FolderCheck(preset.name, folder, measure.verdict, measure.max_tv)


class ExportCheckThread(QThread):
    """Checks the folders one after the other; emits ``checked(list[FolderCheck])`` at the end.
    Never touches a widget."""

    checked = Signal(object)

    def __init__(self, jobs: Sequence[tuple[Path, Preset]], loaded: Any, passage: str, parent=None):
        super().__init__(parent)
        self.jobs, self.loaded, self.passage = list(jobs), loaded, passage

    def run(self) -> None:
        """Check every folder and hand the results over."""
        self.checked.emit([check_folder(folder, preset, self.loaded, self.passage) for folder, preset in self.jobs])


class ExportChecker(QObject):
    """Starts the after-export check and shows its results.

    Args:
        loaded_model: returns the window's loaded model, or None while none is loaded.
        passage_text: returns the current passage.

    Signals:
        finished(list[FolderCheck]): the check ended (tests wait on it).
    """

    finished = Signal(object)

    def __init__(
        self,
        loaded_model: Callable[[], Any],
        passage_text: Callable[[], str],
        prompts: QtPrompts,
        status: QStatusBar,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.loaded_model, self.passage_text = loaded_model, passage_text
        self.prompts, self.status = prompts, status
        self.thread: ExportCheckThread | None = None

    def start(self, presets: Sequence[Preset], files: Sequence[Path]) -> bool:
        """Check each written ``generation_config.json``'s folder; False (and says why) when it cannot start."""
        loaded, passage = self.loaded_model(), self.passage_text().strip()
        why = None
        if loaded is None:
            why = "no model is loaded yet. Load one, then export again with the check ticked."
        elif not passage:
            why = "the passage is empty. Type or open a passage, then export again with the check ticked."
        elif self.running():
            why = "an earlier check is still running. Wait for it, then export again."
        if why is not None:
            self.prompts.show_error("The export was written but not checked", f"It was not checked because {why}")
            return False
        jobs = [(Path(path).parent, preset) for path, preset in zip(files, presets, strict=True)]
        self.thread = ExportCheckThread(jobs, loaded, passage)
        self.thread.checked.connect(self._on_checked)
        self.status.showMessage(f"Checking {len(jobs)} exported preset(s) with transformers on the passage…")
        self.thread.start()
        return True

    def running(self) -> bool:
        """True while a check runs."""
        return self.thread is not None and self.thread.isRunning()

    def _on_checked(self, results: list[FolderCheck]) -> None:
        lines = [result.line() for result in results]
        self.status.showMessage("transformers check: " + "; ".join(lines), 15000)
        self.prompts.show_info(
            "transformers check of the export",
            "Each exported folder run through transformers' generate() processors on the current passage, "
            "against samplewright's own chain:\n\n" + "\n".join(lines),
        )
        self.finished.emit(results)

    def shutdown(self) -> None:
        """Wait for a running check to end (the window calls this when it closes)."""
        if self.thread is not None:
            self.thread.wait()
