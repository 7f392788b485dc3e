"""Audition run files: one audition on screen, kept as JSON to reopen after a restart.

A file holds everything the window shows of an audition, so it can be reopened
without generating again: the passage and how the model was asked (its framing;
``passage_ids`` are the framed prompt's tokens), the run's sizes and seed, the model's
name, the library folder, and per column the preset as it was written (with its
library record id, whether it was an unsaved draft, its seed), its metrics and
its samples token by token. It lives under ``<library>/runs/`` beside the
evaluation runs, told apart from them by its ``format`` value.

Format (``format`` = :data:`FORMAT`, ``version`` = :data:`VERSION`)::

    {"format": "samplewright-audition", "version": 1, "saved_at": ISO 8601, "model": name or null,
     "library_folder": path or null, "passage": text, "passage_ids": [int], "passage_dropped": int,
     "samples": int, "max_new_tokens": int, "seed": int,
     "framing": {"kind": "continuation" or "instruction", "system": str, "instruction": str},
     "columns": [{"preset": {preset fields}, "record_id": id or null, "draft": bool, "seed": int,
                  "metrics": {name: number or null or {...}} or null,
                  "samples": [{"stop_reason": str or null, "text": str,
                               "tokens": [[id, text, raw_p, p, kept, raw_entropy_bits, entropy_bits, bytes_hex?]]}]}]}

No Qt and no torch here.
"""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

from ..errors import PassageError, SamplewrightError
from ..framing import Framing
from ..library.storage import atomic_write, dump_json, read_document
from ..presets import Preset, PresetError, now_iso
from ..results import AuditionRequest, Sample, TokenStep
from ..sampling.metrics import PresetMetrics
from .session import AuditionSession

FORMAT = "samplewright-audition"
VERSION = 1
RUNS_DIR = "runs"
MAX_BYTES = 64_000_000


class AuditionFileError(SamplewrightError):
    """An audition file that cannot be written or read; the message says what to do."""


@dataclasses.dataclass
class SavedAudition:
    """An audition read back from its file, ready for :meth:`AuditionSession.restore`."""

    request: AuditionRequest
    samples: list[list[Sample]]
    metrics: list[PresetMetrics | None]
    record_ids: list[str | None]
    drafts: list[bool]
    seeds: list[int]
    passage_ids: list[int]
    passage_dropped: int
    model: str | None
    library_folder: Path | None
    saved_at: str


def runs_folder(library_dir: str | os.PathLike) -> Path:
    """``<library>/runs``, where audition and evaluation run files are kept."""
    return Path(library_dir).expanduser() / RUNS_DIR


