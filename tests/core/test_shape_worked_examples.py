"""``samplewright.shape`` on hand-worked examples of the published definitions,
boundaries included, and on facts of the trade.

Each check names its published source beside it; the worked numbers are
written out, with the same sources, under "Worked examples" in
docs/sampling-chain.md (computed with numpy in float64).
"""

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import entropy as scipy_entropy

from samplewright import Preset, shape
from samplewright.core.sampling.metrics import entropy_bits

P4 = np.log([0.5, 0.3, 0.15, 0.05])


def close(a, b):
    np.testing.assert_allclose(a, b, atol=1e-6)


# --- Temperature: Ackley, Hinton & Sejnowski (1985), "A Learning Algorithm for Boltzmann Machines";
# p_T = softmax(z / T), eq. 1 of Hinton, Vinyals & Dean (2015), "Distilling the Knowledge in a Neural
# Network" (equation number from memory). Numbers: docs/sampling-chain.md, temperature table.
@pytest.mark.parametrize(
    "t, expected, bits",
    [
        (1.0, [0.665241, 0.244728, 0.090031], 1.200893),
        (0.5, [0.866813, 0.117310, 0.015876], 0.636311),
        (2.0, [0.506480, 0.307196, 0.186324], 1.471825),
    ],
)
def test_temperature_worked(t, expected, bits):
    p = shape([2.0, 1.0, 0.0], Preset("t", temperature=t))
    close(p, expected)
    assert entropy_bits(p) == pytest.approx(bits, abs=1e-6)


def test_temperature_zero_is_greedy_ties_to_lower_id():
    # T -> 0 tends to the one-hot on the arg-max (the limit of softmax(z / T)); [1, 3, 3, 0] ties ids 1
    # and 2, and the first arg-max (as torch.argmax documents) is id 1.
    close(shape([1.0, 3.0, 3.0, 0.0], Preset("g", temperature=0)), [0, 1, 0, 0])


# --- Top-k: Fan, Lewis & Dauphin (2018), "Hierarchical Neural Story Generation", ACL 2018 --------
# Numbers: docs/sampling-chain.md, top-k table.
def test_top_k_worked():
    close(shape([1, 3, 2, 0.5], Preset("k", top_k=2)), [0, 0.731059, 0.268941, 0])
    close(shape([1, 3, 2, 0.5], Preset("k", top_k=5)), [0.085369, 0.630796, 0.232057, 0.051779])


def test_top_k_tie_keeps_exactly_k_lower_ids():
    close(shape([2, 1, 2, 2], Preset("k", top_k=2)), [0.5, 0, 0.5, 0])


# --- Top-p: Holtzman, Buys, Du, Forbes & Choi (2020), "The Curious Case of Neural Text Degeneration",
# ICLR 2020, eq. 2. Numbers: docs/sampling-chain.md, top-p table.
def test_top_p_reached_exactly_keeps_the_token_that_reaches_it():
    # 0.5 + 0.3 = 0.8 exactly: with the 1e-6 tolerance id 1 reaches p, id 2 is cut.
    close(shape(P4, Preset("p", top_p=0.8)), [0.625, 0.375, 0, 0])


def test_top_p_worked():
    close(shape(P4, Preset("p", top_p=0.81)), [0.526316, 0.315789, 0.157895, 0])
    close(shape(P4, Preset("p", top_p=0.4)), [1, 0, 0, 0])


# --- Min-p: Nguyen et al. (2024), "Turning Up the Heat: Min-p Sampling for Creative and Coherent LLM
# Outputs", arXiv:2407.01082. Numbers: docs/sampling-chain.md, min-p table.
def test_min_p_worked():
    close(shape(P4, Preset("m", min_p=0.2)), [0.526316, 0.315789, 0.157895, 0])
    close(shape(P4, Preset("m", min_p=0.7)), [1, 0, 0, 0])


# --- Typical: Meister, Pimentel, Wiher & Cotterell (2023), "Locally Typical Sampling", TACL 11.
# Numbers: docs/sampling-chain.md, typical table (H = 1.142120 nats for p = [0.5, 0.3, 0.15, 0.05]).
@pytest.mark.parametrize(
    "mass, expected",
    [
        (0.2, [0, 1, 0, 0]),  # the top token is dropped
        (0.5, [0.625, 0.375, 0, 0]),
        (0.9, [0.526316, 0.315789, 0.157895, 0]),
    ],
)
def test_typical_worked(mass, expected):
    close(shape(P4, Preset("y", typical_p=mass)), expected)


