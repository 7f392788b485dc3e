"""Each engine module's stages against its cited source's definitions, on hand-worked examples.

Sources (as cited in docs/engines.md):
  vLLM: vllm/model_executor/layers/utils.py ``apply_penalties`` and
  vllm/_custom_ops.py ``apply_repetition_penalties_torch`` (penalties),
  vllm/v1/sample/sampler.py (order, temperature, greedy below 1e-5),
  vllm/v1/sample/logits_processor/builtin.py ``MinPLogitsProcessor``,
  vllm/v1/sample/ops/topk_topp_sampler.py ``apply_top_k_only`` / ``apply_top_k_top_p``,
  vllm/sampling_params.py (temperatures in (0, 0.01) raised to 0.01).
  transformers: the installed transformers' generation/utils.py ``_get_logits_processor``
  and generation/logits_process.py (the processors themselves).
The expected numbers are worked by hand from those definitions.
"""

import json
import math

import numpy as np
import pytest
import torch

from samplewright import Preset
from samplewright.core.engines import openai_target, transformers_target, vllm_target
from samplewright.core.engines.common import samplewright_step
from samplewright.core.engines.cuts import cut_on_tie

NEG = float("-inf")


def row(*values):
    return torch.tensor([values], dtype=torch.float64)


def test_vllm_penalties_count_prompt_for_repetition_and_output_only_for_frequency():
    # apply_penalties: repetition on prompt ∪ output (positive / 2, negative × 2); then
    # frequency 0.5 × output count and presence 0.25 × [in output]. Prompt = [0], output = [1, 1, 3].
    out = vllm_target.penalties(row(2.0, -1.0, 0.5, 3.0), [0], [1, 1, 3], 2.0, 0.5, 0.25)
    # token 0: 2/2 = 1 (prompt: repetition only); token 1: -1×2 - 2×0.5 - 0.25 = -3.25;
    # token 2: untouched; token 3: 3/2 - 0.5 - 0.25 = 0.75
    assert out[0].tolist() == pytest.approx([1.0, -3.25, 0.5, 0.75], abs=1e-15)


def test_vllm_repetition_penalty_leaves_a_zero_logit_at_zero():
    # apply_repetition_penalties_torch: logits > 0 divided, others (zero included) multiplied.
    assert vllm_target.penalties(row(0.0, 1.0), [0, 1], [], 1.5, 0.0, 0.0)[0].tolist() == pytest.approx([0.0, 2 / 3])


def test_vllm_temperature_divides():
    assert vllm_target.temperature(row(1.0, 2.0), 0.5)[0].tolist() == [2.0, 4.0]


def test_vllm_min_p_cuts_below_fraction_of_top_probability():
    # MinPLogitsProcessor: threshold 0.2 × 0.5 = 0.1 removes only the 0.05 token.
    logits = torch.log(row(0.5, 0.3, 0.15, 0.05))
    out = vllm_target.min_p(logits, 0.2)
    assert torch.isfinite(out[0]).tolist() == [True, True, True, False]


def test_vllm_top_k_keeps_every_token_tied_with_the_kth():
    # apply_top_k_only: remove logits < the k-th largest; with k = 2 the two tied 2.0s both stay.
    out = vllm_target.top_k(row(3.0, 2.0, 2.0, 1.0), 2)
    assert torch.isfinite(out[0]).tolist() == [True, True, True, False]
    assert cut_on_tie("top_k", 2, row(3.0, 2.0, 2.0, 1.0)[0], out[0]) is False  # all ties kept: no tie across the cut


def test_vllm_top_p_removes_the_ascending_tail_at_most_one_minus_p():
    # apply_top_k_top_p: ascending [0.2, 0.3, 0.5], cumsum [0.2, 0.5, 1.0]; with p = 0.75,
    # 1 - p = 0.25 removes the 0.2 token only. With p = 0.1 only the top token stays.
    logits = torch.log(row(0.5, 0.3, 0.2))
    assert torch.isfinite(vllm_target.top_p(logits, 0.75)[0]).tolist() == [True, True, False]
    assert torch.isfinite(vllm_target.top_p(logits, 0.1)[0]).tolist() == [True, False, False]


def test_vllm_chain_applies_min_p_before_top_p():
    # sampler.py: temperature, then min-p (argmax-invariant processors), then top-k/top-p.
    # probs [0.4, 0.3, 0.2, 0.1], min_p 0.3 (threshold 0.12) removes 0.1 -> [4/9, 3/9, 2/9];
    # top_p 0.75: ascending cumsum 2/9 <= 0.25 removes 0.2 -> [4/7, 3/7, 0, 0].
    step = vllm_target.chain({"temperature": 1.0, "min_p": 0.3, "top_p": 0.75})
    out = step(torch.log(torch.tensor([0.4, 0.3, 0.2, 0.1], dtype=torch.float64)), [], [])
    assert out.probs.tolist() == pytest.approx([4 / 7, 3 / 7, 0.0, 0.0], abs=1e-12)
    # samplewright's default order (top-p, then min-p) keeps three: [4/9, 3/9, 2/9, 0].
    own = samplewright_step(Preset(name="p", min_p=0.3, top_p=0.75))
    assert own(torch.log(torch.tensor([0.4, 0.3, 0.2, 0.1], dtype=torch.float64)), [], []).probs.tolist() == (
        pytest.approx([4 / 9, 3 / 9, 2 / 9, 0.0], abs=1e-12)
    )


