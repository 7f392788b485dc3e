"""The portable settings file: presets handed to colleagues and other programs.

One JSON document (docs/settings-format.md describes it for other programs)::

    {"format": "samplewright-settings", "format_version": 1,
     "exported_by": "ingrid", "exported_at": "2025-05-02T09:14:00+00:00",
     "tool_version": "0.1.0", "model": "SmolLM2-135M-Instruct",
     "presets": [ {"name": ..., "temperature": ..., ..., "order": [...]} ]}

``resources/settings.schema.json`` (JSON Schema, draft 2020-12) is checked on
export and on import, and every preset also goes through
:meth:`Preset.from_dict`. A file is only ever parsed as data; nothing in it is
executed. Older format versions are brought up to date one step at a time by
the migrators registered with :func:`register_migrator`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from ..errors import LibraryError
from ..presets import Preset, PresetError, now_iso
from ..text_rules import shown
from ..version import VERSION
from .records import RECORD_FORMAT, SETTINGS_FORMAT, decode_record, foreign_reason
from .settings_problems import joined, preset_problems, schema_problem
from .settings_problems import schema as schema  # importable from here, where it was
from .storage import BadContent, atomic_write, current_user, dump_json, explain_os_error, parse_json, read_limited

FORMAT = SETTINGS_FORMAT
FORMAT_VERSION = 1
MAX_BYTES = 5_000_000
#: The presets of one file, written compactly, take at most this much: with room for the
#: header (who, when, which model: under 1 kB), so that every file that is read can be
#: exported again within MAX_BYTES, and every exported file can be read again.
MAX_PRESET_BYTES = MAX_BYTES - 4096

Migrator = Callable[[dict[str, Any]], dict[str, Any]]
#: from_version -> function turning a document of that version into one of from_version + 1.
_MIGRATORS: dict[int, Migrator] = {}


def register_migrator(from_version: int) -> Callable[[Migrator], Migrator]:
    """Decorator: register the step that upgrades a ``from_version`` document to the next version."""

    def decorate(function: Migrator) -> Migrator:
        _MIGRATORS[from_version] = function
        return function

    return decorate


def migrate(document: dict[str, Any], current: int | None = None) -> dict[str, Any]:
    """Bring a document up to the ``current`` format version, one registered step at a time.

    Raises:
        LibraryError: for a newer version than ``current`` or a version with no way forward.
    """
    current = FORMAT_VERSION if current is None else current
    version = document.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool):
        raise LibraryError(f"format_version {str(version)[:20]!r} is not a version number")
    if version > current:
        raise LibraryError(
            f"it was made by a newer Samplewright (format version {version}; this one reads "
            f"up to {current}); update Samplewright to read it"
        )
    while version < current:
        if version not in _MIGRATORS:
            raise LibraryError(f"format version {version} is not one Samplewright knows")
        document = _MIGRATORS[version](dict(document))
        version += 1
        document["format_version"] = version
    return document


@dataclasses.dataclass(frozen=True)
class SettingsDocument:
    """A settings file's content, checked.

    Attributes:
        presets: the presets, in file order (names are unique).
        exported_by, exported_at, tool_version: who wrote the file, when, with which version.
        model: the model the presets were tuned on, or None.
        format_version: the version the file was written in (before migration).
    """

    presets: tuple[Preset, ...]
    exported_by: str = ""
    exported_at: str = ""
    tool_version: str = ""
    model: str | None = None
    format_version: int = FORMAT_VERSION


def _check_unique(presets: Iterable[Preset]) -> None:
    seen: set[str] = set()
    for preset in presets:
        if preset.name in seen:
            raise LibraryError(f"two presets are named {shown(preset.name)}; names in a settings file must differ")
        seen.add(preset.name)


def settings_json(
    presets: Iterable[Preset], exported_by: str | None = None, model: str | None = None
) -> dict[str, Any]:
    """The settings document for ``presets`` as plain JSON types (not yet checked)."""

    document = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "exported_by": exported_by or current_user(),
        "exported_at": now_iso(),
        "tool_version": VERSION,
        "presets": [p.to_dict() for p in presets],
    }
    if model:
        document["model"] = model
    return document


def export_settings(
    presets: Iterable[Preset], path: str | Path, exported_by: str | None = None, model: str | None = None
) -> SettingsDocument:
    """Write ``presets`` to a settings file at ``path`` (atomically: old file or new, whole).

    Args:
        presets: the presets to export (at least one; names must differ).
        path: the file to write.
        exported_by: the name recorded as exporter (default: the login name).
        model: the model the presets were tuned on, if known.

    Returns:
        The document as written.

    Raises:
        LibraryError: when the document breaks the schema, is over 5 MB, or cannot be written.
    """
    presets, path = tuple(presets), Path(path)
    try:
        _check_unique(presets)
    except LibraryError as exc:
        raise LibraryError(f"Cannot export: {exc}.") from None
    document = settings_json(presets, exported_by, model)
    problem = schema_problem(document)
    if problem:
        raise LibraryError(f"Cannot export: {problem}.")
    if _presets_size(document["presets"]) > MAX_PRESET_BYTES:
        raise LibraryError(
            f"Cannot export: the file would be larger than {MAX_BYTES // 1_000_000} MB; export fewer presets."
        )
    data = dump_json(document)
    if len(data) > MAX_BYTES:  # readable layout does not fit: the compact one does (MAX_PRESET_BYTES)
        data = dump_json(document, compact=True)
    write_file(path, data)
    return _document_from(document, FORMAT_VERSION)


def export_preset_file(preset: Preset, path: str | Path) -> Path:
    """Save one preset as a plain preset file (its ``to_dict`` form) anywhere, atomically.

    The way out when the library cannot be written: the file can be checked
    with :func:`check_file` and added to a library later.

    Raises:
        LibraryError: when the file cannot be written (the old file, if any, is untouched).
    """
    path = Path(path)
    write_file(path, dump_json(preset.to_dict()))
    return path


def write_file(path: Path, data: bytes) -> None:
    """Write an exported file atomically, outside any library.

    Raises:
        LibraryError: when its folder is missing (saying so) or cannot be written; no file was written.
    """
    if not path.parent.is_dir():
        raise LibraryError(
            f"Could not write {path.name}: the folder {path.parent} does not exist. No file was "
            "written; create the folder or choose another place."
        )
    try:
        atomic_write(path, data)
    except OSError as exc:
        raise explain_os_error(exc, path.parent, f"write {path.name}", "No file was written") from exc


def read_settings(path: str | Path) -> SettingsDocument:
    """Read and check a settings file.

    Raises:
        LibraryError: saying why the file is refused: over 5 MB, not JSON, not a
            settings file, made by a newer version, or breaking the schema or a
            preset's rules (with the place, e.g. ``presets[2].top_p``).
    """
    path = Path(path)
    return parse_settings(_read_bytes(path), path.name)


def read_importable(path: str | Path) -> SettingsDocument:
    """Read a settings file, or a single preset file (as :func:`export_preset_file` writes it)
    as a one-preset document, so either can be previewed and imported.

    Raises:
        LibraryError: as for :func:`read_settings`; for a single preset file, naming
            the field that breaks the preset's rules.
    """
    path = Path(path)
    data = _read_bytes(path)
    try:
        obj = parse_json(data)
    except BadContent:
        return parse_settings(data, path.name)  # refused with the settings file's own message
    if is_preset_file(obj):
        problems = preset_problems(obj)
        if problems:
            raise LibraryError(f"{path.name} is refused: it is a preset file, but {joined(problems)}.")
        return SettingsDocument((Preset.from_dict(obj),))
    return _parse_object(obj, path.name)


def is_preset_file(obj: Any) -> bool:
    """Whether a parsed JSON value is a single preset's plain form (as :func:`export_preset_file` writes)."""
    return isinstance(obj, dict) and "format" not in obj and "name" in obj


