"""The distribution plot: built once, updated in place, newest step wins; and the demo script."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import torch
from PySide6.QtCore import Qt

from samplewright.core.limits import MAX_PRESETS
from samplewright.core.presets import DEFAULT_ORDER, Preset
from samplewright.core.sampling import registry
from samplewright.qt import palette
from samplewright.qt.distribution_plot import DistributionPlot, token_label
from samplewright.qt.palette import OKABE_ITO, PRESET_COLOURS

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "examples"))
import plot_demo  # noqa: E402

PRESETS = [Preset("Steady", temperature=0.7, top_p=0.9), Preset("Short list", top_k=3)]


def views(n, seed=0):
    rng = np.random.default_rng(seed)
    return [plot_demo.synthetic_view(rng, PRESETS) for _ in range(n)]


def test_items_are_built_once_and_updated_in_place(qtbot):
    plot = DistributionPlot(top_n=20)
    qtbot.addWidget(plot)
    items_before = list(plot.plot_widget.getPlotItem().items)
    for view in views(5):
        plot.show_step(view, [p.name for p in PRESETS])
        plot.flush()
    assert plot.plot_widget.getPlotItem().items == items_before
    # The grey bars hold the raw probabilities of the top tokens, in rank order.
    shown = plot.shown
    widths = plot._bars[0].opts["width"][: len(shown.top_ids)]
    np.testing.assert_allclose(widths, shown.raw_probs[shown.top_ids])
    assert list(widths) == sorted(widths, reverse=True)


def test_cut_tokens_carry_the_mark_of_the_stage_that_cut_them(qtbot):
    plot = DistributionPlot(top_n=20)
    qtbot.addWidget(plot)
    view = views(1, seed=3)[0]
    plot.show_step(view, [p.name for p in PRESETS])
    plot.flush()
    steady, short_list = view.presets
    # top_k=3 keeps exactly three tokens (Fan, Lewis & Dauphin 2018, "Hierarchical Neural Story
    # Generation"), the three of highest raw
    # probability (temperature 1 keeps the ranking), so every other listed token is cut by top_k.
    assert short_list.kept == 3
    assert [row.cut_by for row in short_list.top] == [None] * 3 + ["top_k"] * (len(short_list.top) - 3)
    # Temperature 0.7 only rescales the logits and never removes a token, so every token Steady
    # drops is cut by its top_p=0.9 (Holtzman et al. 2020, "The Curious Case of Neural Text
    # Degeneration", eq. 2), and the most probable one survives.
    steady_cut = [row.cut_by for row in steady.top if row.cut_by]
    assert steady.top[0].cut_by is None and steady_cut and set(steady_cut) == {"top_p"}
    points = plot._cuts[1].points()
    assert len(points) == len(short_list.top) - 3
    top_k = registry.stage("top_k").mark
    assert all(point.symbol() == palette.stage_symbol("top_k") for point in points)
    assert all(point.brush().color().name().upper() == top_k.colour for point in points)
    # The cut tokens' outline bars are hatched in top-k's pattern; the kept ones are not filled.
    brushes = plot._ghosts[1].opts["brushes"]
    assert [b.style() for b in brushes[3 : len(short_list.top)]] == [palette.stage_pattern("top_k")] * len(points)
    assert all(b.style() == Qt.BrushStyle.NoBrush for b in brushes[:3])


def test_only_the_newest_requested_step_is_drawn(qtbot):
    plot = DistributionPlot(top_n=20)
    qtbot.addWidget(plot)
    requested = views(10, seed=5)
    for view in requested:
        plot.show_step(view, [p.name for p in PRESETS])
    qtbot.waitUntil(lambda: plot.redraws == 1, timeout=2000)
    assert plot.shown is requested[-1]


def test_palette_is_okabe_ito_and_stage_marks_are_distinct():
    # Okabe & Ito (2008), "Color Universal Design (CUD): How to make figures and presentations that are
    # friendly to colorblind people", published hex values (from memory): orange E69F00, sky blue 56B4E9,
    # bluish green 009E73, yellow F0E442, blue 0072B2, vermillion D55E00, reddish purple CC79A7.
    assert OKABE_ITO["vermillion"] == "#D55E00" and OKABE_ITO["bluish_green"] == "#009E73"
    assert set(PRESET_COLOURS) <= set(OKABE_ITO.values())
    assert len(set(PRESET_COLOURS)) == MAX_PRESETS  # one colour per preset an audition can compare
    # Each stage's mark differs from every other's in shape, hatch and colour, so any one cue is enough.
    marks = [s.mark for s in registry.stages()]
    for cue in ("shape", "hatch", "colour", "glyph"):
        assert len({getattr(m, cue) for m in marks}) == len(marks), cue
    # No stage is named by a single letter anywhere in the legend (issue 10: trade names only).
    legend = palette.stage_legend()
    assert all(s.label in legend for s in registry.stages())
    assert not any(len(word) == 1 and word.isalpha() for word in legend.replace("·", " ").split())


def test_token_labels_show_invisible_characters():
    assert token_label(" harbour") == "␣harbour"
    assert token_label("\n") == "↵"
    assert token_label("") == "∅"


def test_plot_demo_runs():
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    done = subprocess.run(
        [sys.executable, str(ROOT / "examples" / "plot_demo.py"), "--iterations", "5"],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    assert "drew 5 steps" in done.stdout


@pytest.fixture
def throwaway_stage():
    # A stage invented for this test (no paper): it removes the live token with the highest id.
    def drop_highest_id(logits, params, history):
        ids = torch.arange(logits.shape[-1]).expand_as(logits)
        highest = torch.where(torch.isneginf(logits), -1, ids).max(dim=-1, keepdim=True).values
        return logits.masked_fill(ids == highest, float("-inf"))

    mark = registry.StageMark(colour="#777777", shape="hexagon", hatch="diagonal_grid", glyph="⬢")
    stage = registry.register(
        registry.Stage("drop_highest_id", "drop highest id", "A test stage.", "none", mark, (), drop_highest_id)
    )
    yield stage
    registry.unregister(stage.name)


def test_a_registered_stage_gets_its_mark_and_legend_entry(qtbot, throwaway_stage):
    # One registry entry plus its function (src/samplewright/core/sampling/registry.py) is all the
    # plot needs: the legend names the new stage and its cuts carry its shape and hatch.
    preset = Preset("new stage", order=DEFAULT_ORDER + (throwaway_stage.name,))
    rows = len(plot_demo.WORDS)  # every token is a row, so the highest id is among them
    view = plot_demo.synthetic_view(np.random.default_rng(1), [preset], top=rows)
    plot = DistributionPlot(top_n=rows)
    qtbot.addWidget(plot)
    plot.show_step(view, [preset.name])
    plot.flush()
    cut = [r for r, row in enumerate(view.presets[0].top) if row.cut_by == throwaway_stage.name]
    assert len(cut) == 1  # exactly one token, the highest id, is removed
    assert [p.symbol() for p in plot._cuts[0].points()] == [palette.SHAPE_SYMBOLS["hexagon"]]
    assert plot._ghosts[0].opts["brushes"][cut[0]].style() == Qt.BrushStyle.DiagCrossPattern
    assert "⬢ drop highest id" in palette.stage_legend()
