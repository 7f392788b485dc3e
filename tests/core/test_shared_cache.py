"""The shared passage cache gives the same results as a copy of the passage per row.

Method: Juravsky et al. (2024), "Hydragen: High-Throughput LLM Inference with
Shared Prefixes" (arXiv:2402.05099), section 3: attention over a shared prefix
and a per-row suffix, recombined with their log-sum-exp. References here:
torch.nn.functional.scaled_dot_product_attention over the whole key sequence,
transformers' uncached forward pass, and the engine's plain path (each row
its own copy of the passage cache, as transformers' generate() does).
"""

from __future__ import annotations

import pytest
import torch

from samplewright import Preset
from samplewright.core.engine.backend import TransformersBackend
from samplewright.core.engine.engine import Engine
from samplewright.core.engine.passages import demo_passages
from samplewright.core.engine.shared_attention import SharedPassageCache, shared_prefix_attention
from samplewright.core.results import AuditionRequest

PASSAGE = "The morning ferry to Skerry Point leaves the harbour at seven. Please arrive at the quay"
PRESETS = [
    Preset("warm", temperature=1.2),
    Preset("nucleus", temperature=0.8, top_p=0.9),
    Preset("mixed", temperature=0.9, top_k=40, min_p=0.02, repetition_penalty=1.2, no_repeat_ngram_size=3),
]


@pytest.mark.parametrize("kv_heads, groups", [(2, 1), (2, 3), (1, 4)])
def test_split_attention_equals_attention_over_the_whole_row(kv_heads, groups):
    # Reference: torch SDPA over prefix + suffix concatenated (the key/value
    # heads repeated for grouped queries, as transformers' repeat_kv does).
    gen = torch.Generator().manual_seed(kv_heads * 10 + groups)
    rows, prefix, suffix, dim = 5, 37, 6, 16
    heads = kv_heads * groups
    query = torch.randn(rows, heads, 1, dim, generator=gen, dtype=torch.float64)
    pk, pv = (torch.randn(1, kv_heads, prefix, dim, generator=gen, dtype=torch.float64) * 3 for _ in range(2))
    sk, sv = (torch.randn(rows, kv_heads, suffix, dim, generator=gen, dtype=torch.float64) * 3 for _ in range(2))
    got = shared_prefix_attention(query, pk, pv, sk, sv, dim**-0.5)
    keys = torch.cat([pk.expand(rows, -1, -1, -1), sk], dim=2).repeat_interleave(groups, dim=1)
    values = torch.cat([pv.expand(rows, -1, -1, -1), sv], dim=2).repeat_interleave(groups, dim=1)
    expected = torch.nn.functional.scaled_dot_product_attention(query, keys, values).transpose(1, 2)
    assert got.shape == (rows, 1, heads, dim)
    torch.testing.assert_close(got, expected, rtol=0, atol=1e-12)


def _step_logits_agree(loaded, passage_ids, steps=12, rows=4):
    """Step the shared cache and an uncached forward pass with the same tokens; largest logit difference."""
    backend = TransformersBackend(loaded)
    assert backend.shared, "this model family should use the shared passage cache"
    with torch.inference_mode():
        state = backend.encode(passage_ids)
        cache = backend.start_rows(state, rows, capacity=3)  # small, so it has to grow
        assert isinstance(cache, SharedPassageCache)
        # The passage's keys are the state's own tensors: one copy for every row.
        assert cache.layer(0).prefix_keys.data_ptr() == state.cache.layers[0].keys.data_ptr()
        tokens = [[] for _ in range(rows)]
        ids = torch.topk(state.logits, rows).indices
        worst, live = 0.0, list(range(rows))
        for step in range(steps):
            for r, i in zip(live, ids.tolist(), strict=True):
                tokens[r].append(i)
            logits = backend.step(ids, cache)
            full = loaded.model(torch.tensor([passage_ids + tokens[r] for r in live])).logits[:, -1].float()
            worst = max(worst, float((logits - full).abs().max()))
            ids = logits.argmax(-1)
            if step == steps // 2:  # the second row leaves, as when a sample ends
                keep = [k for k in range(len(live)) if k != 1]
                cache.batch_select_indices(torch.tensor(keep))
                live, ids = [live[k] for k in keep], ids[keep]
    return worst


def test_step_logits_agree_with_the_plain_forward_pass_on_the_tiny_model(tiny_model):
    ids = Engine(tiny_model).encode_passage(PASSAGE).ids
    assert _step_logits_agree(tiny_model, ids) <= 1e-4


@pytest.mark.model
def test_step_logits_agree_with_the_plain_forward_pass_on_the_default_model(default_model):
    ids = Engine(default_model).encode_passage(demo_passages()["timetable-change"]).ids
    assert _step_logits_agree(default_model, ids, steps=8) <= 1e-4


def _same_tokens_both_paths(loaded, passage, tokens):
    request = AuditionRequest(passage, PRESETS, 3, tokens, 17)
    shared = Engine(loaded).audition(request)
    plain_engine = Engine(loaded, shared_cache=False)
    assert not plain_engine.backend.shared
    plain = plain_engine.audition(request)
    for p in range(len(PRESETS)):
        assert [s.token_ids for s in shared.samples[p]] == [s.token_ids for s in plain.samples[p]]
        for a, b in zip(shared.samples[p], plain.samples[p], strict=True):
            assert [t.p for t in a.tokens] == pytest.approx([t.p for t in b.tokens], rel=1e-4, abs=1e-9)
    return shared


def test_sampled_runs_equal_the_plain_path_on_the_tiny_model(tiny_model):
    result = _same_tokens_both_paths(tiny_model, PASSAGE, 16)
    assert result.tokens_generated() > 0


@pytest.mark.model
def test_sampled_runs_equal_the_plain_path_on_the_default_model(default_model):
    result = _same_tokens_both_paths(default_model, demo_passages()["timetable-change"], 12)
    assert result.tokens_generated() > 0
