"""The audition grid: one column per preset, one row per sample.

Sample *i* of every preset is drawn from the same random stream, so rows are
aligned and read across. The grid follows an
:class:`~samplewright.core.engine.session.AuditionSession`: tokens are appended as
the session reports them. Clicking a token asks the window to inspect that
step.
"""

from __future__ import annotations

import bisect
import html

from PySide6.QtCore import QPoint, Qt, Signal
from PySide6.QtGui import QColor, QGuiApplication, QTextCharFormat, QTextCursor
from PySide6.QtWidgets import (
    QFrame,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QPlainTextEdit,
    QScrollArea,
    QSizePolicy,
    QTextEdit,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from ..core.engine.session import AuditionSession
from ..core.sampling.metrics import PresetMetrics
from . import palette

COLUMN_WIDTH = 212
#: Beside a preset's name when its samples were written with the editor's unsaved edits.
DRAFT_MARK = "(unsaved draft)"
SAMPLE_LINES = 6

METRIC_HELP = {
    "distinct": "distinct-1/2/3: share of different words, word pairs and triples over all samples "
    "(Li et al. 2016). Higher = more varied.",
    "self_bleu": "self-BLEU: how much each sample resembles the others (Zhu et al. 2018). Lower = more varied.",
    "seq_rep_4": "repeats: share of repeated 4-token runs within a sample (Welleck et al. 2020). Lower = less looping.",
    "mean_surprisal_bits": "surprisal: average bits of surprise of the drawn tokens under the unshaped model. "
    "Higher = less expected words.",
    "mean_kept": "kept: average number of tokens left to draw from at each step.",
    "mean_length": "length: average tokens per sample.",
}


def _fmt(value, digits: int = 2) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def metrics_text(metrics: PresetMetrics | None) -> str:
    """Four short lines of a preset's metrics; '–' where a value is undefined."""
    if metrics is None:
        return "metrics appear when the run ends"
    ended = ", ".join(f"{k} {v}" for k, v in sorted(metrics.stop_reasons.items())) or "–"
    distinct = " / ".join(_fmt(v) for v in (metrics.distinct_1, metrics.distinct_2, metrics.distinct_3))
    return (
        f"distinct-1/2/3 {distinct}\n"
        f"self-BLEU {_fmt(metrics.self_bleu)} · repeats {_fmt(metrics.seq_rep_4)}\n"
        f"surprisal {_fmt(metrics.mean_surprisal_bits, 1)} bits · kept {_fmt(metrics.mean_kept, 1)}\n"
        f"length {_fmt(metrics.mean_length, 1)} · ended: {ended}"
    )


class SampleView(QPlainTextEdit):
    """One sample's text; knows where every token starts so a click finds its step.

    Signals:
        token_clicked(int): the step of the clicked token.
    """

    token_clicked = Signal(int)

    def __init__(self, column: int, row: int, parent: QWidget | None = None):
        super().__init__(parent)
        self.column, self.row = column, row
        self.starts: list[int] = []
        self.marked: int | None = None
        self.setReadOnly(True)
        self.setAccessibleName(f"Preset {column + 1}, sample {row + 1}")
        self.setToolTip("Click a token to see the distribution it was drawn from")
        self.viewport().setCursor(Qt.PointingHandCursor)
        self.setFixedHeight(self.fontMetrics().lineSpacing() * SAMPLE_LINES + 10)
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Fixed)

    def append_token(self, text: str) -> None:
        """Add one token's text at the end."""
        cursor = QTextCursor(self.document())
        cursor.movePosition(QTextCursor.End)
        self.starts.append(cursor.position())
        cursor.insertText(text)

    def set_tokens(self, texts: list[str]) -> None:
        """Show exactly these token texts."""
        self.clear()
        self.starts = []
        for text in texts:
            self.append_token(text)
        self.mark_step(self.marked)

    def step_at(self, point: QPoint) -> int | None:
        """The step of the token under ``point`` (viewport coordinates), or None."""
        if not self.starts:
            return None
        cursor = self.cursorForPosition(point)
        position = cursor.position()
        # cursorForPosition gives the nearest gap between characters; a click on
        # a character's right half lands after it, so step back one.
        if point.x() < self.cursorRect(cursor).x() and position > 0:
            position -= 1
        if position >= self.document().characterCount() - 1:
            return len(self.starts) - 1
        return max(0, bisect.bisect_right(self.starts, position) - 1)

    def token_point(self, step: int) -> QPoint:
        """A viewport point inside the token of ``step`` (used by tests and keyboard users' tools)."""
        cursor = QTextCursor(self.document())
        cursor.setPosition(self.starts[step])
        rect = self.cursorRect(cursor)
        return QPoint(rect.x() + 3, rect.center().y())

    def mouseReleaseEvent(self, event) -> None:
        super().mouseReleaseEvent(event)
        if event.button() == Qt.LeftButton and not self.textCursor().hasSelection():
            step = self.step_at(event.position().toPoint())
            if step is not None:
                self.token_clicked.emit(step)

    def mark_step(self, step: int | None) -> None:
        """Highlight the token of ``step`` (None: no highlight)."""
        self.marked = step
        selections = []
        if step is not None and 0 <= step < len(self.starts):
            end = self.starts[step + 1] if step + 1 < len(self.starts) else self.document().characterCount() - 1
            mark = QTextEdit.ExtraSelection()
            fmt = QTextCharFormat()
            fmt.setBackground(QColor(palette.DRAWN_HIGHLIGHT))
            fmt.setFontUnderline(True)
            mark.format = fmt
            cursor = QTextCursor(self.document())
            cursor.setPosition(self.starts[step])
            cursor.setPosition(end, QTextCursor.KeepAnchor)
            mark.cursor = cursor
            selections.append(mark)
        self.setExtraSelections(selections)

    def contextMenuEvent(self, event) -> None:
        menu = self.createStandardContextMenu()
        menu.addSeparator()
        menu.addAction("Copy whole sample", self.copy_all)
        menu.exec(event.globalPos())

    def copy_all(self) -> None:
        """Put the sample's whole text on the clipboard."""
        QGuiApplication.clipboard().setText(self.toPlainText())


