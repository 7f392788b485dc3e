"""The lean decoding step computes what transformers' Llama modules compute.

References: transformers' LlamaForCausalLM forward pass (uncached, over each
row's whole sequence) and the plain shared-cache path through transformers'
modules (TransformersBackend(lean=False)); attention split over the shared
passage and each row's own part as in Juravsky et al. (2024), "Hydragen:
High-Throughput LLM Inference with Shared Prefixes" (arXiv:2402.05099),
section 3; rotary embedding as in Su et al. (2021), "RoFormer"
(arXiv:2104.09864), through the model's own rotary module.
"""

from __future__ import annotations

import copy

import pytest
import torch
from transformers import LlamaConfig, LlamaForCausalLM

from samplewright.core.engine import lean_decode
from samplewright.core.engine.backend import TransformersBackend
from samplewright.core.engine.engine import Engine
from samplewright.core.engine.model import model_from_parts
from samplewright.core.engine.passages import demo_passages

PASSAGE = "The morning ferry to Skerry Point leaves the harbour at seven. Please arrive at the quay"


def _variant(tiny_model, seed=5, **config):
    """A random tiny Llama with the tiny model's tokenizer and some configuration changed."""
    settings = dict(
        vocab_size=tiny_model.vocab_size,
        hidden_size=32,
        intermediate_size=64,
        num_hidden_layers=2,
        num_attention_heads=4,
        num_key_value_heads=2,
        max_position_embeddings=256,
        initializer_range=0.3,
        eos_token_id=min(tiny_model.eos_ids),
        pad_token_id=min(tiny_model.eos_ids),
        bos_token_id=None,
    )
    settings.update(config)
    state = torch.random.get_rng_state()
    torch.manual_seed(seed)
    model = LlamaForCausalLM(LlamaConfig(**settings))
    torch.random.set_rng_state(state)
    return model_from_parts(model, tiny_model.tokenizer, "variant")


def _worst_step_difference(loaded, passage_ids, rows, steps=10, leave_at=(4,), packed=False):
    """Run lean steps on the shared cache; the largest logit difference from transformers'
    uncached forward pass and from the plain shared path, over every step, rows leaving on the way."""
    lean = TransformersBackend(loaded, packed_weights=packed)
    plain = TransformersBackend(loaded, lean=False)
    assert lean.lean is not None, lean.lean_note
    assert lean.lean.packed == (packed and lean_decode.packing_available(torch.float32, torch.device("cpu")))
    assert plain.lean is None and plain.shared
    worst_full = worst_plain = 0.0
    with torch.inference_mode():
        state = lean.encode(passage_ids)
        lean_cache, plain_cache = lean.start_rows(state, rows, 3), plain.start_rows(state, rows, 3)  # both grow
        ids = torch.topk(state.logits, rows).indices
        tokens: list[list[int]] = [[] for _ in range(rows)]
        live = list(range(rows))
        for step in range(steps):
            for r, i in zip(live, ids.tolist(), strict=True):
                tokens[r].append(i)
            got, other = lean.step(ids, lean_cache), plain.step(ids, plain_cache)
            full = loaded.model(torch.tensor([list(passage_ids) + tokens[r] for r in live])).logits[:, -1].float()
            worst_full = max(worst_full, float((got - full).abs().max()))
            worst_plain = max(worst_plain, float((got - other).abs().max()))
            ids = got.argmax(-1)
            if step in leave_at and len(live) > 1:  # the second row leaves, as when a sample ends
                keep = [k for k in range(len(live)) if k != 1]
                lean_cache.batch_select_indices(torch.tensor(keep))
                plain_cache.batch_select_indices(torch.tensor(keep))
                live, ids = [live[k] for k in keep], ids[keep]
    return worst_full, worst_plain


@pytest.mark.parametrize("rows", [1, 2, 5])
def test_lean_step_logits_agree_with_transformers_at_every_step(tiny_model, rows):
    ids = Engine(tiny_model).encode_passage(PASSAGE).ids
    worst_full, worst_plain = _worst_step_difference(tiny_model, ids, rows, leave_at=(3, 6))
    assert worst_full <= 1e-4 and worst_plain <= 1e-4


