"""The rank–probability view: built once and updated in place, the raw and shaped curves
by raw rank, where each kept set ends, which stage cut each rank (by its trade name, colour
and hatch), numbers on hover, a click picks a token for the table; and the demo script."""

from __future__ import annotations

import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
from PySide6.QtCore import QPointF
from PySide6.QtWidgets import QWidget

from samplewright.core.presets import Preset
from samplewright.qt import stage_style
from samplewright.qt.distribution_plot import DistributionPlot, probability, token_label
from samplewright.qt.palette import OKABE_ITO, PRESET_COLOURS
from samplewright.qt.step_inspector import QtStepInspector, help_text

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "examples"))
import plot_demo  # noqa: E402

PRESETS = [Preset("Steady", temperature=0.7, top_p=0.9), Preset("Short list", top_k=3)]
NAMES = [p.name for p in PRESETS]
TRADE_NAMES = {"repetition penalties", "temperature", "top-k", "top-p", "min-p", "typical"}


def views(n, seed=0):
    rng = np.random.default_rng(seed)
    return [plot_demo.synthetic_view(rng, PRESETS) for _ in range(n)]


def shown_plot(qtbot, view, **toggles):
    plot = DistributionPlot()
    qtbot.addWidget(plot)
    for name, on in toggles.items():
        getattr(plot, name).setChecked(on)
    plot.show_step(view, NAMES)
    plot.flush()
    return plot


def test_items_are_built_once_and_updated_in_place(qtbot):
    plot = DistributionPlot()
    qtbot.addWidget(plot)
    before = (list(plot.curves.items), list(plot.lanes.items))
    for view in views(5):
        plot.show_step(view, NAMES)
        plot.flush()
    assert (list(plot.curves.items), list(plot.lanes.items)) == before


def test_curves_are_raw_and_shaped_probabilities_by_raw_rank(qtbot):
    view = views(1, seed=3)[0]
    plot = shown_plot(qtbot, view, log_x=False, log_y=False)
    first, last = plot.rank_range()
    raw_x, raw_y = plot._series[0].getData()
    np.testing.assert_array_equal(raw_x, np.arange(1, last + 1))
    np.testing.assert_allclose(raw_y, np.sort(view.raw_probs)[::-1][:last])  # rank 1 = most probable
    short_list = view.presets[1]
    _, shaped = plot._series[2].getData()
    # top_k=3 (Fan et al. 2018) keeps the three most probable tokens: the curve has three points,
    # renormalised to sum to one, and stops where the kept set ends.
    assert np.isfinite(shaped).sum() == 3 and math.isclose(np.nansum(shaped), 1.0)
    assert short_list.kept_end == 3 and plot._ends[1].value() == 3 and plot._ends[1].isVisible()
    assert not plot._ends[2].isVisible()  # only two presets


def test_log_axes_and_running_mass_on_demand(qtbot):
    view = views(1, seed=4)[0]
    plot = shown_plot(qtbot, view)
    assert plot.curves.ctrl.logXCheck.isChecked() and plot.curves.ctrl.logYCheck.isChecked()
    assert plot._ends[1].value() == math.log10(3)  # lines sit in view coordinates of the log axis
    plot.running.setChecked(True)
    _, running = plot._series[0].getData()
    np.testing.assert_allclose(running, np.cumsum(np.sort(view.raw_probs)[::-1])[: len(running)])
    assert plot.curves.getAxis("left").labelText == "running mass"
    assert not plot.curves.ctrl.logYCheck.isChecked() and not plot.log_y.isEnabled()


def test_lanes_show_which_stage_cut_each_rank(qtbot):
    view = views(1, seed=3)[0]
    plot = shown_plot(qtbot, view)
    last = plot.rank_range()[1]
    bands = plot.cut_lanes.bands
    short = [(b.first, b.last, b.stage) for b in bands if b.lane == 1]
    assert short == [(1, 3, None), (4, last, "top_k")]  # kept, then cut by top-k
    steady = {b.stage for b in bands if b.lane == 0}
    assert steady == {None, "top_p"}  # temperature never cuts; top-p does (Holtzman et al. 2020)
    # Each stage has its own colour and hatch, so it is told apart without colour too.
    assert len({stage_style.colour(s) for s in stage_style.stages()}) == len(stage_style.stages())
    assert len({stage_style.pattern(s) for s in stage_style.stages()}) == len(stage_style.stages())
    assert not {stage_style.colour(s) for s in stage_style.stages()} & set(PRESET_COLOURS)


