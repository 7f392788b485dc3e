"""The engine's audition: agreement with transformers and with ``shape``,
coupled randomness, endings, cancellation and passages."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import torch
from scipy import stats

from samplewright import Preset, shape
from samplewright.core.engine.engine import Engine
from samplewright.core.engine.passages import demo_passages
from samplewright.core.errors import PassageError
from samplewright.core.results import AuditionRequest

PASSAGE = "The morning ferry to Skerry Point leaves the harbour at seven. Please arrive at the quay"
GREEDY = Preset("greedy", temperature=0)
WARM = Preset("warm", temperature=1.2)
MIXED = Preset(
    "mixed",
    temperature=0.9,
    top_k=40,
    top_p=0.9,
    min_p=0.01,
    repetition_penalty=1.3,
    frequency_penalty=0.4,
    presence_penalty=0.2,
    no_repeat_ngram_size=2,
)


@pytest.fixture(scope="module")
def engine(tiny_model):
    return Engine(tiny_model)


def audition(engine, presets, samples=2, tokens=8, seed=0, passage=PASSAGE, **kwargs):
    return engine.audition(AuditionRequest(passage, list(presets), samples, tokens, seed), **kwargs)


def ids_of(result, preset_index):
    return [s.token_ids for s in result.samples[preset_index]]


def reference_greedy(loaded, passage_ids, tokens):
    """transformers' greedy generate(), cut at EOS, and the top-2 logit gap at each step."""
    input_ids = torch.tensor([passage_ids])
    out = loaded.model.generate(
        input_ids,
        attention_mask=torch.ones_like(input_ids),
        do_sample=False,
        max_new_tokens=tokens,
        output_scores=True,
        return_dict_in_generate=True,
        pad_token_id=min(loaded.eos_ids),
    )
    generated = out.sequences[0, len(passage_ids) :].tolist()
    end = next((i for i, t in enumerate(generated) if t in loaded.eos_ids), len(generated))
    gaps = [float(s[0].topk(2).values[0] - s[0].topk(2).values[1]) for s in out.scores[: end + 1]]
    return generated[:end], min(gaps)


def forward_logits(loaded, ids):
    """Next-token logits after ``ids`` from one plain, unbatched, uncached forward pass."""
    with torch.inference_mode():
        return loaded.model(torch.tensor([ids])).logits[0, -1].double()


# -- agreement with transformers and with shape() ---------------------------


def test_greedy_audition_equals_transformers_generate(engine, tiny_model):
    # Reference library: transformers generate(do_sample=False); the top-2 gap
    # guards against near-ties that batching noise could flip.
    result = audition(engine, [GREEDY, WARM], samples=2, tokens=20)
    expected, gap = reference_greedy(tiny_model, result.passage_ids, 20)
    assert gap > 1e-3
    assert ids_of(result, 0) == [expected, expected]


@pytest.mark.model
def test_greedy_audition_equals_generate_on_the_default_model(default_model):
    # Reference library: transformers generate(do_sample=False) on the real model and a demo passage.
    engine = Engine(default_model)
    result = audition(engine, [GREEDY, WARM], samples=1, tokens=16, passage=demo_passages()["timetable-change"])
    expected, gap = reference_greedy(default_model, result.passage_ids, 16)
    assert gap > 1e-3
    assert len(expected) > 0 and ids_of(result, 0) == [expected]
    assert result.samples[0][0].text == default_model.tokenizer.decode(expected)


def test_recorded_probabilities_match_shape(engine, tiny_model):
    # Each recorded p must be what samplewright.shape (the single definition)
    # gives for that step, recomputed here with an unbatched forward pass;
    # entropies checked against scipy.stats.entropy(base=2).
    result = audition(engine, [MIXED, WARM], samples=3, tokens=6, seed=4)
    passage = result.passage_ids
    for sample in result.samples[0]:
        for t, token in enumerate(sample.tokens):
            before = sample.token_ids[:t]
            logits = forward_logits(tiny_model, passage + before)
            expected = shape(logits, MIXED, passage + before, before)
            raw = torch.softmax(logits, -1).numpy()
            assert token.p == pytest.approx(expected[token.token_id], rel=1e-4)
            assert token.raw_p == pytest.approx(raw[token.token_id], rel=1e-4)
            assert token.kept == np.count_nonzero(expected)
            assert token.entropy_bits == pytest.approx(stats.entropy(expected, base=2), abs=1e-5)
            assert token.raw_entropy_bits == pytest.approx(stats.entropy(raw, base=2), abs=1e-5)


