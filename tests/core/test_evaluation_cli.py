"""The evaluation commands' contract (names, JSON keys, CSV header, exit codes) and the HTML report."""

import base64
import csv
import io
import json
from html.parser import HTMLParser

import pytest
from matplotlib import image as mpimg

from samplewright.cli import main
from samplewright.core.evaluation.measures import MEASURE_KEYS
from samplewright.core.evaluation.plan import PassageEntry, PresetEntry, RunPlan
from samplewright.core.evaluation.report import render_report
from samplewright.core.evaluation.run import EvaluationRun, PassageOutcome
from samplewright.core.presets import Preset
from samplewright.core.results import Sample, TokenStep


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def passages(tmp_path):
    folder = tmp_path / "letters"
    folder.mkdir()
    (folder / "quay.txt").write_text("Please arrive at the quay ten minutes before", encoding="utf-8")
    (folder / "winter.md").write_text("Season tickets remain valid during the", encoding="utf-8")
    (folder / "broken.txt").write_bytes(b"\xff\xfe\x00bad")
    return folder


@pytest.fixture
def library(tmp_path, monkeypatch):
    folder = tmp_path / "library"
    folder.mkdir()
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(folder))
    return folder


def test_evaluate_json_contract_and_files(capsys, tiny_model_folder, passages, library, tmp_path):
    out_file, csv_file, html_file = tmp_path / "run.json", tmp_path / "s.csv", tmp_path / "r.html"
    presets = [tmp_path / "a.json", tmp_path / "b.json"]
    presets[0].write_text(json.dumps(Preset("Calm", temperature=0.5).to_dict()), encoding="utf-8")
    presets[1].write_text(json.dumps(Preset("Lively", temperature=1.3).to_dict()), encoding="utf-8")
    code, out, err = run(
        capsys, "evaluate", "--passages", passages, "--preset", presets[0], "--preset", presets[1],
        "--samples", 3, "--tokens", 6, "--seed", 4, "--model", tiny_model_folder, "--json",
        "--out", out_file, "--csv", csv_file, "--report", html_file,
    )  # fmt: skip
    assert code == 0, err
    assert "broken.txt" in err  # the skipped file is named with its reason
    data = json.loads(out)
    assert {"presets", "passages", "model", "seed", "samples", "tokens"} <= set(data)
    assert [p["name"] for p in data["passages"]] == ["quay", "winter"]
    assert data["seed"] == 4 and data["samples"] == 3 and data["tokens"] == 6
    for entry in data["presets"]:
        assert {"name", "definition", "pooled", "interval", "per_passage", "pareto"} <= set(entry)
        assert set(entry["pooled"]) == set(MEASURE_KEYS) and set(entry["interval"]) == set(MEASURE_KEYS)
        assert Preset.from_dict(entry["definition"]).name == entry["name"]
        assert [p["passage"] for p in entry["per_passage"]] == ["quay", "winter"]
        assert isinstance(entry["pareto"], bool)
    assert any(e["pareto"] for e in data["presets"])
    assert "NaN" not in out
    assert json.loads(out_file.read_text(encoding="utf-8"))["finished"] is True
    rows = list(csv.reader(io.StringIO(csv_file.read_text(encoding="utf-8"))))
    assert rows[0] == ["preset", "passage", "sample", "text", "tokens", "coherence", "diversity", "distinct_1",
                       "distinct_2", "distinct_3", "seq_rep_4", "length", "degenerate"]  # fmt: skip
    assert len(rows) == 1 + 2 * 2 * 3
    assert all(int(r[11]) == len(r[4].split()) for r in rows[1:])  # length = number of token ids
    assert "Calm" in html_file.read_text(encoding="utf-8")


def test_sweep_json_and_report_command(capsys, tiny_model_folder, passages, library, tmp_path):
    base = tmp_path / "base.json"
    base.write_text(json.dumps(Preset("Notices", top_k=20).to_dict()), encoding="utf-8")
    out_file = tmp_path / "sweep.json"
    code, out, err = run(
        capsys, "sweep", "--preset", base, "--vary", "temperature=0.5:1.5:0.5", "--passages", passages,
        "--samples", 2, "--tokens", 5, "--seed", 0, "--model", tiny_model_folder, "--json", "--out", out_file,
    )  # fmt: skip
    assert code == 0, err
    names = [p["name"] for p in json.loads(out)["presets"]]
    assert names == [f"Notices · temperature={v}" for v in ("0.5", "1", "1.5")]
    html = tmp_path / "r.html"
    code, _, err = run(capsys, "report", out_file, "--out", html, "--csv", tmp_path / "s.csv")
    assert code == 0, err
    assert all(name in html.read_text(encoding="utf-8") for name in names)


