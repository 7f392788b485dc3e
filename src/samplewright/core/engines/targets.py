"""The engine targets by name, and each one's chain for a preset."""

from __future__ import annotations

import tempfile
from pathlib import Path
from types import ModuleType
from typing import Any

from ..errors import SamplewrightError
from ..library.storage import dump_json
from ..presets import Preset
from . import ENGINE_TARGETS, openai_target, transformers_target, vllm_target
from .common import StepFunction

MODULES: dict[str, ModuleType] = {
    "transformers": transformers_target,
    "vllm": vllm_target,
    "openai-request": openai_target,
}


def module(target: str) -> ModuleType:
    """The module of an engine target.

    Raises:
        SamplewrightError: for a name that is not one of the engine targets.
    """
    if target not in MODULES:
        raise SamplewrightError(f"Unknown target {target!r}; choose one of {', '.join(ENGINE_TARGETS)}.")
    return MODULES[target]


def parameters(target: str, preset: Preset) -> dict[str, Any]:
    """The target's own parameters for ``preset`` (what its file holds)."""
    return dict(module(target).parameters(preset))


def chain(target: str, preset: Preset, model=None) -> StepFunction:
    """The target's chain for ``preset``, built from the exported parameters.

    For transformers the parameters go through a real ``generation_config.json``
    read back by ``GenerationConfig.from_pretrained``, and the processors come
    from generate()'s own code (with ``model``, or a stand-in model).
    """
    native = parameters(target, preset)
    if target != "transformers":
        return module(target).chain(native)
    with tempfile.TemporaryDirectory(prefix="samplewright-fidelity-") as folder:
        (Path(folder) / transformers_target.CONFIG_FILE).write_bytes(dump_json(native))
        config = transformers_target.load_config(folder)
    return transformers_target.chain_from_config(config, model)
