"""The next-token distribution at one step, raw and as each preset shaped it.

Tokens are rows, ranked by raw probability from the top; each row holds a
group of horizontal bars: the raw distribution (grey) and each auditioned
preset's shaped distribution (its column colour). A token that a preset's
chain removed gets a dashed outline as long as its raw probability and the
letter of the stage that cut it, so the stage can be told apart without
colour. The token the inspected sample drew is shaded and arrowed.

Every plot item is built once; :meth:`DistributionPlot.show_step` only stores
the newest step and a ~30 Hz timer redraws with ``setOpts``/``setData``.
"""

from __future__ import annotations

import html
from collections.abc import Sequence

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, QTimer
from PySide6.QtGui import QFont, QPainterPath, QTransform
from PySide6.QtWidgets import QLabel, QSizePolicy, QVBoxLayout, QWidget

from ..core.results import StepView
from . import palette

MAX_PRESETS = 6
REDRAW_MS = 33
GROUP_HEIGHT = 0.84


def token_label(text: str, limit: int = 14) -> str:
    """A token's text made visible: spaces as '␣', line breaks as '↵', tabs as '→'."""
    shown = text.replace(" ", "␣").replace("\n", "↵").replace("\r", "").replace("\t", "→")
    shown = shown or "∅"
    return shown if len(shown) <= limit else shown[: limit - 1] + "…"


def _bits(value: float) -> str:
    """Entropy for display; rounding can make a one-token distribution print as -0.00."""
    return f"{max(0.0, value):.2f}"


def _letter_path(letter: str) -> QPainterPath:
    """A unit-sized glyph outline usable as a scatter symbol."""
    font = QFont()
    font.setBold(True)
    path = QPainterPath()
    path.addText(0, 0, font, letter)
    box = path.boundingRect()
    scale = 1.0 / max(box.width(), box.height())
    transform = QTransform()
    transform.scale(scale, scale)
    transform.translate(-box.x() - box.width() / 2, -box.y() - box.height() / 2)
    return transform.map(path)


