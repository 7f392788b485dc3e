"""Command-line subcommands for evaluation runs: ``evaluate``, ``sweep``, ``passages``, ``report``.

``evaluate`` runs presets × passage sets × N samples; ``sweep`` varies one or
two fields of a base preset; both write a run file (``--out``, default under
the library's ``runs/``) after every finished passage and can ``--resume`` it.
``passages`` lists the passage sets; ``report`` turns a run file into a
self-contained HTML report and/or a CSV file. The work is done in
:mod:`samplewright.core.evaluation`; errors are raised as SamplewrightError
for the main CLI to print as one line (exit status 2).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from .core.errors import SamplewrightError

GENERATED_TEXT_CAUTION = (
    "Generated text can be wrong, biased or offensive: review it under your team's policy before use."
)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the evaluation subcommands (each sets ``handler``)."""
    evaluate = subparsers.add_parser("evaluate", help="run presets over passage sets, many samples each")
    evaluate.add_argument("--preset", metavar="X", action="append", default=[], help="preset file or name (repeatable)")
    _add_run_options(evaluate)
    evaluate.set_defaults(handler=run_evaluate)

    sweep = subparsers.add_parser("sweep", help="vary one or two fields of a preset over a range")
    sweep.add_argument("--preset", metavar="BASE", action="append", default=[], help="the base preset (file or name)")
    sweep.add_argument(
        "--vary",
        metavar="FIELD=SPEC",
        action="append",
        default=[],
        help="start:stop:step (stop included) or a list a,b,c; twice for a grid",
    )
    _add_run_options(sweep)
    sweep.set_defaults(handler=run_sweep)

    passages = subparsers.add_parser("passages", help="list the passage sets of the library and the demo sets")
    passages.add_argument("--library", metavar="DIR", help="the library folder (default as for audition)")
    passages.add_argument("--add-demo", action="store_true", help="copy the demo sets into the library")
    passages.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    passages.set_defaults(handler=run_passages)

    report = subparsers.add_parser("report", help="write a run file as an HTML report and/or a CSV file")
    report.add_argument("run_file", metavar="RUN_FILE")
    report.add_argument("--out", metavar="FILE.html", help="the HTML report to write")
    report.add_argument("--csv", metavar="FILE", help="one row per sample")
    report.add_argument("--library", metavar="DIR", help="library to check the run against for later changes")
    report.set_defaults(handler=run_report)


