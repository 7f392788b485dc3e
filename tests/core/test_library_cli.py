"""The library and exchange subcommands (export, import, library, check) through the real CLI."""

import json

import jsonschema
import pytest

from samplewright import Preset
from samplewright.cli import build_parser, main, passage_cut_note
from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.settings_file import export_preset_file, read_importable, schema


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


# -- issue 10, CLI defects -----------------------------------------------------------------------


def tree(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*")) if folder.exists() else None


def test_import_accepts_a_single_preset_file_as_the_window_does(team, tmp_path, capsys):
    single = tmp_path / "ramp.json"
    export_preset_file(Preset(name="Ramp notice", top_k=12), single)  # the window's "Save a copy as file…"
    assert read_importable(single).presets == (Preset(name="Ramp notice", top_k=12),)  # what the window reads
    code, out, _ = run(capsys, "import", str(single), "--library", str(team.folder))
    assert code == 0 and "add        Ramp notice" in out
    code, out, _ = run(capsys, "import", str(single), "--library", str(team.folder), "--yes")
    assert code == 0 and "Wrote 1 preset(s)" in out
    assert PresetLibrary(team.folder, seed=False).find("Ramp notice").preset.top_k == 12


@pytest.mark.parametrize("kind", ["empty", "missing"])
def test_an_import_preview_writes_nothing_ever(tmp_path, capsys, monkeypatch, kind):
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    personal = tmp_path / "personal"  # the personal folder: opened elsewhere, it is created and seeded
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(personal))
    if kind == "empty":
        personal.mkdir()
    single = tmp_path / "ramp.json"
    export_preset_file(Preset(name="Ramp notice"), single)
    before = tree(personal)
    code, out, _ = run(capsys, "import", str(single))
    assert code == 0 and "add        Ramp notice" in out and "Nothing was written" in out
    assert tree(personal) == before  # no starter presets, no folder created


def test_export_to_a_missing_folder_says_so(team, tmp_path, capsys):
    target = tmp_path / "no-such-folder" / "out.json"
    code, _, err = run(capsys, "export", "--library", str(team.folder), "--out", str(target))
    assert code == 2 and "the folder" in err and "does not exist" in err and "library folder" not in err
    assert not target.parent.exists()


def test_export_refuses_to_replace_a_file_without_force(team, tmp_path, capsys):
    target = tmp_path / "out.json"
    target.write_text("the harbour master's own notes")
    code, _, err = run(capsys, "export", "--library", str(team.folder), "--out", str(target))
    assert code == 2 and "--force" in err and target.read_text() == "the harbour master's own notes"
    code, _, _ = run(capsys, "export", "--library", str(team.folder), "--out", str(target), "--force")
    assert code == 0 and len(read_importable(target).presets) == 2


def test_an_empty_passage_is_refused_before_the_model_is_loaded(capsys, tmp_path):
    # A model folder that does not exist: loading it first would give a message about the model.
    code, _, err = run(capsys, "audition", "--text", "  ", "--model", str(tmp_path / "missing" / "model-folder"))
    assert code == 2 and "passage is empty" in err and "model-folder" not in err


def test_a_preset_file_with_several_bad_values_reports_them_all(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"name": "Pier", "temperature": 9, "top_p": 0, "colour": "blue"}))
    code, _, err = run(capsys, "check", str(bad))
    assert code == 2 and err.count("\n") == 1
    assert all(field in err for field in ("temperature", "top_p", "colour"))
    code, _, err = run(capsys, "import", str(bad), "--library", str(tmp_path))
    assert code == 2 and all(field in err for field in ("temperature", "top_p", "colour"))


def test_top_is_offered_only_by_step(capsys):
    assert "--top" in build_parser()._subparsers._group_actions[0].choices["step"].format_help()
    with pytest.raises(SystemExit):
        main(["audition", "--text", "x", "--top", "5"])
    assert "unrecognized arguments: --top" in capsys.readouterr().err


@pytest.mark.parametrize(
    "window, context, words",
    [
        (1024, 8192, "passage window of 1,024 tokens (Samplewright keeps at most 1,024"),
        (128, 256, "passage window of 128 tokens (the model's context of 256 tokens"),
    ],
)
def test_the_long_passage_note_names_the_limit_that_applied(window, context, words):
    note = passage_cut_note(300, window, context, 1024)
    assert words in note and "first 300 tokens were left out" in note
    assert "longer than the model's context" not in note
