"""The table of every measure with its 95% interval, one row per preset (or per preset and
passage), sortable by any column; and the side-by-side samples of two presets."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QTableWidget, QTableWidgetItem, QTextBrowser, QWidget

from ..core.evaluation.measures import LABELS, MEASURE_KEYS
from ..core.evaluation.run import EvaluationRun


class _NumberItem(QTableWidgetItem):
    """A cell that sorts by its number (undefined values last)."""

    def __init__(self, text: str, value: float | None):
        super().__init__(text)
        self.value = value

    def __lt__(self, other) -> bool:
        mine = self.value if self.value is not None else float("inf")
        theirs = getattr(other, "value", None)
        return mine < (theirs if theirs is not None else float("inf"))


def _text(estimate) -> str:
    if estimate.value is None:
        return "–"
    span = f"  [{estimate.low:.3f}, {estimate.high:.3f}]" if estimate.low is not None else ""
    return f"{estimate.value:.3f}{span}"


class MeasureTable(QTableWidget):
    """Pooled measures per preset, or per preset and passage (:meth:`set_per_passage`)."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(0, 3 + len(MEASURE_KEYS), parent)
        self.setHorizontalHeaderLabels(["preset", "passage", "front", *[LABELS[k] for k in MEASURE_KEYS]])
        self.setSortingEnabled(True)
        self.setEditTriggers(QTableWidget.NoEditTriggers)
        self.setSelectionBehavior(QTableWidget.SelectRows)
        self.setAccessibleName("Measures with 95% intervals")
        self.per_passage = False
        self.run: EvaluationRun | None = None

    def set_per_passage(self, on: bool) -> None:
        """Show one row per preset and passage (True) or pooled rows (False)."""
        self.per_passage = on
        self.show_run(self.run)

    def show_run(self, run: EvaluationRun | None) -> None:
        """Fill the table from ``run``'s finished passages."""
        self.run = run
        self.setSortingEnabled(False)
        self.setRowCount(0)
        if run is not None and run.outcomes:
            front = run.pareto()
            labels = run.plan.passage_labels()
            for i, entry in enumerate(run.plan.presets):
                summary = run.preset_summary(i)
                groups = sorted(summary.per_passage.items()) if self.per_passage else [(None, summary.pooled)]
                for j, values in groups:
                    row = self.rowCount()
                    self.insertRow(row)
                    name = QTableWidgetItem(entry.preset.name)
                    name.setData(Qt.UserRole, i)
                    self.setItem(row, 0, name)
                    self.setItem(row, 1, QTableWidgetItem("all" if j is None else labels[j]))
                    self.setItem(row, 2, QTableWidgetItem("yes" if front[i] else ""))
                    for c, key in enumerate(MEASURE_KEYS):
                        e = values[key]
                        item = _NumberItem(_text(e), e.value)
                        if e.undefined or e.reason:
                            item.setToolTip(e.reason or f"{e.undefined} samples without a value")
                        self.setItem(row, 3 + c, item)
        self.setSortingEnabled(True)
        self.resizeColumnsToContents()


class SampleComparison(QTextBrowser):
    """The samples of one preset beside another's, passage by passage, same sample index side by side."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setAccessibleName("Samples of the chosen presets")
        self.setPlaceholderText("Click a point on the map to read the samples it stands for.")
        self.shown: tuple[int | None, int | None] = (None, None)

    def show_presets(self, run: EvaluationRun, first: int, second: int | None) -> None:
        """Show preset ``first``'s samples and, beside them, ``second``'s (None: only ``first``)."""
        import html

        self.shown = (first, second)
        names = [run.plan.presets[first].preset.name] + (
            [run.plan.presets[second].preset.name] if second is not None else []
        )
        labels = run.plan.passage_labels()
        parts = [
            "<p style='color:#a04020'>Generated text can be wrong, biased or offensive: review it under your "
            "team's policy.</p>"
        ]
        head = "".join(f"<th>{html.escape(n)}</th>" for n in names)
        for j, outcome in sorted(run.outcomes.items()):
            parts.append(f"<h4>{html.escape(labels[j])}</h4><table width='100%' border='1' cellpadding='4'>")
            parts.append(f"<tr><th>#</th>{head}</tr>")
            for s, sample in enumerate(outcome.samples[first]):
                cells = [sample.text] + ([outcome.samples[second][s].text] if second is not None else [])
                row = "".join(f"<td>{html.escape(t)}</td>" for t in cells)
                parts.append(f"<tr><td>{s + 1}</td>{row}</tr>")
            parts.append("</table>")
        self.setHtml("".join(parts))