def parse_settings(data: bytes, source: str = "the settings file") -> SettingsDocument:
    """Check the bytes of a settings file; ``source`` names it in messages.

    Raises:
        LibraryError: as for :func:`read_settings`.
    """
    if len(data) > MAX_BYTES:
        raise LibraryError(f"{source} is refused: it is larger than {MAX_BYTES // 1_000_000} MB.")
    try:
        obj = parse_json(data)
    except BadContent as exc:
        raise LibraryError(f"{source} is refused: it is {exc}.") from None
    return _parse_object(obj, source)


def _parse_object(obj: Any, source: str) -> SettingsDocument:
    if not isinstance(obj, dict) or obj.get("format") != FORMAT:
        reason = (
            "a library preset file"
            if isinstance(obj, dict) and obj.get("format") == RECORD_FORMAT
            else foreign_reason(obj)
        )
        raise LibraryError(f"{source} is not a Samplewright settings file: {reason}.")
    try:
        document = migrate(obj)
    except LibraryError as exc:
        raise LibraryError(f"{source} is refused: {exc}.") from None
    problem = schema_problem(document)
    if problem:
        raise LibraryError(f"{source} is refused: it does not match the settings format at {problem}.")
    try:
        return _document_from(document, obj["format_version"])
    except LibraryError as exc:
        raise LibraryError(f"{source} is refused: {exc}.") from None


