"""The rank–probability view of one step: tokens by raw rank on x, probability
(or running mass) on y, the raw curve in grey and each auditioned preset's
reshaped curve in its column colour. A dashed line marks where each preset's
kept set ends; under the plot, one lane per preset shows which ranks it kept
and which stage cut the rest (:mod:`.cut_bands`). The drawn token is marked on
the raw curve; hovering gives every number of the rank under the mouse, and a
click picks that token for the table.

Every plot item is built once; :meth:`DistributionPlot.show_step` only stores
the newest step and a ~30 Hz timer redraws with ``setData``.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QCursor, QFont
from PySide6.QtWidgets import QCheckBox, QHBoxLayout, QToolTip, QVBoxLayout, QWidget

from ..core.results import StepView
from . import palette, stage_style
from .cut_bands import CutLanes, StageLegend, bands_of

MAX_PRESETS = 6
REDRAW_MS = 33
#: The plot shows at least this many ranks, and twice the farthest rank it must show.
MIN_RANKS = 30
LOG_FLOOR = 1e-12
AXIS_WIDTH = 64
#: Curves go through every rank up to this one, then through ranks spread on a log axis.
EXACT_RANKS = 1000
#: Height of one preset's lane and of the rank axis under the lanes, in pixels.
LANE_PIXELS, LANE_AXIS_HEIGHT = 22, 44


def token_label(text: str, limit: int = 14) -> str:
    """A token's text made visible: spaces as '␣', line breaks as '↵', tabs as '→'."""
    shown = text.replace(" ", "␣").replace("\n", "↵").replace("\r", "").replace("\t", "→")
    shown = shown or "∅"
    return shown if len(shown) <= limit else shown[: limit - 1] + "…"


def plotted_ranks(last: int, exact: int = EXACT_RANKS, spread: int = 1000) -> np.ndarray:
    """The ranks a curve is drawn through: every rank up to ``exact``, then ``spread`` ranks
    spaced evenly on a log axis up to ``last`` (a vocabulary of 50,000 drawn point by point
    took half a second to paint, for no more than the screen can show)."""
    head = np.arange(1, min(last, exact) + 1)
    if last <= exact:
        return head
    tail = np.unique(np.round(np.geomspace(exact + 1, last, spread)).astype(np.int64))
    return np.concatenate([head, tail])


def short_name(name: str, limit: int = 8) -> str:
    """A preset's name cut to ``limit`` characters (with '…') for a narrow label."""
    return name if len(name) <= limit else name[: limit - 1].rstrip() + "…"


def probability(value: float) -> str:
    """A probability for display: three decimals, or two significant digits when tiny."""
    if value == 0:
        return "0"
    return f"{value:.3f}" if value >= 0.001 else f"{value:.1e}"


