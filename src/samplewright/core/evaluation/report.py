"""The self-contained HTML report of a run (Jinja2, autoescaped; images as base64 PNG).

Sample text is untrusted: the template is rendered with autoescaping on, so
it can never become markup. The report needs no network to open.
"""

from __future__ import annotations

import base64
import os
from importlib import resources
from pathlib import Path
from typing import Any

from ..library.storage import atomic_write
from .measures import LABELS, MEASURE_KEYS
from .report_images import quality_map_png
from .run import EvaluationRun
from .run_file import RunFileError

TEMPLATE = "evaluation_report.html.j2"
SAMPLES_SHOWN = 3
CAUTION = (
    "Generated text can be wrong, biased or offensive. These samples were written by a language model; "
    "review them under your team's own policy before using or sharing any of them."
)


def _environment():
    import jinja2

    folder = resources.files("samplewright") / "resources" / "templates"
    loader = jinja2.DictLoader({TEMPLATE: (folder / TEMPLATE).read_text(encoding="utf-8")})
    return jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)


def _fmt(value: float | None, digits: int = 3) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _cell(estimate) -> dict[str, str]:
    span = "" if estimate.low is None else f"[{_fmt(estimate.low)}, {_fmt(estimate.high)}]"
    note = f"{estimate.undefined} without a value" if estimate.undefined else (estimate.reason or "")
    return {"value": _fmt(estimate.value), "interval": span, "note": note}


def report_context(run: EvaluationRun, changes: list[str] | None = None) -> dict[str, Any]:
    """Everything the template shows, as plain strings and lists."""
    plan, labels = run.plan, run.plan.passage_labels()
    front = run.pareto()
    presets = []
    for i, entry in enumerate(plan.presets):
        summary = run.preset_summary(i)
        samples = [
            {"passage": labels[j], "texts": [s.text for s in outcome.samples[i][:SAMPLES_SHOWN]]}
            for j, outcome in sorted(run.outcomes.items())
        ]
        presets.append(
            {
                "name": entry.preset.name,
                "describe": entry.preset.describe(),
                "front": front[i],
                "pooled": [_cell(summary.pooled[k]) for k in MEASURE_KEYS],
                "per_passage": {j: [_cell(m[k]) for k in MEASURE_KEYS] for j, m in summary.per_passage.items()},
                "samples": samples,
            }
        )
    passages = [
        {"label": labels[j], "hash": p.text_hash[:12], "framing": p.framing.describe(), "done": j in run.outcomes}
        for j, p in enumerate(plan.passages)
    ]
    return {
        "title": f"Evaluation run {run.created}",
        "caution": CAUTION,
        "model": f"{run.model.get('name', '?')} ({run.model.get('precision', 'float32')})",
        "created": run.created,
        "user": run.user or "unknown",
        "tool_version": run.tool_version,
        "seed": plan.seed,
        "samples": plan.samples,
        "tokens": plan.tokens,
        "sweep": None if plan.sweep is None else ", ".join(a.field for a in plan.sweep.axes),
        "unfinished": not run.finished,
        "changes": changes or [],
        "passages": passages,
        "measure_labels": [LABELS[k] for k in MEASURE_KEYS],
        "presets": presets,
        "done_passages": [(j, labels[j]) for j in sorted(run.outcomes)],
        "map_png": base64.b64encode(quality_map_png(run)).decode("ascii"),
    }


def render_report(run: EvaluationRun, changes: list[str] | None = None) -> str:
    """The report's HTML text."""
    return _environment().get_template(TEMPLATE).render(**report_context(run, changes))


def write_report(run: EvaluationRun, path: str | os.PathLike, changes: list[str] | None = None) -> None:
    """Write the report to ``path`` atomically.

    Raises:
        RunFileError: the file cannot be written.
    """
    path = Path(path).expanduser()
    try:
        atomic_write(path, render_report(run, changes).encode("utf-8"))
    except OSError as exc:
        raise RunFileError(f"Could not write {path} ({exc.strerror or exc}): choose another place.") from None