def _add_run_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--passages",
        metavar="SET_OR_FOLDER",
        action="append",
        default=[],
        help="a passage set of the library (or a demo set), or a folder of .txt/.md files (repeatable)",
    )
    parser.add_argument("--samples", type=int, default=8, metavar="N", help="samples per preset and passage (1-64)")
    parser.add_argument("--tokens", type=int, default=48, metavar="N", help="token budget per sample (1-512)")
    parser.add_argument("--seed", type=int, default=0, metavar="N", help="run seed (default 0)")
    parser.add_argument("--model", metavar="PATH", help="model folder or .gguf file (default: the built-in model)")
    parser.add_argument("--library", metavar="DIR", help="the library folder (default as for audition)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    parser.add_argument("--out", metavar="RUN_FILE", help="the run file (default: a new file in the library's runs/)")
    parser.add_argument("--csv", metavar="FILE", help="also write one row per sample")
    parser.add_argument("--report", metavar="FILE", help="also write the HTML report")
    parser.add_argument("--resume", metavar="RUN_FILE", help="continue a cancelled run (its settings are kept)")


def _library_dir(args) -> Path:
    from .core.library.user_state import library_in_use

    return Path(args.library).expanduser() if args.library else library_in_use()


def _preset_entries(specs: list[str], library_dir: Path):
    """Presets with their library record id and revision when the library holds them as they are."""
    from .core.evaluation.plan import PresetEntry
    from .core.library.library import PresetLibrary
    from .core.library.lookup import resolve_presets

    presets = [p for spec in specs for p in resolve_presets(spec, str(library_dir))]
    records = PresetLibrary(library_dir).records() if library_dir.is_dir() else []
    entries = []
    for preset in presets:
        record = next((r for r in records if r.preset == preset), None)
        entries.append(PresetEntry(preset, record.id if record else None, record.revision if record else None))
    return entries


def _passage_entries(args, library_dir: Path):
    from .core.evaluation.passage_sets import resolve_set
    from .core.evaluation.plan import passages_of

    if not args.passages:
        raise SamplewrightError("name at least one passage set with --passages (see `samplewright passages`)")
    sets = [resolve_set(spec, library_dir) for spec in args.passages]
    for s in sets:
        for skipped in s.skipped:
            print(f"samplewright: skipped {s.name}/{skipped.name}: {skipped.reason}", file=sys.stderr)
    return passages_of(sets)


def _plan(args, passages, presets, sweep=None):
    from .core.evaluation.plan import RunPlan

    return RunPlan(tuple(presets), passages, args.samples, args.tokens, args.seed, sweep)


def run_evaluate(args) -> int:
    """Run an evaluation (or resume one) and print its measures."""
    if args.resume:
        return _execute(args, None)
    if not args.preset:
        raise SamplewrightError("name the presets to compare with --preset (repeatable)")
    passages = _passage_entries(args, _library_dir(args))
    return _execute(args, _plan(args, passages, _preset_entries(args.preset, _library_dir(args))))


def run_sweep(args) -> int:
    """Run a sweep of one base preset and print its measures."""
    from .core.evaluation.plan import PresetEntry, Sweep
    from .core.evaluation.sweep import derived_presets, parse_vary

    if args.resume:
        return _execute(args, None)
    if len(args.preset) != 1:
        raise SamplewrightError("a sweep needs exactly one base preset: --preset BASE")
    if not 1 <= len(args.vary) <= 2:
        raise SamplewrightError("a sweep needs --vary FIELD=SPEC once, or twice for a grid")
    axes = tuple(parse_vary(v) for v in args.vary)  # refuses bad values before anything loads
    passages = _passage_entries(args, _library_dir(args))
    base = _preset_entries(args.preset, _library_dir(args))
    if len(base) != 1:
        raise SamplewrightError("the base preset must be one preset, not a settings file of several")
    presets = [PresetEntry(p) for p in derived_presets(base[0].preset, axes)]
    return _execute(args, _plan(args, passages, presets, Sweep(base[0].preset, axes)))


def _engine(args):
    from .core.engine.engine import Engine
    from .core.engine.model import load_model

    return Engine(load_model(args.model))


def _execute(args, plan) -> int:
    from .core.evaluation import runner
    from .core.evaluation.run_file import load_run, new_run_path

    if plan is None:
        run = load_run(args.resume)
        path = Path(args.out) if args.out else Path(args.resume)
    else:
        _check_outputs(args)
    engine = _engine(args)
    if plan is not None:
        run = runner.new_run(engine, plan)
        path = Path(args.out) if args.out else new_run_path(_library_dir(args), run)
    bar = _Progress(enabled=not args.json)
    try:
        runner.run_evaluation(engine, run, path=path, on_progress=bar.update)
    finally:
        bar.close()
    _write_extras(args, run)
    if args.json:
        print(json.dumps(run_summary(run), ensure_ascii=False))
    else:
        _print_table(run)
        print(f"\nRun file: {path}")
    return 0


def _check_outputs(args) -> None:
    for name in ("csv", "report"):
        value = getattr(args, name)
        if value and not Path(value).expanduser().parent.is_dir():
            raise SamplewrightError(f"--{name}: the folder of {value} does not exist")


def _write_extras(args, run) -> None:
    from .core.evaluation.csv_export import write_csv
    from .core.evaluation.report import write_report

    if args.csv:
        write_csv(run, args.csv)
    if args.report:
        write_report(run, args.report)


def run_summary(run) -> dict[str, Any]:
    """The ``--json`` object of a run (the CLI contract of docs/evaluation.md)."""
    from .core.evaluation.measures import MEASURE_KEYS

    front = run.pareto()
    presets = []
    for i, entry in enumerate(run.plan.presets):
        summary = run.preset_summary(i)
        labels = run.plan.passage_labels()
        presets.append(
            {
                "name": entry.preset.name,
                "definition": entry.preset.to_dict(),
                "pooled": {k: summary.pooled[k].value for k in MEASURE_KEYS},
                "interval": {k: _interval(summary.pooled[k]) for k in MEASURE_KEYS},
                "undefined": {k: summary.pooled[k].undefined for k in MEASURE_KEYS},
                "per_passage": [
                    {"passage": labels[j], **{k: m[k].value for k in MEASURE_KEYS}}
                    for j, m in sorted(summary.per_passage.items())
                ],
                "pareto": front[i],
            }
        )
    return {
        "presets": presets,
        "passages": [{"name": p.label(run.plan.several_sets), "text_hash": p.text_hash} for p in run.plan.passages],
        "model": run.model["name"],
        "seed": run.plan.seed,
        "samples": run.plan.samples,
        "tokens": run.plan.tokens,
        "cancelled": run.cancelled,
        "run_file": str(run.path) if run.path else None,
    }


def _interval(estimate) -> list[float] | None:
    return None if estimate.low is None else [estimate.low, estimate.high]


def _print_table(run) -> None:
    from .core.evaluation.measures import MEASURE_KEYS

    front = run.pareto()
    print(f"{len(run.plan.presets)} presets × {len(run.outcomes)} passages × {run.plan.samples} samples")
    for i, entry in enumerate(run.plan.presets):
        pooled = run.preset_summary(i).pooled
        mark = "  [front]" if front[i] else ""
        print(f"\n== {entry.preset.name}{mark}")
        for key in MEASURE_KEYS:
            e = pooled[key]
            span = f"  [{e.low:.3f}, {e.high:.3f}]" if e.low is not None else ""
            value = "–" if e.value is None else f"{e.value:.3f}"
            note = f"  ({e.undefined} samples without a value)" if e.undefined else ""
            print(f"  {key:<17}{value}{span}{note}")
    print(f"\n{GENERATED_TEXT_CAUTION}")


class _Progress:
    """Tokens done / total and time left on stderr, only on a terminal (tqdm)."""

    def __init__(self, enabled: bool):
        self._bar = None
        if enabled and sys.stderr.isatty():
            from tqdm import tqdm

            self._bar = tqdm(total=0, unit="tok", file=sys.stderr, leave=False)

    def update(self, progress) -> None:
        if self._bar is not None:
            self._bar.total, self._bar.n = progress.total_tokens, progress.done_tokens
            self._bar.set_postfix_str(f"passage {progress.passages_done + 1}/{progress.passages_total}", refresh=False)
            self._bar.refresh()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


def run_passages(args) -> int:
    """List the passage sets (library and demo), or add the demo sets to the library."""
    from .core.evaluation.passage_sets import PassageSets, demo_sets

    library_dir = _library_dir(args)
    sets = PassageSets(library_dir)
    added = sets.add_demo_sets() if args.add_demo else []
    found = [("library", s) for s in (sets.sets() if library_dir.is_dir() else [])]
    have = {s.name for _, s in found}
    found += [("demo", s) for s in demo_sets() if s.name not in have]
    entries = [
        {
            "name": s.name,
            "where": where,
            "folder": str(s.folder) if s.folder else None,
            "framing": s.framing.to_dict(),
            "passages": [{"name": p.name, "text_hash": p.text_hash, "words": len(p.text.split())} for p in s.passages],
            "skipped": [{"name": k.name, "reason": k.reason} for k in s.skipped],
        }
        for where, s in found
    ]
    if args.json:
        print(json.dumps({"library": str(library_dir), "added": added, "sets": entries}, ensure_ascii=False))
        return 0
    for name in added:
        print(f"added the demo set {name} to {library_dir}")
    for e in entries:
        print(f"{e['name']}  ({e['where']}, {len(e['passages'])} passages; {e['framing']['kind']})")
        for k in e["skipped"]:
            print(f"  skipped {k['name']}: {k['reason']}")
    return 0


def run_report(args) -> int:
    """Write a run file as HTML and/or CSV."""
    from .core.evaluation.csv_export import write_csv
    from .core.evaluation.report import write_report
    from .core.evaluation.run_file import changes_since, load_run

    if not args.out and not args.csv:
        raise SamplewrightError("say what to write: --out FILE.html and/or --csv FILE")
    _check_outputs(argparse.Namespace(csv=args.csv, report=args.out))
    run = load_run(args.run_file)
    notes = changes_since(run, args.library) if args.library else []
    if args.out:
        write_report(run, args.out, changes=notes)
        print(f"wrote {args.out}")
    if args.csv:
        write_csv(run, args.csv)
        print(f"wrote {args.csv}")
    return 0