class ColumnHeader(QFrame):
    """A preset's name, colour, number, regenerate button and metrics."""

    def __init__(self, column: int, name: str, parent: QWidget | None = None):
        super().__init__(parent)
        colour = palette.preset_colour(column)
        self.column, self.name, self.colour = column, name, colour
        self.setObjectName("columnHeader")
        self.setStyleSheet(f"#columnHeader {{ border-top: 5px solid {colour}; }}")
        self.title = QLabel()
        self.title.setWordWrap(True)
        self.set_draft(False)
        self.regenerate = QToolButton()
        self.regenerate.setText("↻")
        self.regenerate.setToolTip(f"New samples for this preset ({name}); the other columns stay")
        self.regenerate.setAccessibleName(f"New samples for preset {column + 1}")
        self.metrics = QLabel(metrics_text(None))
        self.metrics.setAccessibleName(f"Metrics of preset {column + 1}")
        self.metrics.setToolTip("\n".join(METRIC_HELP.values()))
        self.metrics.setStyleSheet("color: #303030;")
        self.metrics.setMinimumHeight(self.metrics.fontMetrics().lineSpacing() * 4 + 4)
        top = QHBoxLayout()
        top.addWidget(self.title, 1)
        top.addWidget(self.regenerate)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 4, 2, 2)
        layout.addLayout(top)
        layout.addWidget(self.metrics)

    def set_draft(self, on: bool) -> None:
        """Mark the column as written with the editor's unsaved edits of the preset, or not."""
        self.draft = on
        mark = f" <i>{DRAFT_MARK}</i>" if on else ""
        self.title.setText(
            f"<span style='color:{self.colour}'>■</span> <b>{self.column + 1} · {html.escape(self.name)}</b>{mark}"
        )
        self.title.setToolTip(
            f"{self.name}: written with your unsaved edits of this preset; save them in the editor to keep these values"
            if on
            else self.name
        )


