"""Finding the presets a command names: a preset or settings file, or a name in
the library (the folder in use, or one given) and then among the starter presets.
Shared by every command that takes ``--preset``; no torch."""

from __future__ import annotations

from pathlib import Path

from ..presets import Preset
from .library import PresetLibrary, starter_presets
from .settings_file import read_importable
from .user_state import library_in_use


def resolve_presets(spec: str, library_dir: str | None = None) -> list[Preset]:
    """The presets ``--preset spec`` names: a file's presets, or one preset by name.

    A path to a file (or any spec ending in ``.json``) is read with
    :func:`settings_file.read_importable`: a single preset file gives one
    preset, a settings file all of its presets. A name is looked up in the
    library first, so a team's edited copy of a starter preset wins; the
    built-in starter presets answer only names the library does not hold.

    Raises:
        LibraryError: when the file is missing or refused, or when neither the
            library nor the starter set holds the name (the message lists what does).
    """
    if spec.endswith(".json") or Path(spec).is_file():
        return list(read_importable(spec).presets)
    lib = PresetLibrary(library_dir or library_in_use())
    wanted = spec.strip().casefold()
    if spec in {r.id for r in lib.records()} or any(r.name.casefold() == wanted for r in lib.records()):
        return [lib.find(spec).preset]  # raises LibraryError when several share the name
    for preset in starter_presets():
        if preset.name.casefold() == wanted:
            return [preset]
    return [lib.find(spec).preset]  # raises LibraryError naming what exists
