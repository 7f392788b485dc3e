"""The step view's rank data: every preset read on the raw ranking, where its kept set
ends, its running mass, and which stage cut each rank; checked against ``shape()`` and
numpy definitions written out here."""

from __future__ import annotations

import numpy as np
import pytest

from samplewright import Preset, shape
from samplewright.core.results import CutRun
from samplewright.core.sampling import inspection


@pytest.fixture(scope="module")
def logits():
    return np.random.default_rng(11).normal(0.0, 2.5, size=400)


def _raw(logits):
    z = np.exp(logits - logits.max())
    return z / z.sum()


def _view(logits, presets, **kwargs):
    return inspection.step_view(logits, presets, texts=lambda i: f"t{i}", **kwargs)


def test_ranks_follow_the_raw_probabilities(logits):
    view = _view(logits, [], drawn_id=7)
    raw = _raw(logits)
    # numpy definition: raw rank 1 is the most probable token.
    assert np.all(np.diff(view.raw_ranked) <= 0)
    np.testing.assert_allclose(view.raw_ranked, np.sort(raw)[::-1], atol=1e-15)
    np.testing.assert_allclose(view.raw_cumulative, np.cumsum(np.sort(raw)[::-1]), atol=1e-12)
    assert view.raw_cumulative[-1] == pytest.approx(1.0)
    assert view.rank_of(7) == int((raw > raw[7]).sum()) + 1
    assert [view.rank_of(i) for i in view.top_ids] == list(range(1, len(view.top_ids) + 1))


def test_each_presets_curve_is_shape_in_raw_rank_order(logits):
    presets = [Preset("Warm", temperature=0.8, top_p=0.9), Preset("Short", top_k=5), Preset("Floor", min_p=0.1)]
    view = _view(logits, presets)
    order = np.argsort(-_raw(logits), kind="stable")
    for preset, step in zip(presets, view.presets, strict=True):
        expected = shape(logits, preset)[order]  # shape() is the one definition of a preset
        np.testing.assert_allclose(step.ranked, expected, atol=1e-12)
        np.testing.assert_allclose(step.cumulative, np.cumsum(expected), atol=1e-12)
        assert step.kept_end == np.flatnonzero(expected > 0).max() + 1


def test_kept_set_ends_where_the_published_rules_say(logits):
    raw_sorted = np.sort(_raw(logits))[::-1]
    short, nucleus, floor = _view(
        logits, [Preset("Short", top_k=5), Preset("Nucleus", top_p=0.9), Preset("Floor", min_p=0.1)]
    ).presets
    # Fan et al. 2018, top-k: exactly the k most probable tokens are kept.
    assert short.kept_end == 5 and short.cumulative[4] == pytest.approx(1.0)
    # Holtzman et al. 2020, top-p: the smallest prefix of the ranking whose mass reaches p.
    assert nucleus.kept_end == int(np.searchsorted(np.cumsum(raw_sorted), 0.9)) + 1
    # Nguyen et al. 2024, min-p: tokens with p >= min_p times the top token's p.
    assert floor.kept_end == int((raw_sorted >= 0.1 * raw_sorted[0]).sum())


def test_cut_runs_name_the_stage_that_cut_each_rank(logits):
    raw_sorted = np.sort(_raw(logits))[::-1]
    (step,) = _view(logits, [Preset("Both", top_k=30, top_p=0.5)]).presets
    # Default order: top-k before top-p. Ranks past 30 go to top-k; the nucleus cuts inside the 30.
    nucleus_end = int(np.searchsorted(np.cumsum(raw_sorted), 0.5)) + 1
    assert nucleus_end < 30
    assert step.cut_runs() == [
        CutRun(1, nucleus_end, None),
        CutRun(nucleus_end + 1, 30, "top_p"),
        CutRun(31, len(logits), "top_k"),
    ]
    assert step.cut_stage(1) is None and step.cut_stage(31) == "top_k"
    after_k, after_p = step.stages[2], step.stages[3]
    assert (after_k.stage, after_k.kept) == ("top_k", 30)
    assert after_k.kept_raw_mass == pytest.approx(raw_sorted[:30].sum())
    assert (after_p.stage, after_p.kept) == ("top_p", nucleus_end)


def test_a_repetition_penalty_can_leave_a_hole_in_the_kept_ranks(logits):
    raw = _raw(logits)
    first = int(np.argmax(raw))
    preset = Preset("No repeats", no_repeat_ngram_size=1)  # a token seen once may not come again
    (step,) = _view(logits, [preset], history=[first]).presets
    # The most probable token is banned, so rank 1 is cut by the penalties stage and the rest stay.
    assert step.cut_stage(1) == "penalties" and step.ranked[0] == 0.0
    assert step.cut_runs()[0] == CutRun(1, 1, "penalties") and step.kept_end == len(logits)


def test_table_rows_always_hold_the_drawn_and_picked_tokens(logits):
    raw = _raw(logits)
    order = np.argsort(-raw, kind="stable")
    far, farther = int(order[150]), int(order[300])
    view = _view(logits, [], drawn_id=far)
    ids = inspection.table_ids(view, extra=[farther], head=4)
    assert ids == [int(i) for i in order[:4]] + [far, farther]
    assert inspection.table_ids(view, extra=[int(order[1])], head=2) == [int(order[0]), int(order[1]), far]
