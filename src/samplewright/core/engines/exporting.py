"""Writing presets in an engine's own format.

One preset: for transformers ``out`` is the folder that receives
``generation_config.json``; for vLLM and request fields ``out`` is the JSON
file. Several presets: ``out`` is a folder with one subfolder (transformers) or
one ``<name>.json`` file per preset. Everything is prepared first and each file
written atomically, so a refused export writes nothing.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Sequence
from pathlib import Path

from ..errors import LibraryError
from ..library.storage import atomic_write, dump_json, explain_os_error
from ..presets import Preset
from . import targets, transformers_target


@dataclasses.dataclass(frozen=True)
class ExportedFile:
    """One written file: the preset, the target and the path."""

    preset: Preset
    target: str
    path: Path


def slug(name: str) -> str:
    """A file-system-safe name for a preset: lower case, letters, digits and dashes."""
    text = re.sub(r"[^a-z0-9]+", "-", name.lower()).strip("-")
    return text[:80] or "preset"


def plan_paths(presets: Sequence[Preset], target: str, out: str | Path) -> list[Path]:
    """The file each preset goes to (see the module docstring).

    Raises:
        LibraryError: when ``out`` is a file but a folder is needed, or two names share a file name.
    """
    out = Path(out)
    folder_needed = target == "transformers" or len(presets) > 1
    if folder_needed and out.exists() and not out.is_dir():
        raise LibraryError(f"{out} is a file; give a folder for this export. Nothing was written.")
    if not folder_needed and out.is_dir():
        raise LibraryError(f"{out} is a folder; give the JSON file to write. Nothing was written.")
    if len(presets) == 1:
        return [out / transformers_target.CONFIG_FILE if target == "transformers" else out]
    names = [slug(p.name) for p in presets]
    for index, name in enumerate(names):
        if name in names[:index]:
            raise LibraryError(f"Two presets would both be written as {name!r}; rename one. Nothing was written.")
    if target == "transformers":
        return [out / name / transformers_target.CONFIG_FILE for name in names]
    return [out / f"{name}.json" for name in names]


def export_to(presets: Sequence[Preset], target: str, out: str | Path) -> list[ExportedFile]:
    """Write ``presets`` in ``target``'s format under ``out``.

    Raises:
        LibraryError: on a bad destination (nothing written) or a failed write.
    """
    if not presets:
        raise LibraryError("No presets to export.")
    payloads = [dump_json(targets.parameters(target, p)) for p in presets]
    paths = plan_paths(presets, target, out)
    written = []
    for preset, path, data in zip(presets, paths, payloads, strict=True):
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write(path, data)
        except OSError as exc:
            raise explain_os_error(exc, path.parent, f"write {path.name}", "The export stopped there") from exc
        written.append(ExportedFile(preset, target, path))
    return written


def destination_kind(target: str, count: int) -> str:
    """``"folder"`` or ``"file"``: what a window should ask the user for before writing."""
    return "folder" if target == "transformers" or (count > 1 and target != "samplewright") else "file"


def write_for_target(
    presets: Sequence[Preset], target: str, out: str | Path, model: str | None = None
) -> tuple[str, list[Path]]:
    """Write ``presets`` for any target, the settings file included.

    Returns:
        A one-line summary for the user, and the files written.

    Raises:
        LibraryError: on a refused destination or a failed write (nothing, or only whole files, written).
    """
    if target == "samplewright":
        from ..library.settings_file import export_settings

        export_settings(list(presets), out, model=model)
        return f"Exported {len(presets)} preset(s) to {out}.", [Path(out)]
    written = export_to(presets, target, out)
    where = written[0].path if len(written) == 1 else Path(out)
    return f"Exported {len(written)} preset(s) for {target} to {where}.", [f.path for f in written]
