"""The ``samplewright`` command line: JSON shapes, errors as one line, exit codes.

Runs in-process through ``cli.main`` with the tiny test model saved to a
folder (so loading a local model folder is exercised too); one test runs the
installed entry point in a subprocess.
"""

import json
import subprocess
import sys

import pytest

from samplewright import Preset, shape
from samplewright.cli import main
from samplewright.core.sampling.metrics import METRIC_KEYS


@pytest.fixture(scope="module")
def tiny_folder(tiny_model_folder):
    return tiny_model_folder


@pytest.fixture
def preset_files(tmp_path):
    greedy = tmp_path / "greedy.json"
    greedy.write_text(json.dumps(Preset("Greedy", temperature=0).to_dict()), encoding="utf-8")
    narrow = tmp_path / "narrow.json"
    narrow.write_text(json.dumps(Preset("Narrow", temperature=0.9, top_k=1).to_dict()), encoding="utf-8")
    loose = tmp_path / "loose.json"
    loose.write_text(json.dumps(Preset("Loose", temperature=1.2, top_p=0.95).to_dict()), encoding="utf-8")
    return greedy, narrow, loose


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


PASSAGE = "The morning ferry to Skerry Point leaves the harbour"


def test_audition_json(capsys, tiny_folder, preset_files):
    greedy, narrow, loose = preset_files
    args = [
        "audition",
        "--text",
        PASSAGE,
        "--model",
        tiny_folder,
        "--preset",
        greedy,
        "--preset",
        loose,
        "--samples",
        3,
        "--tokens",
        6,
        "--seed",
        11,
        "--json",
    ]
    code, out, err = run(capsys, *args)
    assert code == 0, err
    data = json.loads(out)
    assert [p["name"] for p in data["presets"]] == ["Greedy", "Loose"]
    for entry in data["presets"]:
        assert len(entry["samples"]) == 3
        assert set(METRIC_KEYS) <= set(entry["metrics"])
        for sample in entry["samples"]:
            assert set(sample) >= {"text", "token_ids", "stop_reason"}
            assert len(sample["token_ids"]) <= 6
            assert sample["stop_reason"] in ("length", "eos", "stop")
    # Greedy samples share one argmax path, so all three are the same.
    assert len({tuple(s["token_ids"]) for s in data["presets"][0]["samples"]}) == 1
    # Same seed, same output (reproducibility).
    assert json.loads(run(capsys, *args)[1]) == data


def test_step_json_ranks_by_raw_probability_and_names_the_cutting_stage(capsys, tiny_folder, preset_files):
    greedy, narrow, _ = preset_files
    code, out, err = run(
        capsys,
        "step",
        "--text",
        PASSAGE,
        "--model",
        tiny_folder,
        "--preset",
        greedy,
        "--preset",
        narrow,
        "--top",
        5,
        "--json",
    )
    assert code == 0, err
    data = json.loads(out)
    for entry in data["presets"]:
        assert set(entry) >= {"name", "kept", "entropy_bits", "raw_entropy_bits", "top"}
        raw = [row["raw_p"] for row in entry["top"]]
        assert raw == sorted(raw, reverse=True) and len(raw) == 5
        assert entry["kept"] == 1 and entry["entropy_bits"] == 0
        assert [row["cut_by"] for row in entry["top"][1:]] == [
            entry["name"] == "Greedy" and "temperature" or "top_k"
        ] * 4
        assert entry["top"][0]["cut_by"] is None and entry["top"][0]["p"] == pytest.approx(1.0)


def test_step_text_names_the_cutting_stage_by_its_trade_name(capsys, tiny_folder, preset_files):
    # Issue 10: the stage that cut a token is named as the trade names it (top-k, Fan, Lewis &
    # Dauphin 2018), never by a code; top_k = 1 cuts every listed token but the first.
    _, narrow, _ = preset_files
    code, out, err = run(capsys, "step", "--text", PASSAGE, "--model", tiny_folder, "--preset", narrow, "--top", 3)
    assert code == 0, err
    assert out.count("cut by top-k") == 2 and "top_k" not in out


def test_step_agrees_with_shape(capsys, tiny_folder, tmp_path, tiny_model):
    # The CLI's shaped probabilities are samplewright.shape() of the model's raw logits.
    import torch

    preset = Preset("Mid", temperature=0.7, top_p=0.9, repetition_penalty=1.3)
    path = tmp_path / "mid.json"
    path.write_text(json.dumps(preset.to_dict()), encoding="utf-8")
    data = json.loads(
        run(capsys, "step", "--text", PASSAGE, "--model", tiny_folder, "--preset", path, "--top", 8, "--json")[1]
    )
    ids = tiny_model.tokenizer(PASSAGE, return_tensors="pt").input_ids
    with torch.no_grad():
        logits = tiny_model.model(ids).logits[0, -1]
    expected = shape(logits, preset, history=ids[0].tolist())
    for row in data["presets"][0]["top"]:
        assert row["p"] == pytest.approx(expected[row["id"]], abs=1e-5)


def test_check_accepts_a_preset_file(capsys, preset_files):
    code, out, _ = run(capsys, "check", preset_files[0])
    assert code == 0 and len(out.strip().splitlines()) == 1


