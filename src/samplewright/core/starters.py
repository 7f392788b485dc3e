"""The starter presets a new library begins with (``resources/presets/starter.json``).

The file is itself a settings file, so it is checked by the same schema and
rules as any file a colleague sends.
"""
from __future__ import annotations

from importlib import resources

from .presets import Preset
from .settings_file import parse_settings


def starter_presets() -> tuple[Preset, ...]:
    """The starter presets: invented examples for a ferry company's communications team."""
    data = resources.files("samplewright").joinpath("resources", "presets", "starter.json").read_bytes()
    return parse_settings(data, "starter.json").presets
