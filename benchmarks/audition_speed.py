"""Audition speed: the engine's batched audition against transformers, in printed figures.

One run prints, each headed with the CPU model and the machine's load:

1. the comparison: 4 presets x 4 samples x 48 new tokens on a demo passage
   with the default model, against ``generate(do_sample=True,
   num_return_sequences=4)`` once per preset; the line ``ratio: X``
   (engine / baseline, target >= 4.0);
2. ``overhead ratio``: the audition's decoding tokens/s divided by the bare
   forward pass's at the same 16 rows and precision (target >= 0.9); the bare
   forward pass is transformers' model called once per step with each row's
   own copy of the passage cache (what generate() does), timed over the
   decoding steps only; also the sampling step's share of a step;
3. float32 and bfloat16 side by side, and which one ``auto`` chose;
4. one row: the audition's steps/s against the bare forward pass's (target >= 1.3x);
   in (2) and (4) the audition runs with the default decoding step (the lean
   step with packed weights), the lean step without packing and
   transformers' modules side by side, and each one's decoding step alone;
5. a scaling table: tokens/s and peak resident memory at 1, 4, 16, 32 and 96
   rows for a 200-token and a 1,000-token passage, shared passage cache
   against a copy per row (each cell in its own process, so each peak is its own);
6. the window's rate on the same work as (1) through the window's engine
   thread, against the CLI's, and the longest stall of its event loop.

Figures on a shared machine are noisy: the load average is printed with them.

Usage: python benchmarks/audition_speed.py [--repeats N] [--tokens N] [--skip-table] [--skip-window]
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

os.environ.setdefault("HF_HUB_OFFLINE", "1")

from bench_common import PRESETS, machine_line, report_sides  # noqa: E402 (after the offline switch)

SAMPLES = 4
PASSAGE = "electric-ferry"
TABLE_ROWS = (1, 4, 16, 32, 96)
TABLE_PASSAGES = (200, 1000)
TABLE_TOKENS = 16


def ensure_cache() -> None:
    """Convert the default model in a child process if its cache is missing,
    so this process measures a start from the cache."""
    from samplewright.core.engine.model import cache_key, cache_root, default_model_path

    if not (cache_root() / cache_key(default_model_path()) / "config.json").is_file():
        print("converting the default model once (first run) ...", flush=True)
        subprocess.run(
            [sys.executable, "-c", "from samplewright.core.engine.model import load_model; load_model()"], check=True
        )


def generate_kwargs(preset) -> dict:
    """transformers' generate() arguments for the same sampling parameters."""
    return dict(
        do_sample=True,
        temperature=preset.temperature,
        top_k=preset.top_k,
        top_p=preset.top_p,
        min_p=preset.min_p or None,
        typical_p=preset.typical_p,
        repetition_penalty=preset.repetition_penalty,
        no_repeat_ngram_size=preset.no_repeat_ngram_size,
    )


def run_baseline(loaded, passage_ids, presets, tokens: int, seed: int) -> tuple[int, float]:
    """generate() once per preset; returns (tokens generated before EOS, seconds)."""
    import torch

    model, eos = loaded.model, loaded.eos_ids
    input_ids = torch.tensor([passage_ids])
    torch.manual_seed(seed)
    generated, start = 0, time.perf_counter()
    with torch.inference_mode():
        for preset in presets:
            out = model.generate(
                input_ids,
                attention_mask=torch.ones_like(input_ids),
                max_new_tokens=tokens,
                num_return_sequences=SAMPLES,
                pad_token_id=min(eos),
                **generate_kwargs(preset),
            )
            for row in out[:, input_ids.shape[1] :].tolist():
                generated += next((i for i, t in enumerate(row) if t in eos), len(row))
    return generated, time.perf_counter() - start


def run_engine(engine, passage, presets, samples: int, tokens: int, seed: int) -> tuple[int, float]:
    """One audition; returns (tokens, seconds)."""
    from samplewright.core.results import AuditionRequest

    start = time.perf_counter()
    result = engine.audition(AuditionRequest(passage, presets, samples, tokens, seed))
    return result.tokens_generated(), time.perf_counter() - start


