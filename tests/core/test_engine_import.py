"""Foreign settings files: export -> import round trips, and bad input refused by name."""

import json

import numpy as np
import pytest
import torch

from samplewright import Preset, shape
from samplewright.core.engines import exporting, foreign_import, vllm_target
from samplewright.core.errors import LibraryError
from samplewright.core.presets import DEFAULT_ORDER

EXACT_PRESETS = {
    "transformers": Preset(name="Pier", temperature=0.6, top_k=25, top_p=0.85, typical_p=0.95,
                           repetition_penalty=1.15, no_repeat_ngram_size=3, max_new_tokens=90, stop=("\n\n",)),
    "vllm": Preset(name="Pier", temperature=0.6, top_k=25, repetition_penalty=1.15, frequency_penalty=0.3,
                   presence_penalty=0.1, max_new_tokens=90, stop=("\n\n",)),
    "openai-request": Preset(name="Pier", temperature=0.6, min_p=0.05, top_k=25, frequency_penalty=0.3,
                             max_new_tokens=90),
}  # fmt: skip


@pytest.mark.parametrize("target", sorted(EXACT_PRESETS))
def test_round_trip_gives_back_the_parameters(target, tmp_path):
    from samplewright.core.engines.fidelity import EXACT, EXACT_EXCEPT_TIES, fidelity

    preset = EXACT_PRESETS[target]
    assert fidelity(preset, target, random_count=100).verdict in (EXACT, EXACT_EXCEPT_TIES)
    (written,) = exporting.export_to([preset], target, tmp_path / "out")
    preview = foreign_import.read_foreign(written.path)
    assert preview is not None and preview.format == target
    back = preview.preset
    for field in preset.parameters():
        if field != "order":
            assert getattr(back, field) == getattr(preset, field), field
    engine_order = DEFAULT_ORDER if target == "transformers" else vllm_target.ORDER
    assert back.order[: len(engine_order)] == engine_order
    logits = torch.from_numpy(np.random.default_rng(3).normal(0, 2, 40))
    assert np.abs(shape(logits, back, [1, 2, 3], [3]) - shape(logits, preset, [1, 2, 3], [3])).max() < 1e-12


def write(tmp_path, name, obj):
    path = tmp_path / name
    path.write_text(obj if isinstance(obj, str) else json.dumps(obj), "utf-8")
    return path


def test_a_real_looking_generation_config_takes_generate_defaults(tmp_path):
    # transformers' _get_default_generation_params: top_k 50 when absent; do_sample absent = greedy.
    config = {"bos_token_id": 1, "eos_token_id": 2, "do_sample": True, "temperature": 0.6, "transformers_version": "4"}
    path = write(tmp_path, "generation_config.json", config)
    preview = foreign_import.read_foreign(path)
    assert preview.preset.top_k == 50 and preview.preset.temperature == 0.6
    greedy = foreign_import.read_foreign(write(tmp_path, "g.json", {"temperature": 0.6, "transformers_version": "5"}))
    assert greedy.preset.temperature == 0.0


def test_unknown_and_dropped_fields_are_named_in_the_preview(tmp_path):
    path = write(tmp_path, "cfg.json", {"do_sample": True, "num_beams": 4, "my_own_flag": 1, "eos_token_id": 2})
    reasons = dict(foreign_import.read_foreign(path).reading.dropped)
    assert "no such stage" in reasons["num_beams"]
    assert "unknown" in reasons["my_own_flag"]
    assert "does not change" in reasons["eos_token_id"]
    request = write(tmp_path, "req.json", {"model": "m", "temperature": 0.5, "logit_bias": {"42": 5}, "colour": 1})
    reasons = dict(foreign_import.read_foreign(request).reading.dropped)
    assert "no such stage" in reasons["logit_bias"] and "unknown" in reasons["colour"]


@pytest.mark.parametrize(
    ("obj", "named"),
    [
        ({"temperature": 0.5, "wibble": 5}, "wibble"),  # vLLM refuses unknown keyword arguments
        ({"temperature": "hot"}, "temperature"),
        ({"top_p": 0.0, "max_tokens": 20}, "top_p"),
        ({"max_tokens": 10_000}, "max_tokens"),
        ({"do_sample": "yes", "top_k": 3}, "do_sample"),
        ({"model": "m", "stop": 5}, "stop"),
        ({"body": [1], "extra_body": {}}, "body"),
    ],
)
def test_bad_values_are_refused_naming_the_key(tmp_path, obj, named):
    with pytest.raises(LibraryError, match=named):
        foreign_import.read_foreign(write(tmp_path, "bad.json", obj))


def test_huge_files_are_refused(tmp_path):
    path = write(tmp_path, "huge.json", '{"temperature": 0.5, "stop": ["' + "x" * 5_100_000 + '"]}')
    with pytest.raises(LibraryError, match="larger than 5 MB"):
        foreign_import.read_foreign(path)


def test_other_json_is_not_taken_for_a_foreign_format():
    assert foreign_import.recognise({"format": "samplewright-settings"}) is None
    assert foreign_import.recognise({"colour": "blue"}) is None
    assert foreign_import.recognise({"name": "Pier", "temperature": 0.5}) is None  # a samplewright preset file
    assert foreign_import.recognise([1, 2]) is None