def test_sweep_refuses_value_out_of_range_before_running(capsys, passages, library, tmp_path):
    code, out, err = run(
        capsys, "sweep", "--preset", "anything", "--vary", "temperature=1:7:1", "--passages", passages,
        "--model", tmp_path / "no-such-model",
    )  # fmt: skip
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "temperature" in err and "6.0" in err and "0 to 5" in err


def test_unknown_passage_set_is_one_line_exit_2(capsys, library):
    code, _, err = run(capsys, "evaluate", "--passages", "no-such-set", "--preset", "x")
    assert code == 2 and err.count("\n") == 1 and "customer-replies" in err  # lists the sets there are


def test_passages_lists_demo_sets_and_adds_them(capsys, library):
    code, out, _ = run(capsys, "passages", "--json")
    data = json.loads(out)
    assert code == 0 and {s["where"] for s in data["sets"]} == {"demo"}
    assert len(data["sets"]) >= 3 and all(len(s["passages"]) >= 3 for s in data["sets"])
    code, out, _ = run(capsys, "passages", "--add-demo", "--json")
    assert {s["where"] for s in json.loads(out)["sets"]} == {"library"}
    assert (library / "passages" / "newsletter").is_dir()


# -- the report as HTML -------------------------------------------------------------------------


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text, self.images = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "img":
            self.images.append(dict(attrs)["src"])

    def handle_data(self, data):
        self.text.append(data)


def _hand_made_run():
    tokens = [TokenStep(i, "w", 0.4, 0.5, 3, 2.0, 1.5) for i in (5, 6, 7, 8, 9)]
    texts = ["<script>alert('x')</script> the quay", "a calm crossing to the island today", "the ferry & the tide"]
    presets = (PresetEntry(Preset("Calm <b>one</b>")), PresetEntry(Preset("Lively")))
    plan = RunPlan(presets, (PassageEntry("set", "quay", "Dear passengers"),), 3, 5, 0)
    samples = [[Sample(p, i, list(tokens), "length", texts[i]) for i in range(3)] for p in range(2)]
    run = EvaluationRun(plan, {"name": "hand-made"})
    run.add(0, PassageOutcome(3, 0, samples))
    return run


def test_report_parses_names_presets_decodes_images_and_escapes_samples():
    html = render_report(_hand_made_run())
    parser = _Collect()
    parser.feed(html)
    parser.close()
    text = "".join(parser.text)
    # Untrusted sample text stays text: no script element, the characters appear as written.
    assert "script" not in parser.tags and "b" not in parser.tags
    assert "<script>alert('x')</script> the quay" in text and "Calm <b>one</b>" in text
    assert "Lively" in text and "wrong, biased or offensive" in text
    assert parser.images and all(src.startswith("data:image/png;base64,") for src in parser.images)
    for src in parser.images:
        picture = mpimg.imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png")
        assert picture.shape[0] > 100 and picture.shape[1] > 100
    assert "http://" not in html and "https://" not in html  # opens without a network


def test_resume_finishes_a_cut_run_file_identically(capsys, tiny_model_folder, passages, library, tmp_path):
    # Common practice: resuming gives what an uninterrupted run gives. The run file is cut back to
    # its first passage, as a cancel after one passage leaves it, then resumed from the command line.
    out_file = tmp_path / "run.json"
    argv = ["--passages", passages, "--preset", "Greedy baseline", "--samples", 2, "--tokens", 5,
            "--model", tiny_model_folder, "--json"]  # fmt: skip
    code, whole, err = run(capsys, "evaluate", *argv, "--out", out_file)
    assert code == 0, err
    data = json.loads(out_file.read_text(encoding="utf-8"))
    data["passages_done"] = data["passages_done"][:1]
    out_file.write_text(json.dumps(data), encoding="utf-8")
    code, resumed, err = run(capsys, "evaluate", "--resume", out_file, "--model", tiny_model_folder, "--json")
    assert code == 0, err
    assert json.loads(resumed)["presets"] == json.loads(whole)["presets"]
    assert json.loads(out_file.read_text(encoding="utf-8"))["finished"] is True
