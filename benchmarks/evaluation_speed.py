"""Evaluation speed: one evaluation run against a loop of one audition per (passage, preset).

Same work on both sides, in one process, with the default model: 4 presets x
3 passages (the demo set ``service-notices``) x 8 samples x 48 new tokens,
same seed. The evaluation batches all presets of a passage together (one
batch of 32 rows per passage); the loop runs 12 auditions of 8 rows each.
Prints both throughputs, the CPU, and a line ``evaluation ratio: X``
(evaluation / loop). Target: ratio >= 1.5.

Figures from a shared, loaded machine are noisy: run it alone when it matters.

Usage: python benchmarks/evaluation_speed.py [--repeats N] [--tokens N]
"""

from __future__ import annotations

import argparse
import os
import sys
import time

os.environ.setdefault("HF_HUB_OFFLINE", "1")

from bench_common import PRESETS, machine_line, report_sides  # noqa: E402 (after the offline switch)

SAMPLES = 8
SET = "service-notices"


def run_evaluation_once(engine, plan) -> tuple[int, float]:
    """One evaluation run (all presets of a passage in one batch)."""
    from samplewright.core.evaluation.runner import new_run, run_evaluation

    start = time.perf_counter()
    run = run_evaluation(engine, new_run(engine, plan))
    return run.tokens_done(), time.perf_counter() - start


def run_loop_once(engine, plan) -> tuple[int, float]:
    """One audition per (passage, preset) with the same settings and seeds."""
    from samplewright.core.evaluation.plan import passage_seed
    from samplewright.core.results import AuditionRequest

    tokens, start = 0, time.perf_counter()
    for passage in plan.passages:
        seed = passage_seed(plan.seed, passage.text_hash)
        for entry in plan.presets:
            request = AuditionRequest(passage.text, [entry.preset], plan.samples, plan.tokens, seed)
            tokens += engine.audition(request).tokens_generated()
    return tokens, time.perf_counter() - start


def main(argv=None) -> int:
    """Run the comparison and print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=2, help="runs of each side, alternating; the fastest counts")
    parser.add_argument("--tokens", type=int, default=48)
    args = parser.parse_args(argv)
    import torch

    from samplewright import Preset
    from samplewright.core.engine.engine import Engine
    from samplewright.core.engine.model import load_model
    from samplewright.core.evaluation.passage_sets import demo_sets
    from samplewright.core.evaluation.plan import PresetEntry, RunPlan, passages_of

    loaded = load_model()
    engine = Engine(loaded)
    passages = passages_of([s for s in demo_sets() if s.name == SET])
    plan = RunPlan(tuple(PresetEntry(Preset.from_dict(p)) for p in PRESETS), passages, SAMPLES, args.tokens, 0)
    print(f"model: {loaded.describe()}")
    print(f"{machine_line()}, torch threads: {torch.get_num_threads()}")
    print(f"work: {len(PRESETS)} presets x {len(passages)} passages x {SAMPLES} samples x {args.tokens} tokens")
    warm = RunPlan(plan.presets[:1], plan.passages[:1], 1, 2, 0)
    run_evaluation_once(engine, warm)
    run_loop_once(engine, warm)
    evaluations, loops = [], []
    for repeat in range(args.repeats):
        evaluations.append(run_evaluation_once(engine, plan))
        loops.append(run_loop_once(engine, plan))
        for label, (n, s) in (("evaluation", evaluations[-1]), ("loop", loops[-1])):
            print(f"  run {repeat + 1} {label:10s}: {n} tokens in {s:.2f} s = {n / s:.1f} tokens/s", flush=True)
    report_sides(("evaluation", evaluations), ("loop of auditions", loops), "evaluation ratio")
    return 0


if __name__ == "__main__":
    sys.exit(main())
