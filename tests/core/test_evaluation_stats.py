"""Bootstrap intervals, the Pareto front, per-sample and pooled measures, sweep specs."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from samplewright.core.evaluation.bootstrap import percentile_interval
from samplewright.core.evaluation.measures import estimate, passage_table
from samplewright.core.evaluation.pareto import pareto_front
from samplewright.core.evaluation.sweep import SweepError, derived_presets, parse_vary
from samplewright.core.presets import Preset
from samplewright.core.results import Sample, TokenStep

# -- bootstrap: against scipy.stats.bootstrap (percentile method, same generator, same resamples) ----


def _pooled_mean(*groups, axis):
    return np.concatenate(groups, axis=axis).mean(axis=axis)


def _mean_of_means(*groups, axis):
    return np.mean([g.mean(axis=axis) for g in groups], axis=0)


@settings(max_examples=30, deadline=None)
@given(
    groups=st.lists(st.lists(st.floats(-10, 10, allow_nan=False), min_size=2, max_size=12), min_size=1, max_size=4),
    seed=st.integers(0, 2**32 - 1),
    statistic=st.sampled_from(["pooled_mean", "mean_of_means"]),
)
def test_bootstrap_matches_scipy(groups, seed, statistic):
    # Reference library: scipy.stats.bootstrap(method="percentile") resamples each sample
    # independently (paired=False), which is resampling within each passage (Efron & Tibshirani
    # 1993, percentile interval). Same generator seed and resamples -> the same interval.
    reference = stats.bootstrap(
        tuple(np.asarray(g) for g in groups),
        _pooled_mean if statistic == "pooled_mean" else _mean_of_means,
        n_resamples=999,
        method="percentile",
        confidence_level=0.95,
        vectorized=True,
        rng=np.random.default_rng(seed),
    ).confidence_interval
    low, high = percentile_interval(groups, statistic, resamples=999, rng=np.random.default_rng(seed))
    assert low == pytest.approx(reference.low, abs=1e-9)
    assert high == pytest.approx(reference.high, abs=1e-9)


def test_bootstrap_interval_shrinks_with_more_samples():
    # Common practice: the interval's width falls roughly as 1/sqrt(n).
    rng = np.random.default_rng(5)
    small, large = rng.normal(size=16), rng.normal(size=1600)
    w_small = np.subtract(*percentile_interval([small])[::-1])
    w_large = np.subtract(*percentile_interval([large])[::-1])
    assert w_large < w_small / 5


# -- Pareto front: against a brute-force check -------------------------------------------------


def _brute_force(points, higher):
    def better(a, b, k):  # a at least as good as b on axis k
        return a[k] >= b[k] if higher[k] else a[k] <= b[k]

    def strictly(a, b, k):
        return a[k] > b[k] if higher[k] else a[k] < b[k]

    live = [p is not None and None not in p for p in points]
    out = []
    for i, a in enumerate(points):
        if not live[i]:
            out.append(False)
            continue
        dominated = any(
            live[j] and better(b, a, 0) and better(b, a, 1) and (strictly(b, a, 0) or strictly(b, a, 1))
            for j, b in enumerate(points)
        )
        out.append(not dominated)
    return out


coordinate = st.one_of(st.none(), st.integers(-5, 5).map(float), st.floats(-3, 3, allow_nan=False))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(coordinate, coordinate), max_size=25), st.tuples(st.booleans(), st.booleans()))
def test_pareto_front_matches_brute_force(points, higher):
    # The definition of Pareto optimality checked pair by pair (common practice).
    assert pareto_front(points, higher) == _brute_force(points, higher)


def test_pareto_front_small_example():
    # Worked by hand: (1, 1) is beaten by (2, 2); (3, 0) and (0, 3) are not beaten; the tie (2, 2) twice stays.
    points = [(1, 1), (2, 2), (3, 0), (0, 3), (2, 2)]
    assert pareto_front(points) == [False, True, True, True, True]


# -- measures ----------------------------------------------------------------------------------


def _sample(text, ids, raw_p, reason="length", index=0):
    tokens = [TokenStep(i, "x", p, p, 1, 1.0, 1.0) for i, p in zip(ids, raw_p, strict=True)]
    return Sample(0, index, tokens, reason, text)


def test_pooled_measures_weigh_samples_and_passages_as_the_issue_says():
    # Passage A: two samples with coherence ln 0.5 and ln 0.25; passage B: one sample with ln 0.5.
    a = passage_table([_sample("w x y z", [1, 2], [0.5, 0.5]), _sample("a b", [3], [0.25])])
    b = passage_table([_sample("boats leave at seven", [4], [0.5])])
    # Per-sample measure: mean over all three samples, each weighing the same.
    pooled = estimate("coherence", [a, b], [0])
    assert pooled.value == pytest.approx((2 * math.log(0.5) + math.log(0.25)) / 3)
    # Diversity: "a b" has fewer than 4 words -> null, counted as undefined.
    div = estimate("diversity", [a, b], [0])
    assert div.value == 1.0 and div.undefined == 1
    # Self-BLEU: passage B has one sample (no value); the pooled value is passage A's.
    bleu = estimate("self_bleu", [a, b], [0])
    assert bleu.defined == 1 and bleu.value == pytest.approx(np.mean([a[0]["bleu"], a[1]["bleu"]]))


def test_undefined_measure_is_none_with_reason_never_nan():
    table = passage_table([_sample("hi", [], [], "eos")])
    e = estimate("coherence", [table], [0])
    assert e.value is None and e.reason and e.low is None
    assert estimate("degenerate_share", [table], [0]).value == 1.0  # EOS in the first 5 tokens


# -- sweeps ------------------------------------------------------------------------------------


def test_vary_range_includes_stop_and_avoids_float_drift():
    assert parse_vary("temperature=0.2:1.6:0.2").values == (0.2, 0.4, 0.6, 0.8, 1.0, 1.2, 1.4, 1.6)
    assert parse_vary("top_p=0.8,0.9,0.95,1").values == (0.8, 0.9, 0.95, 1.0)
    assert parse_vary("top_k=0:40:20").values == (0, 20, 40)


@pytest.mark.parametrize(
    "spec, words",
    [
        ("temperature=0.5:6:0.5", ["temperature", "5.5", "0 to 5"]),
        ("top_p=0,0.5", ["top_p", "0", "above 0 up to 1"]),
        ("min_p=0.5,1", ["min_p", "1", "not including, 1"]),
        ("top_k=2.5", ["top_k", "2.5", "whole number"]),
    ],
)
def test_vary_out_of_range_names_field_value_and_range(spec, words):
    with pytest.raises(SweepError) as caught:
        parse_vary(spec)
    for word in words:
        assert word in str(caught.value)


def test_grid_names_and_order():
    base = Preset("Notices", temperature=0.7)
    presets = derived_presets(base, (parse_vary("temperature=0.5,1"), parse_vary("top_p=0.9,1")))
    assert [p.name for p in presets] == [
        "Notices · temperature=0.5, top_p=0.9",
        "Notices · temperature=0.5, top_p=1",
        "Notices · temperature=1, top_p=0.9",
        "Notices · temperature=1, top_p=1",
    ]
    assert presets[2].temperature == 1.0 and presets[2].top_p == 0.9
