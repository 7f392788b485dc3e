"""Reading a team's existing engine settings into a preset, with a preview.

Recognised: transformers' ``generation_config.json``, a vLLM ``SamplingParams``
JSON object (its keyword arguments), and an OpenAI-compatible request body
(flat, or as ``{"body": ..., "extra_body": ...}`` as samplewright writes it).
The file is read as data only (strict JSON, at most 5 MB, nothing executed).
The preset takes the source engine's stage order, so it means what the team's
tool does today. Every key is accounted for: mapped, at its default, ignored
(it does not change the next-token distribution), dropped (it does, and
samplewright has no such stage) or unknown; a wrong type or an out-of-range
value refuses the whole file, naming the key.
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from ..errors import LibraryError
from ..library.settings_file import MAX_BYTES
from ..library.storage import BadContent, parse_json, read_limited
from ..presets import DEFAULT_ORDER, MAX_TEXT, Preset, PresetError
from . import vllm_target
from .common import Reading, reorder

DROPPED_WORDS = "changes the distribution or the search, and samplewright has no such stage: dropped"
SOURCE_TITLES = {
    "transformers": "transformers generation config",
    "vllm": "vLLM SamplingParams",
    "openai-request": "OpenAI-compatible request",
}

# -- per-format tables -------------------------------------------------------------

_COMMON_MAP = {
    "temperature": "temperature",
    "top_p": "top_p",
    "top_k": "top_k",
    "min_p": "min_p",
    "repetition_penalty": "repetition_penalty",
    "frequency_penalty": "frequency_penalty",
    "presence_penalty": "presence_penalty",
    "max_tokens": "max_new_tokens",
    "stop": "stop",
}
VLLM_IGNORED = {
    "n", "best_of", "seed", "logprobs", "prompt_logprobs", "detokenize", "skip_special_tokens",
    "spaces_between_special_tokens", "include_stop_str_in_output", "output_kind", "truncate_prompt_tokens",
    "stop_token_ids", "flat_logprobs", "logprob_token_ids", "stream_interval", "skip_clone", "extra_args",
}  # fmt: skip
#: Keys that change which tokens can be drawn, with their neutral value.
VLLM_DROPPED: dict[str, Any] = {
    "min_tokens": 0, "ignore_eos": False, "logit_bias": None, "allowed_token_ids": None, "bad_words": None,
    "logits_processors": None, "guided_decoding": None, "structured_outputs": None,
}  # fmt: skip
OPENAI_MAP = {**_COMMON_MAP, "max_completion_tokens": "max_new_tokens"}
OPENAI_IGNORED = VLLM_IGNORED | {
    "model", "prompt", "messages", "stream", "stream_options", "user", "top_logprobs", "echo", "suffix",
    "request_id", "priority", "add_special_tokens", "return_tokens_as_token_ids", "return_token_ids",
}  # fmt: skip
OPENAI_DROPPED = {**VLLM_DROPPED, "response_format": None, "tools": None, "tool_choice": None}
TRANSFORMERS_MAP = {
    "temperature": "temperature",
    "top_k": "top_k",
    "top_p": "top_p",
    "min_p": "min_p",
    "typical_p": "typical_p",
    "repetition_penalty": "repetition_penalty",
    "no_repeat_ngram_size": "no_repeat_ngram_size",
    "max_new_tokens": "max_new_tokens",
    "stop_strings": "stop",
}
#: generate()'s processors that samplewright has no stage for (transformers/generation/utils.py).
TRANSFORMERS_DROPPED = {
    "num_beams", "num_beam_groups", "diversity_penalty", "penalty_alpha", "epsilon_cutoff", "eta_cutoff", "top_h",
    "encoder_repetition_penalty", "encoder_no_repeat_ngram_size", "bad_words_ids", "force_words_ids",
    "sequence_bias", "suppress_tokens", "begin_suppress_tokens", "forced_bos_token_id", "forced_eos_token_id",
    "min_length", "min_new_tokens", "exponential_decay_length_penalty", "guidance_scale", "renormalize_logits",
    "remove_invalid_values", "watermarking_config", "constraints", "dola_layers",
}  # fmt: skip
TRANSFORMERS_MARKS = {"transformers_version", "_from_model_config", "do_sample", "typical_p", "no_repeat_ngram_size",
                      "max_new_tokens", "max_length", "num_beams", "stop_strings", "bos_token_id", "eos_token_id",
                      "pad_token_id"}  # fmt: skip
OPENAI_MARKS = {"body", "extra_body", "model", "messages", "prompt", "stream", "max_completion_tokens", "user",
                "echo", "suffix", "top_logprobs", "response_format", "tools"}  # fmt: skip


@functools.lru_cache(maxsize=1)
def _transformers_known() -> tuple[frozenset[str], dict[str, Any]]:
    """GenerationConfig's own attributes and generate()'s defaults, from the installed transformers."""
    from transformers import GenerationConfig

    return frozenset(vars(GenerationConfig())), dict(GenerationConfig._get_default_generation_params())


def recognise(obj: Any) -> str | None:
    """Which foreign format a parsed JSON value is, or None."""
    if not isinstance(obj, dict) or not obj or "format" in obj or "name" in obj:
        return None  # empty, not an object, or one of samplewright's own files (a preset file has a name)
    keys = set(obj)
    if keys & OPENAI_MARKS:
        return "openai-request"
    if keys & TRANSFORMERS_MARKS:
        return "transformers"
    if keys & set(_COMMON_MAP) or keys <= VLLM_IGNORED | set(VLLM_DROPPED):
        return "vllm"
    return None


# -- reading ------------------------------------------------------------------------


def _convert(key: str, field: str, value: Any) -> Any:
    if field == "stop":
        value = [value] if isinstance(value, str) else value
        if value is None:
            value = []
    if field == "top_k" and isinstance(value, int) and not isinstance(value, bool) and value in (-1, 0):
        value = 0
    try:
        return Preset(name="x", **{field: value}).to_dict()[field]
    except PresetError as exc:
        raise PresetError(key, str(exc).split(": ", 1)[-1]) from None


def _neutral(value: Any, default: Any) -> bool:
    return value is None or value == default or value in ([], {}, False) and not default


def _read_table(
    obj: Mapping[str, Any],
    mapping: Mapping[str, str],
    ignored: set[str],
    dropped: Mapping[str, Any],
    unknown: Callable[[str], str | None],
) -> tuple[dict[str, Any], list, list]:
    fields: dict[str, Any] = {}
    mapped, skipped = [], []
    for key, value in obj.items():
        if key in mapping:
            field = mapping[key]
            if value is None:
                skipped.append((key, "null: the engine's default applies; the preset keeps its neutral value"))
                continue
            fields[field] = _convert(key, field, value)
            mapped.append((key, value, f"{field} = {fields[field]!r}"))
        elif key in ignored:
            skipped.append((key, "does not change the next-token distribution; ignored"))
        elif key in dropped:
            if _neutral(value, dropped[key]):
                skipped.append((key, "at its default; nothing to carry over"))
            else:
                skipped.append((key, DROPPED_WORDS))
        else:
            reason = unknown(key)
            if reason:
                skipped.append((key, reason))
    return fields, mapped, skipped


def _refuse_unknown(key: str) -> str | None:
    raise PresetError(key, "SamplingParams has no such keyword argument (vLLM would refuse it)")


def read_vllm(obj: Mapping[str, Any]) -> Reading:
    """A vLLM SamplingParams object as preset fields (vLLM's order)."""
    fields, mapped, skipped = _read_table(obj, _COMMON_MAP, VLLM_IGNORED, VLLM_DROPPED, _refuse_unknown)
    fields["order"] = reorder(DEFAULT_ORDER, vllm_target.ORDER)
    return Reading(fields, tuple(mapped), tuple(skipped))


def read_openai(obj: Mapping[str, Any]) -> Reading:
    """An OpenAI-compatible request body (flat or body/extra_body) as preset fields."""
    flat = dict(obj)
    for group in ("body", "extra_body"):
        part = flat.pop(group, None)
        if part is not None and not isinstance(part, dict):
            raise PresetError(group, f"{part!r} is not a JSON object")
        flat.update(part or {})
    fields, mapped, skipped = _read_table(
        flat, OPENAI_MAP, OPENAI_IGNORED, OPENAI_DROPPED, lambda key: "unknown request field; ignored"
    )
    fields["order"] = reorder(DEFAULT_ORDER, vllm_target.ORDER)
    return Reading(fields, tuple(mapped), tuple(skipped))


def read_transformers(obj: Mapping[str, Any]) -> Reading:
    """A generation_config.json as preset fields, with generate()'s defaults for absent keys."""
    known, defaults = _transformers_known()
    body = dict(obj)
    do_sample = body.pop("do_sample", defaults.get("do_sample", False))
    if not isinstance(do_sample, bool):
        raise PresetError("do_sample", f"{do_sample!r} is not true or false")

    def unknown(key: str) -> str | None:
        if key in known or key.startswith("_"):
            return "does not change the next-token distribution; ignored"
        return "unknown to transformers' GenerationConfig; generate() ignores it"

    dropped = {key: defaults.get(key) for key in TRANSFORMERS_DROPPED}
    fields, mapped, skipped = _read_table(body, TRANSFORMERS_MAP, set(), dropped, unknown)
    for key in ("temperature", "top_k", "top_p", "typical_p", "repetition_penalty", "no_repeat_ngram_size"):
        field = TRANSFORMERS_MAP[key]
        if key not in body and field not in fields and key in defaults:
            fields[field] = _convert(key, field, defaults[key])
            mapped.append((key, "(absent)", f"{field} = {fields[field]!r} (generate()'s default)"))
    if not do_sample:
        for field in ("top_k", "top_p", "min_p", "typical_p"):
            fields.pop(field, None)
        fields["temperature"] = 0.0
        mapped.append(("do_sample", False, "temperature = 0.0 (greedy; the sampling-only fields have no effect)"))
    fields["order"] = DEFAULT_ORDER
    return Reading(fields, tuple(mapped), tuple(skipped))


READERS: dict[str, Callable[[Mapping[str, Any]], Reading]] = {
    "transformers": read_transformers,
    "vllm": read_vllm,
    "openai-request": read_openai,
}


@dataclasses.dataclass(frozen=True)
class ForeignPreview:
    """What importing a foreign file would bring in; nothing is written by making one."""

    source: str
    format: str
    preset: Preset
    reading: Reading

    def lines(self) -> list[str]:
        """The preview as plain lines for the CLI and the window."""
        out = [f"{self.source}: {SOURCE_TITLES[self.format]} -> preset '{self.preset.name}'"]
        out += [f"  maps  {key} = {value!r}  ->  {result}" for key, value, result in self.reading.mapped]
        out += [f"  skips {key}: {why}" for key, why in self.reading.dropped]
        out.append("  order: " + " > ".join(self.preset.order) + " (the source engine's)")
        return out

    def to_json(self) -> dict[str, Any]:
        """The preview as plain JSON types."""
        return {
            "source": self.source,
            "format": self.format,
            "preset": self.preset.to_dict(),
            "mapped": [{"key": k, "value": v, "result": r} for k, v, r in self.reading.mapped],
            "skipped": [{"key": k, "reason": r} for k, r in self.reading.dropped],
        }


def preset_name(path: Path, fmt: str) -> str:
    """A name for the imported preset from the file (a config's folder for generation_config.json)."""
    stem = path.parent.name if path.name == "generation_config.json" and path.parent.name else path.stem
    stem = " ".join(stem.split()) or "imported"
    suffix = {"transformers": "transformers", "vllm": "vLLM", "openai-request": "request"}[fmt]
    return f"{stem[: MAX_TEXT['name'] - 20]} (from {suffix})"


def preview_foreign(obj: Any, path: Path) -> ForeignPreview | None:
    """The preview of a parsed foreign file, or None if it is not one.

    Raises:
        LibraryError: naming the file and the key, for a wrong type or an out-of-range value.
    """
    fmt = recognise(obj)
    if fmt is None:
        return None
    try:
        reading = READERS[fmt](obj)
        preset = Preset(name=preset_name(path, fmt), **reading.fields)
    except PresetError as exc:
        raise LibraryError(f"{path.name} is refused ({SOURCE_TITLES[fmt]}): {exc}. Nothing was imported.") from None
    return ForeignPreview(path.name, fmt, preset, reading)


def read_foreign(path: str | Path) -> ForeignPreview | None:
    """Read ``path`` as a foreign settings file; None if it is JSON of another kind.

    Raises:
        LibraryError: the file is larger than 5 MB, not JSON, or breaks a rule (named).
    """
    path = Path(path)
    try:
        obj = parse_json(read_limited(path, MAX_BYTES))
    except BadContent as exc:
        raise LibraryError(f"{path.name} is refused: it is {exc}. Nothing was imported.") from None
    except OSError as exc:
        raise LibraryError(f"Cannot read {path}: {exc.strerror or exc}.") from None
    return preview_foreign(obj, path)