@pytest.mark.parametrize(
    "argv, words",
    [
        (["audition", "--text", "x", "--samples", "0"], "--samples"),
        (["audition", "--text", "x", "--tokens", "999"], "--tokens"),
        (["audition", "--passage", "MISSING/draft.txt"], "draft.txt"),
        (["audition", "--text", "x", "--preset", "No Such Preset Anywhere"], "No Such Preset Anywhere"),
        (["step", "--text", "x", "--model", "MISSING/model-folder"], "model-folder"),
        (["check", "MISSING/file.json"], "file.json"),
        (["audition", "--text", "x", "--seed", "-1"], "--seed"),
        (["step", "--text", "x", "--after", "the pier " * 400, "--model", "TINY"], "context"),
    ],
)
def test_errors_are_one_line_with_status_2(capsys, tmp_path, monkeypatch, tiny_folder, argv, words):
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "library"))
    # MISSING: a folder that does not exist, inside the test's own temporary folder.
    argv = [tiny_folder if a == "TINY" else a.replace("MISSING", str(tmp_path / "missing")) for a in argv]
    code, out, err = run(capsys, *argv)
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and words in err
    assert "Traceback" not in err


def test_bad_preset_file_and_non_utf8_passage(capsys, tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"name": "x", "temprature": 0.5}), encoding="utf-8")
    code, _, err = run(capsys, "check", bad)
    assert code == 2 and "temprature" in err
    latin = tmp_path / "notice.txt"
    latin.write_bytes("Fähre nach Skerry".encode("latin-1"))
    code, _, err = run(capsys, "audition", "--passage", latin, "--preset", bad)
    assert code == 2 and "notice.txt" in err and "Traceback" not in err


@pytest.mark.model
def test_entry_point_runs_the_default_model():
    # The installed console script, end to end with the real default model.
    exe = [sys.executable, "-m", "samplewright"]
    proc = subprocess.run(
        exe + ["audition", "--text", "The evening crossing to the island", "--samples", "1", "--tokens", "5", "--json"],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    assert data["presets"] and all(len(p["samples"]) == 1 for p in data["presets"])


def test_cli_uses_the_library_folder_chosen_in_the_window(capsys, tmp_path, monkeypatch):
    # The window remembers the chosen folder in the user's state; the CLI follows it.
    from samplewright.core.library.library import PresetLibrary
    from samplewright.core.library.user_state import UserState

    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.delenv("SAMPLEWRIGHT_LIBRARY_DIR", raising=False)
    team = tmp_path / "team"
    team.mkdir()
    PresetLibrary(team, seed=False).add(Preset("Pier closure", temperature=0.4))
    state = UserState()
    state.last_library = team
    state.save()
    code, out, err = run(capsys, "library", "--json")
    assert code == 0, err
    assert "Pier closure" in out


def test_a_library_preset_wins_over_the_starter_of_the_same_name(tmp_path):
    # Every new library is seeded with starter copies; a team's edit of one must be the one the CLI uses.
    from samplewright.core.library.library import PresetLibrary, starter_presets
    from samplewright.core.library.lookup import resolve_presets

    folder = tmp_path / "team"
    lib = PresetLibrary(folder, create=True)
    record = lib.find("Greedy baseline")
    lib.save(record.edited(record.preset.replace(temperature=0.3, description="Edited by the team")))
    lib.delete(lib.find("Newsletter — lively").id)
    [chosen] = resolve_presets("greedy baseline", str(folder))
    assert chosen.temperature == 0.3 and chosen.description == "Edited by the team"
    # A name the library no longer holds falls back to the starter set.
    [starter] = resolve_presets("Newsletter — lively", str(folder))
    assert starter == next(p for p in starter_presets() if p.name == "Newsletter — lively")


def test_preset_files_are_read_strictly_and_settings_files_give_all_their_presets(capsys, tmp_path):
    from samplewright.core.errors import LibraryError
    from samplewright.core.library.lookup import resolve_presets
    from samplewright.core.library.settings_file import export_settings

    bundle = tmp_path / "bundle.json"
    export_settings([Preset("Pier notice", temperature=0.4), Preset("Letter", top_p=0.8)], bundle)
    assert [p.name for p in resolve_presets(str(bundle))] == ["Pier notice", "Letter"]
    # Strict JSON: Python's json.loads takes NaN, a settings/preset file must not.
    odd = tmp_path / "odd.json"
    odd.write_text('{"name": "Odd", "temperature": NaN}', encoding="utf-8")
    with pytest.raises(LibraryError):
        resolve_presets(str(odd))
    code, _, err = run(capsys, "step", "--text", PASSAGE, "--preset", odd)
    assert code == 2 and "odd.json" in err and "Traceback" not in err


def test_building_the_parser_loads_neither_jsonschema_nor_torch():
    # Start-up: the schema checker and the model stack load only when a command needs them.
    code = (
        "import sys; from samplewright.cli import build_parser; build_parser(); "
        "print(sorted(m for m in ('jsonschema', 'torch', 'transformers') if m in sys.modules))"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"