# -- batching: one prefill, all rows together, finished rows dropped ---------


class ForwardLog:
    """Records the input shape of every model call the batch makes through the engine's
    backend: the passage pass (1 × passage) and each decoding step (rows × 1), whichever
    way the backend runs the model (transformers' modules or the lean step)."""

    def __init__(self, engine):
        self.shapes = []
        self._backend = engine.backend
        encode, step = self._backend.encode, self._backend.step

        def logged_encode(ids):
            self.shapes.append((1, len(ids)))
            return encode(ids)

        def logged_step(ids, cache):
            self.shapes.append((ids.shape[0], 1))
            return step(ids, cache)

        self._backend.encode, self._backend.step = logged_encode, logged_step

    def close(self):
        del self._backend.encode, self._backend.step


def test_passage_runs_once_and_rows_share_each_step(tiny_model):
    engine = Engine(tiny_model)
    log = ForwardLog(engine)
    try:
        first = audition(engine, [WARM, MIXED], samples=2, tokens=4, seed=9)
        again = audition(engine, [WARM, MIXED], samples=2, tokens=4, seed=9)
    finally:
        log.close()
    n = len(first.passage_ids)
    assert first.tokens_generated() == 16, "an EOS here would change the expected calls; pick another seed"
    # One passage pass, then one call per further step with all four rows;
    # the second audition reuses the passage's cache.
    assert log.shapes == [(1, n)] + [(4, 1)] * 3 + [(4, 1)] * 3
    assert ids_of(first, 0) == ids_of(again, 0) and ids_of(first, 1) == ids_of(again, 1)


def test_finished_rows_leave_the_batch_without_changing_results(tiny_model):
    engine = Engine(tiny_model)
    short, long = WARM.replace(name="short", max_new_tokens=2), WARM.replace(name="long", max_new_tokens=6)
    log = ForwardLog(engine)
    try:
        both = audition(engine, [short, long], samples=1, tokens=10, seed=2)
    finally:
        log.close()
    alone = audition(engine, [long], samples=1, tokens=10, seed=2)
    n = len(both.passage_ids)
    assert [len(s.tokens) for s in (both.samples[0][0], both.samples[1][0])] == [2, 6]
    assert log.shapes == [(1, n), (2, 1)] + [(1, 1)] * 4
    assert ids_of(both, 1) == ids_of(alone, 0)
    assert both.samples[0][0].token_ids == both.samples[1][0].token_ids[:2]
    assert both.samples[0][0].stop_reason == "length"


# -- coupled randomness ------------------------------------------------------


def test_same_seed_same_samples_other_seed_other_samples(engine):
    a = audition(engine, [WARM, MIXED], samples=3, tokens=8, seed=21)
    b = audition(engine, [WARM, MIXED], samples=3, tokens=8, seed=21)
    c = audition(engine, [WARM, MIXED], samples=3, tokens=8, seed=22)
    assert ids_of(a, 0) == ids_of(b, 0) and ids_of(a, 1) == ids_of(b, 1)
    assert [s.text for s in a.samples[0]] == [s.text for s in b.samples[0]]
    assert ids_of(a, 0) != ids_of(c, 0)


def test_samples_of_one_preset_differ(engine):
    result = audition(engine, [WARM], samples=3, tokens=8, seed=5)
    assert len({tuple(ids) for ids in ids_of(result, 0)}) == 3


def test_identical_presets_give_identical_samples(engine):
    twin = MIXED.replace(name="twin of mixed")
    result = audition(engine, [MIXED, WARM, twin], samples=3, tokens=8, seed=3)
    assert ids_of(result, 0) == ids_of(result, 2)


def test_sample_stream_does_not_depend_on_the_batch(engine):
    alone = audition(engine, [MIXED], samples=1, tokens=8, seed=8)
    crowded = audition(engine, [WARM, GREEDY, MIXED], samples=3, tokens=8, seed=8)
    assert ids_of(crowded, 2)[0] == ids_of(alone, 0)[0]


# -- endings ------------------------------------------------------------------


def greedy_ids(engine, tokens=20):
    return audition(engine, [GREEDY], samples=1, tokens=tokens).samples[0][0].token_ids


