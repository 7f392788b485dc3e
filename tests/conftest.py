"""Shared test fixtures: offline mode, a tiny in-memory model and the real default model.

``tiny_model`` is a two-layer random-weight Llama model (context 256, so the
passage window is 128 tokens) with a byte-level BPE tokenizer trained in the
test on a few ferry sentences. Its weights use a wide initialisation so its
next-token distributions are peaked enough for greedy decoding to have clear
winners. It is built once per session and is deterministic.

``default_model`` loads the real default model once per session (tests marked
``model``). It uses the normal converted-model cache, so only the very first
run on a machine pays the half-minute GGUF conversion; set
``SAMPLEWRIGHT_CACHE_DIR`` to point it elsewhere.
"""

from __future__ import annotations

import os

os.environ["HF_HUB_OFFLINE"] = "1"
# Exactness checks compare float32 results; the precision test sets its own.
os.environ["SAMPLEWRIGHT_PRECISION"] = "float32"

import pytest

TINY_CORPUS = [
    "The morning ferry to Skerry Point leaves the harbour at seven.",
    "Please arrive at the quay ten minutes before the crossing.",
    "The last sailing is cancelled when the wind is too strong.",
    "Season tickets remain valid during the winter timetable.",
    "Thank you for your patience while the new ferry is tested.",
]
TINY_CONTEXT = 256


def build_tiny_model(seed: int = 1234):
    """A tiny random-weight causal model and tokenizer, wrapped as a LoadedModel."""
    import torch
    from tokenizers import Tokenizer, decoders, models, pre_tokenizers, trainers
    from transformers import LlamaConfig, LlamaForCausalLM, PreTrainedTokenizerFast

    from samplewright.core.engine.model import model_from_parts

    bpe = Tokenizer(models.BPE())
    bpe.pre_tokenizer = pre_tokenizers.ByteLevel(add_prefix_space=False)
    bpe.decoder = decoders.ByteLevel()
    trainer = trainers.BpeTrainer(
        vocab_size=360,
        special_tokens=["<eos>"],
        show_progress=False,
        initial_alphabet=pre_tokenizers.ByteLevel.alphabet(),
    )
    bpe.train_from_iterator(TINY_CORPUS * 3, trainer)
    tokenizer = PreTrainedTokenizerFast(tokenizer_object=bpe, eos_token="<eos>")
    config = LlamaConfig(
        vocab_size=bpe.get_vocab_size(),
        hidden_size=32,
        intermediate_size=64,
        num_hidden_layers=2,
        num_attention_heads=4,
        num_key_value_heads=2,
        max_position_embeddings=TINY_CONTEXT,
        initializer_range=0.3,
        eos_token_id=tokenizer.eos_token_id,
        pad_token_id=tokenizer.eos_token_id,
        bos_token_id=None,
        tie_word_embeddings=False,
    )
    generator_state = torch.random.get_rng_state()
    torch.manual_seed(seed)
    model = LlamaForCausalLM(config)
    torch.random.set_rng_state(generator_state)
    return model_from_parts(model, tokenizer, "tiny test model")


@pytest.fixture(scope="session")
def tiny_model():
    """The tiny model as a LoadedModel, built once per session."""
    return build_tiny_model()


@pytest.fixture(scope="session")
def tiny_model_folder(tiny_model, tmp_path_factory):
    """The tiny model saved as a transformers model folder (config, safetensors, tokenizer)."""
    folder = tmp_path_factory.mktemp("tiny-model")
    tiny_model.model.save_pretrained(folder)
    tiny_model.tokenizer.save_pretrained(folder)
    return folder


@pytest.fixture(scope="session")
def default_model():
    """The real default model (from the converted cache), loaded once per session."""
    from samplewright.core.engine.model import load_model

    return load_model()
