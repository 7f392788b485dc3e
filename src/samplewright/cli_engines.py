"""Command-line parts for the engine targets: ``export --to``, ``fidelity`` and
importing foreign settings files. :mod:`samplewright.cli_exchange` hooks these
into its ``export`` and ``import`` commands; the work is in
``samplewright.core.engines``."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from .core.engines import ENGINE_TARGETS, TARGETS
from .core.errors import SamplewrightError
from .core.presets import Preset

SEED_NOTE = {
    "transformers": "a preset carries no seed and generate() takes none: call transformers.set_seed(N) "
    "before generate() to repeat a run",
    "vllm": "a preset carries no seed: set seed in the file to repeat a run",
    "openai-request": "a preset carries no seed: set seed in body to repeat a run",
}
STOP_NOTE = "stop_strings are read only when generate() is also given tokenizer=..."


def add_export_options(parser: argparse.ArgumentParser) -> None:
    """Add ``--to``, ``--verify`` and ``--passage`` to the ``export`` command."""
    parser.add_argument(
        "--to",
        choices=TARGETS,
        default="samplewright",
        help="the format to write: samplewright (the settings file, default), transformers "
        "(a folder with generation_config.json), vllm (SamplingParams JSON), openai-request (request fields)",
    )
    parser.add_argument(
        "--verify",
        action="store_true",
        help="with --to transformers: run the written config through transformers' own processors "
        "along samples of --passage and print the largest difference (on the built-in model, or on --model "
        "when it is a model folder or .gguf file)",
    )
    parser.add_argument("--passage", metavar="FILE", help="the passage for --verify (.txt or .md)")


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``fidelity`` command."""
    fid = subparsers.add_parser("fidelity", help="measure how faithfully an engine reproduces a preset")
    fid.add_argument("name", metavar="NAME", help="preset name (library, then starter presets) or preset file")
    fid.add_argument("--to", choices=ENGINE_TARGETS, required=True, metavar="TARGET", help=", ".join(ENGINE_TARGETS))
    fid.add_argument("--model", metavar="PATH", help="model folder or .gguf file (default: the built-in model)")
    fid.add_argument("--no-model", action="store_true", help="random logit vectors only (no model is loaded)")
    fid.add_argument("--save-closest", metavar="FILE", help="write the closest expressible preset to FILE")
    fid.add_argument("--library", metavar="DIR", help="the library folder (default: the one in use)")
    fid.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    fid.set_defaults(handler=run_fidelity)


def _print_json(obj) -> None:
    print(json.dumps(obj, ensure_ascii=False, indent=2))


def _fmt(value: float) -> str:
    return "0" if value == 0 else f"{value:.3g}"


# -- export ----------------------------------------------------------------------------


def run_engine_export(args: argparse.Namespace, presets: list[Preset]) -> int:
    """Write ``presets`` for ``args.to``, report each verdict, and verify when asked."""
    from .core.engines import exporting
    from .core.engines.fidelity import fidelity

    if args.verify and args.to != "transformers":
        raise SamplewrightError("--verify works with --to transformers only.")
    if args.verify and not args.passage:
        raise SamplewrightError("--verify needs --passage FILE: the passage to sample along.")
    passage = _read_passage(args.passage) if args.verify else None
    reports = [fidelity(p, args.to) for p in presets]  # before anything is written
    written = exporting.export_to(presets, args.to, args.out)
    notes = [SEED_NOTE[args.to]] + ([STOP_NOTE] if args.to == "transformers" and any(p.stop for p in presets) else [])
    # export's --model names the tuning model; it is loaded only when it is a model folder or file
    model = args.model if args.model and Path(args.model).exists() else None
    checks = _verify(written, model, passage) if passage is not None else []
    if args.json:
        files = [
            {"preset": f.preset.name, "path": str(f.path), **_short(r.to_json())}
            for f, r in zip(written, reports, strict=True)
        ]
        _print_json({"target": args.to, "files": files, "notes": notes, "verify": checks})
        return 0
    print(f"Wrote {len(written)} preset(s) for {args.to}:")
    for f, r in zip(written, reports, strict=True):
        print(f"  {f.preset.name} -> {f.path}")
        print(f"    {r.verdict} (largest TV {_fmt(r.measure.max_tv)} on {r.measure.steps} random logit vectors)")
        for reason in r.reasons:
            print(f"    - {reason}")
    for note in notes:
        print(f"  Note: {note}.")
    for check in checks:
        print(
            f"  Verified {check['path']}: largest difference from samplewright {_fmt(check['max_tv'])} "
            f"(TV) over {check['steps']} steps of samples of the passage: {check['verdict']}"
        )
    if reports:
        print(f"  For the model's own distributions: samplewright fidelity NAME --to {args.to}")
    return 0