def bare_forward(loaded, passage_ids, rows: int, tokens: int) -> float:
    """transformers' model alone: tokens/s over ``tokens`` decoding steps of ``rows`` rows,
    each row with its own copy of the passage cache (the passage pass not timed)."""
    import torch

    model = loaded.model
    with torch.inference_mode():
        cache = model(input_ids=torch.tensor([passage_ids]), use_cache=True).cache
        cache = copy.deepcopy(cache)
        cache.batch_repeat_interleave(rows)
        ids = torch.full((rows, 1), 42, dtype=torch.long)
        start = time.perf_counter()
        for _ in range(tokens):
            out = model(input_ids=ids, cache=cache, use_cache=True, logits_to_keep=1)
            cache = out.cache
            ids = out.logits[:, -1].argmax(-1, keepdim=True)
        return rows * tokens / (time.perf_counter() - start)


def decoding_rate(engine, passage, presets, samples: int, tokens: int, repeats: int) -> tuple[float, float]:
    """Audition tokens/s with the passage already encoded, and the share of each step spent outside the model."""
    run_engine(engine, passage, presets[:1], 1, 1, seed=0)  # the passage pass, kept by the engine
    backend = engine.backend
    inner = backend.step
    in_model = [0.0]

    def timed(ids, cache):
        start = time.perf_counter()
        try:
            return inner(ids, cache)
        finally:
            in_model[0] += time.perf_counter() - start

    backend.step = timed
    best, share = 0.0, 0.0
    try:
        for seed in range(repeats):
            in_model[0] = 0.0
            n, s = run_engine(engine, passage, presets, samples, tokens, seed)
            if n / s > best:
                best, share = n / s, 1 - in_model[0] / s
    finally:
        backend.step = inner
    return best, share


def comparison(loaded, passage, presets, passage_ids, args) -> float:
    """Section 1; returns the engine's rate."""
    from samplewright.core.engine.engine import Engine

    run_engine(Engine(loaded), passage, presets[:1], SAMPLES, 2, seed=0)
    run_baseline(loaded, passage_ids, presets[:1], 2, seed=0)
    engine_runs, baseline_runs = [], []
    for repeat in range(args.repeats):
        engine_runs.append(run_engine(Engine(loaded), passage, presets, SAMPLES, args.tokens, seed=repeat))
        baseline_runs.append(run_baseline(loaded, passage_ids, presets, args.tokens, seed=repeat))
        for label, (n, s) in (("engine", engine_runs[-1]), ("baseline", baseline_runs[-1])):
            print(f"  run {repeat + 1} {label:8s}: {n} tokens in {s:.2f} s = {n / s:.1f} tokens/s", flush=True)
    rate = report_sides(
        ("engine audition (passage pass included)", engine_runs), ("baseline generate()", baseline_runs), "ratio"
    )
    chosen = auto_choice(loaded)
    if chosen != "float32":
        # What a user gets by default on this machine (auto's precision) against generate() as
        # transformers runs it by default on a CPU (float32).
        other = precision_copy(loaded, chosen)
        run_engine(Engine(other), passage, presets[:1], SAMPLES, 2, seed=0)
        runs = [run_engine(Engine(other), passage, presets, SAMPLES, args.tokens, seed=r) for r in range(args.repeats)]
        report_sides(
            (f"engine audition in {chosen} (auto's choice here)", runs),
            ("baseline generate() in float32", baseline_runs),
            f"ratio at auto's choice ({chosen} against float32)",
        )
    unpacked = max(
        n / s
        for n, s in (
            run_engine(Engine(loaded, packed_weights=False), passage, presets, SAMPLES, args.tokens, seed=repeat)
            for repeat in range(args.repeats)
        )
    )
    baseline = max(n / s for n, s in baseline_runs)
    print(
        f"the engine above keeps packed weight copies ({packed_memory_mb(loaded):.0f} MB, its default within "
        f"the budget); without them: {unpacked:.1f} tokens/s, ratio {unpacked / baseline:.2f}"
    )
    return rate


_COPIES: dict[str, object] = {}


def precision_copy(loaded, name: str):
    """A copy of ``loaded`` in precision ``name`` (made once per run)."""
    from samplewright.core.engine import precision

    if name not in _COPIES:
        _COPIES[name] = precision.apply_precision(copy.deepcopy(loaded), name)
    return _COPIES[name]


def auto_choice(loaded) -> str:
    """The precision ``auto`` picks for the default model on this machine (measured once, then stored)."""
    from samplewright.core.engine import precision
    from samplewright.core.engine.model import cache_key, cache_root, default_model_path

    folder = cache_root() / cache_key(default_model_path())
    return precision.choose(loaded, precision.choice_file_for(default_model_path(), folder, cache_root()))


def packed_memory_mb(loaded) -> float:
    """Memory the lean step's packed weight copies take (on top of the model's own weights)."""
    from samplewright.core.engine.backend import TransformersBackend

    decoder = TransformersBackend(loaded, packed_weights=True).lean
    return decoder.packed_bytes() / 2**20 if decoder is not None else 0.0


