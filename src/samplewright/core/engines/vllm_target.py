"""vLLM's ``SamplingParams``: the mapping, and vLLM's chain as its source defines it.

Sources (read for this module; see docs/engines.md for the tables):
    vllm/v1/sample/sampler.py (commit 3e342658b2e9c85a30a54d19e64e5ad77b8a26a6):
        the order: penalties, then greedy if temperature < 1e-5, else
        temperature, the argmax-invariant processors (min-p), then top-k and top-p.
    vllm/model_executor/layers/utils.py ``apply_penalties`` (commit 9c9de631f6f7):
        frequency and presence count the output tokens only.
    vllm/_custom_ops.py ``apply_repetition_penalties_torch`` (commit 7bcae67b5de3):
        repetition penalty on tokens of the prompt or the output.
    vllm/v1/sample/logits_processor/builtin.py ``MinPLogitsProcessor`` (commit bf17660a2493).
    vllm/v1/sample/ops/topk_topp_sampler.py ``apply_top_k_top_p`` (commit 3babc05a035b).
    vllm/sampling_params.py (commit db573835d3ef): ranges, and temperatures in
        (0, 0.01) raised to 0.01.

vLLM computes in float32; these functions compute the same formulas in
float64, so the fidelity verdict measures semantics, not rounding.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import torch

from ..presets import Preset
from .common import StepFunction, StepOutcome, one_hot, order_reasons, reorder
from .cuts import cut_on_tie

NAME = "vllm"
TITLE = "vLLM SamplingParams"
#: vLLM's stage order in samplewright's stage names (it has no typical sampling).
ORDER = ("penalties", "temperature", "min_p", "top_k", "top_p")
SAMPLING_EPS = 1e-5  # sampler.py _SAMPLING_EPS: below it, greedy
MIN_TEMPERATURE = 1e-2  # sampling_params.py _MAX_TEMP: (0, 0.01) is raised to it
MAX_REPETITION_PENALTY = 2.0  # sampling_params.py _verify_args at the cited commit


# -- vLLM's stages, one function each (rows × vocab, float64) ------------------


def penalties(
    logits: torch.Tensor,
    prompt_ids: Sequence[int],
    output_ids: Sequence[int],
    repetition: float,
    frequency: float,
    presence: float,
) -> torch.Tensor:
    """``apply_penalties``: repetition on tokens in the prompt or the output (a
    positive logit times 1/penalty, any other times penalty), then frequency ×
    output count and presence × [in output] subtracted."""
    vocab = logits.shape[-1]
    prompt_mask = torch.zeros(vocab, dtype=torch.bool)
    if prompt_ids:
        prompt_mask[list(prompt_ids)] = True
    counts = torch.bincount(torch.tensor(list(output_ids), dtype=torch.long), minlength=vocab).to(torch.float64)
    output_mask = counts > 0
    pens = torch.where(prompt_mask | output_mask, torch.tensor(repetition, dtype=torch.float64), 1.0)
    scaling = torch.where(logits > 0, 1.0 / pens, pens)
    out = logits * scaling
    out = out - frequency * counts
    return out - presence * output_mask.to(torch.float64)


def temperature(logits: torch.Tensor, t: float) -> torch.Tensor:
    """``Sampler.apply_temperature``: divide by t (greedy rows never get here)."""
    return logits / t


def min_p(logits: torch.Tensor, fraction: float) -> torch.Tensor:
    """``MinPLogitsProcessor.apply``: remove tokens whose probability is below
    ``fraction`` × the top probability (skipped when ``fraction`` is 0)."""
    if not fraction:
        return logits
    probs = torch.softmax(logits, dim=-1)
    threshold = probs.amax(dim=-1, keepdim=True) * fraction
    return logits.masked_fill(probs < threshold, float("-inf"))


def top_k(logits: torch.Tensor, k: int) -> torch.Tensor:
    """``apply_top_k_only``: remove every token below the k-th largest logit
    (all tokens tied with the k-th stay). ``k`` of 0 or at least the vocabulary is off."""
    if k <= 0 or k >= logits.shape[-1]:
        return logits
    kth = logits.topk(k, dim=-1).values[..., -1:]
    return logits.masked_fill(logits < kth, float("-inf"))


def top_p(logits: torch.Tensor, p: float) -> torch.Tensor:
    """The top-p half of ``apply_top_k_top_p``: sort ascending, remove tokens whose
    ascending cumulative probability is at most 1 - p, always keep the largest."""
    if p >= 1.0:
        return logits
    logits_sort, logits_idx = logits.sort(dim=-1, descending=False)
    probs_sum = torch.cumsum(logits_sort.softmax(dim=-1), dim=-1)
    mask = probs_sum <= 1 - p
    mask[..., -1] = False
    logits_sort = logits_sort.masked_fill(mask, float("-inf"))
    return logits_sort.scatter(-1, logits_idx, logits_sort)


# -- the mapping -----------------------------------------------------------------


def parameters(preset: Preset) -> dict[str, Any]:
    """The ``SamplingParams`` keyword arguments for ``preset`` (what can be expressed)."""
    return {
        "temperature": preset.temperature,
        "top_p": preset.top_p,
        "top_k": preset.top_k if preset.top_k > 0 else -1,
        "min_p": preset.min_p,
        "repetition_penalty": min(preset.repetition_penalty, MAX_REPETITION_PENALTY),
        "frequency_penalty": preset.frequency_penalty,
        "presence_penalty": preset.presence_penalty,
        "max_tokens": preset.max_new_tokens,
        "stop": list(preset.stop),
        "seed": None,
    }


def value_gaps(preset: Preset, engine: str = "vLLM") -> list[str]:
    """Plain reasons the preset's values cannot all reach vLLM (stage order aside)."""
    reasons = []
    if preset.typical_p < 1:
        reasons.append(f"{engine} has no typical sampling: the stage is dropped")
    if preset.no_repeat_ngram_size:
        reasons.append(f"{engine} has no no-repeat n-gram rule: it is dropped")
    if 0 < preset.temperature < MIN_TEMPERATURE:
        reasons.append(f"{engine} raises a temperature below {MIN_TEMPERATURE:g} to {MIN_TEMPERATURE:g}")
    if preset.repetition_penalty > MAX_REPETITION_PENALTY:
        reasons.append(
            f"{engine} accepts a repetition penalty of at most {MAX_REPETITION_PENALTY:g}: "
            f"{preset.repetition_penalty:g} is written as {MAX_REPETITION_PENALTY:g}"
        )
    return reasons