def test_vllm_greedy_below_epsilon_is_argmax_after_penalties():
    # sampler.py: temperature < 1e-5 -> greedy_sample = argmax of the penalised logits.
    step = vllm_target.chain({"temperature": 0.0, "repetition_penalty": 2.0})
    out = step(torch.tensor([3.0, 2.0, 0.5], dtype=torch.float64), [0], [])  # 3/2 = 1.5 < 2
    assert out.probs.tolist() == [0.0, 1.0, 0.0]


def test_vllm_raises_tiny_temperatures_to_one_hundredth():
    # sampling_params.py: 0 < temperature < _MAX_TEMP (0.01) becomes 0.01.
    step = vllm_target.chain({"temperature": 0.001})
    out = step(torch.tensor([0.01, 0.0], dtype=torch.float64), [], [])
    assert out.probs[0] == pytest.approx(1 / (1 + math.exp(-1.0)), rel=1e-12)


def test_vllm_parameters_write_minus_one_for_top_k_off_and_clamp_repetition():
    params = vllm_target.parameters(Preset(name="x", top_k=0, repetition_penalty=3.0))
    assert params["top_k"] == -1 and params["repetition_penalty"] == 2.0
    assert any("at most 2" in r for r in vllm_target.gaps(Preset(name="x", repetition_penalty=3.0)))


def test_openai_request_groups_generic_fields_and_extensions():
    request = openai_target.parameters(Preset(name="x", temperature=0.6, top_k=30, stop=("\n\n",)))
    assert set(request["body"]) == {
        "temperature", "top_p", "frequency_penalty", "presence_penalty", "max_tokens", "stop", "seed"
    }  # fmt: skip
    assert request["extra_body"] == {"top_k": 30, "min_p": 0.0, "repetition_penalty": 1.0}
    assert json.loads(json.dumps(request)) == request


def test_transformers_processors_come_in_generate_order_with_the_file_values(tmp_path):
    # _get_logits_processor: repetition, no-repeat n-gram, then temperature, top-k, top-p, min-p, typical.
    preset = Preset(name="x", temperature=0.7, top_k=20, top_p=0.9, min_p=0.05, typical_p=0.95,
                    repetition_penalty=1.2, no_repeat_ngram_size=2)  # fmt: skip
    (tmp_path / "generation_config.json").write_text(json.dumps(transformers_target.parameters(preset)))
    config = transformers_target.load_config(tmp_path)
    _, processors = transformers_target.build_processors(config)
    names = [type(p).__name__ for p in processors]
    assert names == [
        "RepetitionPenaltyLogitsProcessor", "NoRepeatNGramLogitsProcessor", "TemperatureLogitsWarper",
        "TopKLogitsWarper", "TopPLogitsWarper", "MinPLogitsWarper", "TypicalLogitsWarper",
    ]  # fmt: skip
    assert processors[3].top_k == 20 and processors[4].top_p == pytest.approx(0.9)


def test_transformers_top_k_keeps_ties_and_the_step_is_marked_as_tied(tmp_path):
    # TopKLogitsWarper removes scores < the k-th: with k = 2 over [3, 2, 2, 1] three tokens stay;
    # samplewright keeps exactly two (the lower id among the tied), so the step is a tie.
    preset = Preset(name="x", top_k=2)
    (tmp_path / "generation_config.json").write_text(json.dumps(transformers_target.parameters(preset)))
    step = transformers_target.chain_from_folder(tmp_path)
    logits = torch.tensor([3.0, 2.0, 2.0, 1.0], dtype=torch.float64)
    theirs, ours = step(logits, [0], []), samplewright_step(preset)(logits, [0], [])
    total = math.exp(3) + 2 * math.exp(2)
    expected = [math.exp(3) / total, math.exp(2) / total, math.exp(2) / total, 0.0]
    assert theirs.probs.tolist() == pytest.approx(expected, abs=1e-12)
    assert np.count_nonzero(ours.probs) == 2 and ours.tie


def test_transformers_greedy_config_is_argmax_after_repetition_penalty(tmp_path):
    preset = Preset(name="x", temperature=0.0, repetition_penalty=2.0)
    config = transformers_target.parameters(preset)
    assert config["do_sample"] is False
    (tmp_path / "generation_config.json").write_text(json.dumps(config))
    out = transformers_target.chain_from_folder(tmp_path)(torch.tensor([3.0, 2.0], dtype=torch.float64), [0], [])
    assert out.probs.tolist() == [0.0, 1.0]


def test_a_clean_cut_is_not_a_tie_and_a_tied_one_is():
    before = torch.tensor([3.0, 2.0, 1.0, NEG], dtype=torch.float64)
    after = torch.tensor([3.0, 2.0, NEG, NEG], dtype=torch.float64)
    assert not cut_on_tie("top_k", 2, before, after)
    tied_before = torch.tensor([3.0, 2.0, 2.0], dtype=torch.float64)
    assert cut_on_tie("top_k", 2, tied_before, torch.tensor([3.0, 2.0, NEG], dtype=torch.float64))