#: The decoding steps compared: transformers' modules, the lean step, the lean step with packed weights.
STEP_KINDS = {"modules": {"lean_step": False}, "lean": {"packed_weights": False}, "packed": {"packed_weights": True}}


def model_steps(loaded, passage_ids, rows: int, tokens: int, kind: str) -> float:
    """The backend's decoding step alone on the shared passage cache (no sampling): steps/s
    for one of :data:`STEP_KINDS`."""
    import torch

    from samplewright.core.engine.backend import TransformersBackend

    options = STEP_KINDS[kind]
    backend = TransformersBackend(
        loaded, lean=options.get("lean_step", True), packed_weights=options.get("packed_weights", False)
    )
    with torch.inference_mode():
        cache = backend.start_rows(backend.encode(passage_ids), rows, tokens + 1)
        ids = torch.full((rows,), 42, dtype=torch.long)
        start = time.perf_counter()
        for _ in range(tokens):
            ids = backend.step(ids, cache).argmax(-1)
        return tokens / (time.perf_counter() - start)


def side_by_side(model, passage, presets, passage_ids, samples: int, args) -> dict[str, float]:
    """At ``len(presets) * samples`` rows: the audition with each of :data:`STEP_KINDS`, each
    backend step alone, and transformers' bare forward pass (steps/s and tokens/s)."""
    from samplewright.core.engine.engine import Engine

    rows = len(presets) * samples
    found: dict[str, float] = {}
    for kind, options in STEP_KINDS.items():
        engine = Engine(model, **options)
        rate, share = decoding_rate(engine, passage, presets, samples, args.tokens, args.repeats)
        found[kind], found[kind + " share"] = rate, share
        del engine
        found[kind + " step"] = max(model_steps(model, passage_ids, rows, args.tokens, kind) for _ in range(2))
    found["bare"] = max(bare_forward(model, passage_ids, rows, args.tokens) for _ in range(2))
    return found


def overhead_and_precision(loaded, passage, presets, passage_ids, args) -> float:
    """Sections 2 to 4: overhead ratio and sampling share, float32 vs bfloat16, one row; the
    lean decoding step beside transformers' modules in each.
    Returns the float32 decoding rate at 16 rows (the CLI's rate the window is compared with)."""
    from samplewright.core.engine import precision
    from samplewright.core.engine.backend import TransformersBackend
    from samplewright.core.engine.model import cache_key, cache_root, default_model_path

    rows = len(presets) * SAMPLES
    bf16 = precision_copy(loaded, "bfloat16")
    note = TransformersBackend(loaded).lean_note
    print(f"\n-- overhead at {rows} rows, float32 and bfloat16 ({machine_line()})")
    if note:
        print(f"lean step not used: {note}")
    rates = {}
    for model in (loaded, bf16):
        f = side_by_side(model, passage, presets, passage_ids, SAMPLES, args)
        rates[model.precision] = f["packed"]
        print(
            f"{model.precision:9s}: audition {f['packed']:6.1f} tokens/s (the default: lean step with packed "
            f"weights; without packing {f['lean']:6.1f}; transformers' modules {f['modules']:6.1f}), bare forward "
            f"pass {f['bare']:6.1f} tokens/s, overhead ratio: {f['packed'] / f['bare']:.2f} (unpacked "
            f"{f['lean'] / f['bare']:.2f}); sampling step outside the model {f['packed share']:.0%} of a step "
            f"({f['packed share'] / f['packed'] * rows * 1000:.1f} ms per step)\n"
            f"{'':11s}decoding step alone: packed {f['packed step'] * rows:6.1f} tokens/s, lean "
            f"{f['lean step'] * rows:6.1f}, transformers' modules {f['modules step'] * rows:6.1f}"
        )
    folder = cache_root() / cache_key(default_model_path())
    chosen = auto_choice(loaded)
    stored = precision._read(folder / "precision.json").get(precision.machine_key(), {})
    measured = ", ".join(f"{k} {v:.1f} tokens/s" for k, v in stored.get("tokens_per_second", {}).items())
    print(f"auto chose: {chosen} (its stored measurement at 16 rows: {measured or 'none'})")
    fresh = precision.measure(loaded)
    print("measured again now: " + ", ".join(f"{k} {v:.1f} tokens/s" for k, v in fresh.items()))
    print(f"\n-- one row, 1 preset x 1 sample x {args.tokens} tokens ({machine_line()})")
    for model in (loaded, bf16):
        f = side_by_side(model, passage, presets[:1], passage_ids, 1, args)
        print(
            f"{model.precision:9s}: audition {f['packed']:5.1f} steps/s (the default; without packing "
            f"{f['lean']:5.1f}; transformers' modules {f['modules']:5.1f}), bare forward pass {f['bare']:5.1f} "
            f"steps/s, ratio {f['packed'] / f['bare']:.2f} (unpacked {f['lean'] / f['bare']:.2f}, modules "
            f"{f['modules'] / f['bare']:.2f}); sampling step {f['packed share']:.0%} of a step\n"
            f"{'':11s}decoding step alone: packed {f['packed step']:5.1f} steps/s, lean {f['lean step']:5.1f}, "
            f"transformers' modules {f['modules step']:5.1f}"
        )
    return rates["float32"]


