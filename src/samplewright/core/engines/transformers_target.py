"""transformers' ``GenerationConfig``: the mapping, and transformers' own processors.

The chain is never re-implemented here: :func:`chain_from_folder` reads the
exported folder with ``GenerationConfig.from_pretrained`` and builds the
processors through ``generate()``'s own code path
(``GenerationMixin._prepare_generation_config`` then
``GenerationMixin._get_logits_processor``, in transformers/generation/utils.py
of the installed version), then runs them one by one.

generate() itself casts the logits to float32 before the processors; the
fidelity check runs the same processors on float64 logits, so it measures the
processors' meaning, not float32 rounding.
"""

from __future__ import annotations

import contextlib
import functools
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import torch

from ..presets import DEFAULT_ORDER, Preset
from .common import StepFunction, StepOutcome, one_hot, order_reasons
from .cuts import cut_on_tie

NAME = "transformers"
TITLE = "transformers GenerationConfig"
ORDER = DEFAULT_ORDER
CONFIG_FILE = "generation_config.json"


def installed_version() -> str:
    """The installed transformers version (the source the processors come from)."""
    import transformers

    return str(transformers.__version__)


def parameters(preset: Preset) -> dict[str, Any]:
    """The ``generation_config.json`` fields for ``preset``.

    Every sampling field is written, neutral ones too: a field left out is
    filled from the model's own generation config (or transformers' default,
    top_k 50), which would change the distribution. Temperature 0 becomes
    ``do_sample: false`` (greedy), with the sampling-only fields neutral.
    """
    greedy = preset.temperature == 0
    config: dict[str, Any] = {
        "do_sample": not greedy,
        "temperature": 1.0 if greedy else preset.temperature,
        "top_k": 0 if greedy else preset.top_k,
        "top_p": 1.0 if greedy else preset.top_p,
        "min_p": 0.0 if greedy else preset.min_p,
        "typical_p": 1.0 if greedy else preset.typical_p,
        "epsilon_cutoff": 0.0,
        "eta_cutoff": 0.0,
        "num_beams": 1,
        "repetition_penalty": preset.repetition_penalty,
        "no_repeat_ngram_size": preset.no_repeat_ngram_size,
        "max_new_tokens": preset.max_new_tokens,
    }
    if preset.stop:
        config["stop_strings"] = list(preset.stop)
    return config


def gaps(preset: Preset) -> list[str]:
    """Every plain reason transformers may write differently from ``preset``."""
    reasons = []
    if preset.frequency_penalty or preset.presence_penalty:
        reasons.append("transformers has no frequency or presence penalty: they are dropped")
    return reasons + order_reasons(preset, ORDER, "transformers")


def closest(preset: Preset) -> Preset:
    """The nearest preset transformers can express: its order, no frequency/presence penalty."""
    return preset.replace(
        name=f"{preset.name[:100]} (as transformers)",
        order=ORDER,
        frequency_penalty=0.0,
        presence_penalty=0.0,
    )


@functools.lru_cache(maxsize=1)
def stand_in_model():
    """A one-layer random Llama whose only job is to run generate()'s own
    processor-building methods; its generation config is empty, so the file's
    fields alone decide (as they do for a model without its own config)."""
    from transformers import GenerationConfig, LlamaConfig, LlamaForCausalLM

    config = LlamaConfig(
        vocab_size=8,
        hidden_size=8,
        intermediate_size=8,
        num_hidden_layers=1,
        num_attention_heads=1,
        num_key_value_heads=1,
        max_position_embeddings=16,
    )
    model = LlamaForCausalLM(config)
    model.generation_config = GenerationConfig()
    return model.eval()


def load_config(folder: str | Path):
    """``GenerationConfig.from_pretrained(folder)``, offline."""
    from transformers import GenerationConfig

    with _quiet():
        return GenerationConfig.from_pretrained(str(folder), local_files_only=True)


@contextlib.contextmanager
def _quiet():
    """Silence transformers' log while a config is read or prepared: a greedy
    config with neutral sampling fields makes it warn, harmlessly."""
    from transformers.utils import logging

    verbosity = logging.get_verbosity()
    logging.set_verbosity_error()
    try:
        yield
    finally:
        logging.set_verbosity(verbosity)


def build_processors(config, model=None, prompt_length: int = 1):
    """generate()'s processors for ``config``: the prepared config and the processor list."""
    from transformers import LogitsProcessorList

    model = model if model is not None else stand_in_model()
    with _quiet():
        prepared, _ = model._prepare_generation_config(config)
    processors = model._get_logits_processor(
        generation_config=prepared,
        input_ids_seq_length=prompt_length,
        encoder_input_ids=None,
        prefix_allowed_tokens_fn=None,
        logits_processor=LogitsProcessorList(),
        device="cpu",
        model_kwargs={},
    )
    return prepared, processors


def _cut_kind(processor) -> tuple[str, float]:
    from transformers import MinPLogitsWarper, TopKLogitsWarper, TopPLogitsWarper, TypicalLogitsWarper

    if isinstance(processor, TopKLogitsWarper):
        return "top_k", float(processor.top_k)
    if isinstance(processor, TopPLogitsWarper):
        return "top_p", float(processor.top_p)
    if isinstance(processor, MinPLogitsWarper):
        return "min_p", float(processor.min_p)
    if isinstance(processor, TypicalLogitsWarper):
        return "typical_p", float(processor.mass)
    return "", 0.0


def chain_from_config(config, model=None) -> StepFunction:
    """transformers' chain for a ``GenerationConfig``: its processors, then greedy or sampling."""
    prepared, processors = build_processors(config, model)
    greedy = not prepared.do_sample

    def step(logits: torch.Tensor, history: Sequence[int], generated: Sequence[int]) -> StepOutcome:
        ids = torch.tensor([list(history)], dtype=torch.long)
        scores = logits.to(torch.float64).reshape(1, -1)
        tie = False
        with torch.no_grad():
            for processor in processors:
                after = processor(ids, scores.clone())
                kind, value = _cut_kind(processor)
                tie = tie or cut_on_tie(kind, value, scores[0], after[0])
                scores = after
        if greedy:
            return StepOutcome(one_hot(scores.shape[-1], int(scores[0].argmax())), False)
        return StepOutcome(torch.softmax(scores, dim=-1)[0].numpy(), tie)

    return step


def chain_from_folder(folder: str | Path, model=None) -> StepFunction:
    """transformers' chain for an exported folder, read back as generate() would read it."""
    return chain_from_config(load_config(folder), model)
