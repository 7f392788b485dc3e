"""The step inspector: which sample and step is shown, a control to move through
the sample, and the distribution plot for that step."""

from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QSlider, QSpinBox, QVBoxLayout, QWidget

from . import palette
from .distribution_plot import DistributionPlot


class QtStepInspector(QWidget):
    """Shows the distribution at one step of one sample.

    Signals:
        step_chosen(int): the user moved the step control (0-based step).
    """

    step_chosen = Signal(int)

    def __init__(self, top_n: int = 20, parent: QWidget | None = None):
        super().__init__(parent)
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
        controls = QHBoxLayout()
        controls.addWidget(self.spin)
        controls.addWidget(self.of)
        controls.addWidget(self.slider, 1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.title)
        layout.addWidget(self.which)
        layout.addLayout(controls)
        layout.addWidget(self.plot, 1)
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