class DistributionPlot(QWidget):
    """Raw and shaped distributions of one step, by raw rank.

    Args:
        top_n: how many of the most probable tokens the step view's table lists.
        parent: the Qt parent.

    Signals:
        rank_picked(int): the user clicked the plot at this raw rank.
    """

    rank_picked = Signal(int)

    def __init__(self, top_n: int = 12, parent: QWidget | None = None):
        super().__init__(parent)
        self.top_n = top_n
        self._pending: tuple[StepView | None, list[str]] | None = None
        self.shown: StepView | None = None
        self.names: list[str] = []
        self.labels: dict[int, str] = {}
        self.label_source: Callable[[int], str] | None = None  # e.g. the model's vocabulary
        self.picked_rank: int | None = None
        self.hover_text = ""
        self.redraws = 0
        self.log_y = QCheckBox("log probability")
        self.log_y.setChecked(True)
        self.log_y.setToolTip("Probability on a log axis: the small probabilities of the tail become visible")
        self.log_x = QCheckBox("log rank")
        self.log_x.setChecked(True)
        self.log_x.setToolTip("Ranks on a log axis: the first ten ranks get as much room as the next ninety")
        self.running = QCheckBox("running mass")
        self.running.setToolTip(
            "Show the running sum of probability from rank 1 instead: how much of the distribution "
            "the tokens up to each rank hold"
        )
        self._build_plot()
        self.legend = StageLegend()
        toggles = QHBoxLayout()
        for box in (self.log_y, self.log_x, self.running):
            toggles.addWidget(box)
            box.toggled.connect(lambda _=False: self._redraw_shown())
        toggles.addStretch(1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addLayout(toggles)
        layout.addWidget(self.plot_widget, 1)
        layout.addWidget(self.legend)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(REDRAW_MS)
        self._timer.timeout.connect(self.flush)
        self.clear()

    # -- construction -------------------------------------------------------------
    def _build_plot(self) -> None:
        self.plot_widget = pg.GraphicsLayoutWidget()
        self.plot_widget.setBackground("w")
        self.plot_widget.setAccessibleName("Next-token distribution by raw rank")
        self.plot_widget.setMinimumHeight(220)
        self.curves = self.plot_widget.addPlot(row=0, col=0)
        self.lanes = self.plot_widget.addPlot(row=1, col=0)
        self.plot_widget.ci.layout.setRowStretchFactor(0, 5)
        self.plot_widget.ci.layout.setRowStretchFactor(1, 1)
        for item in (self.curves, self.lanes):
            item.setMenuEnabled(False)
            item.hideButtons()
            item.setMouseEnabled(x=False, y=False)
            for side in ("left", "bottom"):
                axis = item.getAxis(side)
                axis.setTextPen(pg.mkPen("#202020"))
                axis.setPen(pg.mkPen("#606060"))
            item.getAxis("left").setWidth(AXIS_WIDTH)
        self.curves.showGrid(x=True, y=True, alpha=0.2)
        self.curves.setLabel("left", "probability")
        self.curves.getAxis("bottom").setStyle(showValues=False)
        self.lanes.setXLink(self.curves)
        self.lanes.setLabel("bottom", "raw rank (1 = the model's most probable token)")
        self.lanes.invertY(True)
        small = QFont()
        small.setPointSizeF(max(6.0, small.pointSizeF() * 0.85))
        self.lanes.getAxis("left").setStyle(tickLength=0, tickFont=small)
        self._drawn_line = pg.InfiniteLine(angle=90, pen=pg.mkPen(palette.DRAWN_HIGHLIGHT, width=6))
        self._drawn_line.setZValue(-10)
        self.curves.addItem(self._drawn_line)
        self._hover_line = pg.InfiniteLine(angle=90, pen=pg.mkPen("#909090", width=1, style=Qt.PenStyle.DotLine))
        self.curves.addItem(self._hover_line)
        colours = [palette.RAW_COLOUR] + [palette.preset_colour(i) for i in range(MAX_PRESETS)]
        self._series: list[pg.PlotDataItem] = []
        for index, colour in enumerate(colours):
            curve = pg.PlotDataItem(pen=pg.mkPen(colour, width=3 if index == 0 else 2), connect="finite")
            curve.setClipToView(True)
            self.curves.addItem(curve)
            self._series.append(curve)
        self._ends, self._end_marks = [], []
        for index in range(MAX_PRESETS):
            colour = palette.preset_colour(index)
            line = pg.InfiniteLine(angle=90, pen=pg.mkPen(colour, width=1.5, style=Qt.DashLine))
            # The last kept token of each preset gets a dot, so a kept set of one token is seen too.
            mark = pg.PlotDataItem(symbol="o", symbolSize=8, symbolBrush=colour, symbolPen=pg.mkPen("w"), pen=None)
            self.curves.addItem(line)
            self.curves.addItem(mark)
            self._ends.append(line)
            self._end_marks.append(mark)
        self._drawn_mark = pg.PlotDataItem(symbol="t", symbolSize=14, symbolBrush="#000000", pen=None)
        self._picked_mark = pg.PlotDataItem(symbol="o", symbolSize=15, symbolPen=pg.mkPen("#000000", width=2), pen=None)
        self._picked_mark.setSymbolBrush(None)
        for mark in (self._drawn_mark, self._picked_mark):
            self.curves.addItem(mark)
        self._hint = pg.TextItem("No step chosen yet", color="#606060", anchor=(0.5, 0.5))
        self.curves.addItem(self._hint, ignoreBounds=True)
        self.cut_lanes = CutLanes()
        self.lanes.addItem(self.cut_lanes)
        self.curves.scene().sigMouseMoved.connect(self._on_mouse_moved)
        self.curves.scene().sigMouseClicked.connect(self._on_mouse_clicked)

    # -- public -------------------------------------------------------------------
    def set_label_source(self, source: Callable[[int], str] | None) -> None:
        """Where the label of any token id comes from (the step's own top labels come first)."""
        self.label_source = source

    def show_step(self, view: StepView | None, preset_names: Sequence[str], drawn_text: str | None = None) -> None:
        """Ask for ``view`` to be drawn; only the newest request is drawn (~30 per second at most).

        Args:
            view: the step, or None to empty the plot.
            preset_names: names of the presets in the view, in column order.
            drawn_text: the drawn token's text (kept for the hover).
        """
        self._pending = (view, list(preset_names))
        if view is not None and view.drawn_id is not None and drawn_text is not None:
            self.labels = {int(view.drawn_id): drawn_text}
        if not self._timer.isActive():
            self._timer.start()

    def flush(self) -> None:
        """Draw the newest pending step now (the redraw timer calls this)."""
        self._timer.stop()
        if self._pending is None:
            return
        view, names = self._pending
        self._pending = None
        if view is None:
            self.clear()
        else:
            if self.shown is None or len(view.ranked_ids) != len(self.shown.ranked_ids):
                self.picked_rank = None
            self._draw(view, names)
        self.redraws += 1

    def clear(self) -> None:
        """Show an empty plot with a hint of what will appear."""
        self.shown, self.names, self.picked_rank = None, [], None
        for item in self._series + self._end_marks + [self._drawn_mark, self._picked_mark]:
            item.setData([], [])
        for line in self._ends + [self._drawn_line, self._hover_line]:
            line.setVisible(False)
        self.cut_lanes.set_bands([], 0, False)
        self.lanes.getAxis("left").setTicks([[]])
        self.curves.setLogMode(x=False, y=False)
        self.lanes.setLogMode(x=False, y=False)
        self.curves.setXRange(1, MIN_RANKS, padding=0)
        self.curves.setYRange(0, 1, padding=0)
        self.lanes.setYRange(-0.5, 0.5, padding=0)
        self._hint.setPos((1 + MIN_RANKS) / 2, 0.5)
        self._hint.setVisible(True)

    def pick_rank(self, rank: int | None) -> None:
        """Mark the token of raw ``rank`` as picked (None: none) and tell the table."""
        view = self.shown
        if view is None or rank is None:
            self.picked_rank = None
        else:
            self.picked_rank = max(1, min(int(rank), len(view.ranked_ids)))
        self._draw_marks()
        if self.picked_rank is not None:
            self.rank_picked.emit(self.picked_rank)

    def rank_range(self) -> tuple[int, int]:
        """The raw ranks the plot shows: 1 to past the farthest kept-set end, drawn and picked token."""
        view = self.shown
        if view is None:
            return (1, MIN_RANKS)
        far = [step.kept_end for step in view.presets[:MAX_PRESETS]]
        if view.drawn_id is not None:
            far.append(view.rank_of(view.drawn_id))
        if self.picked_rank is not None:
            far.append(self.picked_rank)
        return (1, int(min(len(view.ranked_ids), max([MIN_RANKS] + [2 * r for r in far]))))

    def describe_rank(self, rank: int) -> str:
        """Every number of the token of raw ``rank``: its probabilities and which stage cut it, per preset."""
        view = self.shown
        if view is None or not 1 <= rank <= len(view.ranked_ids):
            return ""
        token_id = int(view.ranked_ids[rank - 1])
        lines = [
            f"rank {rank} · {token_label(self.label_of(token_id), 24)} · raw p {probability(view.raw_ranked[rank - 1])}"
            f" · running mass {view.raw_cumulative[rank - 1]:.3f}"
        ]
        for index, step in enumerate(view.presets[:MAX_PRESETS]):
            stage = step.cut_stage(rank)
            state = f"cut by {stage_style.label(stage)}" if stage else f"p {probability(step.ranked[rank - 1])}"
            lines.append(f"{index + 1} {self._name(index)}: {state}")
        if view.drawn_id == token_id:
            lines.append("▼ the token the inspected sample drew")
        return "\n".join(lines)

    def label_of(self, token_id: int) -> str:
        """The label of a token id: the step's own, the drawn token's, the label source's, else its id."""
        view = self.shown
        if view is not None and token_id in view.top_ids:
            return view.top_texts[view.top_ids.index(token_id)]
        if token_id in self.labels:
            return self.labels[token_id]
        return self.label_source(token_id) if self.label_source is not None else f"id {token_id}"

    # -- drawing ------------------------------------------------------------------
    def _name(self, index: int) -> str:
        view = self.shown
        if index < len(self.names):
            return self.names[index]
        return view.presets[index].name if view is not None else ""

    def _redraw_shown(self) -> None:
        if self.shown is not None and self._pending is None:
            self._draw(self.shown, self.names)

    def _draw(self, view: StepView, names: list[str]) -> None:
        self.shown, self.names = view, names
        self._hint.setVisible(False)
        log_x, running = self.log_x.isChecked(), self.running.isChecked()
        log_y = self.log_y.isChecked() and not running
        self.log_y.setEnabled(not running)
        self.curves.setLogMode(x=log_x, y=log_y)
        self.lanes.setLogMode(x=log_x, y=False)
        self.curves.setLabel("left", "running mass" if running else "probability")
        last = self.rank_range()[1]
        ranks = plotted_ranks(last)
        at = ranks - 1
        series = [view.raw_cumulative if running else view.raw_ranked]
        series += [step.cumulative if running else step.ranked for step in view.presets[:MAX_PRESETS]]
        lowest = 1.0
        for index, curve in enumerate(self._series):
            if index >= len(series):
                curve.setData([], [])
                continue
            values = np.array(series[index][at], dtype=float)
            if index > 0 and not running:
                values[values <= 0] = np.nan  # a cut token has no point: the curve stops where the kept set ends
            positive = values[np.isfinite(values) & (values > 0)]
            lowest = min(lowest, float(positive.min()) if positive.size else 1.0)
            curve.setData(ranks.astype(float), values)
        for index, line in enumerate(self._ends):
            active = index < len(view.presets)
            line.setVisible(active)
            if not active:
                self._end_marks[index].setData([], [])
                continue
            end = view.presets[index].kept_end
            line.setValue(math.log10(end) if log_x else end)
            line.setToolTip(f"{index + 1} {self._name(index)}: kept set ends at raw rank {end}")
            if end <= last:
                self._end_marks[index].setData([end], [series[index + 1][end - 1]])
            else:
                self._end_marks[index].setData([], [])
        self._draw_lanes(view, log_x, last)
        self._draw_marks()
        left, right = (math.log10(0.8), math.log10(last + 0.5)) if log_x else (0.5, last + 0.5)
        self.curves.setXRange(left, right, padding=0.01)
        if log_y:
            self.curves.setYRange(math.log10(max(lowest, LOG_FLOOR)), 0.0, padding=0.03)
        else:
            peak = 1.0 if running else float(max(s[:last].max() for s in series))
            self.curves.setYRange(0.0, peak, padding=0.03)

    def _draw_lanes(self, view: StepView, log_x: bool, last: int) -> None:
        bands = []
        steps = view.presets[:MAX_PRESETS]
        for lane, step in enumerate(steps):
            runs = [dataclasses.replace(r, last=min(r.last, last)) for r in step.cut_runs() if r.first <= last]
            bands += bands_of(lane, runs, palette.preset_colour(lane))
        self.cut_lanes.set_bands(bands, len(steps), log_x)
        ticks = [(float(lane), f"{lane + 1} {short_name(self._name(lane))}") for lane in range(len(steps))]
        self.lanes.getAxis("left").setTicks([ticks])
        self.lanes.setYRange(-0.5, max(0.5, len(steps) - 0.5), padding=0)
        height = LANE_AXIS_HEIGHT + LANE_PIXELS * max(1, len(steps))
        self.lanes.setMinimumHeight(height)
        self.lanes.setMaximumHeight(height)

    def _draw_marks(self) -> None:
        view = self.shown
        if view is None:
            return
        running = self.running.isChecked()
        values = view.raw_cumulative if running else view.raw_ranked
        log_x = self.log_x.isChecked()
        drawn = view.rank_of(view.drawn_id) if view.drawn_id is not None else None
        self._drawn_line.setVisible(drawn is not None)
        if drawn is not None:
            self._drawn_line.setValue(math.log10(drawn) if log_x else drawn)
            self._drawn_mark.setData([drawn], [values[drawn - 1]])
        else:
            self._drawn_mark.setData([], [])
        picked = self.picked_rank
        self._picked_mark.setData(*(([picked], [values[picked - 1]]) if picked else ([], [])))

    # -- the mouse ----------------------------------------------------------------
    def _rank_at(self, scene_pos) -> int | None:
        if self.shown is None:
            return None
        for item in (self.curves, self.lanes):
            if item.sceneBoundingRect().contains(scene_pos):
                x = item.vb.mapSceneToView(scene_pos).x()
                rank = round(10**x) if self.log_x.isChecked() else round(x)
                return max(1, min(int(rank), len(self.shown.ranked_ids)))
        return None

    def _on_mouse_moved(self, scene_pos) -> None:
        rank = self._rank_at(scene_pos)
        if rank is None:
            self._hover_line.setVisible(False)
            return
        self._hover_line.setValue(math.log10(rank) if self.log_x.isChecked() else rank)
        self._hover_line.setVisible(True)
        self.hover_text = self.describe_rank(rank)
        QToolTip.showText(QCursor.pos(), self.hover_text, self.plot_widget)

    def _on_mouse_clicked(self, event) -> None:
        rank = self._rank_at(event.scenePos())
        if rank is not None:
            self.pick_rank(rank)
