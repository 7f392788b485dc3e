"""The quality–diversity map of an evaluation run (pyqtgraph).

Each preset is a point at two pooled measures (diversity and coherence unless
the axis controls say otherwise) with both 95% intervals as error bars; a
sweep is a line through its values, each point labelled with its value; a grid
is one line per value of the second field. The Pareto front (computed in the
core) is joined by a dashed line and ringed. The plot items are built once and
updated in place (:meth:`QualityMap.show_run`) as passages finish.

Signals:
    point_clicked(preset index): a point was clicked.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QVBoxLayout, QWidget

from ..core.evaluation.measures import LABELS, MEASURE_KEYS
from ..core.evaluation.run import EvaluationRun
from ..core.evaluation.sweep_lines import sweep_lines

POINT = "#2f5f8a"
FRONT = "#c0562b"
LINE = "#8a96a3"


class QualityMap(QWidget):
    """The map, with two combo boxes choosing its axes."""

    point_clicked = Signal(int)

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.run: EvaluationRun | None = None
        self.x_key, self.y_key = "diversity", "coherence"
        self.x_choice, self.y_choice = self._axis_choice("diversity"), self._axis_choice("coherence")
        self.x_choice.setAccessibleName("Map horizontal axis")
        self.y_choice.setAccessibleName("Map vertical axis")
        controls = QHBoxLayout()
        for label, box in (("across:", self.x_choice), ("up:", self.y_choice)):
            controls.addWidget(QLabel(label))
            controls.addWidget(box)
        controls.addStretch(1)
        self.plot_widget = pg.PlotWidget(background="w")
        self.plot_widget.setMinimumSize(360, 280)
        plot = self.plot_widget.getPlotItem()
        plot.showGrid(x=True, y=True, alpha=0.25)
        self.errors = pg.ErrorBarItem(x=np.zeros(0), y=np.zeros(0), pen=pg.mkPen("#9bb4cc"), beam=0)
        self.front_line = pg.PlotDataItem(pen=pg.mkPen(FRONT, width=1.5, style=Qt.DashLine))
        self.front_rings = pg.ScatterPlotItem(size=18, pen=pg.mkPen(FRONT, width=2), brush=pg.mkBrush(None))
        self.points = pg.ScatterPlotItem(size=10, pen=pg.mkPen("w"), brush=pg.mkBrush(POINT), hoverable=True)
        self.points.setToolTip("")
        self.points.sigClicked.connect(self._on_clicked)
        self.points.sigHovered.connect(self._on_hovered)
        self.lines: list[pg.PlotDataItem] = []
        self.labels: list[pg.TextItem] = []
        for item in (self.errors, self.front_line, self.front_rings, self.points):
            plot.addItem(item)
        self.hint = pg.TextItem("Run an evaluation to see its presets here", color="#606060", anchor=(0.5, 0.5))
        plot.addItem(self.hint)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addLayout(controls)
        layout.addWidget(self.plot_widget, 1)
        self.x_choice.currentIndexChanged.connect(self._on_axes_changed)
        self.y_choice.currentIndexChanged.connect(self._on_axes_changed)
        self._label_axes()

    def _axis_choice(self, key: str) -> QComboBox:
        box = QComboBox()
        for k in MEASURE_KEYS:
            box.addItem(LABELS[k], k)
        box.setCurrentIndex(MEASURE_KEYS.index(key))
        return box

    def _on_axes_changed(self) -> None:
        self.x_key, self.y_key = self.x_choice.currentData(), self.y_choice.currentData()
        self._label_axes()
        self.refresh()

    def _label_axes(self) -> None:
        plot = self.plot_widget.getPlotItem()
        plot.setLabel("bottom", LABELS[self.x_key])
        plot.setLabel("left", LABELS[self.y_key])

    def set_axes(self, x: str, y: str) -> None:
        """Show measures ``x`` across and ``y`` up."""
        self.x_choice.setCurrentIndex(MEASURE_KEYS.index(x))
        self.y_choice.setCurrentIndex(MEASURE_KEYS.index(y))

    def show_run(self, run: EvaluationRun | None) -> None:
        """Show ``run`` (again, after a passage finished): the items are updated in place."""
        self.run = run
        self.refresh()

    # -- drawing ------------------------------------------------------------------------------

    def _coordinates(self) -> list[tuple[int, float, float, object, object]]:
        assert self.run is not None
        out = []
        for i in range(len(self.run.plan.presets)):
            pooled = self.run.preset_summary(i).pooled
            ex, ey = pooled[self.x_key], pooled[self.y_key]
            if ex.value is not None and ey.value is not None:
                out.append((i, ex.value, ey.value, ex, ey))
        return out

    def refresh(self) -> None:
        """Redraw from the current run and axes."""
        points = self._coordinates() if self.run is not None and self.run.outcomes else []
        self.hint.setVisible(not points)
        xs = np.array([p[1] for p in points], dtype=float)
        ys = np.array([p[2] for p in points], dtype=float)
        self.points.setData(x=xs, y=ys, data=[p[0] for p in points])
        self.errors.setData(
            x=xs,
            y=ys,
            left=np.array([_below(p[3]) for p in points], dtype=float),
            right=np.array([_above(p[3]) for p in points], dtype=float),
            bottom=np.array([_below(p[4]) for p in points], dtype=float),
            top=np.array([_above(p[4]) for p in points], dtype=float),
        )
        front = self.run.pareto(self.x_key, self.y_key) if points and self.run is not None else []
        ringed = sorted((x, y) for i, x, y, _, _ in points if front[i])
        self.front_rings.setData(x=[r[0] for r in ringed], y=[r[1] for r in ringed])
        self.front_line.setData(x=[r[0] for r in ringed], y=[r[1] for r in ringed])
        self._draw_lines({p[0]: (p[1], p[2]) for p in points})
        if points:
            self._fit(points)

    def _fit(self, points) -> None:
        # An explicit range with a margin: equal values on one axis (all diversities 1.0, say)
        # would give pyqtgraph's automatic range a width of zero.
        spans = []
        for k in (3, 4):
            lows = [p[k].low if p[k].low is not None else p[k].value for p in points]
            highs = [p[k].high if p[k].high is not None else p[k].value for p in points]
            low, high = min(lows), max(highs)
            pad = max(0.08 * (high - low), 0.02 * abs(high), 1e-3)
            spans.append((low - pad, high + pad))
        self.plot_widget.getPlotItem().vb.setRange(xRange=spans[0], yRange=spans[1], padding=0)

    def _draw_lines(self, where: dict[int, tuple[float, float]]) -> None:
        lines = sweep_lines(self.run) if self.run is not None and where else []
        labels: list[tuple[str, float, float]] = []
        for n, line in enumerate(lines):
            if n == len(self.lines):
                item = pg.PlotDataItem(pen=pg.mkPen(LINE, width=1.2))
                self.plot_widget.getPlotItem().addItem(item)
                self.lines.append(item)
            xy = [(where[p], value) for p, value in zip(line.presets, line.values, strict=True) if p in where]
            self.lines[n].setData(x=[c[0][0] for c in xy], y=[c[0][1] for c in xy])
            self.lines[n].setVisible(True)
            labels += [(value.split("=", 1)[1], c[0], c[1]) for c, value in xy]
        for item in self.lines[len(lines) :]:
            item.setVisible(False)
        if not lines and self.run is not None:
            labels = [(self.run.plan.presets[i].preset.name, x, y) for i, (x, y) in where.items()]
        while len(self.labels) < len(labels):
            text = pg.TextItem("", color="#303030", anchor=(0, 1))
            self.plot_widget.getPlotItem().addItem(text)
            self.labels.append(text)
        for item, (text, x, y), anchor in zip(self.labels, labels, _label_anchors(labels), strict=False):
            item.setText(text)
            item.setAnchor(anchor)
            item.setPos(x, y)
            item.setVisible(True)
        for item in self.labels[len(labels) :]:
            item.setVisible(False)

    # -- what the map shows (for tests and the window) ------------------------------------------

    def point_count(self) -> int:
        """How many presets are drawn as points."""
        return len(self.points.points())

    def visible_line_count(self) -> int:
        """How many sweep lines are drawn."""
        return sum(1 for item in self.lines if item.isVisible())

    def front_count(self) -> int:
        """How many points are on the Pareto front."""
        return len(self.front_rings.points())

    def describe_point(self, preset: int) -> str:
        """The hover text of one preset: its name and its numbers with intervals."""
        if self.run is None:
            return ""
        pooled = self.run.preset_summary(preset).pooled
        lines = [self.run.plan.presets[preset].preset.name]
        for key in (self.x_key, self.y_key):
            e = pooled[key]
            span = f" [{e.low:.3f}, {e.high:.3f}]" if e.low is not None and e.high is not None else ""
            lines.append(f"{LABELS[key]}: {'–' if e.value is None else f'{e.value:.3f}'}{span}")
        return "\n".join(lines)

    def _on_hovered(self, item, points, event=None) -> None:
        self.points.setToolTip(self.describe_point(int(points[0].data())) if len(points) else "")

    def _on_clicked(self, item, points, event=None) -> None:
        if len(points):
            self.point_clicked.emit(int(points[0].data()))


def _below(estimate) -> float:
    return 0.0 if estimate.low is None else estimate.value - estimate.low


def _above(estimate) -> float:
    return 0.0 if estimate.high is None else estimate.high - estimate.value


def _label_anchors(labels: list[tuple[str, float, float]]) -> list[tuple[float, float]]:
    """Where each point's name sits: to the left of points in the right half (so the plot's edge
    never cuts a name), and below the point instead of above when a higher point close by
    already has its name above (names are long, so "close" is a third of the spread across and
    a twelfth of the spread up)."""
    if not labels:
        return []
    xs, ys = [c[1] for c in labels], [c[2] for c in labels]
    middle = (min(xs) + max(xs)) / 2
    near_x, near_y = (max(xs) - min(xs) or 1.0) / 3, (max(ys) - min(ys) or 1.0) / 12
    above: list[tuple[float, float]] = []
    anchors: dict[int, tuple[float, float]] = {}
    for i in sorted(range(len(labels)), key=lambda n: -ys[n]):
        crowded = any(abs(xs[i] - x) < near_x and abs(ys[i] - y) < near_y for x, y in above)
        if not crowded:
            above.append((xs[i], ys[i]))
        anchors[i] = (1.0 if xs[i] > middle else 0.0, 0.0 if crowded else 1.0)
    return [anchors[i] for i in range(len(labels))]
