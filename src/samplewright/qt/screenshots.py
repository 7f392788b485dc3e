"""Render the window in its main states to PNG files (``make screenshots``).

Usage: ``python -m samplewright.qt.screenshots OUTDIR [WIDTHxHEIGHT]`` (default 1400x900)

Uses the default model, the first demo passage and the starter presets, in
a fresh temporary library and settings folder (the user's own are not
touched). Writes ``1-ready.png`` (before a run), ``2-audition.png`` (after a
run), ``3-step.png`` (inspecting one step) with ``3-step-view.png`` (the step
view alone), ``4-accented.png`` (a passage with accented names, a sample
whose characters are spread over several tokens, inspected), and
``5-evaluation.png`` (the evaluation window after a small run over a demo
passage set, one preset's samples shown beside another's).
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

SIZE = (1400, 900)
PREFERRED = ("Timetable notice — exact", "Customer reply — warm", "Newsletter — lively")
#: The evaluation screenshot's passage set and presets (demo set and starter presets).
EVALUATION_SET = "customer-replies"
EVALUATION_PRESETS = ("Greedy baseline", "Customer reply — warm", "Newsletter — lively", "Typical — steady")
#: An invented notice with accented place names, so samples carry characters of several bytes.
ACCENTED_PASSAGE = (
    "Notice to passengers: from Monday the ferry to Ærøskøbing calls at Søby and Fåborg. "
    "The café on deck serves smørrebrød and crème brûlée. Passengers for Ærøskøbing"
)


def _wait(app, until: Callable[[], bool], seconds: float, what: str) -> None:
    deadline = time.monotonic() + seconds
    while not until():
        if time.monotonic() > deadline:
            raise TimeoutError(f"gave up waiting for {what} after {seconds:.0f} s")
        app.processEvents()
        time.sleep(0.02)


def _save(app, widget, path: Path) -> None:
    for _ in range(5):
        app.processEvents()
    inspector = getattr(widget.window(), "inspector", None)
    if inspector is not None:
        inspector.plot.flush()  # the step view redraws on a timer: draw it now
    app.processEvents()
    widget.grab().save(str(path))
    print(f"wrote {path}")


def _choose_presets(window) -> None:
    records = window.library.records()
    by_name = {r.name: r.id for r in records}
    ids = [by_name[n] for n in PREFERRED if n in by_name] or [r.id for r in records[:3]]
    window.library_list.set_chosen(ids)


def _interesting_step(sample) -> int:
    """A step where the model hesitated (most tokens kept) but the drawn token was not a long shot."""
    steps = [i for i, t in enumerate(sample.tokens) if t.raw_p >= 0.05] or list(range(len(sample.tokens)))
    return max(steps, key=lambda i: sample.tokens[i].kept)


def _accented(window) -> tuple[int, int, int]:
    """(column, row, step) of a token holding part of a character of several bytes, else of any
    non-ASCII token, else the first token."""
    vocabulary = window.model_info.vocabulary
    found = []
    for column, samples in enumerate(window.session.samples):
        for row, sample in enumerate(samples):
            for step, token in enumerate(sample.tokens):
                piece = vocabulary.bytes_of(token.token_id)
                if any(b >= 0x80 for b in piece):
                    found.append(("<0x" not in vocabulary.label(token.token_id), column, row, step))
    return min(found)[1:] if found else (0, 0, 0)


def _inspect(app, window, column: int, row: int, step: int) -> None:
    window.inspector.plot.shown = None
    window.audition.inspect(column, row, step)
    _wait(app, lambda: window.inspector.plot.shown is not None, 120, "the step view")


def render(outdir: Path, model_seconds: float = 600, size: tuple[int, int] = SIZE) -> list[Path]:
    """Render the main states into ``outdir`` at ``size``; returns the files written."""
    from .app import make_app
    from .main_window import MainWindow

    outdir.mkdir(parents=True, exist_ok=True)
    app = make_app()
    with tempfile.TemporaryDirectory() as scratch:
        # The scratch library stands in for the user's own, so the header reads as it would for them.
        os.environ["SAMPLEWRIGHT_LIBRARY_DIR"] = str(Path(scratch) / "library")
        window = MainWindow(library_dir=Path(scratch) / "library", config_dir=Path(scratch) / "config")
        window.prompts.show_error = lambda message, detail=None: print(f"error: {detail or message}", file=sys.stderr)
        window.resize(*size)
        window.show()
        _wait(app, lambda: window.model_info is not None, model_seconds, "the model to load")
        _choose_presets(window)
        window.controls.samples_spin.setValue(3)
        window.controls.tokens_spin.setValue(40)
        window.controls.seed_spin.setValue(7)
        names = ("1-ready.png", "2-audition.png", "3-step.png", "3-step-view.png", "4-accented.png")
        files = [outdir / name for name in names]
        _save(app, window, files[0])
        window.audition.generate_all()
        _wait(app, lambda: not window.audition.running(), 900, "the audition")
        _save(app, window, files[1])
        column = min(1, len(window.session.samples) - 1)
        sample = window.session.samples[column][0]
        # The inspected column's preset is the one edited: its chain shows what each stage keeps.
        window.library_list.select(window.session.record_ids[column] or "")
        _inspect(app, window, column, 0, _interesting_step(sample))
        _save(app, window, files[2])
        _save(app, window.inspector, files[3])
        window.passage.set_text(ACCENTED_PASSAGE)
        window.audition.generate_all()
        _wait(app, lambda: not window.audition.running(), 900, "the audition")
        _inspect(app, window, *_accented(window))
        _save(app, window, files[4])
        files.append(_evaluation(app, window, outdir / "5-evaluation.png"))
        window.close()
    return files


def _evaluation(app, window, path: Path) -> Path:
    """A small evaluation run (three presets, one demo passage set) in the evaluation window."""
    window.evaluation.open()
    shown = window.evaluation.current()
    view = shown.view
    view.sets_panel.add_demo_sets()
    view.sets_panel.check(EVALUATION_SET)
    view.reload_presets()
    view.tick_presets(list(EVALUATION_PRESETS))
    view.samples.setValue(6)
    view.tokens.setValue(32)
    view.seed.setValue(7)
    view.start_evaluation()
    _wait(app, lambda: not view.running, 1800, "the evaluation run")
    view.select_preset(1)
    view.compare.setCurrentIndex(min(1, view.compare.count() - 1))
    _save(app, shown, path)
    shown.close()
    return path


def _size(text: str) -> tuple[int, int] | None:
    """``1280x800`` as (1280, 800); None for anything else."""
    width, _, height = text.partition("x")
    return (int(width), int(height)) if width.isdigit() and height.isdigit() else None


def main(argv=None) -> int:
    """Command-line entry: render into the folder given as the only argument."""
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) not in (1, 2) or (len(argv) == 2 and not _size(argv[1])):
        print("usage: python -m samplewright.qt.screenshots OUTDIR [WIDTHxHEIGHT]", file=sys.stderr)
        return 2
    try:
        render(Path(argv[0]), size=_size(argv[1]) if len(argv) == 2 else SIZE)
    except TimeoutError as error:
        print(f"screenshots not finished: {error}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
