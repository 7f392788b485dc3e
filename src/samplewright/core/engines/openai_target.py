"""The request fields of OpenAI-compatible HTTP servers, with the common server
extensions in a separate group.

The file written is ``{"body": {...}, "extra_body": {...}}``: ``body`` holds the
generic fields every OpenAI-compatible server reads (temperature, top_p,
frequency_penalty, presence_penalty, max_tokens, stop, seed); ``extra_body``
holds top_k, min_p and repetition_penalty, which only some servers read (the
OpenAI Python client sends its ``extra_body`` argument merged into the body).

Semantics: OpenAI's own service does not publish its implementation, so its
stage order cannot be read and is unverified. This module follows vLLM's
OpenAI-compatible server, whose source was read: the request becomes
``SamplingParams`` in ``CompletionRequest.to_sampling_params``
(vllm/entrypoints/openai/completion/protocol.py, commit d5dba2d7b0ab), where a
field left out takes the served model's generation-config default, so every
field is always written. From there the chain is vLLM's (:mod:`.vllm_target`).
Ranges of the generic fields: OpenAI's OpenAPI document (temperature 0 to 2,
top_p 0 to 1, penalties -2 to 2), as generated into openai-lib 0.1.0.
"""

from __future__ import annotations

from typing import Any

from ..presets import Preset
from . import vllm_target
from .common import StepFunction, order_reasons

NAME = "openai-request"
TITLE = "OpenAI-compatible request fields"
ORDER = vllm_target.ORDER
GENERIC = ("temperature", "top_p", "frequency_penalty", "presence_penalty", "max_tokens", "stop", "seed")
EXTENSIONS = ("top_k", "min_p", "repetition_penalty")
MAX_TEMPERATURE = 2.0  # OpenAI's OpenAPI document
MAX_STOPS = 4  # OpenAI's OpenAPI document: "up to 4 sequences"


def parameters(preset: Preset) -> dict[str, Any]:
    """The request as two groups: generic ``body`` fields and server ``extra_body`` extensions."""
    native = vllm_target.parameters(preset)
    return {
        "body": {key: native[key] for key in GENERIC},
        "extra_body": {key: native[key] for key in EXTENSIONS},
    }


def flatten(request: dict[str, Any]) -> dict[str, Any]:
    """The fields as one body, as a server extended like vLLM's receives them."""
    return {**request.get("body", {}), **request.get("extra_body", {})}


def gaps(preset: Preset) -> list[str]:
    """Every plain reason a server may write differently from ``preset``."""
    reasons = vllm_target.value_gaps(preset, "an OpenAI-compatible server")
    reasons += order_reasons(preset, ORDER, "an OpenAI-compatible server (as vLLM's)")
    if preset.temperature > MAX_TEMPERATURE:
        reasons.append(f"OpenAI's own service accepts a temperature of at most {MAX_TEMPERATURE:g}")
    if len(preset.stop) > MAX_STOPS:
        reasons.append(f"OpenAI's own service accepts at most {MAX_STOPS} stop strings")
    used = [key for key in EXTENSIONS if getattr(preset, key) != Preset.__dataclass_fields__[key].default]
    if used:
        reasons.append(
            f"{', '.join(used)} {'is a server extension' if len(used) == 1 else 'are server extensions'}: "
            "a server that ignores extra_body "
            "(OpenAI's own service) writes differently"
        )
    return reasons


def closest(preset: Preset) -> Preset:
    """The nearest preset such a server can express (as for vLLM)."""
    variant = vllm_target.closest(preset)
    return variant.replace(name=f"{preset.name[:100]} (as a request)")


def chain(native: dict[str, Any]) -> StepFunction:
    """The chain of a vLLM-style server for this request."""
    return vllm_target.chain(flatten(native))
