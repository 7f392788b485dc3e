"""torch for Samplewright's bundle: the contributed hook, minus torch's parts for tests and tooling.

As in the contributed hook (pyinstaller-hooks-contrib), every submodule is kept: torch imports
some by name at run time (torch._dynamo's polyfills, for one), which no analysis can see. Left out
are the sub-packages bundle_filters.EXCLUDED_MODULES names (TensorBoard, benchmarks, C++
extensions, ...) and torch's own test helpers; bundle_filters.UNNEEDED_FILES drops headers and
test programs.
"""

from PyInstaller.utils.hooks import PY_DYLIB_PATTERNS, collect_data_files, collect_dynamic_libs, collect_submodules

UNUSED = (
    "torch.testing._internal",
    "torch.utils.tensorboard",
    "torch.utils.benchmark",
    "torch.utils.bottleneck",
    "torch.utils.cpp_extension",
    "torch.utils.hipify",
    "torch.utils.model_dump",
)


def _wanted(name: str) -> bool:
    return not any(name == unused or name.startswith(unused + ".") for unused in UNUSED)


module_collection_mode = "pyz+py"  # torch reads its own source (TorchScript, torch._dynamo)
warn_on_missing_hiddenimports = False
hiddenimports = collect_submodules("torch", filter=_wanted)
datas = collect_data_files("torch", excludes=["**/*.h", "**/*.hpp", "**/*.cuh", "**/*.cpp", "**/*.pyi", "**/*.cmake"])
binaries = collect_dynamic_libs("torch", search_patterns=PY_DYLIB_PATTERNS + ["*.so.*"])
bindepend_symlink_suppression = ["**/torch/lib/*.so*"]
