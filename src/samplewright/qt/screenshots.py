"""Render the window in three states to PNG files (``make screenshots``).

Usage: ``python -m samplewright.qt.screenshots OUTDIR [WIDTHxHEIGHT]`` (default 1400x900)

Uses the default model, the first demo passage and the starter presets, in
a fresh temporary library and settings folder (the user's own are not
touched). Writes ``1-ready.png`` (before a run), ``2-audition.png`` (after a
run) and ``3-step.png`` (inspecting one step).
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


def _wait(app, until: Callable[[], bool], seconds: float, what: str) -> None:
    deadline = time.monotonic() + seconds
    while not until():
        if time.monotonic() > deadline:
            raise TimeoutError(f"gave up waiting for {what} after {seconds:.0f} s")
        app.processEvents()
        time.sleep(0.02)


def _save(app, window, path: Path) -> None:
    for _ in range(5):
        app.processEvents()
    window.inspector.plot.flush()
    app.processEvents()
    window.grab().save(str(path))
    print(f"wrote {path}")


def _choose_presets(window) -> None:
    records = window.library.records()
    by_name = {r.name: r.id for r in records}
    ids = [by_name[n] for n in PREFERRED if n in by_name] or [r.id for r in records[:3]]
    window.library_list.set_chosen(ids)


def _interesting_step(sample) -> int:
    """A step where the model hesitated (most tokens kept) and the drawn token is
    among the plotted rows (raw p ≥ 0.05 guarantees a rank within the top 20)."""
    steps = [i for i, t in enumerate(sample.tokens) if t.raw_p >= 0.05] or list(range(len(sample.tokens)))
    return max(steps, key=lambda i: sample.tokens[i].kept)


def render(outdir: Path, model_seconds: float = 600, size: tuple[int, int] = SIZE) -> list[Path]:
    """Render the three states into ``outdir`` at ``size``; returns the files written."""
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
        files = [outdir / "1-ready.png", outdir / "2-audition.png", outdir / "3-step.png"]
        _save(app, window, files[0])
        window.audition.generate_all()
        _wait(app, lambda: not window.audition.running(), 900, "the audition")
        _save(app, window, files[1])
        column = min(1, len(window.session.samples) - 1)
        sample = window.session.samples[column][0]
        # The inspected column's preset is the one edited: its chain shows what each stage keeps.
        window.library_list.select(window.session.record_ids[column] or "")
        window.audition.inspect(column, 0, _interesting_step(sample))
        _wait(app, lambda: window.inspector.plot.shown is not None, 120, "the step view")
        _save(app, window, files[2])
        window.close()
    return files


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
