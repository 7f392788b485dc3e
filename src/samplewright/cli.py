"""The ``samplewright`` command line, on the same core as the window.

Subcommands: ``audition`` (generate samples for several presets), ``step``
(the next-token distribution under each preset), ``check`` (validate a
preset or settings file), ``window`` (open the desktop window), and the
library/exchange commands registered by :mod:`samplewright.cli_exchange`,
and the evaluation commands (``evaluate``, ``sweep``, ``passages``, ``report``)
registered by :mod:`samplewright.cli_evaluation`.

Errors print one line on stderr and exit with status 2; never a traceback.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Sequence

from . import cli_evaluation, cli_exchange
from .core import limits
from .core.errors import SamplewrightError
from .core.presets import Preset
from .core.version import VERSION

EXIT_ERROR = 2


def _add_common(parser: argparse.ArgumentParser) -> None:
    src = parser.add_mutually_exclusive_group()
    src.add_argument("--passage", metavar="FILE", help="draft passage to continue (.txt or .md, UTF-8)")
    src.add_argument("--text", metavar="STRING", help="the passage given directly")
    parser.add_argument(
        "--preset",
        metavar="X",
        action="append",
        default=[],
        help="preset file or settings file (all its presets), or a preset name: the "
        "library's first, else a starter preset's (repeatable)",
    )
    parser.add_argument("--model", metavar="PATH", help="model folder or .gguf file (default: the built-in model)")
    parser.add_argument(
        "--precision",
        choices=("float32", "bfloat16", "auto"),
        default=None,
        help="precision the model runs in (default auto: bfloat16 only where measured 1.2x faster)",
    )
    parser.add_argument(
        "--library",
        metavar="DIR",
        help="preset library folder (default: the one last chosen in the window, else your own)",
    )
    parser.add_argument(
        "--instruction",
        metavar="TEXT",
        help="ask the model through its chat template with this instruction instead of letting it continue "
        "the passage; '{passage}' marks where the passage goes (else it follows the instruction)",
    )
    parser.add_argument("--system", metavar="TEXT", help="system message before the instruction (needs --instruction)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of text")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="samplewright", description=("Audition sampling presets on a draft passage with a local model.")
    )
    parser.add_argument("--version", action="version", version=f"samplewright {VERSION}")
    parser.add_argument(
        "--self-test",
        action="store_true",
        help="open the window offscreen, wait for the model, render it and exit (0 = all well)",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    aud = sub.add_parser("audition", help="write samples of the passage for several presets")
    _add_common(aud)
    aud.add_argument(
        "--samples",
        type=int,
        default=limits.DEFAULT_SAMPLES,
        metavar="N",
        help=f"samples per preset, 1 to {limits.MAX_SAMPLES} (default {limits.DEFAULT_SAMPLES})",
    )
    aud.add_argument(
        "--tokens",
        type=int,
        default=limits.DEFAULT_NEW_TOKENS,
        metavar="N",
        help=f"new tokens per sample, 1 to {limits.MAX_NEW_TOKENS} (default {limits.DEFAULT_NEW_TOKENS})",
    )
    aud.add_argument(
        "--seed",
        type=int,
        default=limits.DEFAULT_SEED,
        metavar="N",
        help=f"run seed shared by all presets (default {limits.DEFAULT_SEED})",
    )
    aud.set_defaults(handler=run_audition)

    step = sub.add_parser("step", help="show how each preset reshapes the next-token distribution")
    _add_common(step)
    step.add_argument(
        "--after",
        metavar="STRING",
        default="",
        help="text already generated after the passage (the step comes after it)",
    )
    step.add_argument("--top", type=int, default=10, metavar="N", help="top tokens to show (default 10)")
    step.set_defaults(handler=run_step)

    check = sub.add_parser("check", help="validate a preset file or a settings file")
    check.add_argument("file", metavar="FILE")
    check.add_argument("--json", action="store_true")
    check.set_defaults(handler=run_check)

    window = sub.add_parser("window", help="open the desktop window")
    window.set_defaults(handler=run_window)

    cli_exchange.register(sub)
    cli_evaluation.register(sub)
    return parser


def _framing(args):
    """How the model is asked: plain continuation unless ``--instruction`` is given."""
    from .core.framing import INSTRUCTION, Framing

    if args.instruction is None:
        if args.system:
            raise SamplewrightError("--system needs --instruction: a plain continuation has no system message")
        return Framing()
    return Framing(INSTRUCTION, args.system or "", args.instruction)


def _passage(args) -> str:
    """The passage to continue, checked before the model is loaded (loading takes seconds)."""
    from .core.engine.passages import demo_passages, read_passage, require_text

    if args.text is not None:
        return require_text(args.text)
    if args.passage:
        return read_passage(args.passage)
    return next(iter(demo_passages().values()))


def _presets(args) -> list[Preset]:
    from .core.library.library import starter_presets
    from .core.library.lookup import resolve_presets

    if args.preset:
        return [preset for spec in args.preset for preset in resolve_presets(spec, args.library)]

    return list(starter_presets())[:3]


def _engine(args):
    from .core.engine.engine import Engine
    from .core.engine.model import load_model

    def progress(message, fraction):
        if sys.stderr.isatty() and not args.json:
            print(f"  {message}", file=sys.stderr)

    return Engine(load_model(args.model, progress=progress, precision=args.precision))


def _check_range(name: str, value: int, low: int, high: int) -> None:
    if not low <= value <= high:
        raise SamplewrightError(f"--{name} must be from {low} to {high}, got {value}")


def run_audition(args) -> int:
    """Generate samples and print them with their metrics."""
    from .core.results import AuditionRequest
    from .core.sampling.metrics import preset_metrics

    _check_range("samples", args.samples, 1, limits.MAX_SAMPLES)
    _check_range("tokens", args.tokens, 1, limits.MAX_NEW_TOKENS)
    if args.seed < 0:
        raise SamplewrightError(f"--seed must be a whole number 0 or more, got {args.seed}")
    passage, presets, framing = _passage(args), _presets(args), _framing(args)
    engine = _engine(args)
    request = AuditionRequest(
        passage, presets, samples=args.samples, max_new_tokens=args.tokens, seed=args.seed, framing=framing
    )
    bar = _progress_bar(not args.json)
    result = engine.audition(request, on_token=bar.update if bar else None)
    if bar:
        bar.close()
    report = [
        {
            "name": preset.name,
            "samples": [{"text": s.text, "token_ids": s.token_ids, "stop_reason": s.stop_reason} for s in row],
            "metrics": preset_metrics(row).to_dict(),
        }
        for preset, row in zip(presets, result.samples, strict=False)
    ]
    if args.json:
        print(
            json.dumps(
                {
                    "seed": args.seed,
                    "precision": engine.loaded.precision,
                    "passage_tokens": len(result.passage_ids),
                    "passage_dropped": result.passage_dropped,
                    "framing": framing.to_dict(),
                    "presets": report,
                },
                ensure_ascii=False,
            )
        )
        return 0
    print(f"({result.tokens_generated()} tokens in {result.seconds:.1f} s; model in {engine.loaded.precision})")
    _print_audition(report, presets, result, engine)
    return 0


def passage_cut_note(dropped: int, window: int, context_length: int, max_passage_tokens: int) -> str:
    """Why the first ``dropped`` tokens of a passage were left out, naming the limit that applied."""
    if window >= max_passage_tokens:
        why = (
            f"the passage window of {window:,} tokens (Samplewright keeps at most {max_passage_tokens:,} "
            "passage tokens, since every sample holds its own copy of the passage's cache)"
        )
    else:
        why = (
            f"the passage window of {window:,} tokens (the model's context of {context_length:,} tokens, "
            "less the room kept for the sample)"
        )
    return f"(the passage is longer than {why}: its first {dropped:,} tokens were left out)"


def _print_audition(report, presets, result, engine) -> None:
    from .core.engine.engine import MAX_PASSAGE_TOKENS

    if result.passage_dropped:
        context = engine.loaded.context_length
        print(passage_cut_note(result.passage_dropped, engine.passage_limit, context, MAX_PASSAGE_TOKENS))
    for entry, preset in zip(report, presets, strict=False):
        print(f"\n== {entry['name']} ({preset.describe()})")
        for i, sample in enumerate(entry["samples"], 1):
            text = " ".join(sample["text"].split())
            print(f"  [{i}] {text}  <{sample['stop_reason']}>")
        print("  " + "  ".join(f"{k}={_fmt(v)}" for k, v in entry["metrics"].items() if k != "stop_reasons"))
    print("\nGenerated text can be wrong, biased or offensive: review it under your team's policy before use.")


def _fmt(value) -> str:
    return "–" if value is None else f"{value:.3f}"


class _TerminalBar:
    """A progress bar on stderr, shown only on a terminal (tqdm)."""

    def __init__(self):
        from tqdm import tqdm

        self._bar = tqdm(total=0, unit="tok", file=sys.stderr, leave=False)

    def update(self, event) -> None:
        self._bar.total = event.total_tokens
        self._bar.n = event.done_tokens
        self._bar.refresh()

    def close(self) -> None:
        self._bar.close()


def _progress_bar(wanted: bool):
    return _TerminalBar() if wanted and sys.stderr.isatty() else None


def run_step(args) -> int:
    """Print the next-token distribution raw and under each preset."""
    from .core.sampling import registry

    _check_range("top", args.top, 1, 200)
    passage, presets, framing = _passage(args), _presets(args), _framing(args)
    engine = _engine(args)
    tokenizer = engine.loaded.tokenizer
    after = tokenizer.encode(args.after, add_special_tokens=False) if args.after else []
    view = engine.step(passage, presets, sample_ids=after, top=args.top, framing=framing)
    entries = [
        {
            "name": ps.name,
            "kept": ps.kept,
            "kept_raw_mass": ps.kept_raw_mass,
            "entropy_bits": ps.entropy_bits,
            "raw_entropy_bits": ps.raw_entropy_bits,
            "top": [{"id": r.id, "text": r.text, "raw_p": r.raw_p, "p": r.p, "cut_by": r.cut_by} for r in ps.top],
        }
        for ps in view.presets
    ]
    if args.json:
        print(
            json.dumps(
                {"context_tokens": view.context_tokens, "precision": engine.loaded.precision, "presets": entries},
                ensure_ascii=False,
            )
        )
        return 0
    print(f"Next token after {view.context_tokens} tokens; raw entropy {view.raw_entropy_bits:.2f} bits")
    for entry in entries:
        noun = "token" if entry["kept"] == 1 else "tokens"
        print(
            f"\n== {entry['name']}: kept {entry['kept']} {noun} holding {entry['kept_raw_mass']:.1%} "
            f"of the raw mass; entropy {entry['raw_entropy_bits']:.2f} -> {entry['entropy_bits']:.2f} bits"
        )
        for row in entry["top"]:
            cut = f"cut by {registry.stage(row['cut_by']).label}" if row["cut_by"] else ""
            print(f"  {row['text']!r:>16}  raw {row['raw_p']:.3f}  -> {row['p']:.3f}  {cut}")
    return 0


def run_check(args) -> int:
    """Validate a preset file or a settings file and print one line."""
    from .core.library.settings_file import check_file

    verdict = check_file(args.file)
    print(json.dumps({"file": args.file, "ok": True, "verdict": verdict}) if args.json else verdict)
    return 0


def run_window(args) -> int:
    """Open the desktop window."""
    from .qt.app import main as window_main

    return window_main([])


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``samplewright`` command; returns the exit status."""
    os.environ.setdefault("HF_HUB_OFFLINE", "1")
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.self_test:
        from .qt.self_test import run as self_test

        return self_test()
    if not getattr(args, "handler", None):
        parser.print_help()
        return 0
    try:
        return args.handler(args)
    except SamplewrightError as exc:  # PresetError, RequestError, LibraryError, ...
        print(f"samplewright: {exc}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print("samplewright: stopped", file=sys.stderr)
        return 130
    except OSError as exc:
        print(f"samplewright: {exc.strerror or exc}: {exc.filename or ''}".rstrip(": "), file=sys.stderr)
        return EXIT_ERROR


if __name__ == "__main__":
    sys.exit(main())
