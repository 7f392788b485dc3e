"""Run files: one JSON file per run under ``<library>/runs/``, written atomically.

The file is replaced whole after every finished passage (storage.atomic_write),
so a cancelled or crashed run leaves the passages finished so far and can be
resumed. Opening a file reads it strictly (storage.parse_json) and rebuilds
the run; :func:`changes_since` says which presets or passages have changed
in the library since the run.
"""

from __future__ import annotations

import os
import re
import secrets
from pathlib import Path

from ..errors import SamplewrightError
from ..library.storage import atomic_write, dump_json, read_document
from .passage_sets import PassageSets
from .run import FORMAT, FORMAT_VERSION, EvaluationRun

RUNS_DIR = "runs"
MAX_RUN_BYTES = 512_000_000


class RunFileError(SamplewrightError):
    """A run file that cannot be read or written; the message says what to do."""


def runs_folder(library_dir: str | os.PathLike) -> Path:
    """``<library>/runs``."""
    return Path(library_dir).expanduser() / RUNS_DIR


def new_run_path(library_dir: str | os.PathLike, run: EvaluationRun) -> Path:
    """A fresh file name under ``runs/``: date, what was run, a random tail."""
    plan = run.plan
    what = f"sweep-{plan.sweep.base.name}" if plan.sweep else "-".join(sorted({p.set_name for p in plan.passages}))
    slug = re.sub(r"[^A-Za-z0-9]+", "-", what).strip("-").lower()[:40] or "run"
    stamp = run.created.replace(":", "").replace("-", "")[:15]
    return runs_folder(library_dir) / f"{stamp}-{slug}-{secrets.token_hex(3)}.json"


def save_run(run: EvaluationRun, path: str | os.PathLike) -> Path:
    """Write ``run`` to ``path`` atomically (the folder is created when missing).

    Raises:
        RunFileError: the file cannot be written (nothing half-written is left).
    """
    path = Path(path).expanduser()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(path, dump_json(run.to_dict()))
    except OSError as exc:
        raise RunFileError(
            f"Could not save the run file {path} ({exc.strerror or exc}): choose another place."
        ) from None
    run.path = path
    return path


def load_run(path: str | os.PathLike) -> EvaluationRun:
    """Read a run file.

    Raises:
        RunFileError: missing, unreadable, not JSON or not a Samplewright run file.
    """
    path = Path(path).expanduser()
    data = read_document(path, MAX_RUN_BYTES, "run file", FORMAT, FORMAT_VERSION, RunFileError)
    try:
        return EvaluationRun.from_dict(data, path)
    except (KeyError, TypeError, ValueError) as exc:
        raise RunFileError(f"The run file {path} is damaged ({exc}): run the evaluation again.") from None


def list_runs(library_dir: str | os.PathLike) -> list[Path]:
    """The run files of a library, newest name first."""
    folder = runs_folder(library_dir)
    return sorted(folder.glob("*.json"), reverse=True) if folder.is_dir() else []


def changes_since(run: EvaluationRun, library_dir: str | os.PathLike | None) -> list[str]:
    """What changed in the library since the run: presets edited or deleted, passages edited or removed."""
    if library_dir is None or not Path(library_dir).is_dir():
        return []
    from ..library.library import PresetLibrary  # the library only when a run is checked

    notes = []
    records = {r.id: r for r in PresetLibrary(library_dir, create=False, seed=False).records()}
    for entry in run.plan.presets:
        if entry.record_id is None:
            continue
        now = records.get(entry.record_id)
        if now is None:
            notes.append(f"preset {entry.preset.name!r} has been deleted from the library")
        elif now.revision != entry.revision:
            notes.append(f"preset {entry.preset.name!r} has changed (revision {entry.revision} → {now.revision})")
    sets = PassageSets(library_dir)
    names = set(sets.names())
    for set_name in sorted({p.set_name for p in run.plan.passages} & names):
        current = {p.name: p.text_hash for p in sets.get(set_name).passages}
        for p in run.plan.passages:
            if p.set_name == set_name and current.get(p.name) != p.text_hash:
                what = "removed" if p.name not in current else "edited"
                notes.append(f"passage {set_name}/{p.name} has been {what}")
    return notes