class QtAuditionGrid(QScrollArea):
    """Presets side by side; follows an AuditionSession.

    Signals:
        token_clicked(column, row, step): a token in a sample was clicked.
        regenerate_requested(column): the ↻ button of a column was pressed.
    """

    token_clicked = Signal(int, int, int)
    regenerate_requested = Signal(int)

    def __init__(self, session: AuditionSession, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.headers: list[ColumnHeader] = []
        self.views: list[list[SampleView]] = []
        self.footers: list[list[QLabel]] = []
        self.current: tuple[int, int] | None = None
        self.setWidgetResizable(True)
        self.setAccessibleName("Audition samples")
        self._host = QWidget()
        outer = QVBoxLayout(self._host)
        self._grid = QGridLayout()
        self._grid.setAlignment(Qt.AlignTop)
        self.setWidget(self._host)
        self._empty = QLabel(
            "Tick presets in the list on the left, then press <b>Generate all</b> "
            "(Ctrl+Enter). Each sample row uses the same random draws for every preset, "
            "so differences across a row come from the presets alone."
        )
        self._empty.setWordWrap(True)
        self._empty.setMargin(12)
        outer.addWidget(self._empty)
        outer.addLayout(self._grid)
        outer.addStretch(1)
        session.started.connect(self._on_started)
        session.token_added.connect(self._on_token_added)
        session.sample_finished.connect(self._on_sample_finished)
        session.finished.connect(self._on_finished)

    def cleanup(self) -> None:
        """Stop following the session."""
        self.session.started.disconnect(self._on_started)
        self.session.token_added.disconnect(self._on_token_added)
        self.session.sample_finished.disconnect(self._on_sample_finished)
        self.session.finished.disconnect(self._on_finished)

    def _on_started(self, serial: int) -> None:
        rows = self.session.sample_count()
        if (
            len(self.headers) != len(self.session.presets)
            or (self.views and len(self.views[0]) != rows)
            or any(h.name != p.name for h, p in zip(self.headers, self.session.presets, strict=False))
        ):
            self._rebuild(rows)
        for column in self.session.columns:
            self.headers[column].metrics.setText(metrics_text(None))
            for row, view in enumerate(self.views[column]):
                view.set_tokens([])
                self.footers[column][row].setText("writing…")

    def _rebuild(self, rows: int) -> None:
        while self._grid.count():
            widget = self._grid.takeAt(0).widget()
            if widget is not None:
                widget.deleteLater()
        self._empty.hide()
        for column in range(1, self._grid.columnCount() + 1):
            self._grid.setColumnStretch(column, 0)
        self.headers, self.views, self.footers = [], [], []
        for row in range(rows):
            label = QLabel(f"<b>{row + 1}</b>")
            label.setToolTip(f"Sample {row + 1}: the same random draws for every preset")
            self._grid.addWidget(label, 1 + 2 * row, 0, Qt.AlignTop)
        for column, preset in enumerate(self.session.presets):
            header = ColumnHeader(column, preset.name)
            header.setMinimumWidth(COLUMN_WIDTH)
            self._grid.setColumnStretch(1 + column, 1)
            header.regenerate.clicked.connect(lambda _=False, c=column: self.regenerate_requested.emit(c))
            self._grid.addWidget(header, 0, 1 + column)
            self.headers.append(header)
            views, footers = [], []
            for row in range(rows):
                view = SampleView(column, row)
                view.setMinimumWidth(COLUMN_WIDTH)
                view.token_clicked.connect(lambda step, c=column, r=row: self.token_clicked.emit(c, r, step))
                footer = QLabel("")
                footer.setStyleSheet("color: #505050;")
                self._grid.addWidget(view, 1 + 2 * row, 1 + column)
                self._grid.addWidget(footer, 2 + 2 * row, 1 + column)
                views.append(view)
                footers.append(footer)
            self.views.append(views)
            self.footers.append(footers)

    def _on_token_added(self, column: int, row: int, step: int, token) -> None:
        self.views[column][row].append_token(token.text)
        self.footers[column][row].setText(f"{len(self.views[column][row].starts)} tokens…")

    def _on_sample_finished(self, column: int, row: int, reason: str) -> None:
        count = len(self.views[column][row].starts)
        self.footers[column][row].setText(f"{count} tokens · ended: {reason}")

    def _on_finished(self, serial: int, cancelled: bool) -> None:
        for column in self.session.columns:
            self.headers[column].metrics.setText(metrics_text(self.session.metrics[column]))
            for row, sample in enumerate(self.session.samples[column]):
                view = self.views[column][row]
                texts = [t.text for t in sample.tokens]
                if len(view.starts) != len(texts):
                    view.set_tokens(texts)
                reason = sample.stop_reason or ("cancelled" if cancelled else "–")
                self.footers[column][row].setText(f"{len(texts)} tokens · ended: {reason}")

    def clear(self) -> None:
        """Remove every column and show the empty-grid hint again (the session was emptied)."""
        self._rebuild(0)
        self.current = None
        self._empty.show()

    def mark_draft(self, column: int, on: bool) -> None:
        """Mark (or unmark) a column as written with an unsaved draft of its preset."""
        if 0 <= column < len(self.headers):
            self.headers[column].set_draft(on)

    def mark(self, column: int, row: int, step: int | None) -> None:
        """Highlight one token; clears the highlight elsewhere."""
        if self.current != (column, row):
            self.unmark()
        self.current = (column, row)
        view = self._view(column, row)
        if view is not None:
            view.mark_step(step)
            self.ensureWidgetVisible(view)

    def unmark(self) -> None:
        """Remove the highlight of the inspected token."""
        old = self._view(*self.current) if self.current is not None else None
        if old is not None:
            old.mark_step(None)
        self.current = None

    def _view(self, column: int, row: int) -> SampleView | None:
        if 0 <= column < len(self.views) and 0 <= row < len(self.views[column]):
            return self.views[column][row]
        return None

    def view(self, column: int, row: int) -> SampleView | None:
        """The text view of one sample, or None."""
        return self._view(column, row)
