"""One row per sample: ``preset,passage,sample,text,tokens`` then the per-sample measures.

``tokens`` is the generated token ids joined by spaces; an undefined measure is
an empty cell; ``degenerate`` is 0 or 1. Written atomically, UTF-8, with the
csv module's quoting (texts hold commas, quotes and line breaks).
"""

from __future__ import annotations

import csv
import io
import os
from pathlib import Path

from ..library.storage import atomic_write
from .measures import SAMPLE_KEYS
from .run import EvaluationRun
from .run_file import RunFileError

HEADER = ("preset", "passage", "sample", "text", "tokens", *SAMPLE_KEYS)


def csv_text(run: EvaluationRun) -> str:
    """The CSV of ``run``'s finished passages."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(HEADER)
    labels = run.plan.passage_labels()
    for j, outcome in sorted(run.outcomes.items()):
        for i, row in enumerate(outcome.samples):
            name = run.plan.presets[i].preset.name
            for sample, values in zip(row, outcome.tables[i], strict=True):
                cells = ["" if values[k] is None else _cell(k, values[k]) for k in SAMPLE_KEYS]
                ids = " ".join(str(t) for t in sample.token_ids)
                writer.writerow([name, labels[j], sample.sample_index, sample.text, ids, *cells])
    return out.getvalue()


def _cell(key: str, value: float | None) -> str:
    if key in ("length", "degenerate"):
        return str(int(value or 0))
    return repr(float(value or 0.0))


def write_csv(run: EvaluationRun, path: str | os.PathLike) -> None:
    """Write :func:`csv_text` to ``path`` atomically.

    Raises:
        RunFileError: the file cannot be written.
    """
    path = Path(path).expanduser()
    try:
        atomic_write(path, csv_text(run).encode("utf-8"))
    except OSError as exc:
        raise RunFileError(f"Could not write {path} ({exc.strerror or exc}): choose another place.") from None
