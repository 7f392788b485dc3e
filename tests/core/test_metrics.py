"""Metrics against published worked examples and reference libraries."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import entropy as scipy_entropy

from samplewright.core.results import Sample, TokenStep
from samplewright.core.sampling.metrics import (
    METRIC_KEYS,
    PresetMetrics,
    coherence,
    distinct_n,
    diversity,
    entropy_bits,
    is_degenerate,
    mean_surprisal_bits,
    preset_metrics,
    rep_n,
    self_bleu,
    seq_rep_n,
)


def test_distinct_n_hand_counted():
    # Li et al. 2016, "A Diversity-Promoting Objective Function for Neural Conversation Models"
    # (distinct-n), counted by hand: 10 words, 6 distinct; 8 bigrams, 5 distinct.
    texts = ["the tide table is posted", "The tide table is late"]
    assert distinct_n(texts, 1) == pytest.approx(0.6)
    assert distinct_n(texts, 2) == pytest.approx(0.625)
    # Trigrams: 6 in all; "the tide table" and "tide table is" repeat -> 4 distinct.
    assert distinct_n(texts, 3) == pytest.approx(4 / 6)


def test_distinct_n_undefined_is_none():
    assert distinct_n(["short one"], 3) is None
    assert distinct_n([], 1) is None


def test_self_bleu_worked_example():
    # Zhu et al. 2018, "Texygen" (self-BLEU), computed with sacrebleu: per sample 75.9836, 75.9836, 6.5673 -> 0.528448.
    texts = ["the harbour bell rings at noon", "the harbour bell rings at dusk", "a gull sat on the ticket booth"]
    assert self_bleu(texts) == pytest.approx(0.528448, abs=1e-6)


def _papineni_bleu(hypothesis: str, reference: str) -> float:
    """BLEU-4 of one hypothesis against one reference, written out from Papineni, Roukos, Ward &
    Zhu (2002), "BLEU: a Method for Automatic Evaluation of Machine Translation", ACL: modified
    n-gram precisions p_n (clipped counts), uniform weights 1/4, brevity penalty
    BP = exp(1 - r/c) when c <= r."""
    hyp, ref = hypothesis.split(), reference.split()
    logs = []
    for n in range(1, 5):
        grams = [tuple(hyp[i : i + n]) for i in range(len(hyp) - n + 1)]
        ref_grams = [tuple(ref[i : i + n]) for i in range(len(ref) - n + 1)]
        clipped = sum(min(grams.count(g), ref_grams.count(g)) for g in set(grams))
        logs.append(math.log(clipped / len(grams)))
    brevity = 1.0 if len(hyp) > len(ref) else math.exp(1 - len(ref) / len(hyp))
    return brevity * math.exp(sum(logs) / 4)


def test_bleu_formula_hand_counted():
    # Counted by hand (Papineni et al. 2002): "the ferry leaves at noon today" against
    # "the ferry leaves at nine today": p1 = 5/6, p2 = 3/5, p3 = 2/4, p4 = 1/3, both 6 words (BP = 1)
    # -> BLEU = (5/6 * 3/5 * 2/4 * 1/3) ** (1/4) = (1/12) ** 0.25 = 0.537285.
    assert _papineni_bleu("the ferry leaves at noon today", "the ferry leaves at nine today") == pytest.approx(
        (1 / 12) ** 0.25, abs=1e-12
    )
    # All precisions 1, hypothesis 5 words against 6: BP = exp(1 - 6/5) = 0.818731.
    assert _papineni_bleu("the ferry leaves at noon", "the ferry leaves at noon today") == pytest.approx(
        math.exp(-0.2), abs=1e-12
    )


@pytest.mark.parametrize(
    "texts",
    [
        ["the ferry leaves at noon today", "the ferry leaves at nine today"],
        ["the ferry leaves at noon", "the ferry leaves at noon today"],
    ],
)
def test_self_bleu_against_papineni_formula(texts):
    # Self-BLEU (Zhu et al. 2018) of two texts is the mean of each one's BLEU against the other; no
    # n-gram count is zero here, so sacrebleu's smoothing does not apply and the plain formula of
    # Papineni et al. (2002) must give the same number.
    expected = (_papineni_bleu(texts[0], texts[1]) + _papineni_bleu(texts[1], texts[0])) / 2
    assert self_bleu(texts) == pytest.approx(expected, abs=1e-9)


def test_self_bleu_needs_two_samples():
    assert self_bleu(["only one"]) is None


def test_seq_rep_4_worked_example():
    # Welleck et al. 2020, "Neural Text Generation with Unlikelihood Training" (seq-rep-4):
    # six 4-grams, five distinct -> 1/6.
    assert seq_rep_n([[5, 6, 7, 8, 5, 6, 7, 8, 9]], 4) == pytest.approx(1 / 6)
    assert seq_rep_n([[1, 2, 3]], 4) is None
    # Sequences too short are skipped in the mean.
    assert seq_rep_n([[1, 2, 3], [1, 2, 3, 4, 5]], 4) == 0.0


def test_surprisal_worked_example():
    # Shannon 1948, "A Mathematical Theory of Communication":
    # p = 0.5, 0.25, 0.125, 0.125 -> mean 2.25 bits, perplexity 4.756828.
    mean = mean_surprisal_bits([0.5, 0.25, 0.125, 0.125])
    assert mean == pytest.approx(2.25)
    assert 2**mean == pytest.approx(4.756828, abs=1e-6)
    assert mean_surprisal_bits([]) is None


@pytest.mark.parametrize(
    "p, bits", [([0.5, 0.25, 0.125, 0.125], 1.75), ([2, 1, 0.5, 0.5], 1.75), ([0.5, 0.5, 0], 1.0), ([0, 1, 0], 0.0)]
)
def test_entropy_worked_examples(p, bits):
    # Shannon 1948, "A Mathematical Theory of Communication".
    assert entropy_bits(p) == pytest.approx(bits)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(0, 10, allow_nan=False), min_size=1, max_size=50).filter(lambda v: sum(v) > 1e-6))
def test_entropy_against_scipy(p):
    # Reference library: scipy.stats.entropy normalises its input first, as we do.
    assert entropy_bits(p) == pytest.approx(scipy_entropy(p, base=2), abs=1e-9)


def _sample(text, ids, raw_p, kept, reason="length"):
    tokens = [TokenStep(i, "x", r, r, k, 1.0, 1.0) for i, r, k in zip(ids, raw_p, kept, strict=False)]
    return Sample(0, 0, tokens, reason, text)


def test_preset_metrics_collects_every_key():
    samples = [
        _sample("the harbour bell rings at noon", [1, 2, 3, 4, 5], [0.5] * 5, [3] * 5),
        _sample("the harbour bell rings at dusk", [1, 2, 3, 4, 6], [0.25] * 5, [5] * 5, "eos"),
    ]
    m = preset_metrics(samples)
    assert isinstance(m, PresetMetrics)
    assert set(METRIC_KEYS) <= set(m.to_dict())
    # Worked by hand: surprisal is -log2 of the raw probability (Shannon 1948), averaged over all
    # ten tokens: five at -log2(0.5) = 1 bit and five at -log2(0.25) = 2 bits -> (5*1 + 5*2) / 10 = 1.5.
    assert m.mean_surprisal_bits == pytest.approx(1.5)
    # Worked by hand: kept counts 3 (five tokens) and 5 (five tokens) -> (5*3 + 5*5) / 10 = 4.0.
    assert m.mean_kept == pytest.approx(4.0)
    # Worked by hand: both samples hold 5 tokens -> (5 + 5) / 2 = 5.0.
    assert m.mean_length == pytest.approx(5.0)
    # Worked by hand (Welleck et al. 2020): ids 1,2,3,4,5 and 1,2,3,4,6 each hold two 4-grams, both
    # distinct within their sample -> 1 - 2/2 = 0 for each, mean 0.
    assert m.seq_rep_4 == 0.0
    assert m.stop_reasons == {"length": 1, "eos": 1}


def test_preset_metrics_single_short_sample_gives_nulls_not_errors():
    m = preset_metrics([_sample("hi", [7], [0.9], [1])])
    assert m.self_bleu is None and m.distinct_2 is None and m.seq_rep_4 is None
    assert m.distinct_1 == 1.0
    assert not math.isnan(m.mean_surprisal_bits)


def test_preset_metrics_of_empty_samples():
    m = preset_metrics([_sample("", [], [], [], "eos"), _sample("", [], [], [], "eos")])
    assert m.distinct_1 is None and m.mean_surprisal_bits is None and m.mean_length == 0.0


def test_coherence_is_mean_natural_log_probability():
    # Su & Collier (2023), coherence as mean log-probability (nats): ln 0.5, ln 0.25 -> mean -1.5 ln 2.
    assert coherence([0.5, 0.25]) == pytest.approx(-1.5 * math.log(2))
    assert coherence([]) is None


def test_rep_n_and_diversity_hand_counted():
    # Su et al. (2022), rep-n = 1 - unique n-grams / n-grams, counted by hand on
    # "the ferry the ferry the ferry": 6 words; bigrams 5, unique 2 ("the ferry", "ferry the")
    # -> rep-2 = 3/5; trigrams 4, unique 2 -> rep-3 = 1/2; 4-grams 3, unique 2 -> rep-4 = 1/3.
    words = "the ferry the ferry the ferry".split()
    assert rep_n(words, 2) == pytest.approx(3 / 5)
    assert rep_n(words, 3) == pytest.approx(1 / 2)
    assert rep_n(words, 4) == pytest.approx(1 / 3)
    # diversity = (1 - 3/5)(1 - 1/2)(1 - 1/3) = 2/5 * 1/2 * 2/3 = 2/15.
    assert diversity("The ferry the FERRY the ferry") == pytest.approx(2 / 15)
    # No repeated n-gram at all -> diversity 1; fewer than four words -> undefined.
    assert diversity("boats leave at seven sharp") == 1.0
    assert diversity("boats leave early") is None


def test_degenerate_rule():
    # The rule stated in docs/evaluation.md: a 4-gram three times, or EOS within the first 5 tokens.
    assert is_degenerate([1, 2, 3, 4] * 3, "length")
    assert not is_degenerate([1, 2, 3, 4] * 2 + [9], "length")
    assert is_degenerate([1, 2], "eos")
    assert not is_degenerate([1, 2], "length")
    assert not is_degenerate([1, 2, 3, 4, 5], "eos")