def test_hover_gives_every_number_and_names_the_cutting_stage(qtbot):
    view = views(1, seed=3)[0]
    plot = shown_plot(qtbot, view, log_x=False)
    plot.resize(500, 400)
    plot.show()
    scene_pos = plot.curves.vb.mapViewToScene(QPointF(5, 0.01))
    plot.curves.scene().sigMouseMoved.emit(scene_pos)
    text = plot.hover_text
    token = view.ranked_ids[4]
    assert text.startswith("rank 5 ·") and probability(view.raw_probs[token]) in text
    assert "2 Short list: cut by top-k" in text
    assert re.search(r"1 Steady: (p [0-9.e-]+|cut by top-p)", text)


def test_a_click_picks_a_far_token_for_the_table(qtbot):
    inspector = QtStepInspector()
    qtbot.addWidget(inspector)
    view = views(1, seed=6)[0]
    inspector.show_step(view, NAMES, "x")
    far = len(view.ranked_ids)  # the least probable token
    inspector.plot.pick_rank(far)
    table = inspector.table
    assert int(view.ranked_ids[far - 1]) in table.ids
    assert view.drawn_id in table.ids  # the drawn token is always listed, wherever it ranks
    ranks = [view.rank_of(i) for i in table.ids]
    assert ranks == sorted(ranks) and ranks[: inspector.plot.top_n] == list(range(1, inspector.plot.top_n + 1))
    last = table.rowCount() - 1
    assert table.item(last, 0).text() == f"⋯ {far}"  # a gap in the ranks is shown
    header = [table.horizontalHeaderItem(c).text() for c in range(table.columnCount())]
    assert header == ["rank", "token", "raw p", "1", "2", "cut by"]
    assert "top-k (2)" in table.item(last, 5).text()
    cut_cell = table.item(last, 4)
    assert cut_cell.text() == "cut" and cut_cell.background().style() == stage_style.pattern("top_k")
    assert "cut by top-k" in cut_cell.toolTip()


def test_no_single_letter_stage_codes_and_the_legend_always_fits(qtbot):
    plot = shown_plot(qtbot, views(1)[0])
    legend = plot.legend
    assert TRADE_NAMES <= set(legend.texts())
    assert not [t for t in legend.texts() if re.fullmatch(r"[A-Z]", t.split()[0])]
    host = QWidget()
    qtbot.addWidget(host)
    for width in (180, 320, 900):
        placed = legend._layout(width)
        assert all(rect.right() <= width or rect.x() == 0 for rect, _ in placed)
        assert legend.heightForWidth(width) >= max(rect.bottom() for rect, _ in placed)
    assert legend.heightForWidth(180) > legend.heightForWidth(900)  # wraps onto more lines when narrow
    words = help_text()
    assert all(name in words for name in TRADE_NAMES)
    assert not re.search(r"\b[A-Z] = |\([A-Z]\)", words)  # no "K = top-k" style codes


def test_only_the_newest_requested_step_is_drawn(qtbot):
    plot = DistributionPlot()
    qtbot.addWidget(plot)
    requested = views(10, seed=5)
    for view in requested:
        plot.show_step(view, NAMES)
    qtbot.waitUntil(lambda: plot.redraws == 1, timeout=2000)
    assert plot.shown is requested[-1]


def test_palette_is_okabe_ito():
    # Okabe & Ito (2008) published hex values (from memory of the CUD page): orange E69F00, sky blue 56B4E9,
    # bluish green 009E73, yellow F0E442, blue 0072B2, vermillion D55E00, reddish purple CC79A7.
    assert OKABE_ITO["vermillion"] == "#D55E00" and OKABE_ITO["bluish_green"] == "#009E73"
    assert set(PRESET_COLOURS) <= set(OKABE_ITO.values())
    assert len(set(PRESET_COLOURS)) == 6


def test_token_labels_show_invisible_characters():
    assert token_label(" harbour") == "␣harbour"
    assert token_label("\n") == "↵"
    assert token_label("") == "∅"
    assert probability(0.1234) == "0.123" and probability(0.00012) == "1.2e-04" and probability(0) == "0"


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


def test_long_curves_keep_every_head_rank_and_a_log_spread_tail():
    from samplewright.qt.distribution_plot import plotted_ranks

    ranks = plotted_ranks(49152)
    assert list(ranks[:1000]) == list(range(1, 1001)) and ranks[-1] == 49152
    assert np.all(np.diff(ranks) > 0) and len(ranks) < 2100
    assert list(plotted_ranks(40)) == list(range(1, 41))
