"""torch for Samplewright's bundle: the contributed hook without its "every submodule" import list.

The contributed hook (pyinstaller-hooks-contrib) adds all of torch's ~3000 submodules; the
analysis already follows every import torch and transformers make, function-level ones included,
so only those are kept. Libraries and data files are collected as in the contributed hook;
bundle_filters.UNNEEDED_FILES then drops headers and test programs.
"""

from PyInstaller.utils.hooks import PY_DYLIB_PATTERNS, collect_data_files, collect_dynamic_libs

module_collection_mode = "pyz+py"  # torch reads its own source (TorchScript, torch._dynamo)
warn_on_missing_hiddenimports = False
datas = collect_data_files("torch", excludes=["**/*.h", "**/*.hpp", "**/*.cuh", "**/*.cpp", "**/*.pyi", "**/*.cmake"])
binaries = collect_dynamic_libs("torch", search_patterns=PY_DYLIB_PATTERNS + ["*.so.*"])
bindepend_symlink_suppression = ["**/torch/lib/*.so*"]
