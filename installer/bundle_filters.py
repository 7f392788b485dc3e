"""What the bundle leaves out: modules never imported and files never read by Samplewright.

Every entry was checked against a traced run (the command line's audition and step view, the
window) in which none of these modules was imported; installer/smoke.sh runs the built bundle
through the same work. Used by samplewright.spec; imports nothing heavy.
"""

from __future__ import annotations

import importlib.util
from fnmatch import fnmatch
from pathlib import Path

#: Model families whose classes the bundle keeps: the default model is a Llama-architecture model;
#: auto maps names to classes; encoder_decoder is imported by the auto classes themselves; the GGUF
#: tokenizer converter (integrations/gguf/gguf_tokenizer_mapping.py) imports the tokenizers of gemma,
#: gpt2, qwen2, qwen3_5 and t5.
KEPT_MODEL_FAMILIES = ("auto", "llama", "encoder_decoder", "gemma", "gpt2", "qwen2", "qwen3_5", "t5")
#: transformers sub-packages for training, serving and exporting, which the engine never uses.
UNUSED_TRANSFORMERS = ("commands", "cli", "pipelines", "onnx", "data", "trainer", "sagemaker", "kernels", "exporters")

#: Modules left out of the analysis: development tools, notebooks, and torch's parts for
#: training tools, benchmarks, C++ extensions and TensorBoard; scipy (only transformers' object-detection
#: losses would use it), hf_xet (downloads), Qt's network module, pyqtgraph's 3D, notebook and example
#: parts. (sympy and torch._dynamo stay: torch imports them while loading the model; matplotlib stays:
#: it draws the evaluation report's map.)
EXCLUDED_MODULES = (
    "tkinter",
    "pandas",
    "IPython",
    "notebook",
    "pytest",
    "_pytest",
    "pytestqt",
    "hypothesis",
    "mypy",
    "ruff",
    "PyInstaller",
    "pip",
    "setuptools",
    "pkg_resources",
    "distutils",
    "networkx",
    "pydantic",
    "rich",
    "typer",
    "click",
    "pygments",
    "torchvision",
    "torchaudio",
    "triton",
    "tensorboard",
    "tensorflow",
    "jax",
    "flax",
    "llm",
    "llama_cpp",
    "scipy",
    "hf_xet",
    "PySide6.QtNetwork",
    "pyqtgraph.examples",
    "pyqtgraph.jupyter",
    "pyqtgraph.opengl",
    "torch.utils.tensorboard",
    "torch.utils.benchmark",
    "torch.utils.bottleneck",
    "torch.utils.cpp_extension",
    "torch.utils.hipify",
    "torch.utils.model_dump",
    "huggingface_hub.cli",
    "huggingface_hub.commands",
    "transformers.commands",
    "transformers.cli",
    "transformers.trainer",
    "transformers.pipelines",
)

#: Collected files nobody reads at run time (paths inside the bundle, shell-style patterns).
UNNEEDED_FILES = (
    # torch: C++ headers, CMake files, test programs, static libraries
    "torch/include/*",
    "torch/share/*",
    "torch/bin/*",
    "torch/test/*",
    "*.a",
    "*.pyi",
    "torch/lib/libtorchbind_test.so",
    # Qt: translations (the window is in English), plugins for displays and services the window
    # never uses (VNC, framebuffer, EGL full-screen, SQL, TLS, network state, QML tooling, Designer)
    "PySide6/Qt/translations/*",
    "PySide6/Qt/plugins/egldeviceintegrations/*",
    "PySide6/Qt/plugins/networkinformation/*",
    "PySide6/Qt/plugins/tls/*",
    "PySide6/Qt/plugins/sqldrivers/*",
    "PySide6/Qt/plugins/qmltooling/*",
    "PySide6/Qt/plugins/designer/*",
    "PySide6/Qt/plugins/generic/*",
    "PySide6/Qt/plugins/platforms/libqvnc.so",
    "PySide6/Qt/plugins/platforms/libqlinuxfb.so",
    "PySide6/Qt/plugins/platforms/libqeglfs.so",
    "PySide6/Qt/plugins/platforms/libqminimalegl.so",
    "PySide6/Qt/plugins/platforms/libqvkkhrdisplay.so",
    "PySide6/Qt/lib/libQt6EglFSDeviceIntegration.so*",
    "PySide6/Qt/lib/libQt6EglFsKmsSupport.so*",
)


def excluded_modules() -> list[str]:
    """Module names the analysis must not follow, other transformers model families included
    (transformers names every family in imports that only type checkers run)."""
    spec = importlib.util.find_spec("transformers")
    folders = list(spec.submodule_search_locations or []) if spec else []
    families = [
        f"transformers.models.{entry.name}"
        for folder in folders
        for entry in sorted((Path(folder) / "models").iterdir())
        if entry.is_dir() and entry.name not in KEPT_MODEL_FAMILIES and not entry.name.startswith("_")
    ]
    return list(EXCLUDED_MODULES) + families


def wanted_transformers_module(name: str) -> bool:
    """Whether a transformers sub-module is bundled: everything but other model families and tools."""
    parts = name.split(".")
    if len(parts) >= 3 and parts[1] == "models":
        return parts[2] in KEPT_MODEL_FAMILIES
    return len(parts) < 2 or parts[1] not in UNUSED_TRANSFORMERS


#: Files kept although a pattern above matches them: torch will not import without this helper.
NEEDED_FILES = ("torch/bin/torch_shm_manager", "torch/bin/torch_shm_manager.exe")


def is_unneeded(dest: str) -> bool:
    """Whether a file bound for ``dest`` (a path inside the bundle) is left out."""
    dest = dest.replace("\\", "/")
    return dest not in NEEDED_FILES and any(fnmatch(dest, pattern) for pattern in UNNEEDED_FILES)


def keep_needed(toc):
    """A PyInstaller table of files without the unneeded ones."""
    return [entry for entry in toc if not is_unneeded(entry[0])]
