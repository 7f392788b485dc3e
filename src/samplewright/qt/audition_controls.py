"""The audition's controls above the grid: samples, new tokens, seed, run and stop, progress."""

from __future__ import annotations

from PySide6.QtWidgets import QCheckBox, QHBoxLayout, QLabel, QProgressBar, QPushButton, QSpinBox, QVBoxLayout, QWidget

from ..core.limits import DEFAULT_NEW_TOKENS, DEFAULT_SAMPLES, DEFAULT_SEED, MAX_NEW_TOKENS, MAX_SAMPLES


class QtAuditionControls(QWidget):
    """The run's sizes and seed, the Generate and Stop buttons and the progress bar, over ``grid``."""

    def __init__(self, grid: QWidget, parent: QWidget | None = None):
        super().__init__(parent)
        self.samples_spin = _spin(
            1,
            MAX_SAMPLES,
            DEFAULT_SAMPLES,
            "Samples per preset",
            f"How many samples each preset writes (1–{MAX_SAMPLES})",
        )
        self.tokens_spin = _spin(
            1,
            MAX_NEW_TOKENS,
            DEFAULT_NEW_TOKENS,
            "New tokens",
            "The longest continuation, in tokens; a preset's own max_new_tokens can make it shorter",
        )
        self.seed_spin = _spin(
            0, 2**31 - 1, DEFAULT_SEED, "Seed", "The random seed; the same seed gives the same samples"
        )
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
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(QLabel("<b>Audition</b> — presets side by side; sample rows share their random draws"))
        layout.addLayout(controls)
        layout.addWidget(self.progress)
        layout.addWidget(grid, 1)

    def show_progress(self, done: int, total: int) -> None:
        """Show ``done`` of ``total`` tokens (a total of 0 shows an empty bar)."""
        self.progress.setRange(0, max(1, total))
        self.progress.setValue(done)


def _spin(low: int, high: int, value: int, name: str, tip: str) -> QSpinBox:
    spin = QSpinBox()
    spin.setRange(low, high)
    spin.setValue(value)
    spin.setAccessibleName(name)
    spin.setToolTip(tip)
    return spin
