"""The fidelity verdict, computed against the engines' own chains.

transformers: the processors are built by generate()'s own code
(``_prepare_generation_config`` and ``_get_logits_processor``) from the
exported generation_config.json read back with ``GenerationConfig.from_pretrained``.
vLLM: samplewright.core.engines.vllm_target, tested stage by stage in
test_engine_stages.py against vLLM's source.
"""

import pytest

from samplewright import Preset
from samplewright.core.engines.fidelity import (
    DIFFERS,
    EXACT,
    EXACT_EXCEPT_TIES,
    THRESHOLD,
    fidelity,
    random_steps,
)

DEFAULT_ORDER_PRESETS = [
    Preset(name="warm", temperature=0.8, top_p=0.92, repetition_penalty=1.1),
    Preset(name="exact", temperature=0.3, top_k=20, top_p=0.8, repetition_penalty=1.1),
    Preset(
        name="everything",
        temperature=0.7,
        top_k=30,
        top_p=0.9,
        min_p=0.05,
        typical_p=0.95,
        repetition_penalty=1.2,
        no_repeat_ngram_size=2,
    ),  # fmt: skip
    Preset(name="greedy", temperature=0.0, repetition_penalty=1.3),
]


@pytest.mark.parametrize("preset", DEFAULT_ORDER_PRESETS, ids=lambda p: p.name)
def test_transformers_equals_shape_away_from_ties(preset):
    report = fidelity(preset, "transformers")
    assert report.measure.steps == 1000
    assert report.verdict in (EXACT, EXACT_EXCEPT_TIES)
    assert report.measure.max_tv_away_from_ties < THRESHOLD


def test_transformers_reports_a_reordered_preset_as_differs_with_a_distance():
    preset = Preset(
        name="min-p first", temperature=1.1, top_p=0.8, min_p=0.1,
        order=("penalties", "min_p", "temperature", "top_k", "top_p", "typical_p"),
    )  # fmt: skip
    report = fidelity(preset, "transformers", random_count=300)
    assert report.verdict == DIFFERS and report.measure.max_tv > 0.01 and report.measure.differing_share > 0
    assert any("before min-p" in r for r in report.reasons)
    assert report.closest is not None and report.closest.preset.order[:2] == ("penalties", "temperature")
    assert report.closest.verdict_on_target in (EXACT, EXACT_EXCEPT_TIES)
    assert report.closest.from_original.max_tv > 0


def test_transformers_reports_frequency_penalty_as_differs_with_a_distance():
    report = fidelity(Preset(name="fresh", temperature=0.9, frequency_penalty=0.6), "transformers", random_count=300)
    assert report.verdict == DIFFERS and report.measure.mean_tv > 0
    assert report.reasons == ("transformers has no frequency or presence penalty: they are dropped",)


def test_vllm_keeps_frequency_penalty_but_drops_typical_sampling():
    assert (
        fidelity(Preset(name="fresh", temperature=0.9, frequency_penalty=0.6), "vllm", random_count=300).verdict
        == EXACT
    )
    report = fidelity(Preset(name="typical", typical_p=0.9), "vllm", random_count=300)
    assert report.verdict == DIFFERS and "no typical sampling" in report.reasons[0]
    assert report.closest is not None and report.closest.preset.typical_p == 1.0


def test_vllm_min_p_and_top_p_in_the_default_order_differ():
    # vLLM applies min-p before top-p (test_engine_stages shows a hand-worked case).
    report = fidelity(Preset(name="both", min_p=0.2, top_p=0.7), "openai-request", random_count=300)
    assert report.verdict == DIFFERS and report.measure.max_tv > 0


def test_json_report_has_the_contract_keys():
    data = fidelity(Preset(name="fresh", frequency_penalty=0.6), "transformers", random_count=50).to_json()
    assert {"preset", "target", "verdict", "reasons", "max_tv", "mean_tv", "differing_share", "parameters"} <= set(data)
    assert data["parameters"]["do_sample"] is True and "frequency_penalty" not in data["parameters"]


def test_random_steps_include_ties_and_repeated_tokens():
    steps = random_steps(40)
    assert any(len(set(s.logits.tolist())) < len(s.logits) for s in steps)
    assert any(len(set(s.history)) < len(s.history) for s in steps)


@pytest.mark.model
def test_transformers_on_the_default_model_along_a_demo_passage(default_model):
    passage = {"notice": "The 07:15 sailing from Skerry Point is delayed by twenty minutes this morning."}
    preset = Preset(name="exact", temperature=0.3, top_k=20, top_p=0.8, repetition_penalty=1.1)
    report = fidelity(preset, "transformers", default_model, passages=passage, random_count=10, model_tokens=4)
    assert report.model_steps == 4
    assert report.measure.max_tv_away_from_ties < THRESHOLD