def _plain(value: Any) -> Any:
    """Metrics as strict JSON: a non-finite number becomes null."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, (int, str)):
        return value
    number = float(value)
    return number if math.isfinite(number) else None


def audition_dict(
    session: AuditionSession, model: str | None = None, token_bytes: Callable[[int], bytes] | None = None
) -> dict:
    """The session's last audition as the file's JSON object.

    ``token_bytes(id)`` gives a token's bytes; they are kept (as hex) so that a reopened audition
    shows characters spread over several tokens whole before the model is loaded.

    Raises:
        AuditionFileError: when there is no finished audition to keep.
    """
    request = session.request
    if request is None or session.running:
        raise AuditionFileError("There is no finished audition to save: generate one first, or wait for the run.")
    columns = []
    for column, preset in enumerate(session.presets):
        columns.append(
            {
                "preset": preset.to_dict(),
                "record_id": session.record_ids[column],
                "draft": session.drafts[column],
                "seed": session.seeds[column],
                "metrics": _plain(metrics.to_dict()) if (metrics := session.metrics[column]) else None,
                "samples": [
                    {
                        "stop_reason": s.stop_reason,
                        "text": s.text,
                        "tokens": [
                            [t.token_id, t.text, t.raw_p, t.p, t.kept, t.raw_entropy_bits, t.entropy_bits]
                            + _piece_hex(t, token_bytes)
                            for t in s.tokens
                        ],
                    }
                    for s in session.samples[column]
                ],
            }
        )
    folder = session.library_folder
    return {
        "format": FORMAT,
        "version": VERSION,
        "saved_at": now_iso(),
        "model": model,
        "library_folder": str(folder) if folder is not None else None,
        "passage": request.passage,
        "passage_ids": list(session.passage_ids),
        "passage_dropped": session.passage_dropped,
        "samples": request.samples,
        "max_new_tokens": request.max_new_tokens,
        "seed": request.seed,
        "framing": request.framing.to_dict(),
        "columns": _plain(columns),
    }


def save_audition(
    session: AuditionSession,
    path: str | os.PathLike,
    model: str | None = None,
    token_bytes: Callable[[int], bytes] | None = None,
) -> Path:
    """Write the session's audition to ``path`` atomically (the folder is created when missing);
    ``token_bytes`` as for :func:`audition_dict`.

    Raises:
        AuditionFileError: nothing to save, or the file cannot be written (nothing half-written is left).
    """
    data = dump_json(audition_dict(session, model, token_bytes))
    path = Path(path).expanduser()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(path, data)
    except OSError as exc:
        raise AuditionFileError(
            f"Could not save the audition to {path} ({exc.strerror or exc}): choose another place."
        ) from None
    return path


def load_audition(path: str | os.PathLike) -> SavedAudition:
    """Read an audition file.

    Raises:
        AuditionFileError: missing, unreadable, not an audition file, another version, or damaged.
    """
    path = Path(path).expanduser()
    data = read_document(path, MAX_BYTES, "audition file", FORMAT, VERSION, AuditionFileError)
    try:
        return _saved(data)
    except (KeyError, TypeError, ValueError, IndexError, PresetError, PassageError) as exc:
        raise AuditionFileError(f"The audition file {path} is damaged ({exc}): generate the audition again.") from None


def _saved(data: dict) -> SavedAudition:
    columns = data["columns"]
    presets = [Preset.from_dict(c["preset"]) for c in columns]
    request = AuditionRequest(
        str(data["passage"]),
        presets,
        samples=int(data["samples"]),
        max_new_tokens=int(data["max_new_tokens"]),
        seed=int(data["seed"]),
        # Files written before the audition had a framing continued the passage plainly.
        framing=Framing.from_dict(data["framing"]) if "framing" in data else Framing(),
    )
    samples = [[_sample(c, r, s) for r, s in enumerate(column["samples"])] for c, column in enumerate(columns)]
    folder = data.get("library_folder")
    return SavedAudition(
        request=request,
        samples=samples,
        metrics=[PresetMetrics.from_dict(c["metrics"]) if c["metrics"] else None for c in columns],
        record_ids=[c["record_id"] for c in columns],
        drafts=[bool(c["draft"]) for c in columns],
        seeds=[int(c["seed"]) for c in columns],
        passage_ids=[int(i) for i in data["passage_ids"]],
        passage_dropped=int(data["passage_dropped"]),
        model=data.get("model"),
        library_folder=Path(folder) if folder else None,
        saved_at=str(data.get("saved_at", "")),
    )


def _piece_hex(token: TokenStep, token_bytes: Callable[[int], bytes] | None) -> list[str]:
    """The token's bytes as a one-item list of hex, or no item when they are not known."""
    piece = token_bytes(token.token_id) if token_bytes is not None else token.piece
    return [piece.hex()] if piece is not None else []


def _number(value: Any) -> float:
    """A saved probability or entropy (null was a non-finite number)."""
    return math.nan if value is None else float(value)


def _sample(column: int, row: int, data: dict) -> Sample:
    tokens = [
        TokenStep(
            int(t[0]),
            str(t[1]),
            _number(t[2]),
            _number(t[3]),
            int(t[4]),
            _number(t[5]),
            _number(t[6]),
            bytes.fromhex(t[7]) if len(t) > 7 and isinstance(t[7], str) else None,
        )
        for t in data["tokens"]
    ]
    return Sample(column, row, tokens, data["stop_reason"], str(data["text"]))