class DistributionPlot(QWidget):
    """Grouped horizontal bars of the top tokens at one step.

    Args:
        top_n: how many tokens (rows) the plot holds; fixed for its lifetime.
        parent: the Qt parent.
    """

    def __init__(self, top_n: int = 20, parent: QWidget | None = None):
        super().__init__(parent)
        self.top_n = top_n
        self._pending: tuple[StepView, list[str]] | None = None
        self._drawn_text: str | None = None
        self.shown: StepView | None = None
        self.drawn_row: int | None = None
        self.redraws = 0
        self._symbols = {stage: _letter_path(letter) for stage, letter in palette.STAGE_LETTERS.items()}
        self._build_plot()
        self._summary = QLabel(self)
        self._summary.setObjectName("stepSummary")
        self._summary.setWordWrap(True)
        self._summary.setTextFormat(Qt.RichText)
        self._summary.setAccessibleName("Step summary")
        self._summary.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self._summary.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Minimum)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.plot_widget, 1)
        layout.addWidget(self._summary)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(REDRAW_MS)
        self._timer.timeout.connect(self.flush)
        self.clear()

    # -- construction -------------------------------------------------------------
    def _build_plot(self) -> None:
        self.plot_widget = pg.PlotWidget(background="w")
        self.plot_widget.setAccessibleName("Next-token distribution plot")
        self.plot_widget.setToolTip(
            "Top tokens by raw probability. Grey: the model as it is. Coloured: after each preset. "
            "Dashed outline with a letter: the token was cut, the letter names the stage."
        )
        item = self.plot_widget.getPlotItem()
        item.invertY(True)
        item.setMenuEnabled(False)
        item.setMouseEnabled(x=False, y=False)
        item.hideButtons()
        item.showGrid(x=True, y=False, alpha=0.25)
        item.setLabel("bottom", "probability")
        for side in ("left", "bottom"):
            axis = item.getAxis(side)
            axis.setTextPen(pg.mkPen("#202020"))
            axis.setPen(pg.mkPen("#606060"))
        item.getAxis("bottom").enableAutoSIPrefix(False)
        item.getAxis("left").setStyle(tickTextOffset=4)
        item.getAxis("left").setWidth(110)
        rows = np.arange(self.top_n, dtype=float)
        zeros = np.zeros(self.top_n)
        self._highlight = pg.LinearRegionItem(
            values=(0, 1),
            orientation="horizontal",
            movable=False,
            brush=pg.mkBrush(palette.DRAWN_HIGHLIGHT + "90"),
            pen=pg.mkPen(None),
        )
        self._highlight.setZValue(-10)
        item.addItem(self._highlight)
        colours = [palette.RAW_COLOUR] + [palette.preset_colour(i) for i in range(MAX_PRESETS)]
        self._bars, self._ghosts, self._cuts = [], [], []
        for series, colour in enumerate(colours):
            bar = pg.BarGraphItem(x0=0, y=rows, height=0.1, width=zeros, brush=pg.mkBrush(colour), pen=pg.mkPen(None))
            item.addItem(bar)
            self._bars.append(bar)
            if series == 0:
                continue
            ghost = pg.BarGraphItem(
                x0=0,
                y=rows,
                height=0.1,
                width=zeros,
                brush=pg.mkBrush(None),
                pen=pg.mkPen(colour, width=1.2, style=Qt.DashLine),
            )
            cut = pg.ScatterPlotItem(size=13, pen=pg.mkPen(colour), brush=pg.mkBrush(colour), pxMode=True)
            item.addItem(ghost)
            item.addItem(cut)
            self._ghosts.append(ghost)
            self._cuts.append(cut)
        self._arrow = pg.ScatterPlotItem(size=14, symbol="t2", brush=pg.mkBrush("#000000"), pxMode=True)
        item.addItem(self._arrow)
        self._hint = pg.TextItem("No step chosen yet", color="#606060", anchor=(0.5, 0.5))
        self._hint.setPos(0.5, (self.top_n - 1) / 2)
        item.addItem(self._hint)

    # -- public -------------------------------------------------------------------
    def show_step(self, view: StepView | None, preset_names: Sequence[str], drawn_text: str | None = None) -> None:
        """Ask for ``view`` to be drawn; only the newest request is drawn (~30 per second at most).

        Args:
            view: the step, or None to empty the plot.
            preset_names: names of the auditioned presets, in column order.
            drawn_text: the drawn token's text, shown when it is outside the plotted rows.
        """
        self._pending = (view, list(preset_names))
        self._drawn_text = drawn_text
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
            self._draw(view, names)
        self.redraws += 1

    def clear(self) -> None:
        """Show an empty plot with a hint of what will appear."""
        self.shown = None
        self.drawn_row = None
        zeros = np.zeros(self.top_n)
        for bar in self._bars + self._ghosts:
            bar.setOpts(width=zeros)
            bar.setVisible(False)
        for cut in self._cuts:
            cut.setData(x=[], y=[])
        self._arrow.setData(x=[], y=[])
        self._highlight.setVisible(False)
        self._hint.setVisible(True)
        self.plot_widget.getPlotItem().getAxis("left").setTicks([[]])
        self.plot_widget.setXRange(0, 1, padding=0.02)
        self.plot_widget.setYRange(-0.5, self.top_n - 0.5, padding=0)
        self._summary.setText(
            "<i>Generate, then click a token in a sample to see the distribution "
            "it was drawn from.</i><br>" + html.escape(palette.stage_legend())
        )

    # -- drawing ------------------------------------------------------------------
    def _draw(self, view: StepView, names: list[str]) -> None:
        self.shown = view
        self._hint.setVisible(False)
        n = min(self.top_n, len(view.top_ids))
        series = 1 + min(len(view.presets), MAX_PRESETS)
        bar_h = GROUP_HEIGHT / series
        rows = np.arange(self.top_n, dtype=float)
        offsets = [-GROUP_HEIGHT / 2 + bar_h * (s + 0.5) for s in range(series)]
        raw = np.zeros(self.top_n)
        raw[:n] = view.raw_probs[view.top_ids[:n]]
        self._bars[0].setOpts(y=rows + offsets[0], height=bar_h * 0.9, width=raw)
        self._bars[0].setVisible(True)
        peak = max([float(raw.max())] + [row.p for step in view.presets for row in step.top[:n]])
        for index in range(MAX_PRESETS):
            active = index < series - 1
            step = view.presets[index] if active else None
            ys = rows + (offsets[index + 1] if active else 0)
            # Letters of different presets sit in their own columns so they never overlap.
            self._draw_preset(index, step, n, ys, bar_h, letter_x=peak * (0.045 + 0.055 * index))
        self._draw_drawn_mark(view, n, peak)
        labels = [(float(r), token_label(t)) for r, t in enumerate(view.top_texts[:n])]
        if self.drawn_row is not None:
            row = self.drawn_row
            labels[row] = (float(row), "▶ " + labels[row][1])
        self.plot_widget.getPlotItem().getAxis("left").setTicks([labels])
        self.plot_widget.setXRange(0, max(peak, 1e-6) * 1.08, padding=0)
        self._summary.setText(self._summary_html(view, names))

    def _draw_preset(self, index: int, step, n: int, ys: np.ndarray, bar_h: float, letter_x: float) -> None:
        shaped = np.zeros(self.top_n)
        ghost = np.zeros(self.top_n)
        cut_x, cut_y, cut_symbols = [], [], []
        if step is not None:
            for r, row in enumerate(step.top[:n]):
                shaped[r] = row.p
                if row.cut_by:
                    ghost[r] = row.raw_p
                    cut_x.append(letter_x)
                    cut_y.append(ys[r])
                    cut_symbols.append(self._symbols.get(row.cut_by, "x"))
        self._bars[index + 1].setOpts(y=ys, height=bar_h * 0.9, width=shaped)
        self._ghosts[index].setOpts(y=ys, height=bar_h * 0.9, width=ghost)
        self._bars[index + 1].setVisible(step is not None)
        self._ghosts[index].setVisible(step is not None and bool(ghost.any()))
        self._cuts[index].setData(x=cut_x, y=cut_y, symbol=cut_symbols or "o")

    def _draw_drawn_mark(self, view: StepView, n: int, peak: float) -> None:
        self.drawn_row = None
        if view.drawn_id is not None and view.drawn_id in view.top_ids[:n]:
            self.drawn_row = view.top_ids.index(view.drawn_id)
        if self.drawn_row is None:
            self._highlight.setVisible(False)
            self._arrow.setData(x=[], y=[])
            return
        r = self.drawn_row
        self._highlight.setRegion((r - 0.5, r + 0.5))
        self._highlight.setVisible(True)
        self._arrow.setData(x=[max(peak, 1e-6) * 1.03], y=[float(r)])

    def _summary_html(self, view: StepView, names: list[str]) -> str:
        parts = [f"<b>Context:</b> {view.context_tokens} tokens · raw entropy {_bits(view.raw_entropy_bits)} bits"]
        if view.drawn_id is not None:
            parts.append(self._drawn_html(view))
        rows = [
            "<tr><th></th><th align='left'>preset</th><th>kept</th><th>entropy before → after</th>"
            "<th>raw mass kept</th></tr>"
        ]
        for index, step in enumerate(view.presets[:MAX_PRESETS]):
            name = names[index] if index < len(names) else step.name
            colour = palette.preset_colour(index)
            rows.append(
                f"<tr><td style='color:{colour}'>■ {index + 1}</td><td>{html.escape(name)}</td>"
                f"<td align='right'>{step.kept}</td>"
                f"<td align='right'>{_bits(step.raw_entropy_bits)} → {_bits(step.entropy_bits)} bits</td>"
                f"<td align='right'>{step.kept_raw_mass:.2f}</td></tr>"
            )
        parts.append("<table cellspacing='6'>" + "".join(rows) + "</table>")
        parts.append("<small>Cut by: " + html.escape(palette.stage_legend()) + "</small>")
        return "<br>".join(parts[:-2]) + "".join(parts[-2:])

    def _drawn_html(self, view: StepView) -> str:
        rank = int((view.raw_probs > view.raw_probs[view.drawn_id]).sum()) + 1
        index = view.top_ids.index(view.drawn_id) if view.drawn_id in view.top_ids else None
        if index is not None:
            text = token_label(view.top_texts[index])
        else:
            text = token_label(self._drawn_text) if self._drawn_text is not None else f"id {view.drawn_id}"
        where = "" if index is not None else " (outside the rows shown)"
        return (
            f"<b>Drawn here:</b> <span style='background:{palette.DRAWN_HIGHLIGHT}'>"
            f"{html.escape(text)}</span> — raw rank {rank}, raw p "
            f"{view.raw_probs[view.drawn_id]:.3f}{where}"
        )
