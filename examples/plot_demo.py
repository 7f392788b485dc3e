"""Feed synthetic next-token distributions to the distribution plot.

Each iteration makes random logits over a small invented vocabulary, has the
core's ``inspection.step_view`` shape them with three presets, and hands the
result to the plot, as the window does for a real step.

Run:  python examples/plot_demo.py --iterations 50
      (add --stay to keep the window open afterwards)
"""

from __future__ import annotations

import argparse
import sys

import numpy as np

WORDS = (
    "ferry",
    "harbour",
    "timetable",
    "sailing",
    "delayed",
    "tide",
    "pier",
    "ticket",
    "crossing",
    "weather",
    "notice",
    "passengers",
    "island",
    "morning",
    "evening",
    "cancelled",
    "return",
    "quay",
    "cabin",
    "deck",
    "captain",
    "route",
    "fare",
    "service",
    "storm",
)


def synthetic_view(rng: np.random.Generator, presets, top: int = 20):
    """A StepView of random logits, built by the core exactly as the window's steps are."""
    from samplewright.core.sampling.inspection import step_view

    logits = rng.normal(0.0, 2.0, len(WORDS))
    raw = np.exp(logits - logits.max())
    drawn = int(rng.choice(len(WORDS), p=raw / raw.sum()))
    return step_view(
        logits,
        presets,
        [" " + word for word in WORDS],
        top=top,
        drawn_id=drawn,
        context_tokens=int(rng.integers(10, 200)),
    )


def main(argv=None) -> int:
    """Show ``--iterations`` synthetic steps in the plot, then exit."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--iterations", type=int, default=100)
    parser.add_argument("--stay", action="store_true", help="keep the window open at the end")
    args = parser.parse_args(argv)

    from PySide6.QtWidgets import QApplication

    from samplewright.core.presets import Preset
    from samplewright.qt.distribution_plot import DistributionPlot

    app = QApplication.instance() or QApplication(sys.argv)
    presets = [
        Preset("Steady", temperature=0.7, top_p=0.9),
        Preset("Short list", top_k=5),
        Preset("Floor", min_p=0.1, temperature=1.2),
    ]
    plot = DistributionPlot()
    plot.resize(520, 760)
    plot.show()
    rng = np.random.default_rng(7)
    for _ in range(args.iterations):
        plot.show_step(synthetic_view(rng, presets), [p.name for p in presets])
        plot.flush()
        app.processEvents()
    print(f"drew {plot.redraws} steps", flush=True)
    code = app.exec() if args.stay else 0
    # Delete the widget while Qt is still up: left to interpreter exit, its plot items can be
    # destroyed after their scene, which crashes.
    plot.deleteLater()
    app.processEvents()
    del plot
    return code


if __name__ == "__main__":
    sys.exit(main())
