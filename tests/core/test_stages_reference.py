"""Each stage, and the default chain, against transformers' logits processors.

Reference library: transformers ``generation/logits_process.py`` (installed
version). Deliberate differences, documented in
src/samplewright/core/sampling/stages.py and docs/sampling-chain.md
("Decisions where the papers are silent"):
- ties at a cut: we keep lower ids first (exactly k for top-k); transformers
  keeps every token tied with the k-th and follows torch.sort elsewhere;
- top-p and typical sampling reach their mass within 1e-6; transformers has
  no tolerance.
Random float64 logits make both differences practically unreachable, so the
kept sets and the logits must agree exactly.
"""

import numpy as np
import pytest
import torch
from transformers.generation import logits_process as tlp

import samplewright
from samplewright import Preset
from samplewright.core.sampling import stages

VOCAB = 64
TRIALS = 25


def random_logits(seed, scale=3.0, rows=1):
    gen = torch.Generator().manual_seed(seed)
    return torch.randn(rows, VOCAB, generator=gen, dtype=torch.float64) * scale


def same_logits(ours, theirs):
    assert torch.equal(torch.isneginf(ours), torch.isneginf(theirs))
    live = ~torch.isneginf(ours)
    torch.testing.assert_close(ours[live], theirs[live], rtol=1e-12, atol=1e-12)


def row(value, dtype=torch.float64):
    return torch.tensor([value], dtype=dtype)


@pytest.mark.parametrize("t", [0.3, 0.7, 1.0, 1.5, 4.0])
def test_temperature_matches_transformers(t):
    for seed in range(TRIALS):
        z = random_logits(seed)
        same_logits(stages.temperature(z, row(t)), tlp.TemperatureLogitsWarper(t)(None, z.clone()))


@pytest.mark.parametrize("k", [1, 2, 5, 40, VOCAB, VOCAB + 10])
def test_top_k_matches_transformers(k):
    for seed in range(TRIALS):
        z = random_logits(seed)
        same_logits(stages.top_k(z, row(k, torch.long)), tlp.TopKLogitsWarper(k)(None, z.clone()))


@pytest.mark.parametrize("p", [0.05, 0.3, 0.5, 0.9, 0.99])
def test_top_p_matches_transformers(p):
    for seed in range(TRIALS):
        z = random_logits(seed)
        same_logits(stages.top_p(z, row(p)), tlp.TopPLogitsWarper(p)(None, z.clone()))


@pytest.mark.parametrize("m", [0.01, 0.1, 0.5, 0.9])
def test_min_p_matches_transformers(m):
    for seed in range(TRIALS):
        z = random_logits(seed)
        same_logits(stages.min_p(z, row(m)), tlp.MinPLogitsWarper(m)(None, z.clone()))


@pytest.mark.parametrize("mass", [0.2, 0.5, 0.8, 0.95])
def test_typical_matches_transformers(mass):
    for seed in range(TRIALS):
        z = random_logits(seed)
        same_logits(stages.typical_p(z, row(mass)), tlp.TypicalLogitsWarper(mass)(None, z.clone()))


@pytest.mark.parametrize("penalty", [0.5, 1.3, 2.0])
def test_repetition_penalty_matches_transformers(penalty):
    for seed in range(TRIALS):
        z = random_logits(seed)
        history = torch.randint(0, VOCAB, (1, 12), generator=torch.Generator().manual_seed(seed))
        seen = torch.zeros(1, VOCAB, dtype=torch.bool)
        seen[0, history[0]] = True
        theirs = tlp.RepetitionPenaltyLogitsProcessor(penalty)(history, z.clone())
        same_logits(stages.repetition_penalty(z, row(penalty), seen), theirs)


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_no_repeat_ngram_matches_transformers(n):
    for seed in range(TRIALS):
        z = random_logits(seed)
        # A small id range makes repeated n-grams common.
        history = torch.randint(0, 6, (1, 20), generator=torch.Generator().manual_seed(seed))
        banned = torch.zeros(1, VOCAB, dtype=torch.bool)
        ids = sorted(stages.banned_ngram_tokens(history[0].tolist(), n))
        banned[0, ids] = True
        theirs = tlp.NoRepeatNGramLogitsProcessor(n)(history, z.clone())
        same_logits(stages.no_repeat_ngram(z, banned), theirs)


def transformers_chain(preset):
    """transformers' generate() order: repetition, no-repeat n-gram, then the warpers."""
    procs = []
    if preset.repetition_penalty != 1:
        procs.append(tlp.RepetitionPenaltyLogitsProcessor(preset.repetition_penalty))
    if preset.no_repeat_ngram_size:
        procs.append(tlp.NoRepeatNGramLogitsProcessor(preset.no_repeat_ngram_size))
    if preset.temperature != 1:
        procs.append(tlp.TemperatureLogitsWarper(preset.temperature))
    if preset.top_k:
        procs.append(tlp.TopKLogitsWarper(preset.top_k))
    if preset.top_p < 1:
        procs.append(tlp.TopPLogitsWarper(preset.top_p))
    if preset.min_p:
        procs.append(tlp.MinPLogitsWarper(preset.min_p))
    if preset.typical_p < 1:
        procs.append(tlp.TypicalLogitsWarper(preset.typical_p))
    return tlp.LogitsProcessorList(procs)