def test_packed_weights_give_the_same_logits(tiny_model):
    # Four rows, two leaving: the packed products run while there are at least
    # PACKED_MIN_ROWS rows, the plain ones after; both against the same references
    # (where torch has no oneDNN the decoder refuses to pack and this checks the plain ones).
    ids = Engine(tiny_model).encode_passage(PASSAGE).ids
    assert max(_worst_step_difference(tiny_model, ids, 4, leave_at=(3, 6), packed=True)) <= 1e-4


def test_lean_step_follows_the_models_rope_scaling(tiny_model):
    # Linear rope scaling (positions divided by the factor), computed by
    # transformers' own rotary module: a step with unscaled positions would differ.
    scaled = _variant(tiny_model, rope_parameters={"rope_type": "linear", "factor": 4.0, "rope_theta": 500.0})
    ids = Engine(scaled).encode_passage(PASSAGE).ids
    assert max(_worst_step_difference(scaled, ids, rows=3, steps=6)) <= 1e-4


def test_lean_step_with_one_query_head_per_key_head(tiny_model):
    # Plain multi-head attention (no grouping) and a wider head: the same reference.
    plain_heads = _variant(tiny_model, num_attention_heads=2, num_key_value_heads=2, hidden_size=48)
    ids = Engine(plain_heads).encode_passage(PASSAGE).ids
    assert max(_worst_step_difference(plain_heads, ids, rows=3, steps=6)) <= 1e-4


@pytest.mark.model
def test_lean_step_logits_agree_on_the_default_model(default_model):
    ids = Engine(default_model).encode_passage(demo_passages()["timetable-change"]).ids
    assert max(_worst_step_difference(default_model, ids, rows=3, steps=6, leave_at=(2,))) <= 1e-4


@pytest.mark.parametrize(
    "config, reason",
    [
        ({"mlp_bias": True}, "biases"),
        ({"attention_bias": True}, "biases"),
        ({"hidden_act": "gelu"}, "activation"),
    ],
)
def test_unsupported_configurations_fall_back_to_transformers_modules(tiny_model, config, reason):
    loaded = _variant(tiny_model, **config)
    backend = TransformersBackend(loaded)
    assert backend.lean is None and reason in backend.lean_note
    # The fallback is the plain path: its steps still agree with the uncached forward pass.
    ids = Engine(loaded).encode_passage(PASSAGE).ids
    with torch.inference_mode():
        state = backend.encode(ids)
        cache = backend.start_rows(state, 2, 4)
        step = backend.step(torch.tensor([7, 9]), cache)
        full = loaded.model(torch.tensor([ids + [7], ids + [9]])).logits[:, -1]
    assert float((step - full).abs().max()) <= 1e-4


def test_other_families_and_training_mode_are_refused(tiny_model):
    from transformers import GPT2Config, GPT2LMHeadModel

    gpt2 = GPT2LMHeadModel(GPT2Config(n_embd=16, n_layer=1, n_head=2, vocab_size=50, n_positions=32))
    assert "Llama" in (lean_decode.unsupported_reason(gpt2.eval()) or "")
    training = _variant(tiny_model).model.train()
    assert "training" in (lean_decode.unsupported_reason(training) or "")
    assert TransformersBackend(tiny_model, lean=False).lean is None
    assert TransformersBackend(tiny_model, shared=False).lean is None


def _storage_bytes(model) -> int:
    """Bytes of the distinct storages behind the model's parameters (views counted once)."""
    storages = {p.untyped_storage().data_ptr(): p.untyped_storage().nbytes() for p in model.parameters()}
    return sum(storages.values())


def test_fused_weights_are_the_models_own_parameters(tiny_model):
    loaded = _variant(tiny_model, seed=9)
    before = _storage_bytes(loaded.model)
    with torch.inference_mode():
        reference = loaded.model(torch.tensor([[3, 5, 8, 13]])).logits
    decoder = TransformersBackend(loaded, packed_weights=False).lean
    assert decoder is not None
    attn, mlp = loaded.model.model.layers[0].self_attn, loaded.model.model.layers[0].mlp
    layer = decoder.layers[0]
    # The parameters are views into the fused weights: same memory, no copy.
    assert attn.q_proj.weight.data_ptr() == layer.qkv.data_ptr()
    assert attn.k_proj.weight.data_ptr() == layer.qkv[attn.q_proj.weight.shape[0] :].data_ptr()
    assert mlp.gate_proj.weight.data_ptr() == layer.gate_up.data_ptr()
    assert mlp.up_proj.weight.data_ptr() == layer.gate_up[mlp.gate_proj.weight.shape[0] :].data_ptr()
    assert _storage_bytes(loaded.model) == before and decoder.packed_bytes() == 0
    # A second backend on the same model reuses them; the plain forward pass is unchanged.
    again = TransformersBackend(loaded, packed_weights=False).lean
    assert again is not None and again.layers[0].qkv.data_ptr() == layer.qkv.data_ptr()
    with torch.inference_mode():
        assert torch.equal(loaded.model(torch.tensor([[3, 5, 8, 13]])).logits, reference)


