"""The precision the model runs in: float32, bfloat16, or the faster of the two here.

bfloat16 halves the weights' memory traffic, and CPUs with AMX or AVX-512
BF16 multiply it natively, so there it runs faster; on a CPU without them it
is emulated and slower. ``auto`` therefore measures both once per machine and
model (16 rows, a few decoding steps) and picks bfloat16 only when it is at
least :data:`MIN_SPEEDUP` times faster. The choice is stored next to the
converted model (or in the model cache for other models), keyed by the CPU,
the torch version and the thread count, so later starts read it.

The sampling chain always runs in float64 on the model's logits, whatever the
precision; tests that check exact agreement pin float32.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
import platform
import time
from pathlib import Path

from ..errors import ModelError

PRECISIONS = ("float32", "bfloat16", "auto")
#: How much faster bfloat16 must be for ``auto`` to choose it.
MIN_SPEEDUP = 1.2
#: Rows and steps of the measurement.
MEASURE_ROWS = 16
MEASURE_STEPS = 6
#: Alternating rounds of the measurement (each precision keeps its best).
MEASURE_ROUNDS = 3


def cpu_name() -> str:
    """The CPU's model name (``/proc/cpuinfo`` on Linux, else the platform's answer)."""
    try:
        for line in Path("/proc/cpuinfo").read_text(encoding="utf-8", errors="replace").splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine() or "unknown CPU"


def _dtype(name: str):
    import torch

    return {"float32": torch.float32, "bfloat16": torch.bfloat16}[name]


def apply_precision(loaded, precision: str, choice_file: Path | None = None):
    """Run ``loaded`` in ``precision`` (converting its weights in place).

    Args:
        loaded: a LoadedModel.
        precision: ``float32``, ``bfloat16`` or ``auto``.
        choice_file: where ``auto`` keeps its measurement (None: measure, keep nothing).

    Returns:
        The LoadedModel with ``precision`` set to what it now runs in.

    Raises:
        ModelError: an unknown precision.
    """
    if precision not in PRECISIONS:
        raise ModelError(f"Unknown precision {precision!r}: choose one of {', '.join(PRECISIONS)}.")
    if precision == "auto":
        precision = choose(loaded, choice_file)
    if precision != loaded.precision:
        loaded.model.to(_dtype(precision))
    return dataclasses.replace(loaded, precision=precision)


#: Bumped when the measurement changes, so choices stored by an older one are measured again
#: (2: alternating rounds, each precision's best).
MEASUREMENT = 2


def machine_key() -> str:
    """What a stored choice depends on besides the model: CPU, torch version, threads, how it was measured."""
    import torch

    return f"{cpu_name()} | torch {torch.__version__} | {torch.get_num_threads()} threads | measurement {MEASUREMENT}"


def choose(loaded, choice_file: Path | None) -> str:
    """``bfloat16`` if it measured at least MIN_SPEEDUP times faster here, else ``float32``."""
    key = machine_key()
    stored = _read(choice_file)
    if key in stored and stored[key].get("chosen") in ("float32", "bfloat16"):
        return str(stored[key]["chosen"])
    rates = measure(loaded)
    chosen = "bfloat16" if rates["bfloat16"] >= MIN_SPEEDUP * rates["float32"] else "float32"
    stored[key] = {"chosen": chosen, "tokens_per_second": rates}
    _write(choice_file, stored)
    return chosen


def measure(
    loaded, rows: int = MEASURE_ROWS, steps: int = MEASURE_STEPS, rounds: int = MEASURE_ROUNDS
) -> dict[str, float]:
    """Decoding tokens/s of ``loaded`` at ``rows`` rows in float32 and in bfloat16 (a copy).

    The two precisions are timed in turn, ``rounds`` times each, and each keeps its best
    round: on a machine shared with other work a single round can be several times slower
    than the next, and alternating keeps such a spell from falling on one side only.
    """
    import torch

    models = {}
    for name in ("float32", "bfloat16"):
        same = _dtype(name) == next(loaded.model.parameters()).dtype
        models[name] = loaded.model if same else copy.deepcopy(loaded.model).to(_dtype(name))
    best = {name: float("inf") for name in models}
    for _ in range(rounds):
        for name, model in models.items():
            best[name] = min(best[name], _time_steps(model, rows, steps, torch))
    return {name: rows * steps / seconds for name, seconds in best.items()}


def _time_steps(model, rows: int, steps: int, torch) -> float:
    with torch.inference_mode():
        out = model(input_ids=torch.arange(1, 65).unsqueeze(0), use_cache=True)
        cache = out.cache
        cache.batch_repeat_interleave(rows)
        ids = torch.ones(rows, 1, dtype=torch.long)
        start = time.perf_counter()
        for _ in range(steps):
            cache = model(input_ids=ids, cache=cache, use_cache=True, logits_to_keep=1).cache
        return time.perf_counter() - start


def choice_file_for(source: Path | None, folder: Path | None, root: Path) -> Path | None:
    """Where ``auto`` keeps its choice: inside the converted model's folder, else
    under the model cache keyed by the model's path (None for in-memory models)."""
    if folder is not None:
        return folder / "precision.json"
    if source is None:
        return None
    digest = hashlib.sha256(str(Path(source).resolve()).encode()).hexdigest()[:16]
    return root / "precision" / f"{digest}.json"


def _read(path: Path | None) -> dict:
    if path is None:
        return {}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def _write(path: Path | None, data: dict) -> None:
    if path is None:
        return
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        temp = path.with_suffix(".tmp")
        temp.write_text(json.dumps(data, indent=2, sort_keys=True), encoding="utf-8")
        temp.replace(path)
    except OSError:
        pass  # an unwritable cache only means measuring again next time
