"""The audition grid: one column per preset, one row per sample.

Sample *i* of every preset is drawn from the same random stream, so rows are
aligned and read across. The grid follows an
:class:`~samplewright.core.engine.session.AuditionSession`: tokens are appended as
the session reports them. Clicking a token asks the window to inspect that
step.
"""

from __future__ import annotations

import html

import numpy as np
from PySide6.QtCore import QPoint, Qt, Signal
from PySide6.QtGui import QColor, QGuiApplication, QTextCharFormat, QTextCursor
from PySide6.QtWidgets import (
    QDialog,
    QFrame,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QPlainTextEdit,
    QPushButton,
    QScrollArea,
    QSizePolicy,
    QTextEdit,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from ..core.engine.session import AuditionSession
from ..core.engine.token_text import GrowingText, Vocabulary
from ..core.sampling.metrics import PresetMetrics
from . import palette

COLUMN_WIDTH = 176
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


#: Which metrics each of the header's four metric lines shows (its tooltip explains those).
METRIC_LINES = (("distinct",), ("self_bleu", "seq_rep_4"), ("mean_surprisal_bits", "mean_kept"), ("mean_length",))


def metrics_text(metrics: PresetMetrics | None) -> str:
    """Four short lines of a preset's metrics; '–' where a value is undefined."""
    if metrics is None:
        return "metrics appear when the run ends\n\n\n"
    ended = ", ".join(f"{k} {v}" for k, v in sorted(metrics.stop_reasons.items())) or "–"
    distinct = " / ".join(_fmt(v) for v in (metrics.distinct_1, metrics.distinct_2, metrics.distinct_3))
    return (
        f"distinct-1/2/3 {distinct}\n"
        f"self-BLEU {_fmt(metrics.self_bleu)} · repeats {_fmt(metrics.seq_rep_4)}\n"
        f"surprisal {_fmt(metrics.mean_surprisal_bits, 1)} bits · kept {_fmt(metrics.mean_kept, 1)}\n"
        f"length {_fmt(metrics.mean_length, 1)} · ended: {ended}"
    )


class SampleView(QPlainTextEdit):
    """One sample's text, decoded from the bytes of all its tokens at once (so a
    character spread over several tokens shows whole), and where every token lies
    in it so a click finds its step.

    Signals:
        token_clicked(int): the step of the clicked token.
    """

    token_clicked = Signal(int)

    def __init__(self, column: int, row: int, parent: QWidget | None = None):
        super().__init__(parent)
        self.column, self.row = column, row
        self.growing = GrowingText()
        self.marked: int | None = None
        self._utf16: np.ndarray | None = None
        self.setReadOnly(True)
        self.setAccessibleName(f"Preset {column + 1}, sample {row + 1}")
        self.setToolTip("Click a token to see the distribution it was drawn from")
        self.viewport().setCursor(Qt.PointingHandCursor)
        self.setFixedHeight(self.fontMetrics().lineSpacing() * SAMPLE_LINES + 10)
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Fixed)

    @property
    def starts(self) -> list[int]:
        """Where each token starts in the document (Qt positions)."""
        return [start for start, _ in self.qt_spans()]

    def qt_spans(self) -> list[tuple[int, int]]:
        """Each token's range in the document, in Qt positions (UTF-16 units)."""
        offsets = self._offsets()
        return [(int(offsets[a]), int(offsets[b])) for a, b in self.growing.spans]

    def _offsets(self) -> np.ndarray:
        """Qt position of every character offset of the text (an emoji takes two Qt positions)."""
        if self._utf16 is None:
            code_points = np.frombuffer(self.growing.text.encode("utf-32-le"), dtype=np.uint32)
            self._utf16 = np.concatenate([[0], np.cumsum(1 + (code_points > 0xFFFF))]).astype(np.int64)
        return self._utf16

    def append_piece(self, piece: bytes) -> None:
        """Add one token's bytes at the end; the unfinished character before it is decoded again."""
        old = self._offsets()
        changed = self.growing.append(piece)
        cursor = QTextCursor(self.document())
        cursor.setPosition(int(old[changed]) if changed < len(old) else int(old[-1]))
        cursor.movePosition(QTextCursor.End, QTextCursor.KeepAnchor)
        self._utf16 = None
        cursor.insertText(self.growing.text[changed:])

    def append_token(self, text: str) -> None:
        """Add one token given by its text (without the model's vocabulary)."""
        self.append_piece(text.encode("utf-8"))

    def set_pieces(self, pieces: list[bytes]) -> None:
        """Show exactly the tokens with these bytes."""
        self.clear()
        self.growing, self._utf16 = GrowingText(), None
        for piece in pieces:
            self.append_piece(piece)
        self.mark_step(self.marked)

    def set_tokens(self, texts: list[str]) -> None:
        """Show exactly these token texts."""
        self.set_pieces([t.encode("utf-8") for t in texts])

    def step_at(self, point: QPoint) -> int | None:
        """The step of the token under ``point`` (viewport coordinates), or None."""
        if not self.growing.spans:
            return None
        cursor = self.cursorForPosition(point)
        position = cursor.position()
        # cursorForPosition gives the nearest gap between characters; a click on
        # a character's right half lands after it, so step back one.
        if point.x() < self.cursorRect(cursor).x() and position > 0:
            position -= 1
        character = int(np.searchsorted(self._offsets(), position, side="right")) - 1
        if character >= len(self.growing.text):
            return len(self.growing.spans) - 1
        return self.growing.snapshot().token_at(character)

    def token_point(self, step: int) -> QPoint:
        """A viewport point inside the token of ``step`` (used by tests and keyboard users' tools)."""
        cursor = QTextCursor(self.document())
        cursor.setPosition(self.qt_spans()[step][0])
        rect = self.cursorRect(cursor)
        return QPoint(rect.x() + 3, rect.center().y())

    def mouseReleaseEvent(self, event) -> None:
        super().mouseReleaseEvent(event)
        if event.button() == Qt.LeftButton and not self.textCursor().hasSelection():
            step = self.step_at(event.position().toPoint())
            if step is not None:
                self.token_clicked.emit(step)

    def mark_step(self, step: int | None) -> None:
        """Highlight the token of ``step`` (None: no highlight); a character it shares with a
        neighbouring token is highlighted whole."""
        self.marked = step
        selections = []
        spans = self.qt_spans()
        if step is not None and 0 <= step < len(spans):
            start, end = spans[step]
            mark = QTextEdit.ExtraSelection()
            fmt = QTextCharFormat()
            fmt.setBackground(QColor(palette.DRAWN_HIGHLIGHT))
            fmt.setFontUnderline(True)
            mark.format = fmt
            cursor = QTextCursor(self.document())
            cursor.setPosition(start)
            cursor.setPosition(max(end, start), QTextCursor.KeepAnchor)
            mark.cursor = cursor
            selections.append(mark)
        self.setExtraSelections(selections)

    def contextMenuEvent(self, event) -> None:
        menu = self.createStandardContextMenu()
        menu.addSeparator()
        menu.addAction("Copy whole sample", self.copy_all)
        menu.addAction("Read the whole sample…", self.read_whole)
        menu.exec(event.globalPos())

    def read_whole(self) -> QDialog:
        """Open the sample in a window of its own, large enough to read it whole."""
        dialog = QDialog(self.window())
        dialog.setWindowTitle(f"Preset {self.column + 1}, sample {self.row + 1}")
        text = QPlainTextEdit(self.toPlainText())
        text.setReadOnly(True)
        text.setAccessibleName("Whole sample")
        layout = QVBoxLayout(dialog)
        layout.addWidget(text)
        dialog.resize(640, 420)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.show()
        return dialog

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
        self.metric_lines = [QLabel() for _ in METRIC_LINES]
        for line, keys in zip(self.metric_lines, METRIC_LINES, strict=True):
            line.setToolTip("\n".join(METRIC_HELP[k] for k in keys))
            line.setStyleSheet("color: #303030;")
            line.setAccessibleName(f"Metrics of preset {column + 1}: {', '.join(keys)}")
        self.note = QLabel()
        self.note.setWordWrap(True)
        self.note.setAccessibleName(f"Settings of preset {column + 1}")
        self.note.setStyleSheet("color: #505050;")
        self.stale = QLabel()
        self.stale.setWordWrap(True)
        self.stale.setObjectName("staleNote")
        self.stale.setStyleSheet(palette.notice_style("staleNote"))
        self.stale.setAccessibleName(f"Preset {column + 1} is out of date")
        self.stale.hide()
        self.set_metrics(None)
        top = QHBoxLayout()
        top.addWidget(self.title, 1)
        top.addWidget(self.regenerate)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 4, 2, 2)
        layout.setSpacing(1)
        layout.addLayout(top)
        layout.addWidget(self.note)
        layout.addWidget(self.stale)
        for line in self.metric_lines:
            layout.addWidget(line)

    def set_metrics(self, metrics: PresetMetrics | None) -> None:
        """Show the preset's metrics, one line per group; hovering a line explains its measures."""
        for line, text in zip(self.metric_lines, metrics_text(metrics).split("\n"), strict=True):
            line.setText(text)

    def metrics_shown(self) -> str:
        """The metric lines as shown, one per line."""
        return "\n".join(line.text() for line in self.metric_lines)

    def set_note(self, text: str, tip: str) -> None:
        """Show which token limit and random numbers applied, with ``tip`` explaining them."""
        self.note.setText(text)
        self.note.setToolTip(tip)

    def set_stale(self, reason: str | None) -> None:
        """Dim the column's header and say why it is out of date (None: it is current)."""
        self.stale.setVisible(reason is not None)
        self.stale.setText(f"{reason}. Press ↻ to write it again." if reason else "")
        self.title.setEnabled(reason is None)

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
        generate_again_requested(): the out-of-date notice's Generate again was pressed.
    """

    token_clicked = Signal(int, int, int)
    regenerate_requested = Signal(int)
    generate_again_requested = Signal()

    def __init__(self, session: AuditionSession, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.headers: list[ColumnHeader] = []
        self.views: list[list[SampleView]] = []
        self.footers: list[list[QLabel]] = []
        self.current: tuple[int, int] | None = None
        self.vocabulary: Vocabulary | None = None
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
        self.stale_banner = QFrame()
        self.stale_banner.setObjectName("staleBanner")
        self.stale_banner.setStyleSheet(palette.notice_style("staleBanner"))
        self.stale_label = QLabel()
        self.stale_label.setWordWrap(True)
        self.stale_label.setAccessibleName("The audition is out of date")
        self.again_button = QPushButton("Generate again")
        self.again_button.setToolTip("Write the audition again with the current passage and presets")
        self.again_button.clicked.connect(self.generate_again_requested)
        banner = QHBoxLayout(self.stale_banner)
        banner.setContentsMargins(4, 2, 4, 2)
        banner.addWidget(self.stale_label, 1)
        banner.addWidget(self.again_button)
        self.stale_banner.hide()
        outer.addWidget(self.stale_banner)
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
        if self.session.columns == list(range(len(self.session.presets))):
            self.horizontalScrollBar().setValue(0)  # a new run starts at column 1
        rows = self.session.sample_count()
        if (
            len(self.headers) != len(self.session.presets)
            or (self.views and len(self.views[0]) != rows)
            or any(h.name != p.name for h, p in zip(self.headers, self.session.presets, strict=False))
        ):
            self._rebuild(rows)
        for column in self.session.columns:
            self.headers[column].set_metrics(None)
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
                footer.setContentsMargins(0, 0, 26, 0)  # room for the ⤢ button in the same cell
                self._grid.addWidget(view, 1 + 2 * row, 1 + column)
                self._grid.addWidget(footer, 2 + 2 * row, 1 + column)
                self._grid.addWidget(_whole_button(view), 2 + 2 * row, 1 + column, Qt.AlignmentFlag.AlignRight)
                views.append(view)
                footers.append(footer)
            self.views.append(views)
            self.footers.append(footers)

    def set_vocabulary(self, vocabulary: Vocabulary | None) -> None:
        """The model's token bytes: samples are shown from them (None: from each token's own text)."""
        self.vocabulary = vocabulary

    def _piece(self, token) -> bytes:
        if self.vocabulary is not None:
            return self.vocabulary.bytes_of(token.token_id)
        return token.piece if token.piece is not None else token.text.encode("utf-8")

    def _on_token_added(self, column: int, row: int, step: int, token) -> None:
        self.views[column][row].append_piece(self._piece(token))
        self.footers[column][row].setText(f"{len(self.views[column][row].growing.spans)} tokens…")

    def _on_sample_finished(self, column: int, row: int, reason: str) -> None:
        count = len(self.views[column][row].growing.spans)
        self.footers[column][row].setText(f"{count} tokens · ended: {reason}")

    def _on_finished(self, serial: int, cancelled: bool) -> None:
        for column in self.session.columns:
            self.headers[column].set_metrics(self.session.metrics[column])
            for row, sample in enumerate(self.session.samples[column]):
                view = self.views[column][row]
                if len(view.growing.spans) != len(sample.tokens):
                    view.set_pieces([self._piece(t) for t in sample.tokens])
                reason = sample.stop_reason or ("cancelled" if cancelled else "–")
                self.footers[column][row].setText(f"{len(sample.tokens)} tokens · ended: {reason}")

    def show_staleness(self, audition: str | None, columns: list[str | None]) -> None:
        """Dim what is out of date and say why: the whole audition (``audition``) or single columns."""
        self.stale_banner.setVisible(audition is not None)
        self.stale_label.setText(audition or "")
        for column, header in enumerate(self.headers):
            reason = columns[column] if column < len(columns) else None
            header.set_stale(reason if audition is None else None)
            dim = audition is not None or reason is not None
            style = "color: #8C8C8C;" if dim else ""
            for view in self.views[column]:
                if view.styleSheet() != style:  # a new style sheet re-polishes the view: only on a change
                    view.setStyleSheet(style)

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


def _whole_button(view: SampleView) -> QToolButton:
    """The button under a sample that opens it whole in a window of its own."""
    whole = QToolButton()
    whole.setText("⤢")
    whole.setAutoRaise(True)
    whole.setAccessibleName(f"Read preset {view.column + 1}, sample {view.row + 1} whole")
    whole.setToolTip("Read the whole sample in a window of its own")
    whole.clicked.connect(view.read_whole)
    return whole