def passage_of(loaded, tokens: int) -> str:
    """A passage of about ``tokens`` tokens made of the demo passages."""
    from samplewright.core.engine.passages import demo_passages

    text = "\n\n".join(demo_passages().values())
    while len(loaded.tokenizer(text)["input_ids"]) < tokens:
        text = text + "\n\n" + text
    ids = loaded.tokenizer(text, add_special_tokens=False)["input_ids"][:tokens]
    return loaded.tokenizer.decode(ids)


def peak_mb() -> float:
    """This process's own peak resident memory in MB.

    Linux's ``getrusage`` maximum survives ``exec``, so a cell started from the big main
    process would report the main process's peak; ``VmHWM`` in ``/proc/self/status`` belongs
    to the process's own memory map. Elsewhere ``getrusage`` is the best there is.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def cell(passage_tokens: int, rows: int, mode: str, precision_name: str) -> dict:
    """One cell of the scaling table, measured in this (fresh) process."""
    from samplewright import Preset
    from samplewright.core.engine.engine import Engine
    from samplewright.core.engine.model import load_model

    loaded = load_model(precision=precision_name)
    engine = Engine(loaded, shared_cache=mode == "shared")
    passage = passage_of(loaded, passage_tokens)
    kinds = min(len(PRESETS), rows)
    presets = [Preset.from_dict(p) for p in PRESETS[:kinds]]
    rate, _ = decoding_rate(engine, passage, presets, rows // kinds, TABLE_TOKENS, 1)
    return {"rate": rate, "peak_mb": peak_mb(), "passage": len(engine.encode_passage(passage).ids)}


def table(precision_name: str, threads: int, table_rows) -> None:
    """Section 5: every cell in its own process."""
    print(
        f"\n-- scaling, {TABLE_TOKENS} new tokens per row, passage pass not timed, {precision_name} ({machine_line()})"
    )
    print(f"{'passage':>8} {'rows':>5} | {'shared tok/s':>12} {'peak MB':>8} | {'per-row tok/s':>13} {'peak MB':>8}")
    for passage_tokens in TABLE_PASSAGES:
        for rows in table_rows:
            found = {}
            for mode in ("shared", "copies"):
                out = subprocess.run(
                    [
                        sys.executable,
                        __file__,
                        "--threads",
                        str(threads),
                        "--cell",
                        str(passage_tokens),
                        str(rows),
                        mode,
                    ]
                    + [precision_name],
                    capture_output=True,
                    text=True,
                    check=True,
                )
                found[mode] = json.loads(out.stdout.strip().splitlines()[-1])
            s, c = found["shared"], found["copies"]
            print(
                f"{s['passage']:>8} {rows:>5} | {s['rate']:>12.1f} {s['peak_mb']:>8.0f} | "
                f"{c['rate']:>13.1f} {c['peak_mb']:>8.0f}",
                flush=True,
            )


def window(cli_rate: float, args) -> None:
    """Section 6: the same audition through the window's engine thread, in its own process."""
    out = subprocess.run(
        [sys.executable, __file__, "--window-cell", str(args.tokens), str(args.repeats)],
        capture_output=True,
        text=True,
        check=True,
        env={**os.environ, "QT_QPA_PLATFORM": os.environ.get("QT_QPA_PLATFORM", "offscreen")},
    )
    found = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"\n-- the window ({machine_line()})")
    print(
        f"window audition: {found['rate']:.1f} tokens/s on {found['threads']} torch threads, "
        f"CLI's {cli_rate:.1f}: window/CLI {found['rate'] / cli_rate:.2f}; "
        f"longest event-loop stall {found['stall_ms']:.0f} ms"
    )


