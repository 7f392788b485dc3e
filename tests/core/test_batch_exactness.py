"""The batched sampling step agrees with ``shape()`` to 1e-9 in float64.

A scripted stand-in for the model (the batch's ``ModelBackend`` seam) gives
each row logits that depend only on that row's tokens so far, so every step
can be recomputed one row at a time with ``samplewright.shape`` (the single
definition of a preset), scipy's entropy, and the Gumbel-max rule with the
sampler's own noise (Gumbel 1954; Maddison, Tarlow & Minka 2014).
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy import stats

from samplewright import Preset, shape
from samplewright.core.engine import batch
from samplewright.core.engine.backend import PassageState, PassageTokens
from samplewright.core.results import AuditionRequest
from samplewright.core.sampling import compact, sampler

VOCAB = 300
PASSAGE = [5, 17, 42, 99, 17, 8, 250, 42, 3, 77]
PRESETS = [
    Preset("warm", temperature=1.3),
    Preset("nucleus", temperature=0.8, top_p=0.9),
    Preset("narrow", top_k=12, min_p=0.02, order=["penalties", "top_k", "temperature", "top_p", "min_p", "typical_p"]),
    Preset("typical", typical_p=0.8, repetition_penalty=1.3, frequency_penalty=0.3, no_repeat_ngram_size=2),
    Preset("short", temperature=0.9, max_new_tokens=3),
    # Stages after a truncation run on the compact table: penalties, greedy, a top-k wider than what is left.
    Preset(
        "cut first",
        min_p=0.05,
        top_k=200,
        repetition_penalty=1.5,
        no_repeat_ngram_size=2,
        order=["min_p", "top_k", "penalties", "temperature", "top_p", "typical_p"],
    ),
    Preset(
        "greedy cut",
        top_p=0.7,
        temperature=0.0,
        order=["top_p", "temperature", "penalties", "top_k", "min_p", "typical_p"],
    ),
]


def scripted_logits(history) -> torch.Tensor:
    """float32 logits that depend only on the token history."""
    seed = 0
    for token in history:
        seed = (seed * 1_000_003 + int(token) + 1) % (2**31 - 1)
    return torch.randn(VOCAB, generator=torch.Generator().manual_seed(seed)) * 3


class ScriptedModel:
    """ModelBackend whose rows' logits come from :func:`scripted_logits`."""

    eos_ids = frozenset({0})
    context_length = 4096

    def start_rows(self, state, rows, capacity):
        self.histories = [list(state.ids) for _ in range(rows)]
        return self

    def batch_select_indices(self, indices):
        self.histories = [self.histories[i] for i in indices.tolist()]

    def step(self, ids, cache):
        for history, token in zip(self.histories, ids.tolist(), strict=True):
            history.append(token)
        return torch.stack([scripted_logits(h) for h in self.histories])

    def token_text(self, token_id):
        return f"<{token_id}>"

    def decode(self, ids):
        return "".join(f"<{i}>" for i in ids)


@pytest.mark.parametrize("compact_limit", [0, compact.COMPACT_LIMIT])
@pytest.mark.parametrize("seed", [0, 5])
def test_every_recorded_step_equals_shape_and_the_gumbel_rule(seed, compact_limit, monkeypatch):
    # compact_limit 0: every stage on the whole vocabulary; the default: on the live tokens after a cut.
    monkeypatch.setattr(compact, "COMPACT_LIMIT", compact_limit)
    state = PassageState(tuple(PASSAGE), None, scripted_logits(PASSAGE))
    tokens = PassageTokens(list(PASSAGE), 0, 1024, None)
    result = batch.run_audition(ScriptedModel(), tokens, state, AuditionRequest("passage", PRESETS, 3, 10, seed))
    checked = 0
    for preset, samples in zip(PRESETS, result.samples, strict=True):
        for sample in samples:
            ids = sample.token_ids
            steps = len(ids) + (sample.stop_reason == "eos")
            for t in range(steps):
                before = ids[:t]
                logits = scripted_logits(PASSAGE + before)
                expected = shape(logits, preset, PASSAGE + before, before)
                noise = sampler.noise(seed, sample.sample_index, t, VOCAB).numpy()
                with np.errstate(divide="ignore"):
                    drawn = int(np.argmax(np.log(expected) + noise))
                if t == len(ids):  # the row ended on EOS, which is not recorded
                    assert drawn == 0
                    continue
                token = sample.tokens[t]
                raw = torch.softmax(logits.double(), -1).numpy()
                assert token.token_id == drawn
                assert token.p == pytest.approx(expected[drawn], rel=1e-9, abs=1e-12)
                assert token.raw_p == pytest.approx(raw[drawn], rel=1e-9, abs=1e-12)
                assert token.kept == np.count_nonzero(expected)
                assert token.entropy_bits == pytest.approx(stats.entropy(expected, base=2), abs=1e-9)
                assert token.raw_entropy_bits == pytest.approx(stats.entropy(raw, base=2), abs=1e-9)
                checked += 1
    assert checked > 60
    assert all(s.stop_reason in ("length", "eos") for s in result.samples[4])
    assert max(len(s.tokens) for s in result.samples[4]) <= 3
