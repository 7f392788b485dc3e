"""The batch's lean sampling path gives the chain's own results.

``compact.shape_group`` runs the chain on the live tokens only once
truncation leaves few; every check here recomputes the same thing on the
whole vocabulary with ``run_chain`` / ``samplewright.shape`` (the definition)
and compares to 1e-9 in float64. The truncation rules are the published
ones the stages cite: top-k (Fan, Lewis & Dauphin 2018), top-p (Holtzman et
al. 2020, eq. 2), min-p (Nguyen et al. 2024), typical (Meister et al. 2023),
repetition penalty (Keskar et al. 2019); the draw is Gumbel-max (Gumbel 1954;
Maddison, Tarlow & Minka 2014); entropies are checked against scipy.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special, stats

from samplewright import Preset, shape
from samplewright.core.engine import drawing
from samplewright.core.sampling import compact, registry, sampler, stages
from samplewright.core.sampling.chain import RowHistory, RowParams, run_chain

VOCAB = 400
HISTORY = [3, 7, 7, 19, 250, 3, 11]
GENERATED = [7, 250, 7]


def first(*names: str) -> list[str]:
    """A whole stage order starting with ``names`` (the rest in the default order)."""
    return [*names, *(n for n in registry.names() if n not in names)]


# Presets whose truncation leaves few tokens and stages that run after it (the compact part).
PRESETS = [
    Preset("nucleus then heat", top_p=0.6, temperature=1.7, order=first("top_p", "temperature")),
    Preset(
        "few then penalties", top_k=9, repetition_penalty=1.8, frequency_penalty=0.4, order=first("top_k", "penalties")
    ),
    Preset("k above the live count", min_p=0.3, top_k=150, order=first("min_p", "top_k")),
    Preset("greedy after a cut", top_k=30, temperature=0.0, order=first("top_k", "temperature")),
    Preset("typical after min-p", min_p=0.01, typical_p=0.7, order=first("min_p", "typical_p")),
    Preset("everything", temperature=0.8, top_k=60, top_p=0.9, min_p=0.02, typical_p=0.95, repetition_penalty=1.2),
    Preset("ban after a cut", top_p=0.8, no_repeat_ngram_size=1, order=first("top_p", "penalties")),
    Preset("plain heat", temperature=1.4),
]


def logits_of(seed: int, integer: bool = False) -> torch.Tensor:
    gen = torch.Generator().manual_seed(seed)
    if integer:  # many exact ties, also at every cut
        return torch.randint(-4, 4, (VOCAB,), generator=gen).to(torch.float64)
    return torch.randn(VOCAB, generator=gen, dtype=torch.float64) * 2.5


def batch_of(rows: list[torch.Tensor], preset: Preset):
    params = RowParams.from_presets([preset] * len(rows))
    history = RowHistory.build(
        [HISTORY] * len(rows), [GENERATED] * len(rows), [preset.no_repeat_ngram_size] * len(rows), VOCAB
    )
    return torch.stack(rows), params, history


def widened(shaped: compact.Shaped) -> torch.Tensor:
    """The compact table scattered back to the whole vocabulary (-inf elsewhere)."""
    if shaped.ids is None:
        return shaped.logits
    full = torch.full((shaped.logits.shape[0], VOCAB), stages.NEG_INF, dtype=torch.float64)
    live = shaped.logits > stages.NEG_INF
    rows = torch.arange(shaped.logits.shape[0]).unsqueeze(-1).expand_as(live)
    full[rows[live], shaped.ids[live]] = shaped.logits[live]
    return full


@pytest.mark.parametrize("preset", PRESETS, ids=lambda p: p.name)
@pytest.mark.parametrize("integer", [False, True])
def test_compact_chain_equals_shape_on_every_row(preset, integer):
    logits, params, history = batch_of([logits_of(s, integer) for s in range(6)], preset)
    out = compact.shape_group(logits, params, history, compact.active_stages(preset.order, params))
    if preset.name != "plain heat":
        assert out.ids is not None, "truncation left few tokens, so the table must be compact"
        live = out.logits > stages.NEG_INF
        assert out.logits.shape[-1] < VOCAB
        # Live ids ascend along the slots (ties to the lower id stay ties to the earlier slot).
        for r in range(len(live)):
            ids = out.ids[r][live[r]]
            assert torch.all(ids[1:] > ids[:-1])
    full = run_chain(logits, params, history).logits
    probs = torch.softmax(widened(out), -1)
    for r in range(len(logits)):
        expected = shape(logits[r], preset, HISTORY, GENERATED)
        np.testing.assert_allclose(probs[r].numpy(), expected, rtol=0, atol=1e-9)
        assert torch.equal(torch.isneginf(widened(out)[r]), torch.isneginf(full[r]))


def test_compact_limit_zero_keeps_the_whole_vocabulary():
    logits, params, history = batch_of([logits_of(1)], PRESETS[0])
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(compact, "COMPACT_LIMIT", 0)
        out = compact.shape_group(logits, params, history, compact.active_stages(PRESETS[0].order, params))
    assert out.ids is None
    torch.testing.assert_close(out.logits, run_chain(logits, params, history).logits, rtol=0, atol=0)


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    integer=st.booleans(),
    top_k=st.integers(0, VOCAB + 50),
    top_p=st.sampled_from([1.0, 0.95, 0.5, 0.1]),
    min_p=st.sampled_from([0.0, 0.05, 0.5]),
    temperature=st.sampled_from([0.0, 0.3, 1.0, 2.5]),
    penalty=st.sampled_from([1.0, 1.5]),
    order=st.permutations(registry.names()),
)
def test_any_preset_and_order_gives_the_chains_distribution(
    seed, integer, top_k, top_p, min_p, temperature, penalty, order
):
    # Property: for any order of the stages (penalties after truncation included), the compact
    # path's distribution is shape()'s to 1e-9 and removes exactly the same tokens.
    preset = Preset(
        "any",
        temperature=temperature,
        top_k=top_k,
        top_p=top_p,
        min_p=min_p,
        repetition_penalty=penalty,
        order=list(order),
    )
    logits, params, history = batch_of([logits_of(seed, integer), logits_of(seed + 1, integer)], preset)
    out = widened(compact.shape_group(logits, params, history, compact.active_stages(preset.order, params)))
    for r in range(2):
        expected = shape(logits[r], preset, HISTORY, GENERATED)
        np.testing.assert_allclose(torch.softmax(out[r], -1).numpy(), expected, rtol=0, atol=1e-9)
        assert np.array_equal(np.isneginf(out[r].numpy()), expected == 0) or np.all(
            expected[np.isneginf(out[r].numpy())] == 0
        )


def test_removed_tokens_stay_removed_under_every_stage():
    # The compact path drops removed tokens for good: no stage may bring a -inf back.
    logits = logits_of(4).unsqueeze(0).repeat(3, 1)
    logits[:, ::3] = stages.NEG_INF
    preset = Preset(
        "all",
        temperature=0.5,
        top_k=100,
        top_p=0.9,
        min_p=0.01,
        typical_p=0.9,
        repetition_penalty=1.5,
        frequency_penalty=0.5,
        presence_penalty=-0.5,
    )
    params = RowParams.from_presets([preset] * 3)
    history = RowHistory.build([list(range(0, VOCAB, 2))] * 3, [list(range(0, VOCAB, 5))] * 3, [0] * 3, VOCAB)
    for name in registry.names():
        out = registry.stage(name).apply(logits, params, history)
        assert bool(torch.isneginf(out[:, ::3]).all()), name


def test_guarded_equals_the_chains_two_guards():
    # +inf (a temperature near 0 overflowing) and an emptied row both go through the guards.
    before = torch.tensor([[1.0, 3.0, 3.0, 0.0], [1.0, 2.0, 0.5, 0.0], [0.0, 1.0, 2.0, 3.0]], dtype=torch.float64)
    after = torch.tensor(
        [[1.0, float("inf"), float("inf"), 0.0], [stages.NEG_INF] * 4, [0.0, 1.0, 2.0, 3.0]], dtype=torch.float64
    )
    got = compact.guarded(before, after)
    # Row 0: greedy over the +inf ids, the first keeps logit 0 (ties to the lower id, as temperature 0);
    # row 1: emptied, keeps the most probable token of the stage's input; row 2: untouched.
    assert got[0].tolist() == [stages.NEG_INF, 0.0, stages.NEG_INF, stages.NEG_INF]
    assert got[1].tolist() == [stages.NEG_INF, 2.0, stages.NEG_INF, stages.NEG_INF]
    assert got[2].tolist() == after[2].tolist()


def test_step_noise_at_ids_is_the_whole_vocabulary_noise_read_there():
    # Coupling: the noise a compact row reads is exactly the noise of its ids in the full vector.
    indices = [1, 0, 1, 3]
    noise = sampler.StepNoise(9, indices, 4, VOCAB)
    ids = torch.tensor([[2, 5, 399, 0], [0, 1, 2, 3], [7, 7, 8, 100], [399, 398, 0, 1]])
    got = noise.at(slice(None), ids)
    for r, index in enumerate(indices):
        full = sampler.noise(9, index, 4, VOCAB)
        assert torch.equal(got[r], full[ids[r]])
    assert torch.equal(noise.at(slice(1, 3)), torch.stack([sampler.noise(9, i, 4, VOCAB) for i in indices[1:3]]))


@pytest.mark.parametrize("with_removed", [False, True])
def test_raw_statistics_match_scipy(with_removed):
    raw = torch.stack([logits_of(s) * 4 for s in range(3)])
    if with_removed:
        raw[1, :50] = stages.NEG_INF  # a model that masks part of its vocabulary
    ids = torch.tensor([5, 60, 399])
    p, bits = drawing.raw_statistics(raw, ids)
    for r in range(3):
        probs = special.softmax(raw[r].numpy())
        assert float(p[r]) == pytest.approx(probs[ids[r]], rel=1e-9, abs=1e-15)
        assert float(bits[r]) == pytest.approx(stats.entropy(probs, base=2), abs=1e-9)
    shared_p, shared_bits = drawing.raw_statistics(raw[:1].expand(3, -1), ids, shared=True)
    alone_p, alone_bits = drawing.raw_statistics(raw[:1].repeat(3, 1), ids)
    torch.testing.assert_close(shared_p, alone_p, rtol=1e-12, atol=0)
    torch.testing.assert_close(shared_bits, alone_bits, rtol=1e-12, atol=0)


def test_draw_on_the_compact_table_is_the_gumbel_max_of_the_full_distribution():
    preset = PRESETS[5]
    rows = [logits_of(s) for s in range(4)]
    logits, params, history = batch_of(rows, preset)
    shaped = compact.shape_group(logits, params, history, compact.active_stages(preset.order, params))
    for step in range(25):
        noise = sampler.StepNoise(3, [0, 1, 2, 3], step, VOCAB)
        drawn = drawing.draw_step(logits, [(slice(0, 4), shaped)], noise, shared=False)
        for r in range(4):
            expected = shape(rows[r], preset, HISTORY, GENERATED)
            with np.errstate(divide="ignore"):
                token = int(np.argmax(np.log(expected) + sampler.noise(3, r, step, VOCAB).numpy()))
            assert drawn.token_ids[r] == token
            assert drawn.p[r] == pytest.approx(expected[token], rel=1e-9)
            assert drawn.kept[r] == np.count_nonzero(expected)
            assert drawn.entropy[r] == pytest.approx(stats.entropy(expected, base=2), abs=1e-9)


def test_penalties_skip_only_parts_that_would_change_nothing():
    # Keskar et al. (2019) repetition, then frequency/presence, then the n-gram ban, each on its own.
    logits = logits_of(8).unsqueeze(0).repeat(2, 1)
    history = RowHistory.build([HISTORY] * 2, [GENERATED] * 2, [1, 1], VOCAB)
    for preset in (
        Preset("rep", repetition_penalty=1.3),
        Preset("freq", frequency_penalty=0.2),
        Preset("ban", no_repeat_ngram_size=1),
    ):
        params = RowParams.from_presets([preset] * 2)
        out = registry.stage("penalties").apply(logits, params, history)
        full = stages.repetition_penalty(logits, params.repetition_penalty, history.seen)
        full = stages.frequency_presence(full, params.frequency_penalty, params.presence_penalty, history.counts)
        if preset.no_repeat_ngram_size:
            full = stages.no_repeat_ngram(full, history.banned)
        assert torch.equal(out, full), preset.name


def _dead_tail(logits: torch.Tensor) -> torch.Tensor:
    out = logits.clone()
    out[0, 30:] = stages.NEG_INF  # a row with fewer live tokens than k
    return out


@pytest.mark.parametrize("name", ["top_k", "top_p", "min_p", "typical_p"])
@pytest.mark.parametrize("case", ["ties", "quarters", "dead tail", "mixed k"])
def test_truncation_gathered_directly_equals_the_stage_then_compacted(name, case):
    # The truncation stages' direct compact forms against the plain stage (Fan et al. 2018; Holtzman
    # et al. 2020; Nguyen et al. 2024; Meister et al. 2023) on tie-heavy logits: integers, and logits
    # on a grid of quarters (a quantised model's logits often tie at the cut).
    rows = [logits_of(s, integer=True) for s in range(4)] if case == "ties" else [logits_of(s) for s in range(4)]
    logits = torch.stack(rows)
    if case == "quarters":
        logits = torch.round(logits * 4) / 4
    if case == "dead tail":
        logits = _dead_tail(logits)
    presets = [Preset("cut", top_k=50, top_p=0.7, min_p=0.1, typical_p=0.6)] * 4
    if case == "mixed k":
        wider = Preset("wider", top_k=120, top_p=0.9, min_p=0.02, typical_p=0.9)
        presets = [presets[0], wider, presets[0], wider]
    params = RowParams.from_presets(presets)
    history = RowHistory.build([HISTORY] * 4, [GENERATED] * 4, [0] * 4, VOCAB)
    out = compact.shape_group(logits, params, history, (name,))
    plain = compact.guarded(logits, registry.stage(name).apply(logits, params, history))
    assert torch.equal(widened(out), plain)