def window_cell(tokens: int, repeats: int) -> dict:
    """The window's engine worker on its thread, a 10 ms timer on the main thread counting gaps."""
    from PySide6.QtCore import QEventLoop, QTimer
    from PySide6.QtWidgets import QApplication

    from samplewright import Preset
    from samplewright.core.engine.engine import Engine
    from samplewright.core.engine.model import load_model
    from samplewright.core.engine.passages import demo_passages
    from samplewright.core.results import AuditionRequest
    from samplewright.core.sampling.metrics import preset_metrics
    from samplewright.qt.workers import EngineThread, EngineWorker

    _app = QApplication.instance() or QApplication([])  # kept alive while the loop runs
    thread = EngineThread(EngineWorker(lambda source, progress: load_model(source, progress), Engine, preset_metrics))
    done: list = []
    loop = QEventLoop()
    thread.worker.model_ready.connect(loop.quit)
    thread.worker.audition_ready.connect(lambda serial, result, metrics: done.append(result))
    thread.worker.audition_ready.connect(loop.quit)
    thread.load_model(None)
    loop.exec()
    presets = [Preset.from_dict(p) for p in PRESETS]
    best, stall = 0.0, 0.0
    ticks: list[float] = []
    timer = QTimer()
    timer.setInterval(10)
    timer.timeout.connect(lambda: ticks.append(time.perf_counter()))
    for seed in range(repeats + 1):
        done.clear()
        ticks.clear()
        timer.start()
        start = time.perf_counter()
        thread.run_audition(AuditionRequest(demo_passages()[PASSAGE], presets, SAMPLES, tokens, seed))
        loop.exec()
        seconds = time.perf_counter() - start
        timer.stop()
        if seed:  # the first run warms up
            best = max(best, done[0].tokens_generated() / seconds)
            stall = max([stall] + [b - a for a, b in zip(ticks, ticks[1:], strict=False)])
    thread.shutdown()
    return {"rate": best, "stall_ms": stall * 1000, "threads": thread.worker.threads}


def main(argv=None) -> int:
    """Run every comparison and print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="runs of each side; the fastest of each counts")
    parser.add_argument("--tokens", type=int, default=48)
    parser.add_argument("--skip-table", action="store_true", help="leave out the scaling table (the slow part)")
    parser.add_argument("--skip-window", action="store_true", help="leave out the window's figures")
    parser.add_argument(
        "--threads",
        type=int,
        default=0,
        help="torch threads (default: torch's own, every core; 1 is steadier when shared)",
    )
    parser.add_argument(
        "--table-rows", default=",".join(map(str, TABLE_ROWS)), help="rows of the scaling table, comma-separated"
    )
    parser.add_argument("--cell", nargs=4, help=argparse.SUPPRESS)
    parser.add_argument("--window-cell", nargs=2, type=int, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.threads:
        import torch

        torch.set_num_threads(args.threads)
    if args.cell:
        print(json.dumps(cell(int(args.cell[0]), int(args.cell[1]), args.cell[2], args.cell[3])))
        return 0
    if args.window_cell:
        print(json.dumps(window_cell(*args.window_cell)))
        return 0
    ensure_cache()
    start = time.perf_counter()
    import torch
    import transformers  # noqa: F401  (timed: part of getting the model ready)

    from samplewright.core.engine.model import load_model

    imported = time.perf_counter()
    loaded = load_model(precision="float32")
    ready, loading = time.perf_counter() - start, time.perf_counter() - imported
    from samplewright import Preset
    from samplewright.core.engine.engine import Engine
    from samplewright.core.engine.passages import demo_passages

    passage = demo_passages()[PASSAGE]
    presets = [Preset.from_dict(p) for p in PRESETS]
    passage_ids = Engine(loaded).encode_passage(passage).ids
    print(machine_line())
    print(f"model: {loaded.describe()}")
    print(
        f"work: {len(presets)} presets x {SAMPLES} samples x {args.tokens} new tokens, "
        f"passage of {len(passage_ids)} tokens, torch threads: {torch.get_num_threads()}"
    )
    comparison(loaded, passage, presets, passage_ids, args)
    print(
        f"model ready from the cache: {ready:.2f} s ({loading:.2f} s in load_model, "
        f"the rest importing torch and transformers)"
    )
    cli_rate = overhead_and_precision(loaded, passage, presets, passage_ids, args)
    if not args.skip_window:
        window(cli_rate, args)
    if not args.skip_table:
        table("float32", args.threads, [int(r) for r in args.table_rows.split(",")])
    print(f"\npeak resident memory of the main process: {peak_mb():.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
