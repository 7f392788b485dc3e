"""Where a library is and what a new one starts with: the personal library folder and the
starter presets (invented examples for a ferry company's communications team)."""

from __future__ import annotations

import os
from pathlib import Path

import platformdirs

from ..presets import Preset


def starter_presets() -> tuple[Preset, ...]:
    """The presets a new library starts with: invented examples for a ferry company's
    communications team, read from ``resources/presets/starter.json`` (itself a settings
    file, so the same schema and rules check it)."""
    from importlib import resources

    from .settings_file import parse_settings  # jsonschema loads only when needed

    data = (resources.files("samplewright") / "resources" / "presets" / "starter.json").read_bytes()
    return parse_settings(data, "starter.json").presets


def default_library_dir() -> Path:
    """The personal library folder: ``$SAMPLEWRIGHT_LIBRARY_DIR``, else ``<user data>/samplewright/library``."""
    override = os.environ.get("SAMPLEWRIGHT_LIBRARY_DIR")
    if override:
        return Path(override).expanduser()
    return Path(platformdirs.user_data_dir("samplewright", appauthor=False)) / "library"