# --- Penalties: numbers in docs/sampling-chain.md, "Repetition penalty" to "No-repeat n-gram" ----
def test_repetition_penalty_worked():
    # Keskar et al. (2019), "CTRL: A Conditional Transformer Language Model for Controllable
    # Generation", penalized sampling, sign-aware form: z = [2, -1, 0.5, 3], history [0, 1, 1], theta 2.
    p = shape([2.0, -1.0, 0.5, 3.0], Preset("r", repetition_penalty=2.0), history=[0, 1, 1])
    close(p, [0.110554, 0.005504, 0.067054, 0.816888])


def test_frequency_presence_count_generated_tokens_only():
    # No paper: the additive form is a hosted-API convention (common practice); counted tokens [2, 2, 3].
    preset = Preset("f", frequency_penalty=0.5, presence_penalty=0.25)
    close(shape([1.0] * 4, preset, generated=[2, 2, 3]), [0.362467, 0.362467, 0.103849, 0.171217])
    # The passage alone (history, not generated) is not counted.
    close(shape([1.0] * 4, preset, history=[2, 2, 3]), [0.25] * 4)


@pytest.mark.parametrize("n, banned", [(3, {9}), (2, {9}), (4, set()), (1, {4, 7, 9})])
def test_no_repeat_ngram_worked(n, banned):
    # Paulus, Xiong & Socher (2017), "A Deep Reinforced Model for Abstractive Summarization": a token
    # may not complete an n-gram already in the history; history [4, 7, 9, 4, 7].
    p = shape(np.zeros(12), Preset("n", no_repeat_ngram_size=n), history=[4, 7, 9, 4, 7])
    assert {i for i in range(12) if p[i] == 0} == banned


def test_stage_that_removes_everything_keeps_the_most_probable():
    # Every token of a 3-token vocabulary is banned: the most probable stays, no NaN.
    p = shape([0.1, 2.0, 1.0], Preset("n", no_repeat_ngram_size=1), history=[0, 1, 2])
    close(p, [0, 1, 0])


# --- Order: each truncation stage renormalises what the stage before left (transformers' generate()
# chains its processors so). Numbers: docs/sampling-chain.md, "Order". ---------------------------
def test_order_changes_the_result():
    z = np.log([0.4, 0.3, 0.2, 0.1])
    default = Preset("o", top_k=2, top_p=0.55)
    swapped = default.replace(order=("penalties", "temperature", "top_p", "top_k", "min_p", "typical_p"))
    close(shape(z, default), [1, 0, 0, 0])
    close(shape(z, swapped), [0.571429, 0.428571, 0, 0])


# --- Input handling ------------------------------------------------------------------
def test_shape_accepts_torch_and_numpy_and_leaves_input_unchanged():
    z = torch.tensor([0.5, 2.0, -1.0, 0.0])
    before = z.clone()
    preset = Preset("x", temperature=0.7, top_k=3, repetition_penalty=1.5)
    np.testing.assert_array_equal(shape(z, preset, history=[1]), shape(z.numpy(), preset, history=[1]))
    assert torch.equal(z, before)


def test_extreme_and_minus_inf_logits():
    z = np.array([100.0, -np.inf, 99.0, -100.0]) * 100
    p = shape(z, Preset("x", temperature=1.5, top_p=0.9))
    assert np.isfinite(p).all() and p[1] == 0 and p.sum() == pytest.approx(1.0)