def _short(report: dict[str, Any]) -> dict[str, Any]:
    keep = ("verdict", "reasons", "max_tv", "mean_tv", "differing_share")
    return {key: report[key] for key in keep}


def _read_passage(path: str) -> str:
    from .core.engine.passages import read_passage

    return read_passage(path)


def _verify(written, model: str | None, passage: str) -> list[dict[str, Any]]:
    from .core.engine.model import load_model
    from .core.engines.fidelity import verify_folder

    loaded = load_model(model)
    checks = []
    for f in written:
        measure = verify_folder(f.path.parent, f.preset, loaded, passage)
        checks.append(
            {
                "preset": f.preset.name,
                "path": str(f.path.parent),
                "steps": measure.steps,
                "max_tv": measure.max_tv,
                "mean_tv": measure.mean_tv,
                "verdict": measure.verdict,
            }
        )
    return checks


# -- fidelity -------------------------------------------------------------------------


def run_fidelity(args: argparse.Namespace) -> int:
    """Print the verdict, reasons and distances of one preset for one target."""
    from .core.engines.fidelity import fidelity
    from .core.library.lookup import resolve_presets

    presets = resolve_presets(args.name, args.library)
    if len(presets) != 1:
        raise SamplewrightError(f"{args.name} holds {len(presets)} presets; name one preset.")
    loaded = None
    if not args.no_model:
        from .core.engine.model import load_model

        loaded = load_model(args.model)
    report = fidelity(presets[0], args.to, loaded)
    if args.save_closest and report.closest is not None:
        from .core.library.settings_file import export_preset_file

        export_preset_file(report.closest.preset, args.save_closest)
    if args.json:
        _print_json(report.to_json())
        return 0
    _print_fidelity(report, args.save_closest)
    return 0


def _print_fidelity(report, saved: str | None) -> None:
    m = report.measure
    print(f"Preset '{report.preset.name}' on {report.target}: {report.verdict}")
    print(
        f"  largest TV distance {_fmt(m.max_tv)}, mean {_fmt(m.mean_tv)}, differing on {m.differing_share:.1%} "
        f"of {m.steps} steps ({m.steps - report.model_steps} random logit vectors, {report.model_steps} model steps)"
    )
    for reason in report.reasons:
        print(f"  - {reason}")
    print("  parameters as the target sees them: " + json.dumps(report.parameters, ensure_ascii=False))
    if report.closest is not None:
        c = report.closest
        print(
            f"  closest expressible: '{c.preset.name}' ({c.preset.describe()}): TV from the original "
            f"largest {_fmt(c.from_original.max_tv)}, mean {_fmt(c.from_original.mean_tv)}; "
            f"on {report.target}: {c.verdict_on_target}"
        )
        if saved:
            print(f"  wrote it to {saved}; audition it beside the original with --preset {saved}")


# -- import -----------------------------------------------------------------------------


def foreign_preview(path: str):
    """The foreign-format preview of ``path``, or None when it is not a foreign file
    (then the settings-file reader handles it, with its own messages)."""
    from .core.engines.foreign_import import preview_foreign, recognise
    from .core.library.settings_file import MAX_BYTES
    from .core.library.storage import BadContent, parse_json, read_limited

    try:
        obj = parse_json(read_limited(Path(path), MAX_BYTES))
    except (BadContent, OSError):
        return None
    return preview_foreign(obj, Path(path)) if recognise(obj) else None
