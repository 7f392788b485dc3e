"""The export dialog: choose a target, see each preset's measured fidelity
before anything is written, and add an engine's closest expressible variant to
the audition.

The dialog writes nothing itself. After ``exec()`` returns ``Accepted`` the
caller asks for the destination and writes with
:func:`samplewright.core.engines.exporting.export_to` (or, for the settings
file, ``export_settings``). Measuring runs on a worker thread; the thread only
emits plain reports, the dialog fills its table from them.

Signals:
    closest_requested(Preset): the user wants this variant beside the original in the audition.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

from PySide6.QtCore import Qt, QThread, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QPlainTextEdit,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from ..core.presets import Preset

if TYPE_CHECKING:
    from ..core.engines.fidelity import Fidelity

TARGET_LABELS = {
    "samplewright": "Samplewright settings file (every stage, exactly)",
    "transformers": "transformers: a folder with generation_config.json",
    "vllm": "vLLM: SamplingParams as JSON",
    "openai-request": "OpenAI-compatible server: request fields",
}
COLUMNS = ["Preset", "Verdict", "Largest difference (TV)", "Why"]
MEASURED_ON = (
    "Measured on 1,000 random logit vectors against samplewright's own definition; "
    "`samplewright fidelity NAME --to TARGET` adds the model's real distributions."
)


def default_measure(preset: Preset, target: str):
    """The fidelity report on random logit vectors (no model: safe on any thread)."""
    from ..core.engines.fidelity import fidelity

    return fidelity(preset, target)


class FidelityThread(QThread):
    """Measures each preset for one target; emits ``measured(serial, row, report)`` or
    ``failed(serial, row, message)``. Never touches a widget."""

    measured = Signal(int, int, object)
    failed = Signal(int, int, str)

    def __init__(self, serial: int, presets: Sequence[Preset], target: str, measure: Callable, parent=None):
        super().__init__(parent)
        self.serial, self.presets, self.target, self.measure = serial, list(presets), target, measure
        self.stopped = False

    def run(self) -> None:
        """Measure the presets one after the other until stopped."""
        for row, preset in enumerate(self.presets):
            if self.stopped:
                return
            try:
                self.measured.emit(self.serial, row, self.measure(preset, self.target))
            except Exception as error:  # shown in the row; the dialog stays usable
                self.failed.emit(self.serial, row, str(error) or type(error).__name__)


class ExportDialog(QDialog):
    """Lists the export targets and, for the chosen one, each preset's verdict and reasons.

    Args:
        presets: the presets to export.
        measure: ``(preset, target) -> Fidelity``; by default random logit vectors only.
        transformers_check: offer the after-export check on the current passage.
    """

    closest_requested = Signal(object)

    def __init__(
        self,
        presets: Sequence[Preset],
        measure: Callable | None = None,
        transformers_check: bool = True,
        parent: QWidget | None = None,
    ):
        super().__init__(parent)
        self.setWindowTitle(f"Export {len(presets)} preset(s)")
        self.presets = list(presets)
        self.measure = measure or default_measure
        self.reports: dict[int, Fidelity] = {}
        self._serial = 0
        self._threads: list[FidelityThread] = []
        self._build(transformers_check)
        self.targets.setCurrentRow(0)
        self.resize(900, 520)

    # -- layout --------------------------------------------------------------------

    def _build(self, transformers_check: bool) -> None:
        self.targets = QListWidget()
        self.targets.setAccessibleName("Export targets")
        for key, label in TARGET_LABELS.items():
            item = QListWidgetItem(label)
            item.setData(Qt.ItemDataRole.UserRole, key)
            self.targets.addItem(item)
        self.targets.setMaximumHeight(100)
        self.targets.currentRowChanged.connect(self._on_target_changed)
        self.table = QTableWidget(len(self.presets), len(COLUMNS))
        self.table.setHorizontalHeaderLabels(COLUMNS)
        self.table.setAccessibleName("Fidelity of each preset")
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.currentCellChanged.connect(lambda *_: self._show_details())
        self.details = QPlainTextEdit(readOnly=True)
        self.details.setAccessibleName("Reasons and parameters")
        self.add_closest = QPushButton("Add the closest expressible variant to the audition")
        self.add_closest.setEnabled(False)
        self.add_closest.clicked.connect(self._on_add_closest)
        self.check_after = QCheckBox("After writing, check the config on the current passage with transformers")
        self.check_after.setVisible(transformers_check)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Export…")
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("Write for:"))
        layout.addWidget(self.targets)
        layout.addWidget(QLabel("Nothing has been written yet. " + MEASURED_ON))
        layout.addWidget(self.table)
        layout.addWidget(self.details)
        layout.addWidget(self.add_closest)
        layout.addWidget(self.check_after)
        layout.addWidget(buttons)

    # -- what the caller reads ----------------------------------------------------------

    def target(self) -> str:
        """The chosen target's name (``samplewright``, ``transformers``, ``vllm``, ``openai-request``)."""
        item = self.targets.currentItem()
        return str(item.data(Qt.ItemDataRole.UserRole)) if item else "samplewright"

    def check_requested(self) -> bool:
        """Whether to run the transformers check on the current passage after writing."""
        return self.target() == "transformers" and self.check_after.isChecked()

    def measuring(self) -> bool:
        """True while some preset's verdict is still being measured."""
        return any(thread.isRunning() for thread in self._threads)

    # -- measuring -------------------------------------------------------------------

    def _on_target_changed(self, _row: int) -> None:
        self._serial += 1
        self.reports.clear()
        self._stop_threads()
        target = self.target()
        self.check_after.setEnabled(target == "transformers")
        for row, preset in enumerate(self.presets):
            self._set_row(row, preset.name, "measuring…" if target != "samplewright" else "exact", "", "")
        if target == "samplewright":
            for row in range(len(self.presets)):
                self._set_row(row, self.presets[row].name, "exact", "0", "the settings file carries every stage")
            self._show_details()
            return
        thread = FidelityThread(self._serial, self.presets, target, self.measure)
        thread.measured.connect(self._on_measured)
        thread.failed.connect(self._on_failed)
        self._threads.append(thread)
        thread.start()
        self._show_details()

    def _on_measured(self, serial: int, row: int, report: Fidelity) -> None:
        if serial != self._serial:
            return
        self.reports[row] = report
        why = "; ".join(report.reasons) or "same distribution"
        self._set_row(row, report.preset.name, report.verdict, f"{report.measure.max_tv:.3g}", why)
        self._show_details()

    def _on_failed(self, serial: int, row: int, message: str) -> None:
        if serial == self._serial:
            self._set_row(row, self.presets[row].name, "not measured", "", message)

    def _set_row(self, row: int, *texts: str) -> None:
        for column, text in enumerate(texts):
            item = QTableWidgetItem(text)
            item.setToolTip(text)
            self.table.setItem(row, column, item)

    def _current_row(self) -> int:
        row = self.table.currentRow()
        return row if row >= 0 else 0

    def _show_details(self) -> None:
        report = self.reports.get(self._current_row())
        self.add_closest.setEnabled(report is not None and report.closest is not None)
        if report is None:
            self.details.setPlainText("" if self.target() == "samplewright" else "Measuring…")
            return
        m = report.measure
        lines = [
            f"{report.preset.name} on {self.target()}: {report.verdict}",
            f"largest TV {m.max_tv:.3g}, mean {m.mean_tv:.3g}, differing on {m.differing_share:.1%} of {m.steps} steps",
            *[f"• {reason}" for reason in report.reasons],
            "parameters as the engine sees them: " + ", ".join(f"{k}={v!r}" for k, v in report.parameters.items()),
        ]
        if report.closest is not None:
            c = report.closest
            lines.append(
                f"closest expressible: {c.preset.name}: TV from the original {c.from_original.max_tv:.3g} "
                f"(mean {c.from_original.mean_tv:.3g}); on this engine: {c.verdict_on_target}"
            )
        self.details.setPlainText("\n".join(lines))

    def _on_add_closest(self) -> None:
        report = self.reports.get(self._current_row())
        if report is not None and report.closest is not None:
            self.closest_requested.emit(report.closest.preset)

    def _stop_threads(self) -> None:
        for thread in self._threads:
            thread.stopped = True
        for thread in self._threads:
            thread.wait()
        self._threads.clear()

    def done(self, result: int) -> None:
        """Close the dialog, waiting for a running measurement to stop first."""
        self._stop_threads()
        super().done(result)
