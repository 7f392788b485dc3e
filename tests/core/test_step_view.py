"""The step view: shaped distributions, kept sets, entropies and which stage cut a token."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy import stats

from samplewright import Preset, shape
from samplewright.core.engine.engine import Engine
from samplewright.core.presets import DEFAULT_ORDER
from samplewright.core.results import AuditionRequest
from samplewright.core.sampling import inspection

PASSAGE = "Season tickets remain valid during the winter timetable. The last sailing"


@pytest.fixture(scope="module")
def engine(tiny_model):
    return Engine(tiny_model)


# -- the pure helpers -----------------------------------------------------------


def test_entropy_bits_matches_scipy():
    # Reference library: scipy.stats.entropy with base 2, zeros included.
    rng = np.random.default_rng(0)
    probs = rng.dirichlet(np.ones(50), size=4)
    probs[:, :10] = 0
    probs /= probs.sum(axis=1, keepdims=True)
    assert inspection.entropy_bits(probs) == pytest.approx(stats.entropy(probs, base=2, axis=1), abs=1e-12)
    assert inspection.entropy_bits([0.5, 0.5, 0.0]) == pytest.approx(1.0)  # a fair coin: 1 bit
    certain = inspection.entropy_bits([1.0, 0.0])
    assert certain == 0.0 and np.copysign(1.0, certain) == 1.0  # printed as 0.00, not -0.00


def test_top_ids_rank_ties_to_the_lower_id():
    assert inspection.top_ids([0.1, 0.3, 0.3, 0.2, 0.1], 4) == [1, 2, 3, 0]


def test_cut_by_names_the_first_stage_that_removed_a_token():
    inf = -np.inf
    after = {
        "penalties": np.array([2.0, 1.0, 0.5, 0.0]),
        "temperature": np.array([4.0, 2.0, 1.0, 0.0]),
        "top_k": np.array([4.0, 2.0, 1.0, inf]),
        "top_p": np.array([4.0, 2.0, inf, inf]),
        "min_p": np.array([4.0, 2.0, inf, inf]),
        "typical_p": np.array([4.0, inf, inf, inf]),
    }
    assert inspection.cut_by(after, DEFAULT_ORDER, [0, 1, 2, 3]) == [None, "typical_p", "top_p", "top_k"]


# -- the engine's step view -------------------------------------------------------


def raw_logits(loaded, ids):
    with torch.inference_mode():
        return loaded.model(torch.tensor([ids])).logits[0, -1].double()


def test_step_view_agrees_with_shape_and_scipy(engine, tiny_model):
    presets = [
        Preset("plain"),
        Preset("nucleus", temperature=0.8, top_p=0.7),
        Preset("penalised", repetition_penalty=1.5, presence_penalty=0.5, no_repeat_ngram_size=2),
    ]
    sample = [40, 41, 42]
    view = engine.step(PASSAGE, presets, sample_ids=sample, top=10)
    history = engine.encode_passage(PASSAGE).ids + sample
    logits = raw_logits(tiny_model, history)
    raw = torch.softmax(logits, -1).numpy()
    assert view.context_tokens == len(history)
    assert view.raw_probs == pytest.approx(raw, abs=1e-6)
    assert view.raw_entropy_bits == pytest.approx(stats.entropy(raw, base=2), abs=1e-5)
    assert view.top_ids == list(np.argsort(-raw, kind="stable")[:10])
    for preset, step in zip(presets, view.presets, strict=False):
        expected = shape(logits, preset, history, sample)
        assert step.name == preset.name
        assert step.probs == pytest.approx(expected, abs=1e-6)
        assert step.kept == np.count_nonzero(expected)
        assert step.kept_raw_mass == pytest.approx(raw[expected > 0].sum(), abs=1e-6)
        assert step.entropy_bits == pytest.approx(stats.entropy(expected, base=2), abs=1e-5)
        assert [row.id for row in step.top] == view.top_ids
        assert all(row.p == pytest.approx(expected[row.id], abs=1e-6) for row in step.top)
    assert view.presets[0].kept == tiny_model.vocab_size  # temperature 1 alone removes nothing


@pytest.mark.parametrize(
    "preset, stage", [(Preset("one", top_k=1), "top_k"), (Preset("greedy", temperature=0), "temperature")]
)
def test_single_survivor_cuts_everything_else(engine, preset, stage):
    # By hand from the definitions: top_k = 1 keeps the k = 1 most probable tokens (Fan, Lewis &
    # Dauphin 2018) and temperature 0 is the one-hot on the arg-max (limit of softmax(z / T)).
    step = engine.step(PASSAGE, [preset], top=8).presets[0]
    assert step.kept == 1 and step.entropy_bits == 0.0
    assert step.top[0].cut_by is None and step.top[0].p == 1.0
    assert step.kept_raw_mass == pytest.approx(step.top[0].raw_p)
    assert [row.cut_by for row in step.top[1:]] == [stage] * 7


def test_cut_by_follows_the_preset_order(engine):
    # By hand from the definitions (min-p: Nguyen et al. 2024, "Turning Up the Heat: Min-p Sampling
    # for Creative and Coherent LLM Outputs"; top-k: Fan, Lewis & Dauphin 2018): with min_p between
    # the 2nd and 3rd token's share of the top probability, min_p (run first) cuts the 3rd token
    # onwards and top_k = 1 then cuts the 2nd; in the default order top_k cuts them all first.
    raw = engine.step(PASSAGE, [], top=3)
    r0, r1, r2 = (raw.raw_probs[i] for i in raw.top_ids)
    assert r1 > r2
    min_p = float((r1 + r2) / 2 / r0)
    late_k = Preset(
        "min-p first", top_k=1, min_p=min_p, order=["penalties", "temperature", "min_p", "top_p", "typical_p", "top_k"]
    )
    early_k = late_k.replace(name="top-k first", order=list(DEFAULT_ORDER))
    view = engine.step(PASSAGE, [late_k, early_k], top=5)
    assert [row.cut_by for row in view.presets[0].top] == [None, "top_k", "min_p", "min_p", "min_p"]
    assert [row.cut_by for row in view.presets[1].top] == [None] + ["top_k"] * 4


def test_step_along_a_sample_reproduces_its_records(engine):
    preset = Preset("nucleus", temperature=0.9, top_p=0.8, frequency_penalty=0.3)
    result = engine.audition(AuditionRequest(PASSAGE, [preset], samples=1, max_new_tokens=5, seed=6))
    sample = result.samples[0][0]
    for t, token in enumerate(sample.tokens):
        view = engine.step(PASSAGE, [preset], sample_ids=sample.token_ids[:t], drawn_id=token.token_id)
        step = view.presets[0]
        assert view.drawn_id == token.token_id
        assert step.probs[token.token_id] == pytest.approx(token.p, rel=1e-4)
        assert view.raw_probs[token.token_id] == pytest.approx(token.raw_p, rel=1e-4)
        assert step.kept == token.kept


def test_step_refuses_ids_outside_the_vocabulary(engine, tiny_model):
    with pytest.raises(ValueError):
        engine.step(PASSAGE, [Preset("plain")], sample_ids=[tiny_model.vocab_size])


def test_step_view_of_plain_logits_shapes_like_shape_and_names_the_cutting_stage():
    # No model: the core function the engine, the CLI and the plot demo all use.
    logits = np.log([0.4, 0.3, 0.2, 0.1])
    presets = [Preset("one", top_k=1), Preset("greedy", temperature=0), Preset("rep", repetition_penalty=2.0)]
    view = inspection.step_view(
        logits, presets, ["a", "b", "c", "d"], history=[0], generated=[0], top=3, drawn_id=2, context_tokens=7
    )
    assert view.top_ids == [0, 1, 2] and view.top_texts == ["a", "b", "c"]
    assert view.drawn_id == 2 and view.context_tokens == 7
    np.testing.assert_allclose(view.raw_probs, [0.4, 0.3, 0.2, 0.1])
    # top_k=1 keeps the single most probable token (Fan, Lewis & Dauphin 2018, "Hierarchical Neural
    # Story Generation"), so top_k cuts the rest; temperature 0 is greedy (the T -> 0 limit of the
    # softmax with temperature, Ackley, Hinton & Sejnowski 1985), so temperature cuts them.
    assert [row.cut_by for row in view.presets[0].top] == [None, "top_k", "top_k"]
    assert [row.cut_by for row in view.presets[1].top] == [None, "temperature", "temperature"]
    for step, preset in zip(view.presets, presets, strict=False):
        np.testing.assert_array_equal(step.probs, shape(logits, preset, history=[0], generated=[0]))
    # The repetition penalty of Keskar et al. (2019), "CTRL: A Conditional Transformer Language Model
    # for Controllable Generation", sign-aware form, multiplies a seen token's negative logit by it:
    # log(0.4) * 2 = log(0.16), below id 1's log(0.3), so id 0 falls behind id 1.
    rep = view.presets[2]
    assert rep.probs[0] < rep.probs[1] and rep.kept == 4
    texts_by_call = inspection.step_view(logits, presets[:1], lambda i: f"<{i}>", top=2)
    assert texts_by_call.top_texts == ["<0>", "<1>"]
