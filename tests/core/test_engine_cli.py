"""The engine commands through the real CLI: export --to, fidelity, import of foreign files."""

import json

import pytest

from samplewright import Preset
from samplewright.cli import main
from samplewright.core.library.library import PresetLibrary


@pytest.fixture
def team(tmp_path, monkeypatch):
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "personal"))
    lib = PresetLibrary(tmp_path / "team", create=True, seed=False)
    lib.add(Preset(name="Pier notice", temperature=0.4, top_k=30, repetition_penalty=1.1, stop=("\n\n",)))
    lib.add(Preset(name="Crew newsletter", temperature=1.1, typical_p=0.9, frequency_penalty=0.4))
    return lib


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_export_to_transformers_writes_a_folder_generation_config_reads(team, tmp_path, capsys):
    from transformers import GenerationConfig

    out = tmp_path / "pier"
    code, text, _ = run(capsys, "export", "Pier notice", "--to", "transformers", "--out", out, "--library", team.folder)
    assert code == 0 and "exact" in text and "set_seed" in text and "tokenizer=" in text
    config = GenerationConfig.from_pretrained(out)  # transformers' own reader
    assert (config.do_sample, config.temperature, config.top_k, config.stop_strings) == (True, 0.4, 30, ["\n\n"])


def test_export_several_presets_to_vllm_as_json(team, tmp_path, capsys):
    out = tmp_path / "vllm"
    code, text, _ = run(capsys, "export", "Pier notice", "Crew newsletter", "--to", "vllm", "--out", out,
                        "--library", team.folder, "--json")  # fmt: skip
    data = json.loads(text)
    assert code == 0 and data["target"] == "vllm"
    verdicts = {f["preset"]: f["verdict"] for f in data["files"]}
    assert verdicts["Crew newsletter"] == "differs" and verdicts["Pier notice"] != "differs"
    assert json.loads((out / "pier-notice.json").read_text())["top_k"] == 30


def test_export_to_openai_request_marks_the_extensions(team, tmp_path, capsys):
    out = tmp_path / "request.json"
    code, _, _ = run(capsys, "export", "Pier notice", "--to", "openai-request", "--out", out, "--library", team.folder)
    request = json.loads(out.read_text())
    assert code == 0 and request["extra_body"]["top_k"] == 30 and "top_k" not in request["body"]


def test_export_refuses_verify_for_other_targets(team, tmp_path, capsys):
    code, _, err = run(capsys, "export", "Pier notice", "--to", "vllm", "--verify", "--out", tmp_path / "x.json",
                       "--library", team.folder)  # fmt: skip
    assert code == 2 and "--verify" in err and not (tmp_path / "x.json").exists()


def test_fidelity_json_has_the_contract_keys(team, capsys):
    code, text, _ = run(capsys, "fidelity", "Crew newsletter", "--to", "transformers", "--no-model", "--json",
                        "--library", team.folder)  # fmt: skip
    data = json.loads(text)
    assert code == 0
    assert {"preset", "target", "verdict", "reasons", "max_tv", "mean_tv", "differing_share", "parameters"} <= set(data)
    assert data["verdict"] == "differs" and data["max_tv"] > 0 and 0 < data["differing_share"] <= 1


def test_fidelity_on_a_model_saves_the_closest_variant(team, tmp_path, tiny_model_folder, capsys):
    closest = tmp_path / "closest.json"
    code, text, _ = run(capsys, "fidelity", "Crew newsletter", "--to", "vllm", "--model", tiny_model_folder,
                        "--save-closest", closest, "--library", team.folder)  # fmt: skip
    assert code == 0 and "36 model steps" in text and "no typical sampling" in text
    assert json.loads(closest.read_text())["typical_p"] == 1.0


def test_export_verify_runs_generate_processors_on_the_passage(team, tmp_path, tiny_model_folder, capsys):
    passage = tmp_path / "notice.txt"
    passage.write_text("The morning ferry to Skerry Point leaves the harbour at seven.", "utf-8")
    code, text, _ = run(capsys, "export", "Pier notice", "--to", "transformers", "--out", tmp_path / "cfg",
                        "--verify", "--passage", passage, "--model", tiny_model_folder, "--library", team.folder,
                        "--json")  # fmt: skip
    (check,) = json.loads(text)["verify"]
    assert code == 0 and check["steps"] == 48 and check["max_tv"] < 1e-9


def test_import_reads_a_foreign_file_and_writes_only_with_yes(team, tmp_path, capsys):
    path = tmp_path / "ferry-bot" / "generation_config.json"
    path.parent.mkdir()
    path.write_text(json.dumps({"do_sample": True, "temperature": 0.7, "top_k": 40, "num_beams": 1}))
    code, text, _ = run(capsys, "import", path, "--library", team.folder)
    assert code == 0 and "ferry-bot (from transformers)" in text and "Nothing was written" in text
    code, text, _ = run(capsys, "import", path, "--library", team.folder, "--yes", "--json")
    data = json.loads(text)
    assert code == 0 and data["foreign"]["format"] == "transformers" and len(data["written"]) == 1
    assert PresetLibrary(team.folder).find("ferry-bot (from transformers)").preset.top_k == 40


def test_import_of_a_bad_foreign_file_writes_nothing(team, tmp_path, capsys):
    before = sorted(p.name for p in team.folder.iterdir())
    path = tmp_path / "bad.json"
    path.write_text(json.dumps({"temperature": 0.5, "top_p": 7}))
    code, _, err = run(capsys, "import", path, "--library", team.folder, "--yes")
    assert code == 2 and "top_p" in err and "Nothing was imported" in err
    assert sorted(p.name for p in team.folder.iterdir()) == before
