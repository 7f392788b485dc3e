"""The program's version, read once from the installed package's metadata.

pyproject.toml is the one place the version is written; this module reads
it back so the core never imports the package root.
"""

from __future__ import annotations

from importlib import metadata

try:
    VERSION = metadata.version("samplewright")
except metadata.PackageNotFoundError:  # a source tree used without installing it
    VERSION = "0+unknown"
