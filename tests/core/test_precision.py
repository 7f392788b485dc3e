"""The precision setting: bfloat16 runs the same engine, auto measures once and keeps its choice."""

from __future__ import annotations

import json

import pytest
import torch

from samplewright import Preset
from samplewright.cli import main
from samplewright.core.engine import precision
from samplewright.core.engine.engine import Engine
from samplewright.core.errors import ModelError
from samplewright.core.results import AuditionRequest

PASSAGE = "The morning ferry to Skerry Point leaves the harbour at seven. Please arrive at the quay"


@pytest.fixture
def fresh_tiny():
    """A tiny model of its own (these tests convert its weights)."""
    from tests.conftest import build_tiny_model

    return build_tiny_model()


def test_bfloat16_greedy_audition_equals_generate_in_bfloat16(fresh_tiny):
    # Reference library: transformers generate(do_sample=False) on the same bfloat16 weights.
    loaded = precision.apply_precision(fresh_tiny, "bfloat16")
    assert loaded.precision == "bfloat16" and "bfloat16" in loaded.describe()
    assert next(loaded.model.parameters()).dtype == torch.bfloat16
    engine = Engine(loaded)
    result = engine.audition(AuditionRequest(PASSAGE, [Preset("greedy", temperature=0)], 1, 8, 0))
    ids = torch.tensor([result.passage_ids])
    out = loaded.model.generate(
        ids, attention_mask=torch.ones_like(ids), do_sample=False, max_new_tokens=8, pad_token_id=min(loaded.eos_ids)
    )
    expected = out[0, ids.shape[1] :].tolist()
    end = next((i for i, t in enumerate(expected) if t in loaded.eos_ids), len(expected))
    assert result.samples[0][0].token_ids == expected[:end]


def test_auto_measures_once_and_follows_the_threshold(fresh_tiny, tmp_path):
    choice = tmp_path / "precision.json"
    loaded = precision.apply_precision(fresh_tiny, "auto", choice)
    stored = json.loads(choice.read_text(encoding="utf-8"))[precision.machine_key()]
    rates = stored["tokens_per_second"]
    expected = "bfloat16" if rates["bfloat16"] >= precision.MIN_SPEEDUP * rates["float32"] else "float32"
    assert stored["chosen"] == expected == loaded.precision


def test_auto_reads_a_stored_choice_instead_of_measuring(fresh_tiny, tmp_path, monkeypatch):
    choice = tmp_path / "precision.json"
    choice.write_text(json.dumps({precision.machine_key(): {"chosen": "bfloat16"}}), encoding="utf-8")

    def refuse(*args, **kwargs):
        raise AssertionError("measured although a choice was stored")

    monkeypatch.setattr(precision, "measure", refuse)
    assert precision.apply_precision(fresh_tiny, "auto", choice).precision == "bfloat16"


def test_unknown_precision_is_refused(fresh_tiny):
    with pytest.raises(ModelError, match="float32, bfloat16, auto"):
        precision.apply_precision(fresh_tiny, "float8")


def test_cli_reports_the_precision(capsys, tiny_model_folder):
    args = ["audition", "--text", PASSAGE, "--model", tiny_model_folder, "--samples", 1, "--tokens", 3]
    assert main([str(a) for a in [*args, "--precision", "bfloat16", "--json"]]) == 0
    assert json.loads(capsys.readouterr().out)["precision"] == "bfloat16"
    assert main([str(a) for a in args]) == 0  # the tests pin float32 through SAMPLEWRIGHT_PRECISION
    assert "model in float32" in capsys.readouterr().out
