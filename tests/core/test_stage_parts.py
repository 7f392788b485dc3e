"""The chain as the editor shows it: which stages a preset leaves off, switching
one on or off, and what each stage keeps at one step."""

from __future__ import annotations

import numpy as np
import pytest

from samplewright import Preset
from samplewright.core.fields import NumberField
from samplewright.core.presets import DEFAULT_ORDER, FIELDS
from samplewright.core.results import StageEffect
from samplewright.core.sampling import inspection
from samplewright.core.sampling.stage_parts import chain_parts, is_off, stages_kept, switched

# A four-token distribution worked by hand: probabilities 0.5, 0.3, 0.15, 0.05.
PROBS = np.array([0.5, 0.3, 0.15, 0.05])


def test_every_field_of_the_chain_belongs_to_exactly_one_stage():
    fields = [f for part in chain_parts().values() for f in part.fields]
    assert sorted(fields) == sorted(set(fields))
    # The numeric parameters that are no stage's: the preset's token limit only.
    numeric = {f for f, spec in FIELDS.items() if isinstance(spec, NumberField)}
    assert numeric - set(fields) == {"max_new_tokens"}


def test_a_new_preset_has_every_stage_off_and_switching_on_changes_it():
    neutral = Preset("n")
    assert all(is_off(neutral, stage) for stage in DEFAULT_ORDER)
    warm = switched(neutral, "top_p", True)
    assert not is_off(warm, "top_p") and warm.top_p < 1
    assert is_off(switched(warm, "top_p", False), "top_p")
    assert switched(warm, "top_p", True) == warm  # already on: its value is kept
    # The penalties stage is on when any of its parts is.
    assert not is_off(Preset("n", no_repeat_ngram_size=3), "penalties")


def test_neutral_values_leave_the_distribution_unchanged():
    # Each stage's neutral values are a no-op of the chain (common practice: 1 / 0 means "off").
    view = inspection.step_view(np.log(PROBS), [Preset("n")], [str(i) for i in range(4)])
    kept = view.presets[0].stages
    assert [k.kept for k in kept] == [4] * len(DEFAULT_ORDER)
    assert all(k.kept_raw_mass == pytest.approx(1.0) for k in kept)


def test_kept_counts_follow_the_chain_order():
    # Holtzman et al. (2020), "The Curious Case of Neural Text Degeneration": the nucleus is the
    # smallest set whose probability reaches p; for p = 0.75 that is {0.5, 0.3} (0.8).
    # Then top-k with k = 1 (Fan et al. 2018) keeps the most likely token, 0.5 of the mass.
    order = ("penalties", "temperature", "top_p", "top_k", "min_p", "typical_p")
    preset = Preset("cut", top_p=0.75, top_k=1, order=order)
    view = inspection.step_view(np.log(PROBS), [preset], [str(i) for i in range(4)])
    got = {k.stage: (k.kept, round(k.kept_raw_mass, 9)) for k in view.presets[0].stages}
    assert got == {
        "penalties": (4, 1.0),
        "temperature": (4, 1.0),
        "top_p": (2, 0.8),
        "top_k": (1, 0.5),
        "min_p": (1, 0.5),
        "typical_p": (1, 0.5),
    }
    assert [k.stage for k in view.presets[0].stages] == list(order)
    assert view.presets[0].kept == 1


def test_min_p_keeps_tokens_above_its_share_of_the_top():
    # Nguyen et al. (2024), "Turning Up the Heat: Min-p Sampling": keep p >= min_p * p_max;
    # 0.2 * 0.5 = 0.1, so 0.5, 0.3 and 0.15 stay (0.95 of the mass) and 0.05 goes.
    view = inspection.step_view(np.log(PROBS), [Preset("m", min_p=0.2)], [str(i) for i in range(4)])
    by_stage = {k.stage: k for k in view.presets[0].stages}
    assert by_stage["min_p"].kept == 3 and by_stage["min_p"].kept_raw_mass == pytest.approx(0.95)


def test_a_stage_missing_from_the_record_keeps_what_came_before():
    with np.errstate(divide="ignore"):
        after = {"top_k": np.log(np.array([0.5, 0.3, 0.0, 0.0]))}
    assert stages_kept(("temperature", "top_k"), PROBS, after) == (
        StageEffect("temperature", 4, pytest.approx(1.0)),
        StageEffect("top_k", 2, pytest.approx(0.8)),
    )
