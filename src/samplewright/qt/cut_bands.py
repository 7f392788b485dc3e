"""The bands under the rank plot, one lane per preset: the raw ranks it kept in
the preset's colour, the ranks each stage cut in that stage's colour and hatch;
and the legend explaining them, which wraps to any width.

Hatches are painted in screen pixels (not plot units), so they look the same
at every zoom and on a log axis.
"""

from __future__ import annotations

import dataclasses
import math

import pyqtgraph as pg
from PySide6.QtCore import QPointF, QRectF, QSize
from PySide6.QtGui import QBrush, QColor, QPainter, QPen
from PySide6.QtWidgets import QSizePolicy, QWidget

from ..core.results import CutRun
from . import stage_style

LANE_HEIGHT = 0.72


@dataclasses.dataclass(frozen=True)
class Band:
    """One run of ranks in one lane: ``first``..``last`` (raw ranks), kept or cut by ``stage``."""

    lane: int
    first: int
    last: int
    stage: str | None
    colour: str  # the preset's colour for a kept run


def fill(painter: QPainter, rect: QRectF, stage: str | None, colour: str) -> None:
    """Paint one band's rectangle: solid preset colour when kept, pale stage colour and hatch when cut."""
    if stage is None:
        painter.fillRect(rect, QBrush(QColor(colour)))
        return
    pale = QColor(stage_style.colour(stage))
    pale.setAlpha(70)
    painter.fillRect(rect, QBrush(pale))
    painter.fillRect(rect, QBrush(QColor(stage_style.colour(stage)), stage_style.pattern(stage)))


class CutLanes(pg.GraphicsObject):
    """The lanes of kept and cut ranks; built once, given new bands with :meth:`set_bands`."""

    def __init__(self) -> None:
        super().__init__()
        self.bands: list[Band] = []
        self.lanes = 0
        self.log_x = False

    def set_bands(self, bands: list[Band], lanes: int, log_x: bool) -> None:
        """Show these bands in ``lanes`` lanes (lane 0 on top), ranks on a log axis or not."""
        self.prepareGeometryChange()
        self.bands, self.lanes, self.log_x = bands, lanes, log_x
        self.update()

    def x_of(self, rank_edge: float) -> float:
        """Plot x of a rank edge (ranks are drawn from rank - 0.5 to rank + 0.5)."""
        return math.log10(rank_edge) if self.log_x else rank_edge

    def boundingRect(self) -> QRectF:
        if not self.bands:
            return QRectF()
        right = max(b.last for b in self.bands) + 0.5
        left = self.x_of(0.5)
        return QRectF(left, -0.5, self.x_of(right) - left, max(1, self.lanes))

    def paint(self, painter: QPainter, *args) -> None:
        to_screen = painter.transform()
        painter.save()
        painter.resetTransform()  # hatches in screen pixels
        for band in self.bands:
            top = band.lane - LANE_HEIGHT / 2
            corner = to_screen.map(QPointF(self.x_of(band.first - 0.5), top))
            far = to_screen.map(QPointF(self.x_of(band.last + 0.5), top + LANE_HEIGHT))
            fill(painter, QRectF(corner, far).normalized(), band.stage, band.colour)
        painter.restore()


def bands_of(lane: int, runs: list[CutRun], colour: str) -> list[Band]:
    """The bands of one preset's lane from its runs of kept and cut ranks."""
    return [Band(lane, run.first, run.last, run.stage, colour) for run in runs]


class StageLegend(QWidget):
    """Swatches and names of what the bands and marks mean; wraps onto as many lines as the width needs."""

    SWATCH = QSize(18, 11)
    GAP = 12

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setAccessibleName("Step view legend")
        policy = QSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Preferred)
        policy.setHeightForWidth(True)
        self.setSizePolicy(policy)
        self.entries: list[tuple[str, str | None, str]] = [("kept (the preset's colour)", None, "#5A5A5A")]
        self.entries += [(stage_style.label(s), s, "") for s in stage_style.stages()]
        self.entries += [("▼ drawn token", "", "#000000"), ("┆ kept set ends", "", "#000000")]

    def texts(self) -> list[str]:
        """The legend's entries as the user reads them."""
        return [text for text, _, _ in self.entries]

    def _layout(self, width: int) -> list[tuple[QRectF, int]]:
        """Where each entry goes at this width: its rectangle and index."""
        metrics = self.fontMetrics()
        line = max(metrics.height(), self.SWATCH.height()) + 4
        x = y = 0.0
        placed = []
        for index, (text, stage, _) in enumerate(self.entries):
            swatch = self.SWATCH.width() + 4 if stage != "" else 0
            w = swatch + metrics.horizontalAdvance(text)
            if x > 0 and x + w > width:
                x, y = 0.0, y + line
            placed.append((QRectF(x, y, w, line), index))
            x += w + self.GAP
        return placed

    def hasHeightForWidth(self) -> bool:
        return True

    def heightForWidth(self, width: int) -> int:
        placed = self._layout(max(1, width))
        return int(max(r.bottom() for r, _ in placed)) + 2 if placed else 0

    def sizeHint(self) -> QSize:
        return QSize(300, self.heightForWidth(300))

    def minimumSizeHint(self) -> QSize:
        return QSize(60, self.heightForWidth(max(60, self.width())))

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self.setMinimumHeight(self.heightForWidth(self.width()))  # every wrapped line stays visible

    def paintEvent(self, event) -> None:
        painter = QPainter(self)
        metrics = self.fontMetrics()
        for rect, index in self._layout(self.width()):
            text, stage, colour = self.entries[index]
            x = rect.x()
            if stage != "":
                box = QRectF(x, rect.y() + (rect.height() - self.SWATCH.height()) / 2, *self.SWATCH.toTuple())
                fill(painter, box, stage, colour)
                painter.setPen(QPen(QColor("#606060")))
                painter.drawRect(box)
                x += self.SWATCH.width() + 4
            painter.setPen(QPen(self.palette().text().color()))
            painter.drawText(QPointF(x, rect.y() + (rect.height() + metrics.ascent() - metrics.descent()) / 2), text)
        painter.end()
