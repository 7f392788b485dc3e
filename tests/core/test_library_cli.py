"""The library and exchange subcommands (export, import, library, check) through the real CLI."""

import json

import jsonschema
import pytest

from samplewright import Preset
from samplewright.cli import main
from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.settings_file import schema


@pytest.fixture
def team(tmp_path, monkeypatch):
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "personal"))
    lib = PresetLibrary(tmp_path / "team", create=True, seed=False)
    lib.add(Preset(name="Pier notice", temperature=0.4))
    lib.add(Preset(name="Crew newsletter", temperature=1.1, min_p=0.05))
    (lib.folder / "broken.json").write_text("{")
    return lib


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_library_lists_presets_and_skipped_files_as_json(team, capsys):
    code, out, _ = run(capsys, "library", "--library", str(team.folder), "--json")
    data = json.loads(out)
    assert code == 0
    assert [p["name"] for p in data["presets"]] == ["Crew newsletter", "Pier notice"]
    assert data["skipped"] == [{"file": "broken.json", "reason": data["skipped"][0]["reason"]}]
    assert "not valid JSON" in data["skipped"][0]["reason"]


def test_export_then_check(team, tmp_path, capsys):
    out_file = tmp_path / "to-colleagues.json"
    code, out, _ = run(
        capsys,
        "export",
        "Pier notice",
        "--library",
        str(team.folder),
        "--out",
        str(out_file),
        "--model",
        "SmolLM2-135M-Instruct",
    )
    assert code == 0 and "Wrote 1 preset(s)" in out
    jsonschema.validate(json.loads(out_file.read_text("utf-8")), schema(), cls=jsonschema.Draft202012Validator)
    code, out, _ = run(capsys, "check", str(out_file))
    assert code == 0 and "a valid settings file" in out and "'Pier notice'" in out


def test_export_of_an_unknown_name_fails_with_one_line(team, tmp_path, capsys):
    code, out, err = run(
        capsys, "export", "Ferry ghost", "--library", str(team.folder), "--out", str(tmp_path / "x.json")
    )
    assert code != 0 and out == "" and err.count("\n") == 1 and "No preset named 'Ferry ghost'" in err
    assert not (tmp_path / "x.json").exists()


def test_import_previews_and_writes_only_with_yes(team, tmp_path, capsys):
    source = PresetLibrary(tmp_path / "colleague", create=True, seed=False)
    source.add(Preset(name="Pier notice", temperature=0.9))
    source.add(Preset(name="Storm warning", temperature=0.2))
    file = tmp_path / "in.json"
    assert run(capsys, "export", "--library", str(source.folder), "--out", str(file))[0] == 0

    code, out, _ = run(capsys, "import", str(file), "--library", str(team.folder))
    assert (
        code == 0 and "conflict   Pier notice  (temperature: 0.4 -> 0.9)" in out and "add        Storm warning" in out
    )
    assert "Nothing was written" in out and len(team.rescan().added) == 0

    code, _, err = run(capsys, "import", str(file), "--library", str(team.folder), "--yes")
    assert code != 0 and "--on-conflict" in err and not team.rescan()

    code, out, _ = run(
        capsys, "import", str(file), "--library", str(team.folder), "--yes", "--on-conflict", "keep_both", "--json"
    )
    data = json.loads(out)
    assert (
        code == 0
        and data["applied"]
        and sorted(w["name"] for w in data["written"]) == ["Pier notice (copy)", "Storm warning"]
    )
    team.rescan()
    assert team.find("Pier notice").preset.temperature == 0.4
    assert team.find("Pier notice (copy)").preset.temperature == 0.9


def test_import_of_a_bad_file_fails_with_one_line(team, tmp_path, capsys):
    (tmp_path / "bad.json").write_text('{"format": "samplewright-settings", "format_version": 7}')
    code, _, err = run(capsys, "import", str(tmp_path / "bad.json"), "--library", str(team.folder))
    assert code != 0 and "newer Samplewright" in err and err.count("\n") == 1