CHAIN_PRESETS = [
    Preset("a", temperature=0.8, top_k=20, top_p=0.9),
    Preset("b", temperature=1.3, min_p=0.05, repetition_penalty=1.2),
    Preset("c", temperature=0.6, typical_p=0.7, no_repeat_ngram_size=2),
    Preset(
        "d",
        temperature=1.1,
        top_k=30,
        top_p=0.95,
        min_p=0.02,
        typical_p=0.9,
        repetition_penalty=1.15,
        no_repeat_ngram_size=3,
    ),
]


@pytest.mark.parametrize("preset", CHAIN_PRESETS, ids=lambda p: p.name)
def test_shape_default_order_matches_transformers_chain(preset):
    for seed in range(TRIALS):
        z = random_logits(seed)
        history = torch.randint(0, 8, (1, 16), generator=torch.Generator().manual_seed(seed + 1000))
        theirs = torch.softmax(transformers_chain(preset)(history, z.clone()), dim=-1)[0].numpy()
        ours = samplewright.shape(z[0].numpy(), preset, history=history[0].tolist())
        np.testing.assert_allclose(ours, theirs, rtol=1e-10, atol=1e-12)


def test_documented_tie_difference_top_k():
    # Top-k as Fan, Lewis & Dauphin (2018), "Hierarchical Neural Story Generation", define it keeps k
    # tokens: logits [2, 1, 2, 2], k = 2: we keep exactly two (ids 0, 2); transformers'
    # TopKLogitsWarper keeps every token tied with the k-th (three tokens). docs/sampling-chain.md, top-k.
    z = torch.tensor([[2.0, 1.0, 2.0, 2.0]], dtype=torch.float64)
    ours = torch.softmax(stages.top_k(z, row(2, torch.long)), -1)[0]
    theirs = torch.softmax(tlp.TopKLogitsWarper(2)(None, z.clone()), -1)[0]
    torch.testing.assert_close(ours, torch.tensor([0.5, 0, 0.5, 0], dtype=torch.float64))
    torch.testing.assert_close(theirs, torch.tensor([1 / 3, 0, 1 / 3, 1 / 3], dtype=torch.float64))


@pytest.mark.parametrize("scale", [0.05, 1.0, 6.0])
def test_large_vocabulary_matches_transformers(scale):
    # A vocabulary larger than the first of stages.RANKING_WIDTHS: flat rows (small scale) need more
    # tokens than the candidates hold and take the full-sort path.
    z = torch.randn(4, 3000, generator=torch.Generator().manual_seed(7), dtype=torch.float64) * scale

    def four(v):
        return torch.full((4,), v, dtype=torch.float64)

    same_logits(stages.top_p(z, four(0.9)), tlp.TopPLogitsWarper(0.9)(None, z.clone()))
    same_logits(stages.typical_p(z, four(0.9)), tlp.TypicalLogitsWarper(0.9)(None, z.clone()))
    same_logits(stages.top_k(z, torch.full((4,), 1500)), tlp.TopKLogitsWarper(1500)(None, z.clone()))


def _reference_prefix(key, probs, mass):
    """Independent definition: numpy lexsort by (key descending, id ascending)."""
    order = np.lexsort((np.arange(len(key)), -key))
    kept, total = [], 0.0
    for i in order:
        if kept and total >= mass - stages.MASS_TOLERANCE:
            break
        kept.append(i)
        total += probs[i]
    return set(kept)


@pytest.mark.parametrize("widths", [(3,), (3, 8), (8, 24), (1024,)])
def test_candidate_ranking_equals_full_stable_sort_with_ties(monkeypatch, widths):
    # Integer logits give many exact ties, the case the candidate shortcut must get right.
    monkeypatch.setattr(stages, "RANKING_WIDTHS", widths)
    gen = torch.Generator().manual_seed(3)
    for trial in range(30):
        z = torch.randint(-3, 3, (1, 40), generator=gen).to(torch.float64)
        for p in (0.1, 0.5, 0.9):
            probs = torch.softmax(z, -1)[0].numpy()
            ours = set(torch.nonzero(~torch.isneginf(stages.top_p(z, row(p)))[0]).flatten().tolist())
            assert ours == _reference_prefix(probs, probs, p), (trial, p)
            k = int(trial % 7)
            kept_k = set(torch.nonzero(~torch.isneginf(stages.top_k(z, row(k, torch.long)))[0]).flatten().tolist())
            assert kept_k == (set(np.lexsort((np.arange(40), -z[0].numpy()))[:k].tolist()) if k else set(range(40)))