def test_a_precision_change_rebuilds_the_fused_weights(tiny_model):
    # model.to(dtype) gives every parameter its own new tensor; the next step must
    # notice and fuse again. A weight edited in place after the change must show in
    # the step (a decoder still holding the old weights would miss it).
    loaded = copy.deepcopy(_variant(tiny_model, seed=11))
    backend = TransformersBackend(loaded)
    assert backend.lean is not None
    loaded.model.to(torch.float64)
    assert not backend.lean.current()
    with torch.no_grad():
        loaded.model.model.layers[0].mlp.up_proj.weight.mul_(1.5)
    ids = Engine(loaded).encode_passage(PASSAGE).ids
    with torch.inference_mode():
        state = backend.encode(ids)
        cache = backend.start_rows(state, 2, 4)
        step = backend.step(torch.tensor([7, 9]), cache)
        full = loaded.model(torch.tensor([ids + [7], ids + [9]])).logits[:, -1]
    assert backend.lean.current() and backend.lean.dtype == torch.float64
    assert loaded.model.model.layers[1].self_attn.q_proj.weight.data_ptr() == backend.lean.layers[1].qkv.data_ptr()
    assert float((step.double() - full).abs().max()) <= 1e-4


def test_a_fused_model_can_still_be_saved_and_fuses_again(tiny_model, tmp_path):
    # safetensors' save_model (the converted-model cache's writer) refuses tensors that are
    # slices of one storage; save_converted separates them first, and the next lean step fuses again.
    from safetensors.torch import load_file

    from samplewright.core.engine.model import save_converted

    loaded = _variant(tiny_model, seed=13)
    backend = TransformersBackend(loaded)
    assert backend.lean is not None and backend.lean.current()
    save_converted(loaded.model, loaded.tokenizer, tmp_path / "saved")
    stored = load_file(str(tmp_path / "saved" / "model.safetensors"))
    q = loaded.model.model.layers[0].self_attn.q_proj.weight
    assert torch.equal(stored["model.layers.0.self_attn.q_proj.weight"], q)
    assert not backend.lean.current()
    ids = Engine(loaded).encode_passage(PASSAGE).ids
    assert max(_worst_step_difference(loaded, ids, rows=2, steps=3)) <= 1e-4


def test_engines_over_one_model_share_one_decoder_and_free_it_with_the_model(tiny_model):
    # The window's engine and its evaluation screen's run over the same loaded model: one set of
    # packed copies, not one per engine; and a model no longer used is freed with its decoder
    # (Python's gc: weak references do not keep an object alive).
    import gc
    import weakref

    loaded = _variant(tiny_model, seed=11)
    first = TransformersBackend(loaded, packed_weights=True)
    second = TransformersBackend(loaded, packed_weights=True)
    assert first.lean is second.lean and first.lean is not None
    gone = weakref.ref(loaded.model)
    del first, second, loaded
    gc.collect()
    assert gone() is None


def test_packing_is_left_on_only_within_its_memory_budget(tiny_model, monkeypatch):
    # packed_size counts every projection and the output head once, at the weights' own width
    # (the packed layout holds the same numbers, common practice for oneDNN's reordered weights).
    loaded = _variant(tiny_model, seed=12)
    model = loaded.model
    expected = sum(
        m.weight.numel() * m.weight.element_size() for m in model.modules() if isinstance(m, torch.nn.Linear)
    )
    assert lean_decode.packed_size(model) == expected
    available = lean_decode.packing_available(torch.float32, torch.device("cpu"))
    assert TransformersBackend(loaded).lean.packed == available  # the tiny model is far below the budget
    small = _variant(tiny_model, seed=13)
    monkeypatch.setattr(lean_decode, "PACKED_BUDGET_BYTES", expected - 1)
    assert TransformersBackend(small).lean.packed is False
