"""The step view's token rows: the most probable tokens, the drawn token and the
token picked in the plot, wherever they rank, each with its raw probability,
each preset's probability and the stage that cut it; and a short summary of
how much of the distribution each preset keeps.
"""

from __future__ import annotations

import html
from collections.abc import Callable, Sequence

from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QTableWidget, QTableWidgetItem, QWidget

from ..core.results import StepView
from ..core.sampling.inspection import table_ids
from . import palette, stage_style
from .distribution_plot import MAX_PRESETS, probability, token_label

FIXED_COLUMNS = ("rank", "token", "raw p")


def _bits(value: float) -> str:
    """Entropy for display; rounding can make a one-token distribution print as -0.00."""
    return f"{max(0.0, value):.2f}"


class StepTable(QTableWidget):
    """One row per listed token, one probability column per preset, and a "cut by" column.

    Args:
        top_n: how many of the most probable tokens are always listed.
        label_of: the label of a token id.
    """

    def __init__(self, top_n: int, label_of: Callable[[int], str], parent: QWidget | None = None):
        super().__init__(parent)
        self.top_n, self.label_of = top_n, label_of
        self.ids: list[int] = []
        self.picked: int | None = None
        self.setAccessibleName("Token rows of the step")
        self.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.verticalHeader().hide()
        self.verticalHeader().setDefaultSectionSize(self.fontMetrics().height() + 6)
        self.setWordWrap(False)
        # Columns are fitted once per step: fitting them on every new cell took a tenth of a second.
        self.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Interactive)
        self.horizontalHeader().setStretchLastSection(True)

    def show_step(self, view: StepView | None, names: Sequence[str], picked_rank: int | None = None) -> None:
        """List the step's rows (None: empty), with the token of ``picked_rank`` among them."""
        self.clearContents()
        if view is None:
            self.ids, self.picked = [], None
            self.setRowCount(0)
            return
        self.picked = int(view.ranked_ids[picked_rank - 1]) if picked_rank else None
        self.ids = table_ids(view, [self.picked] if self.picked is not None else [], self.top_n)
        presets = view.presets[:MAX_PRESETS]
        headers = [*FIXED_COLUMNS, *[str(i + 1) for i in range(len(presets))], "cut by"]
        self.setColumnCount(len(headers))
        self.setHorizontalHeaderLabels(headers)
        for column, name in enumerate(names[: len(presets)]):
            header = self.horizontalHeaderItem(len(FIXED_COLUMNS) + column)
            header.setToolTip(f"Preset {column + 1}: {name}, probability after its chain")
            header.setForeground(QBrush(QColor(palette.preset_colour(column))))
        self.setRowCount(len(self.ids))
        previous = 0
        for row, token_id in enumerate(self.ids):
            rank = view.rank_of(token_id)
            self._fill_row(view, names, row, token_id, rank, gap=rank > previous + 1)
            previous = rank
        self.resizeColumnsToContents()
        if self.picked is not None and self.picked in self.ids:
            self.selectRow(self.ids.index(self.picked))

    def _fill_row(self, view: StepView, names: Sequence[str], row: int, token_id: int, rank: int, gap: bool) -> None:
        drawn = token_id == view.drawn_id
        text = ("▼ " if drawn else "") + token_label(self.label_of(token_id), 18)
        cells = [
            self._cell(("⋯ " if gap else "") + str(rank)),
            self._cell(text),
            self._cell(probability(view.raw_probs[token_id])),
        ]
        cuts: dict[str, list[str]] = {}
        for index, step in enumerate(view.presets[:MAX_PRESETS]):
            stage = step.cut_stage(rank)
            name = names[index] if index < len(names) else step.name
            if stage is None:
                cell = self._cell(probability(step.probs[token_id]))
                cell.setToolTip(f"{name}: p {probability(step.probs[token_id])} after its chain")
            else:
                cell = self._cell("cut")
                hatch = QColor(stage_style.colour(stage))
                hatch.setAlpha(150)  # the word "cut" stays readable over the hatch
                cell.setBackground(QBrush(hatch, stage_style.pattern(stage)))
                cell.setToolTip(f"{name}: cut by {stage_style.label(stage)}")
                cuts.setdefault(stage_style.label(stage), []).append(str(index + 1))
            cells.append(cell)
        cells.append(self._cell(" · ".join(f"{label} ({', '.join(n)})" for label, n in cuts.items()) or "kept by all"))
        tip = f"raw rank {rank} · id {token_id} · raw p {probability(view.raw_probs[token_id])}"
        if gap:
            tip += " (ranks in between are not listed)"
        for column, cell in enumerate(cells):
            if drawn and column == 1:
                cell.setBackground(QBrush(QColor(palette.DRAWN_HIGHLIGHT)))
                cell.setToolTip("The token the inspected sample drew at this step")
            elif not cell.toolTip():
                cell.setToolTip(tip)
            if token_id == self.picked:
                font = QFont(cell.font())
                font.setBold(True)
                cell.setFont(font)
            self.setItem(row, column, cell)

    @staticmethod
    def _cell(text: str) -> QTableWidgetItem:
        cell = QTableWidgetItem(text)
        cell.setTextAlignment(Qt.AlignmentFlag.AlignVCenter | Qt.AlignmentFlag.AlignLeft)
        return cell


def context_text(view: StepView | None, live: bool = False) -> str:
    """Where the presets are compared: the inspected sample's own context; and whether typed edits are shown."""
    if view is None:
        return ""
    text = (
        f"All presets are compared at this sample's own context: {view.context_tokens} tokens, "
        "the passage and the sample up to this step."
    )
    return text + (" Your unsaved edits are shown as you type them." if live else "")


def summary_html(view: StepView | None, names: Sequence[str]) -> str:
    """How many tokens and how much of the distribution each preset keeps at this step."""
    if view is None:
        return "<i>Generate, then click a token in a sample to see the distribution it was drawn from.</i>"
    rows = [
        "<tr><th></th><th align='left'>preset</th><th>kept</th><th>ends at rank</th>"
        "<th>raw mass kept</th><th>entropy, bits</th></tr>"
    ]
    for index, step in enumerate(view.presets[:MAX_PRESETS]):
        name = names[index] if index < len(names) else step.name
        rows.append(
            f"<tr><td style='color:{palette.preset_colour(index)}'>■ {index + 1}</td><td>{html.escape(name)}</td>"
            f"<td align='right'>{step.kept}</td><td align='right'>{step.kept_end}</td>"
            f"<td align='right'>{step.kept_raw_mass:.2f}</td>"
            f"<td align='right'>{_bits(step.raw_entropy_bits)} → {_bits(step.entropy_bits)}</td></tr>"
        )
    return f"<table cellspacing='4'>{''.join(rows)}</table>"
