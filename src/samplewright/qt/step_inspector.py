"""The step inspector: which sample and step is shown, a control to move through
the sample, the rank–probability view of that step, its token rows and what
each preset keeps."""

from __future__ import annotations

from collections.abc import Sequence

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QSlider, QSpinBox, QSplitter, QTabWidget, QVBoxLayout, QWidget

from ..core.engine.token_text import Vocabulary
from ..core.results import StepView
from . import palette, stage_style
from .distribution_plot import DistributionPlot
from .step_table import StepTable, context_text, summary_html


def help_text() -> str:
    """How to read the step view (the Help menu shows it)."""
    stages = ", ".join(stage_style.label(s) for s in stage_style.stages())
    return (
        "Every token the model could write next is placed by its raw rank: 1 is the token the model "
        "itself finds most probable. The grey curve is the model's own distribution; each coloured "
        "curve is the distribution after one preset (numbered as in the audition columns), drawn "
        "on the same ranking, and it stops where that preset's kept set ends (the dashed line).\n\n"
        "Under the plot, one lane per preset: its colour over the ranks it keeps; over the ranks it "
        "cut, the colour and hatch of the stage that cut them (" + stages + "), as the legend shows.\n\n"
        "Hover the plot for every number of a rank; click it to list that token in the table. The "
        "yellow line and ▼ mark the token the inspected sample drew. 'log probability' and "
        "'log rank' switch the axes; 'running mass' shows how much probability the tokens up to "
        "each rank hold.\n\nAll presets are compared at the inspected sample's own context; while "
        "you edit a preset shown here, its curve follows what you type."
    )


class QtStepInspector(QWidget):
    """Shows the distribution at one step of one sample.

    Signals:
        step_chosen(int): the user moved the step control (0-based step).
    """

    step_chosen = Signal(int)

    def __init__(self, top_n: int = 12, parent: QWidget | None = None):
        super().__init__(parent)
        self.vocabulary: Vocabulary | None = None
        self.live = False
        self._table_step: tuple[StepView | None, list[str]] = (None, [])
        self.title = QLabel("<b>Next-token view</b>")
        self.which = QLabel("No sample chosen yet.")
        self.which.setWordWrap(True)
        self.which.setAccessibleName("Inspected sample")
        self.spin = QSpinBox()
        self.spin.setAccessibleName("Step")
        self.spin.setToolTip("The step (token position) of the sample to inspect")
        self.spin.setPrefix("step ")
        self.slider = QSlider(Qt.Horizontal)
        self.slider.setAccessibleName("Step slider")
        self.slider.setToolTip("Move through the sample one token at a time")
        self.of = QLabel("")
        self.plot = DistributionPlot(top_n=top_n)
        self.table = StepTable(top_n, self.plot.label_of)
        self.summary = QLabel(summary_html(None, []))
        self.summary.setObjectName("stepSummary")
        self.summary.setAccessibleName("Step summary")
        self.summary.setWordWrap(True)
        self.summary.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.summary.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.context = QLabel("")
        self.context.setWordWrap(True)
        self.context.setAccessibleName("Where the presets are compared")
        self.context.setStyleSheet("color: #404040;")
        self.tabs = QTabWidget()
        self.tabs.addTab(self.table, "Tokens")
        self.tabs.addTab(self.summary, "What each preset keeps")
        self.split = QSplitter(Qt.Orientation.Vertical)
        self.split.addWidget(self.plot)
        self.split.addWidget(self.tabs)
        self.split.setStretchFactor(0, 3)
        self.split.setStretchFactor(1, 2)
        self.split.setSizes([470, 260])
        self.split.setChildrenCollapsible(False)
        controls = QHBoxLayout()
        controls.addWidget(self.spin)
        controls.addWidget(self.of)
        controls.addWidget(self.slider, 1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.title)
        layout.addWidget(self.which)
        layout.addLayout(controls)
        layout.addWidget(self.context)
        layout.addWidget(self.split, 1)
        self.plot.rank_picked.connect(self._on_rank_picked)
        self.spin.valueChanged.connect(self._on_spin)
        self.slider.valueChanged.connect(self._on_slider)
        self.set_sample(None, None, 0)

    def set_sample(self, column: int | None, name: str | None, row: int | None, steps: int = 0, step: int = 0) -> None:
        """Point the controls at one sample with ``steps`` tokens, at ``step``."""
        for widget in (self.spin, self.slider):
            widget.blockSignals(True)
            widget.setRange(1, max(1, steps))
            widget.setValue(step + 1)
            widget.setEnabled(steps > 0)
            widget.blockSignals(False)
        self.of.setText(f"of {steps}" if steps else "")
        if column is None:
            self.which.setText("Click any token of any sample to see the distribution it was drawn from.")
        else:
            colour = palette.preset_colour(column)
            self.which.setText(
                f"<span style='color:{colour}'>■</span> preset {column + 1} · {name} · "
                f"sample {row + 1}; the highlighted token is the one it drew."
            )

    def set_vocabulary(self, vocabulary: Vocabulary | None) -> None:
        """The model's token bytes, for labelling any token the user picks."""
        self.vocabulary = vocabulary
        self.plot.set_label_source(vocabulary.label if vocabulary is not None else None)

    def label_of(self, token_id: int) -> str:
        """A token's label from the model's vocabulary ("id N" without one)."""
        return self.vocabulary.label(token_id) if self.vocabulary is not None else f"id {token_id}"

    def show_step(
        self, view: StepView | None, names: Sequence[str], drawn_text: str | None = None, live: bool = False
    ) -> None:
        """Show one step in the plot, the table and the summary (None: empty them).

        Args:
            view: the step.
            names: the presets' names in column order.
            drawn_text: the drawn token's label.
            live: the view shows unsaved edits of a preset, recomputed as they are typed.
        """
        self.live = live
        self.plot.show_step(view, names, drawn_text)
        self._table_step = (view, list(names))
        self.plot.flush()
        self._show_table()

    def _show_table(self) -> None:
        view, names = self._table_step
        self.table.show_step(view, names, self.plot.picked_rank)
        self.summary.setText(summary_html(view, names))
        self.context.setText(context_text(view, self.live))

    def _on_rank_picked(self, rank: int) -> None:
        self._show_table()

    def step(self) -> int:
        """The chosen step (0-based)."""
        return self.spin.value() - 1

    def move(self, delta: int) -> None:
        """Move the step by ``delta`` tokens (stays within the sample)."""
        if self.spin.isEnabled():
            self.spin.setValue(self.spin.value() + delta)

    def _on_spin(self, value: int) -> None:
        self.slider.blockSignals(True)
        self.slider.setValue(value)
        self.slider.blockSignals(False)
        self.step_chosen.emit(value - 1)

    def _on_slider(self, value: int) -> None:
        self.spin.blockSignals(True)
        self.spin.setValue(value)
        self.spin.blockSignals(False)
        self.step_chosen.emit(value - 1)
