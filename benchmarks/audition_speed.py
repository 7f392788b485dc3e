"""Audition speed: the engine's batched audition against transformers' generate().

Same work on both sides, in one process: 4 presets x 4 samples x 48 new
tokens on a demo passage with the default model. The baseline calls
``generate(do_sample=True, num_return_sequences=4, max_new_tokens=48)`` once
per preset with the matching sampling parameters. Prints both throughputs,
a line ``ratio: X`` (engine / baseline), the time until the model is ready
from the converted cache, and the peak resident memory.

Targets: ratio >= 2.0, ready from the cache <= 5 s, peak RSS <= 1.5 GB.

Usage: python benchmarks/audition_speed.py [--repeats N] [--tokens N]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import time

os.environ.setdefault("HF_HUB_OFFLINE", "1")

PRESETS = [
    {"name": "steady", "temperature": 0.7, "top_p": 0.9},
    {"name": "top-k 40", "temperature": 1.0, "top_k": 40},
    {"name": "min-p", "temperature": 1.0, "min_p": 0.05},
    {"name": "varied", "temperature": 1.1, "top_p": 0.95, "repetition_penalty": 1.1},
]
SAMPLES = 4
PASSAGE = "electric-ferry"


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


def run_engine(loaded, passage, presets, tokens: int, seed: int) -> tuple[int, float]:
    """One audition with a fresh engine (its passage pass included)."""
    from samplewright.core.engine.engine import Engine
    from samplewright.core.results import AuditionRequest

    start = time.perf_counter()
    result = Engine(loaded).audition(AuditionRequest(passage, presets, SAMPLES, tokens, seed))
    return result.tokens_generated(), time.perf_counter() - start


def main(argv=None) -> int:
    """Run the comparison and print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--repeats", type=int, default=3, help="runs of each side, alternating; the fastest of each counts"
    )
    parser.add_argument("--tokens", type=int, default=48)
    args = parser.parse_args(argv)
    ensure_cache()
    start = time.perf_counter()
    import torch  # noqa: F401  (timed: part of getting the model ready)
    import transformers  # noqa: F401

    from samplewright.core.engine.model import load_model

    imported = time.perf_counter()
    loaded = load_model()
    ready, loading = time.perf_counter() - start, time.perf_counter() - imported
    from samplewright import Preset
    from samplewright.core.engine.engine import Engine
    from samplewright.core.engine.passages import demo_passages

    passage = demo_passages()[PASSAGE]
    presets = [Preset.from_dict(p) for p in PRESETS]
    passage_ids = Engine(loaded).encode_passage(passage).ids
    print(f"model: {loaded.describe()}")
    print(
        f"work: {len(presets)} presets x {SAMPLES} samples x {args.tokens} new tokens, "
        f"passage of {len(passage_ids)} tokens, torch threads: {__import__('torch').get_num_threads()}"
    )
    # Warm up both paths once (first calls pay one-off set-up costs).
    run_engine(loaded, passage, presets[:1], 2, seed=0)
    run_baseline(loaded, passage_ids, presets[:1], 2, seed=0)
    engine_runs, baseline_runs = [], []
    for repeat in range(args.repeats):
        engine_runs.append(run_engine(loaded, passage, presets, args.tokens, seed=repeat))
        baseline_runs.append(run_baseline(loaded, passage_ids, presets, args.tokens, seed=repeat))
        for label, (n, s) in (("engine", engine_runs[-1]), ("baseline", baseline_runs[-1])):
            print(f"  run {repeat + 1} {label:8s}: {n} tokens in {s:.2f} s = {n / s:.1f} tokens/s", flush=True)
    engine_rate = max(n / s for n, s in engine_runs)
    baseline_rate = max(n / s for n, s in baseline_runs)
    print(f"engine audition: {engine_rate:.1f} tokens/s")
    print(f"baseline generate(): {baseline_rate:.1f} tokens/s")
    print(f"ratio: {engine_rate / baseline_rate:.2f}")
    print(
        f"model ready from the cache: {ready:.2f} s ({loading:.2f} s in load_model, "
        f"the rest importing torch and transformers)"
    )
    print(f"peak resident memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
