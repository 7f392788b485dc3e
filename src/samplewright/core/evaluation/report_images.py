"""Static pictures for the HTML report, drawn with matplotlib (Agg, no window) as PNG bytes.

Only :func:`quality_map_png` draws: each preset a point at its two pooled
measures with both 95% intervals as error bars, a sweep as a line through its
values, the Pareto front joined and marked.
"""

from __future__ import annotations

import io

from .measures import LABELS, Estimate
from .run import EvaluationRun
from .sweep_lines import sweep_lines


def quality_map_png(run: EvaluationRun, x: str = "diversity", y: str = "coherence") -> bytes:
    """The run's quality–diversity map as PNG bytes."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(7.5, 5.0), dpi=100)
    FigureCanvasAgg(figure)
    axes = figure.add_subplot()
    points = []
    for i, entry in enumerate(run.plan.presets):
        pooled = run.preset_summary(i).pooled
        ex, ey = pooled[x], pooled[y]
        if ex.value is None or ey.value is None:
            continue
        points.append((i, ex.value, ey.value))
        axes.errorbar(
            ex.value, ey.value, xerr=_bar(ex), yerr=_bar(ey), fmt="o", color="#2f5f8a", ecolor="#9bb4cc", capsize=3
        )
        if run.plan.sweep is None:
            axes.annotate(
                entry.preset.name, (ex.value, ey.value), textcoords="offset points", xytext=(5, 5), fontsize=8
            )
    for line in sweep_lines(run):
        coords: list[tuple[float, float, str]] = []
        for p, value in zip(line.presets, line.values, strict=True):
            m = run.preset_summary(p).pooled
            vx, vy = m[x].value, m[y].value
            if vx is not None and vy is not None:
                coords.append((vx, vy, value))
        axes.plot([c[0] for c in coords], [c[1] for c in coords], "-", color="#7a8a99", linewidth=1, label=line.label)
        for cx, cy, value in coords:
            axes.annotate(value, (cx, cy), textcoords="offset points", xytext=(4, -10), size=7)
    front = run.pareto(x, y)
    on_front = sorted((px, py) for i, px, py in points if front[i])
    if on_front:
        axes.plot([p[0] for p in on_front], [p[1] for p in on_front], "--", color="#c0562b", label="Pareto front")
        axes.scatter([p[0] for p in on_front], [p[1] for p in on_front], s=90, facecolors="none", edgecolors="#c0562b")
    axes.set_xlabel(LABELS[x])
    axes.set_ylabel(LABELS[y])
    axes.grid(True, alpha=0.3)
    if axes.get_legend_handles_labels()[0]:
        axes.legend(fontsize=8, loc="best")
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return buffer.getvalue()


def _bar(estimate: Estimate) -> list[list[float]] | None:
    """matplotlib's asymmetric error bar of one estimate (None without an interval)."""
    if estimate.value is None or estimate.low is None or estimate.high is None:
        return None
    return [[estimate.value - estimate.low], [estimate.high - estimate.value]]