# A division overflowing float64 (max about 1.8e308, IEEE 754) gives +inf, and a softmax over +inf
# gives NaN; the chain makes such a row greedy over its +inf ids instead (docs/sampling-chain.md).
@pytest.mark.parametrize(
    "logits, preset, history, expected",
    [
        ([30.0, 0.0], Preset("x", temperature=1e-307), (), [1.0, 0.0]),  # 30 / 1e-307 = 3e308 > max
        ([30.0, 0.0], Preset("x", repetition_penalty=1e-308), (0,), [1.0, 0.0]),  # 30 / 1e-308 = 3e309 > max
        ([1e308, 1e308, 0.0], Preset("x", temperature=0.5), (), [1.0, 0.0, 0.0]),  # tie: the lower id, as T = 0
    ],
)
def test_overflow_to_infinity_becomes_greedy_not_nan(logits, preset, history, expected):
    p = shape(np.array(logits), preset, history=history)
    assert not np.isnan(p).any() and p.sum() == 1.0
    np.testing.assert_array_equal(p, expected)


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.floats(-1e308, 1e308, allow_nan=False, allow_infinity=False), min_size=2, max_size=12),
    st.sampled_from([0.0, 5e-324, 1e-308, 1e-300, 1e-10, 0.5, 5.0]),
    st.sampled_from([5e-324, 1e-308, 1e-200, 1e-5, 1.0, 10.0]),
    st.sampled_from([-2.0, 0.0, 2.0]),
    st.integers(0, 3),
)
def test_extreme_temperatures_and_penalties_never_give_nan(z, t, rep, freq, order_shift):
    from samplewright.core.presets import DEFAULT_ORDER

    order = DEFAULT_ORDER[order_shift:] + DEFAULT_ORDER[:order_shift]
    preset = Preset(
        "x",
        temperature=t,
        repetition_penalty=rep,
        frequency_penalty=freq,
        presence_penalty=freq,
        top_p=0.9,
        min_p=0.05,
        typical_p=0.95,
        order=order,
    )
    p = shape(np.array(z), preset, history=[0, 1, 1], generated=[1, 1])
    assert np.isfinite(p).all() and p.sum() == pytest.approx(1.0)


@pytest.mark.parametrize("bad", [[], [[1.0, 2.0]], [np.nan, 1.0], [np.inf, 0.0], [-np.inf, -np.inf]])
def test_shape_rejects_bad_logits(bad):
    with pytest.raises(ValueError):
        shape(np.array(bad, dtype=float), Preset("x"))


def test_shape_rejects_history_outside_vocabulary():
    with pytest.raises(ValueError, match="outside the vocabulary"):
        shape([0.0, 1.0], Preset("x", repetition_penalty=1.2), history=[5])


# --- Facts of the trade (common practice, no source) ---------------------------------
logit_vectors = st.lists(st.floats(-8, 8, allow_nan=False), min_size=2, max_size=40).map(np.array)


@settings(max_examples=60, deadline=None)
@given(logit_vectors)
def test_temperature_one_leaves_the_distribution_unchanged(z):
    # Common practice: T = 1 is plain softmax.
    expected = np.exp(z - z.max()) / np.exp(z - z.max()).sum()
    np.testing.assert_allclose(shape(z, Preset("t")), expected, rtol=1e-12, atol=1e-15)


@settings(max_examples=60, deadline=None)
@given(logit_vectors, st.floats(0.1, 2.0), st.floats(0.1, 2.0))
def test_entropy_rises_with_temperature(z, t1, t2):
    # Common practice: dH/d(1/T) = -Var_p(z)/T^2 <= 0, a standard result on the Boltzmann distribution
    # (Ackley, Hinton & Sejnowski 1985), so entropy never falls as T rises.
    low, high = sorted((t1, t2))
    h_low = scipy_entropy(shape(z, Preset("a", temperature=low)), base=2)
    h_high = scipy_entropy(shape(z, Preset("b", temperature=high)), base=2)
    assert h_high >= h_low - 1e-9


@settings(max_examples=60, deadline=None)
@given(logit_vectors, st.integers(1, 50))
def test_top_k_keeps_exactly_k(z, k):
    # Common practice: top-k keeps min(k, V) tokens.
    assert np.count_nonzero(shape(z, Preset("k", top_k=k))) == min(k, len(z))


@settings(max_examples=60, deadline=None)
@given(logit_vectors, st.floats(0.05, 0.99))
def test_top_p_set_grows_as_the_distribution_flattens(z, p):
    # Common practice: a flatter distribution needs more tokens to reach the same mass.
    sharp = np.count_nonzero(shape(z, Preset("a", temperature=0.5, top_p=p)))
    flat = np.count_nonzero(shape(z, Preset("b", temperature=2.0, top_p=p)))
    assert flat >= sharp
