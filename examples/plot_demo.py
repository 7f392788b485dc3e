"""Feed synthetic next-token distributions to the distribution plot.

Each iteration makes random logits over a small invented vocabulary, shapes
them with three presets through the real sampling chain, and hands the
result to the plot, as the window does for a real step.

Run:  python examples/plot_demo.py --iterations 50
      (add --stay to keep the window open afterwards)
"""
from __future__ import annotations

import argparse
import sys

import numpy as np

WORDS = ("ferry", "harbour", "timetable", "sailing", "delayed", "tide", "pier", "ticket", "crossing",
         "weather", "notice", "passengers", "island", "morning", "evening", "cancelled", "return",
         "quay", "cabin", "deck", "captain", "route", "fare", "service", "storm")


def synthetic_view(rng: np.random.Generator, presets, top: int = 20):
    """A StepView built from random logits, shaped by the real chain."""
    from samplewright.core.chain import shape
    from samplewright.core.metrics import entropy_bits
    from samplewright.core.results import PresetStep, StepView, TokenRow

    logits = rng.normal(0.0, 2.0, len(WORDS))
    raw = np.exp(logits - logits.max())
    raw /= raw.sum()
    order = [int(i) for i in np.argsort(-raw, kind="stable")[:top]]
    steps = []
    for preset in presets:
        probs = shape(logits, preset)
        rows = [TokenRow(i, WORDS[i], float(raw[i]), float(probs[i]),
                         None if probs[i] > 0 else _first_cut(logits, preset, i)) for i in order]
        steps.append(PresetStep(preset.name, probs, int((probs > 0).sum()), float(raw[probs > 0].sum()),
                                entropy_bits(probs), entropy_bits(raw), rows))
    drawn = int(rng.choice(len(WORDS), p=raw))
    return StepView(raw, entropy_bits(raw), order, [" " + WORDS[i] for i in order], steps,
                    context_tokens=int(rng.integers(10, 200)), drawn_id=drawn)


def _first_cut(logits, preset, token: int) -> str:
    """The first stage in the preset's order after which ``token`` has no probability left."""
    from samplewright.core.chain import shape

    for end in range(1, len(preset.order) + 1):
        neutral = {name: _neutral(name) for name in preset.order[end:]}
        partial = preset.replace(**{k: v for d in neutral.values() for k, v in d.items()})
        if shape(logits, partial)[token] == 0:
            return preset.order[end - 1]
    return preset.order[-1]


def _neutral(stage: str) -> dict:
    return {"penalties": {"repetition_penalty": 1.0}, "temperature": {"temperature": 1.0},
            "top_k": {"top_k": 0}, "top_p": {"top_p": 1.0}, "min_p": {"min_p": 0.0},
            "typical_p": {"typical_p": 1.0}}[stage]


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
    presets = [Preset("Steady", temperature=0.7, top_p=0.9), Preset("Short list", top_k=5),
               Preset("Floor", min_p=0.1, temperature=1.2)]
    plot = DistributionPlot(top_n=20)
    plot.resize(520, 760)
    plot.show()
    rng = np.random.default_rng(7)
    for _ in range(args.iterations):
        plot.show_step(synthetic_view(rng, presets), [p.name for p in presets])
        plot.flush()
        app.processEvents()
    print(f"drew {plot.redraws} steps")
    return app.exec() if args.stay else 0


if __name__ == "__main__":
    sys.exit(main())