def test_eos_ends_a_sample_without_recording_it(tiny_model):
    ids = greedy_ids(Engine(tiny_model))
    j = next(j for j in range(2, len(ids)) if ids[j] not in ids[:j])
    # Make the greedy path's j-th token the end-of-sequence token.
    engine = Engine(dataclasses.replace(tiny_model, eos_ids=frozenset({ids[j]})))
    events = []
    result = audition(engine, [GREEDY], samples=1, tokens=20, on_token=events.append)
    sample = result.samples[0][0]
    assert sample.stop_reason == "eos"
    assert sample.token_ids == ids[:j]
    assert sample.text == tiny_model.tokenizer.decode(ids[:j])
    assert events[-1].token is None and events[-1].stop_reason == "eos"


def test_stop_string_cuts_the_text(engine, tiny_model):
    ids = greedy_ids(engine)
    decode = tiny_model.tokenizer.decode
    full = decode(ids)
    stop = next(
        full[a : a + 3]
        for a in range(len(full) // 2, len(full) - 3)
        if full[a : a + 3].isascii() and full[a : a + 3].strip()
    )
    k = next(k for k in range(1, len(ids) + 1) if stop in decode(ids[:k]))
    result = audition(engine, [GREEDY.replace(stop=("never here", stop))], samples=1, tokens=20)
    sample = result.samples[0][0]
    assert sample.stop_reason == "stop"
    assert sample.token_ids == ids[:k]
    assert sample.text == decode(ids[:k])[: decode(ids[:k]).index(stop)]
    assert stop not in sample.text


def test_budget_and_preset_limit(engine):
    result = audition(engine, [WARM.replace(max_new_tokens=3), WARM.replace(name="w2")], samples=1, tokens=5)
    assert [len(row[0].tokens) for row in result.samples] == [3, 5]
    assert {row[0].stop_reason for row in result.samples} == {"length"}


def test_cancel_ends_every_row(engine):
    calls = []

    def should_stop():
        calls.append(1)
        return len(calls) > 3

    events = []
    result = audition(
        engine, [WARM, MIXED], samples=2, tokens=30, seed=1, on_token=events.append, should_stop=should_stop
    )
    assert result.cancelled
    assert all(s.stop_reason == "cancelled" and len(s.tokens) == 3 for row in result.samples for s in row)
    assert sum(1 for e in events if e.stop_reason == "cancelled") == 4


def test_progress_events_cover_every_token_and_ending(engine):
    events = []
    result = audition(engine, [WARM, MIXED.replace(max_new_tokens=4)], samples=2, tokens=7, on_token=events.append)
    assert sum(1 for e in events if e.token is not None) == result.tokens_generated()
    assert sum(1 for e in events if e.stop_reason) == 4
    done = [e.done_tokens for e in events]
    assert done == sorted(done) and events[-1].done_tokens == events[-1].total_tokens
    assert events[0].total_tokens == 2 * 7 + 2 * 4


# -- passages -----------------------------------------------------------------


@pytest.mark.parametrize("text", ["", "   \n\t "])
def test_empty_passage_is_an_error(engine, text):
    with pytest.raises(PassageError, match="empty"):
        engine.encode_passage(text)
    with pytest.raises(PassageError):
        audition(engine, [WARM], passage=text)


def test_long_passage_keeps_its_last_part(engine, tiny_model):
    text = " ".join(f"Crossing number {i} leaves on time." for i in range(60))
    full = tiny_model.tokenizer(text, add_special_tokens=False)["input_ids"]
    tokens = engine.encode_passage(text)
    assert engine.passage_limit == 128 and len(full) > 128
    assert tokens.ids == full[-128:]
    assert tokens.dropped == len(full) - 128
    assert tiny_model.tokenizer.decode(tokens.ids) == text[tokens.cut_at :]
    result = audition(engine, [WARM], samples=1, tokens=3, passage=text)
    assert result.passage_dropped == tokens.dropped and result.passage_ids == tokens.ids


def test_short_passage_is_kept_whole(engine, tiny_model):
    tokens = engine.encode_passage(PASSAGE)
    assert tokens.dropped == 0 and tokens.cut_at is None
    assert tokens.ids == tiny_model.tokenizer(PASSAGE, add_special_tokens=False)["input_ids"]


@pytest.mark.parametrize("change", [dict(samples=0), dict(max_new_tokens=0), dict(seed=-1), dict(presets=[])])
def test_impossible_requests_are_refused(engine, change):
    request = dataclasses.replace(AuditionRequest(PASSAGE, [WARM]), **change)
    with pytest.raises(ValueError):
        engine.audition(request)
