"""Importing accepts a single preset file (the window's "Save a copy as file…") as well as a
settings file, with the same refusals."""

from __future__ import annotations

import json

import pytest

from samplewright.core.errors import LibraryError
from samplewright.core.library.settings_file import (
    export_preset_file,
    export_settings,
    read_importable,
    read_settings,
)
from samplewright.core.presets import Preset

COPY = Preset("Quay closure notice", temperature=0.4, top_p=0.85, tags=("notices",), stop=("\n\n",))


def test_a_single_preset_file_reads_as_a_one_preset_document(tmp_path):
    path = export_preset_file(COPY, tmp_path / "copy.json")
    assert read_importable(path).presets == (COPY,)


def test_a_settings_file_reads_as_read_settings_reads_it(tmp_path):
    path = tmp_path / "team.json"
    export_settings([COPY, Preset("Greedy", temperature=0.0)], path, exported_by="ingrid")
    assert read_importable(path) == read_settings(path)


@pytest.mark.parametrize(
    "content, words",
    [
        ('{"name": "x", "top_p": 2}', "top_p"),  # breaks the preset's rules
        ('{"name": "x", "launch": "rm -rf /"}', "launch"),  # unknown field, never run
    ],
)
def test_a_bad_preset_file_is_refused_naming_the_field(tmp_path, content, words):
    path = tmp_path / "bad.json"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(LibraryError, match=f"bad.json is refused: it is a preset file, but {words}"):
        read_importable(path)


@pytest.mark.parametrize("content", ['{"presets": [', '{"format": "ferry-timetable"}', "[1, 2]"])
def test_other_files_get_the_settings_files_refusal(tmp_path, content):
    path = tmp_path / "other.json"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(LibraryError) as expected:
        read_settings(path)
    with pytest.raises(LibraryError) as refused:
        read_importable(path)
    assert str(refused.value) == str(expected.value)


def test_the_preset_file_is_plain_json_of_the_preset(tmp_path):
    path = export_preset_file(COPY, tmp_path / "copy.json")
    assert json.loads(path.read_text(encoding="utf-8")) == COPY.to_dict()