def gaps(preset: Preset) -> list[str]:
    """Every plain reason vLLM may write differently from ``preset``."""
    return value_gaps(preset) + order_reasons(preset, ORDER, "vLLM")


def closest(preset: Preset) -> Preset:
    """The nearest preset vLLM can express: its order, values kept, missing stages off."""
    return preset.replace(
        name=f"{preset.name[:100]} (as vLLM)",
        order=reorder(preset.order, ORDER),
        typical_p=1.0,
        no_repeat_ngram_size=0,
        temperature=max(preset.temperature, MIN_TEMPERATURE) if preset.temperature else 0.0,
        repetition_penalty=min(preset.repetition_penalty, MAX_REPETITION_PENALTY),
    )


def chain(native: dict[str, Any]) -> StepFunction:
    """vLLM's chain for the given ``SamplingParams`` keyword arguments."""
    t = float(native.get("temperature", 1.0))
    if 0 < t < MIN_TEMPERATURE:
        t = MIN_TEMPERATURE
    k, p, m = int(native.get("top_k", -1)), float(native.get("top_p", 1.0)), float(native.get("min_p", 0.0))
    rep = float(native.get("repetition_penalty", 1.0))
    freq, pres = float(native.get("frequency_penalty", 0.0)), float(native.get("presence_penalty", 0.0))
    no_penalties = rep == 1.0 and freq == 0.0 and pres == 0.0

    def step(logits: torch.Tensor, history: Sequence[int], generated: Sequence[int]) -> StepOutcome:
        z = logits.to(torch.float64)
        if not no_penalties:
            prompt = list(history)[: len(history) - len(generated)]
            z = penalties(z, prompt, generated, rep, freq, pres)
        if t < SAMPLING_EPS:
            return StepOutcome(one_hot(z.shape[-1], int(z.argmax())), False)
        z = temperature(z, t)
        after_min_p = min_p(z, m)
        after_top_k = top_k(after_min_p, k)
        after_top_p = top_p(after_top_k, p)
        tie = (
            cut_on_tie("min_p", m, z, after_min_p)
            or cut_on_tie("top_k", float(k), after_min_p, after_top_k)
            or cut_on_tie("top_p", p, after_top_k, after_top_p)
        )
        return StepOutcome(torch.softmax(after_top_p, dim=-1).numpy(), tie)

    return step
