"""The evaluation screen: choose passage sets and presets (or a sweep), run, and read the
quality–diversity map, the table of measures and the samples behind each point.

:class:`EvaluationView` is the screen; :class:`EvaluationWindow` holds it in a window of
its own (the main window opens it from one menu action). Runs are generated on
:class:`~samplewright.qt.evaluation_worker.EvaluationThread`; the map and the table are
updated in place as each passage finishes. All measures come from the core run.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QListWidget,
    QListWidgetItem,
    QMainWindow,
    QProgressBar,
    QPushButton,
    QSpinBox,
    QSplitter,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import SamplewrightError
from ..core.evaluation import runner
from ..core.evaluation.plan import MAX_SAMPLES, MAX_TOKENS, PresetEntry, RunPlan, Sweep, passages_of
from ..core.evaluation.report import write_report
from ..core.evaluation.run import EvaluationRun
from ..core.evaluation.run_file import changes_since, load_run, new_run_path, runs_folder
from ..core.evaluation.sweep import SWEEPABLE, derived_presets, parse_vary
from ..core.library.library import PresetLibrary
from .evaluation_prompts import Prompts
from .evaluation_worker import EvaluationThread
from .measure_table import MeasureTable, SampleComparison
from .passage_sets_panel import PassageSetPanel
from .quality_map import QualityMap

CAUTION = "Generated text can be wrong, biased or offensive: review it under your team's policy before use."


def _spin(low: int, high: int, value: int, name: str) -> QSpinBox:
    box = QSpinBox()
    box.setRange(low, high)
    box.setValue(value)
    box.setAccessibleName(name)
    return box


class EvaluationView(QWidget):
    """The whole evaluation screen.

    Args:
        library_dir: the library folder (passage sets, presets, runs).
        loaded_model: returns the window's loaded model, or None while none is loaded.
        prompts: the dialogs (tests pass their own answers).
    """

    def __init__(
        self,
        library_dir: str | Path,
        loaded_model: Callable[[], Any],
        prompts: Prompts | None = None,
        parent: QWidget | None = None,
    ):
        super().__init__(parent)
        self.library_dir = Path(library_dir)
        self.loaded_model = loaded_model
        self.prompts = prompts or Prompts(self)
        self.run: EvaluationRun | None = None
        self.running = False
        self.selected: int | None = None
        self.thread = EvaluationThread(self)
        self.thread.worker.progress.connect(self._on_progress)
        self.thread.worker.passage_done.connect(self._on_passage_done)
        self.thread.worker.finished.connect(self._on_finished)
        self.thread.worker.failed.connect(self._on_failed)
        self.sets_panel = PassageSetPanel(self.library_dir, self.prompts)
        self.map = QualityMap()
        self.map.point_clicked.connect(self.select_preset)
        self.table = MeasureTable()
        self.samples_view = SampleComparison()
        # The measures table runs the full width under the map and the samples: it has a column per
        # measure, too many for a side column at 1400 px.
        top = QSplitter(Qt.Horizontal)
        top.addWidget(self._middle())
        top.addWidget(self._samples_box())
        top.setSizes([640, 480])
        work = QSplitter(Qt.Vertical)
        work.addWidget(top)
        work.addWidget(self._table_box())
        work.setSizes([640, 200])
        splitter = QSplitter(Qt.Horizontal)
        splitter.addWidget(self.sets_panel)
        splitter.addWidget(work)
        splitter.setSizes([250, 1130])
        layout = QVBoxLayout(self)
        layout.addWidget(splitter)
        caution = QLabel(CAUTION)
        caution.setStyleSheet("color: #a04020;")
        layout.addWidget(caution)
        self.reload_presets()
        self._update_buttons()

    # -- construction ----------------------------------------------------------------------------

    def _middle(self) -> QWidget:
        self.preset_list = QListWidget()
        self.preset_list.setAccessibleName("Presets to compare")
        self.samples = _spin(1, MAX_SAMPLES, 8, "Samples per preset and passage")
        self.tokens = _spin(1, MAX_TOKENS, 48, "Token budget per sample")
        self.seed = _spin(0, 2**31 - 1, 0, "Run seed")
        numbers = QHBoxLayout()
        for label, box in (("samples", self.samples), ("tokens", self.tokens), ("seed", self.seed)):
            numbers.addWidget(QLabel(label))
            numbers.addWidget(box)
        self.base = QComboBox()
        self.base.setAccessibleName("Base preset of the sweep")
        self.fields = [QComboBox(), QComboBox()]
        self.specs = [QLineEdit("0.3:1.5:0.3"), QLineEdit("")]
        self.fields[0].addItems(SWEEPABLE)
        self.fields[1].addItems(["(none)", *SWEEPABLE])
        self.specs[1].setPlaceholderText("e.g. 0.8,0.9,1")
        sweep_box = QGroupBox("Sweep")
        form = QFormLayout(sweep_box)
        form.addRow("base preset", self.base)
        for n in range(2):
            row = QHBoxLayout()
            row.addWidget(self.fields[n])
            row.addWidget(self.specs[n], 1)
            form.addRow("vary" if n == 0 else "and", row)
        self.buttons: dict[str, QPushButton] = {}
        actions = QHBoxLayout()
        for key, text, slot in (
            ("run", "Run evaluation", self.start_evaluation),
            ("sweep", "Run sweep", self.start_sweep),
            ("cancel", "Cancel", self.cancel),
            ("resume", "Resume", self.resume),
            ("open", "Open run…", self.open_run),
            ("report", "Write report…", self.write_report),
            ("save", "Save preset", self.save_selected_preset),
        ):
            button = QPushButton(text)
            button.clicked.connect(slot)
            actions.addWidget(button)
            self.buttons[key] = button
        self.progress = QProgressBar()
        self.progress.setAccessibleName("Run progress")
        self.status = QLabel("Choose passage sets and presets, then run.")
        self.status.setWordWrap(True)
        box = QWidget()
        layout = QVBoxLayout(box)
        # The preset list beside the numbers and the sweep: the map below keeps the height.
        choose = QHBoxLayout()
        presets = QVBoxLayout()
        presets.addWidget(QLabel("Presets (tick the ones to compare)"))
        presets.addWidget(self.preset_list, 1)
        choose.addLayout(presets, 1)
        settings = QVBoxLayout()
        settings.addLayout(numbers)
        settings.addWidget(sweep_box)
        choose.addLayout(settings, 1)
        self.preset_list.setMaximumHeight(150)
        layout.addLayout(choose)
        layout.addLayout(actions)
        layout.addWidget(self.progress)
        layout.addWidget(self.status)
        layout.addWidget(self.map, 3)
        return box

    def _samples_box(self) -> QWidget:
        self.compare = QComboBox()
        self.compare.setAccessibleName("Preset to compare with")
        self.compare.currentIndexChanged.connect(lambda *_: self._show_samples())
        row = QHBoxLayout()
        label = QLabel("Samples of the clicked point beside")
        label.setToolTip("Click a point on the map; its samples are shown beside the preset chosen here.")
        row.addWidget(label)
        row.addWidget(self.compare, 1)
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.addLayout(row)
        layout.addWidget(self.samples_view, 1)
        return box

    def _table_box(self) -> QWidget:
        self.per_passage = QCheckBox("one row per passage")
        self.per_passage.toggled.connect(self.table.set_per_passage)
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.per_passage)
        layout.addWidget(self.table, 1)
        return box

    def reload_presets(self) -> None:
        """List the library's presets (ticks kept by name)."""
        ticked = {self.preset_list.item(r).text() for r in range(self.preset_list.count())
                  if self.preset_list.item(r).checkState() == Qt.Checked}  # fmt: skip
        self.preset_list.clear()
        self.base.clear()
        try:
            records = PresetLibrary(self.library_dir).records()
        except SamplewrightError as exc:
            self.prompts.show_error(str(exc))
            records = []
        for record in sorted(records, key=lambda r: r.name.casefold()):
            item = QListWidgetItem(record.name)
            item.setData(Qt.UserRole, record)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(Qt.Checked if record.name in ticked else Qt.Unchecked)
            self.preset_list.addItem(item)
            self.base.addItem(record.name, record)

    def tick_presets(self, names: list[str]) -> None:
        """Tick exactly the presets named."""
        for r in range(self.preset_list.count()):
            item = self.preset_list.item(r)
            item.setCheckState(Qt.Checked if item.text() in names else Qt.Unchecked)

    # -- starting runs -----------------------------------------------------------------------------

    def _passages(self):
        sets = self.sets_panel.checked_sets()
        if not sets:
            raise SamplewrightError("Tick at least one passage set to run on.")
        return passages_of(sets)

    def plan_evaluation(self) -> RunPlan:
        """The plan of the ticked sets and presets."""
        records = [self.preset_list.item(r).data(Qt.UserRole) for r in range(self.preset_list.count())
                   if self.preset_list.item(r).checkState() == Qt.Checked]  # fmt: skip
        if not records:
            raise SamplewrightError("Tick at least one preset to compare.")
        presets = tuple(PresetEntry(r.preset, r.id, r.revision) for r in records)
        return RunPlan(presets, self._passages(), self.samples.value(), self.tokens.value(), self.seed.value())

    def plan_sweep(self) -> RunPlan:
        """The plan of the sweep set up in the sweep box."""
        record = self.base.currentData()
        if record is None:
            raise SamplewrightError("Choose the base preset of the sweep.")
        axes = [parse_vary(f"{self.fields[0].currentText()}={self.specs[0].text()}")]
        if self.fields[1].currentIndex() > 0:
            axes.append(parse_vary(f"{self.fields[1].currentText()}={self.specs[1].text()}"))
        presets = tuple(PresetEntry(p) for p in derived_presets(record.preset, tuple(axes)))
        sweep = Sweep(record.preset, tuple(axes))
        return RunPlan(presets, self._passages(), self.samples.value(), self.tokens.value(), self.seed.value(), sweep)

    def start_evaluation(self) -> None:
        """Run the ticked presets over the ticked sets."""
        self._start(self.plan_evaluation)

    def start_sweep(self) -> None:
        """Run the sweep of the base preset."""
        self._start(self.plan_sweep)

    def _start(self, make_plan: Callable[[], RunPlan]) -> None:
        loaded = self.loaded_model()
        if loaded is None:
            self.prompts.show_error("The model is still loading: run again when it is ready.")
            return
        try:
            plan = make_plan()
            run = runner.new_run(_EngineInfo(loaded), plan)
        except SamplewrightError as exc:
            self.prompts.show_error(str(exc))
            return
        self._launch(loaded, run, new_run_path(self.library_dir, run))

    def _launch(self, loaded, run: EvaluationRun, path: Path) -> None:
        self.run, self.running, self.selected = run, True, None
        self.map.show_run(run)
        self.table.show_run(run)
        self._fill_compare()
        self.progress.setRange(0, 0)
        self.status.setText(f"Running {len(run.plan.presets)} presets on {len(run.plan.passages)} passages…")
        self._update_buttons()
        self.thread.start(loaded, run, path)

    def cancel(self) -> None:
        """Stop the run; the finished passages stay in its file."""
        self.thread.stop()

    def resume(self) -> None:
        """Continue the shown run where it stopped."""
        loaded = self.loaded_model()
        if self.run is None or self.run.finished or loaded is None:
            return
        path = self.run.path or new_run_path(self.library_dir, self.run)
        self._launch(loaded, self.run, path)

    # -- progress ------------------------------------------------------------------------------------

    def _on_progress(self, progress) -> None:
        self.progress.setRange(0, max(1, progress.total_tokens))
        self.progress.setValue(progress.done_tokens)
        left = progress.time_left()
        self.progress.setFormat(f"%p% · {left} left" if left else "%p%")
        self.status.setText(progress.describe())

    def _on_passage_done(self, index: int, run) -> None:
        if run is self.run:
            self._show_run()

    def _on_finished(self, run) -> None:
        if run is not self.run:
            return
        self.running = False
        self.progress.setRange(0, 1)
        self.progress.setFormat("%p%")
        self.progress.setValue(1 if run.finished else 0)
        where = f" Saved to {run.path}." if run.path else ""
        done = f"{len(run.outcomes)} of {len(run.plan.passages)} passages"
        self.status.setText(("Cancelled after " if run.cancelled else "Finished: ") + done + "." + where)
        self._show_run()

    def _on_failed(self, message: str) -> None:
        self.running = False
        self.progress.setRange(0, 1)
        self.progress.setFormat("%p%")
        self.status.setText("The run stopped: " + message)
        self.prompts.show_error(message)
        self._update_buttons()

    def _show_run(self) -> None:
        self.map.show_run(self.run)
        self.table.show_run(self.run)
        self._show_samples()
        self._update_buttons()

    def _update_buttons(self) -> None:
        has_run = self.run is not None and bool(self.run.outcomes)
        self.buttons["run"].setEnabled(not self.running)
        self.buttons["sweep"].setEnabled(not self.running)
        self.buttons["cancel"].setEnabled(self.running)
        self.buttons["resume"].setEnabled(not self.running and self.run is not None and not self.run.finished)
        self.buttons["report"].setEnabled(has_run and not self.running)
        self.buttons["save"].setEnabled(self.selected is not None)

    # -- reading a run -------------------------------------------------------------------------------

    def _fill_compare(self) -> None:
        self.compare.blockSignals(True)
        self.compare.clear()
        self.compare.addItem("(none)", None)
        if self.run is not None:
            for i, entry in enumerate(self.run.plan.presets):
                self.compare.addItem(entry.preset.name, i)
        self.compare.blockSignals(False)

    def select_preset(self, index: int) -> None:
        """Show preset ``index``'s samples (clicked on the map), beside the comparison preset's."""
        if self.run is None:
            return
        if self.selected is not None and self.selected != index and self.compare.currentData() is None:
            self.compare.setCurrentIndex(self.selected + 1)  # the previous point becomes the comparison
        self.selected = index
        self._show_samples()
        self._update_buttons()

    def _show_samples(self) -> None:
        if self.run is not None and self.selected is not None and self.run.outcomes:
            other = self.compare.currentData()
            self.samples_view.show_presets(self.run, self.selected, other if other != self.selected else None)

    def show_run_file(self, path: str | Path) -> None:
        """Open a saved run and show it without generating."""
        run = load_run(path)
        self.run, self.selected = run, None
        self._fill_compare()
        notes = changes_since(run, self.library_dir)
        state = "finished" if run.finished else f"{len(run.outcomes)} of {len(run.plan.passages)} passages done"
        self.status.setText(
            f"Run of {run.created} by {run.user or 'unknown'} on {run.model.get('name')} ({state})."
            + (" Changed since: " + "; ".join(notes) if notes else "")
        )
        self._show_run()

    def open_run(self) -> None:
        """Ask for a run file and show it."""
        runs_folder(self.library_dir).mkdir(parents=True, exist_ok=True)
        path = self.prompts.ask_open_path("Open a run", "Samplewright runs (*.json)")
        if path:
            try:
                self.show_run_file(path)
            except SamplewrightError as exc:
                self.prompts.show_error(str(exc))

    def write_report(self) -> None:
        """Ask where, then write the HTML report of the shown run."""
        if self.run is None:
            return
        path = self.prompts.ask_save_path("Write the report", "HTML (*.html)", "evaluation-report.html")
        if path:
            try:
                write_report(self.run, path, changes=changes_since(self.run, self.library_dir))
                self.status.setText(f"Report written to {path}.")
            except SamplewrightError as exc:
                self.prompts.show_error(str(exc))

    def save_selected_preset(self) -> None:
        """Save the selected point's preset (e.g. a sweep's derived preset) into the library."""
        if self.run is None or self.selected is None:
            return
        preset = self.run.plan.presets[self.selected].preset
        try:
            library = PresetLibrary(self.library_dir)
            taken = {r.name for r in library.records()}
            name = preset.name if preset.name not in taken else library.unused_name(preset.name, "copy")
            record = library.add(preset.replace(name=name))
        except SamplewrightError as exc:
            self.prompts.show_error(str(exc))
            return
        self.status.setText(f"Saved {record.name!r} into the library.")
        self.reload_presets()

    def shutdown(self) -> None:
        """Stop a run and end the worker thread (the finished passages are saved)."""
        self.thread.shutdown()


class _EngineInfo:
    """What :func:`runner.new_run` reads of an engine: its loaded model."""

    def __init__(self, loaded):
        self.loaded = loaded


class EvaluationWindow(QMainWindow):
    """The evaluation screen in a window of its own."""

    def __init__(self, library_dir, loaded_model: Callable[[], Any], parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Samplewright — evaluation runs")
        self.view = EvaluationView(library_dir, loaded_model, parent=self)
        self.setCentralWidget(self.view)
        self.resize(1400, 900)

    def closeEvent(self, event) -> None:
        self.view.shutdown()
        super().closeEvent(event)
