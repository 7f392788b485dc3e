"""The library's file for one preset: a stored preset with its id and revision.

A library file is a JSON object (sorted keys, indent 2) named ``<id>.json``::

    {"format": "samplewright-preset", "format_version": 1,
     "id": "<32 hex digits>", "revision": 3,
     "modified_at": "2025-05-02T09:14:00+00:00", "modified_by": "ingrid",
     "preset": { ...Preset.to_dict()... }}

:func:`decode_record` checks every part and names the first problem, so the
library can list a bad file as skipped without touching it.
"""

from __future__ import annotations

import dataclasses
import re
import uuid
from pathlib import Path
from typing import Any

from ..presets import Preset, PresetError
from ..text_rules import character_problem, shown
from .storage import BadContent, dump_json, parse_json, read_limited

RECORD_FORMAT = "samplewright-preset"
RECORD_VERSION = 1
SETTINGS_FORMAT = "samplewright-settings"
#: A preset file is a few kB; anything much larger is not one of ours.
MAX_RECORD_BYTES = 1_000_000
_ID = re.compile(r"[0-9a-f]{32}")
_KEYS = ("format", "format_version", "id", "revision", "modified_at", "modified_by", "preset")


def new_id() -> str:
    """A fresh, stable preset id (a random UUID as 32 hex digits)."""
    return uuid.uuid4().hex


@dataclasses.dataclass(frozen=True)
class PresetRecord:
    """A preset as stored in the library: the preset plus its identity and revision.

    Attributes:
        id: stable id (32 hex digits); the file is ``<id>.json``.
        revision: 1 for the first save, one more for every save after; 0 for
            a record not yet saved.
        preset: the preset itself.
        modified_at: ISO 8601 time of the save that wrote this revision.
        modified_by: user name of whoever wrote this revision.
    """

    id: str
    revision: int
    preset: Preset
    modified_at: str = ""
    modified_by: str = ""

    @property
    def name(self) -> str:
        """The preset's name."""
        return self.preset.name

    @property
    def file_name(self) -> str:
        """The file name this record is stored under."""
        return record_file_name(self.id)

    def edited(self, preset: Preset) -> PresetRecord:
        """The same record (id, revision) holding an edited preset, ready for ``library.save``."""
        return dataclasses.replace(self, preset=preset)

    def to_json(self) -> dict[str, Any]:
        """The record as plain JSON types, as written to its file."""
        return {
            "format": RECORD_FORMAT,
            "format_version": RECORD_VERSION,
            "id": self.id,
            "revision": self.revision,
            "modified_at": self.modified_at,
            "modified_by": self.modified_by,
            "preset": self.preset.to_dict(),
        }


def record_file_name(record_id: str) -> str:
    """The file name of the record with ``record_id``."""
    return f"{record_id}.json"


def encode_record(record: PresetRecord) -> bytes:
    """The bytes of a record's file."""
    return dump_json(record.to_json())


def foreign_reason(obj: Any) -> str:
    """Why a parsed JSON value without our library format tag is not a library file."""
    if isinstance(obj, dict) and obj.get("format") == SETTINGS_FORMAT:
        return "a settings file, not a library preset; import it instead"
    if isinstance(obj, dict) and "format" not in obj and "name" in obj:
        return "a single preset file, not a library preset; import it instead"
    if isinstance(obj, dict) and "format" in obj:
        return f"a file of another kind (format {shown(obj['format'], 60)})"
    return "not a Samplewright library preset (no format tag)"


def decode_record(data: bytes, file_name: str | None = None) -> PresetRecord:
    """Read a library file's bytes.

    Args:
        data: the file's bytes.
        file_name: when given, the id inside must match it (``<id>.json``).

    Raises:
        BadContent: with the reason the file is not a usable library preset.
    """
    obj = parse_json(data)
    if not isinstance(obj, dict) or obj.get("format") != RECORD_FORMAT:
        raise BadContent(foreign_reason(obj))
    version = obj.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise BadContent(f"format_version {shown(version, 20)} is not a version number")
    if version > RECORD_VERSION:
        raise BadContent(f"made by a newer Samplewright (format version {version}); update Samplewright to read it")
    unknown = sorted(set(obj) - set(_KEYS))
    if unknown:
        raise BadContent(f"unknown key {shown(unknown[0], 60)}")
    record = _record_from(obj)
    if file_name is not None and file_name != record.file_name:
        raise BadContent(f"the file name does not match the id inside ({record.id}); a copied file?")
    return record


def _record_from(obj: dict[str, Any]) -> PresetRecord:
    record_id, revision = obj.get("id"), obj.get("revision")
    if not isinstance(record_id, str) or not _ID.fullmatch(record_id):
        raise BadContent("the id is missing or is not 32 hexadecimal digits")
    if not isinstance(revision, int) or isinstance(revision, bool) or revision < 1:
        raise BadContent("the revision is missing or is not a whole number ≥ 1")
    texts = {key: obj.get(key, "") for key in ("modified_at", "modified_by")}
    if not all(isinstance(value, str) and len(value) <= 200 for value in texts.values()):
        raise BadContent("modified_at and modified_by must be short text")
    for key, value in texts.items():
        problem = character_problem(value, "line")
        if problem:
            raise BadContent(f"{key} is refused: {problem}")
    try:
        preset = Preset.from_dict(obj.get("preset") or {})
    except PresetError as exc:
        raise BadContent(f"invalid preset: {exc}") from None
    return PresetRecord(record_id, revision, preset, texts["modified_at"], texts["modified_by"])


def read_record_file(path: Path) -> PresetRecord:
    """Read and check one library file.

    Raises:
        BadContent: naming what is wrong with the file.
        OSError: when it cannot be read.
    """
    if path.suffix.lower() != ".json":
        raise BadContent("not a preset file (library presets are .json files)")
    return decode_record(read_limited(path, MAX_RECORD_BYTES), path.name)