def _presets_size(presets: list[dict[str, Any]]) -> int:
    return len(dump_json(presets, compact=True))


def _document_from(document: dict[str, Any], written_version: int) -> SettingsDocument:
    presets, problems = [], []
    for index, item in enumerate(document["presets"]):
        try:
            presets.append(Preset.from_dict(item))
        except PresetError:
            found = "; ".join(preset_problems(item))
            problems.append(f"presets[{index}] ({shown(item.get('name'), 60)}): {found}")
    if problems:
        raise LibraryError(joined(problems))
    _check_unique(presets)
    if _presets_size([p.to_dict() for p in presets]) > MAX_PRESET_BYTES:
        raise LibraryError(
            f"its presets take more than {MAX_PRESET_BYTES / 1_000_000:.3f} MB when written out, so they "
            f"could not be exported again within {MAX_BYTES // 1_000_000} MB; split the file"
        )
    return SettingsDocument(
        tuple(presets),
        document["exported_by"],
        document["exported_at"],
        document["tool_version"],
        document.get("model"),
        written_version,
    )


def _read_bytes(path: Path) -> bytes:
    try:
        return read_limited(path, MAX_BYTES)
    except BadContent:
        raise LibraryError(f"{path.name} is refused: it is larger than {MAX_BYTES // 1_000_000} MB.") from None
    except IsADirectoryError:
        raise LibraryError(f"{path} is a folder, not a file.") from None
    except FileNotFoundError:
        raise LibraryError(f"There is no file {path}.") from None
    except OSError as exc:
        raise LibraryError(f"Cannot read {path}: {exc.strerror}.") from None


def check_file(path: str | Path) -> str:
    """Recognise and check a preset file, a settings file or a library preset file.

    Returns:
        A one-line verdict naming the kind of file and what it holds.

    Raises:
        LibraryError: for an unreadable, oversized, non-JSON or unknown file, or
            a settings/library file that breaks its rules.
        PresetError: for a single preset file with an invalid value or unknown key
            (every one of them in the message).
    """
    path = Path(path)
    data = _read_bytes(path)
    try:
        obj = parse_json(data)
    except BadContent as exc:
        raise LibraryError(f"{path.name} is not usable: it is {exc}.") from None
    if isinstance(obj, dict) and obj.get("format") == FORMAT:
        doc = _parse_object(obj, path.name)
        names = ", ".join(f"'{p.name}'" for p in doc.presets[:8]) + (", ..." if len(doc.presets) > 8 else "")
        return (
            f"{path.name}: a valid settings file (format version {doc.format_version}) with "
            f"{len(doc.presets)} preset(s): {names}; exported by {doc.exported_by} at {doc.exported_at}"
        )
    if isinstance(obj, dict) and obj.get("format") == RECORD_FORMAT:
        try:
            record = decode_record(data)
        except BadContent as exc:
            raise LibraryError(f"{path.name} is not a usable library preset: {exc}.") from None
        return (
            f"{path.name}: a valid library preset '{record.name}', revision {record.revision}, "
            f"saved by {record.modified_by} at {record.modified_at}"
        )
    if isinstance(obj, dict) and "format" not in obj:
        problems = preset_problems(obj)
        if problems:
            field = problems[0].split(":", 1)[0]
            raise PresetError(field, joined(problems)[len(field) + 2 :])
        preset = Preset.from_dict(obj)
        return f"{path.name}: a valid preset '{preset.name}' ({preset.describe()})"
    raise LibraryError(f"{path.name} is not a Samplewright file: {foreign_reason(obj)}.")
