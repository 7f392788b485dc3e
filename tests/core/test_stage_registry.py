"""The stage registry (src/samplewright/core/sampling/registry.py): every stage is a pure
function whose neutral values change nothing, and a new stage needs only its entry and its
function to run through the chain, shape() and the step view."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from samplewright import Preset, PresetError, shape
from samplewright.core.fields import NumberField
from samplewright.core.presets import DEFAULT_ORDER, FIELDS
from samplewright.core.sampling import inspection, registry
from samplewright.core.sampling.chain import RowHistory, RowParams, run_chain
from samplewright.core.sampling.stage_parts import chain_parts, is_off, switched

VOCAB = 40
STAGES = registry.stages()


def _active_value(field: NumberField) -> float:
    """A value inside the field's range that is not its neutral one (so the stage acts)."""
    if field.integer:
        return int(field.low) + 2
    value = field.low + (field.high - field.low) * 0.37
    assert field.contains(value) and value != field.neutral
    return value


def _batch(preset_values: dict[str, float], rows: int = 3, seed: int = 0):
    """Random float64 logits (some already removed), the rows' parameters and a history."""
    gen = torch.Generator().manual_seed(seed)
    logits = torch.randn(rows, VOCAB, generator=gen, dtype=torch.float64) * 3
    logits[:, ::7] = float("-inf")
    presets = [Preset(f"row {r}", **preset_values) for r in range(rows)]
    history = [[1, 2, 3, 1, 2], [5, 5, 6], [9, 8, 9, 8]][:rows]
    hist = RowHistory.build(history, history, [p.no_repeat_ngram_size for p in presets], VOCAB)
    return logits, RowParams.from_presets(presets), hist


@pytest.mark.parametrize("stage", STAGES, ids=[s.name for s in STAGES])
@pytest.mark.parametrize("active", [True, False], ids=["active", "neutral"])
def test_every_stage_leaves_its_input_unchanged(stage, active):
    # Common practice for a pipeline of logits processors: a stage returns new scores and the
    # chain keeps each stage's input (the step view compares them), so none may write in place.
    values = {f.name: _active_value(f) if active else f.neutral for f in stage.fields}
    logits, params, history = _batch(values)
    seen = (history.seen.clone(), history.counts.clone(), history.banned.clone())
    before = (logits.clone(), {k: v.clone() for k, v in params.values.items()})
    out = stage.apply(logits, params, history)
    assert out.shape == logits.shape and out.dtype == torch.float64
    assert torch.equal(logits, before[0])
    assert all(torch.equal(params.values[k], v) for k, v in before[1].items())
    assert all(torch.equal(a, b) for a, b in zip(seen, (history.seen, history.counts, history.banned), strict=True))


@pytest.mark.parametrize("stage", STAGES, ids=[s.name for s in STAGES])
def test_every_stages_neutral_value_is_a_no_op(stage):
    # Each method's own definition: temperature 1 divides by 1 (Ackley, Hinton & Sejnowski 1985),
    # top-k 0 and top-p 1 keep everything (Fan, Lewis & Dauphin 2018; Holtzman et al. 2020, eq. 2),
    # min-p 0 has threshold 0 (Nguyen et al. 2024), typical 1 keeps all the mass (Meister et al.
    # 2023), a repetition penalty of 1 divides by 1 (Keskar et al. 2019, CTRL, section 4.1),
    # frequency/presence 0 subtract nothing, no-repeat n-gram 0 bans nothing (Paulus, Xiong &
    # Socher 2017). The history is non-empty, so a stage that ignored its value would show it.
    logits, params, history = _batch({f.name: f.neutral for f in stage.fields})
    assert stage.neutral and set(stage.neutral) == {f.name for f in stage.fields}
    assert torch.equal(stage.apply(logits, params, history), logits)


@pytest.mark.parametrize("stage", STAGES, ids=[s.name for s in STAGES])
def test_every_stage_acts_at_a_value_other_than_neutral(stage):
    # The other side of the neutral test, so that test can fail: away from neutral the stage
    # changes the logits of the same batch (each method's definition, as above).
    logits, params, history = _batch({f.name: _active_value(f) for f in stage.fields})
    assert not torch.equal(stage.apply(logits, params, history), logits)


def test_each_stage_field_is_a_preset_parameter_with_the_same_default():
    # The registry, Preset and the typed field descriptions agree (docs/sampling-chain.md, "Adding a
    # stage": a new parameter also becomes a Preset attribute and a property of the settings-file schema).
    plain = Preset("plain")
    for stage in STAGES:
        for field in stage.fields:
            assert FIELDS[field.name] is field
            assert getattr(plain, field.name) == field.default == field.neutral
    assert registry.names() == DEFAULT_ORDER


def test_registering_a_clashing_stage_is_refused():
    penalties = registry.stage("penalties")
    with pytest.raises(ValueError, match="registered already"):
        registry.register(penalties)
    clash = registry.Stage(**{**penalties.__dict__, "name": "second_penalties"})
    with pytest.raises(ValueError, match="belongs to another stage"):
        registry.register(clash)
    assert "second_penalties" not in registry.names()


def test_a_stage_whose_starting_values_leave_it_off_or_out_of_range_is_refused():
    # Switching a stage on in the editor must make it act, with a value its field allows.
    strength = NumberField("drop_strength", 0.0, 1.0, 0.0, "A test parameter.", neutral=0.0)
    entry = registry.Stage(
        name="starts_off",
        label="starts off",
        summary="A test stage.",
        source="none: invented for this test",
        mark=registry.StageMark(colour="#777777", shape="plus", hatch="dots", glyph="+"),
        fields=(strength,),
        apply=lambda logits, params, history: logits,
    )
    with pytest.raises(ValueError, match="other than neutral"):
        registry.register(entry)
    with pytest.raises(ValueError, match="drop_strength=2"):
        registry.register(registry.Stage(**{**entry.__dict__, "starting": (("drop_strength", 2.0),)}))
    assert "starts_off" not in registry.names()


def test_every_built_in_stage_switched_on_acts_and_switched_off_is_neutral():
    # Each stage's starting value lies in its range and is not its neutral value (common practice:
    # switching a stage on gives it a typical value to tune), and the editor's parts show the entry.
    parts = chain_parts()
    assert tuple(parts) == DEFAULT_ORDER
    for stage in STAGES:
        on = switched(Preset("plain"), stage.name, True)
        assert not is_off(on, stage.name) and is_off(switched(on, stage.name, False), stage.name)
        part = parts[stage.name]
        assert (part.label, part.explanation, part.starting) == (stage.label, stage.summary, stage.switched_on)
        assert part.fields == tuple(f.name for f in stage.fields)


# --- A new stage is one entry plus its function --------------------------------------------------
# A throwaway stage invented for this test (no paper): it removes the live token with the highest id.
THROWAWAY = "drop_highest_id"


def _drop_highest_id(logits, params, history):
    live = ~torch.isneginf(logits)
    ids = torch.arange(logits.shape[-1]).expand_as(logits)
    highest = torch.where(live, ids, -1).max(dim=-1, keepdim=True).values
    return logits.masked_fill(ids == highest, float("-inf"))


@pytest.fixture
def throwaway_stage():
    stage = registry.register(
        registry.Stage(
            name=THROWAWAY,
            label="drop highest id",
            summary="Removes the live token with the highest id (a test stage).",
            source="none: invented for this test",
            mark=registry.StageMark(colour="#777777", shape="hexagon", hatch="diagonal_grid", glyph="⬢"),
            fields=(),
            apply=_drop_highest_id,
        )
    )
    yield stage
    registry.unregister(THROWAWAY)


def test_a_registered_stage_runs_through_shape_and_the_step_view(throwaway_stage):
    order = DEFAULT_ORDER + (THROWAWAY,)
    preset = Preset("with the new stage", order=order)
    # Removing id 3 of logits [1, 2, 3, 4] leaves softmax([1, 2, 3]): by the softmax's definition
    # the same numbers as softmax([2, 1, 0]) in reverse, the temperature-1 row of the worked
    # examples in docs/sampling-chain.md (Ackley, Hinton & Sejnowski 1985).
    p = shape([1.0, 2.0, 3.0, 4.0], preset)
    np.testing.assert_allclose(p, [0.090031, 0.244728, 0.665241, 0.0], atol=1e-6)
    # The step view attributes the cut to the new stage, by its name.
    view = inspection.step_view(np.array([1.0, 2.0, 3.0, 4.0]), [preset], texts=["a", "b", "c", "d"], top=4)
    assert [row.cut_by for row in view.presets[0].top] == [THROWAWAY, None, None, None]


def test_a_registered_stage_gets_its_block_in_the_editors_chain(throwaway_stage):
    # docs/sampling-chain.md, "Adding a stage": the editor's blocks come from the registry, so the
    # new stage shows with its own label and summary after the built-in ones, and nothing else is added.
    parts = chain_parts()
    assert tuple(parts) == DEFAULT_ORDER + (THROWAWAY,)
    part = parts[THROWAWAY]
    assert (part.label, part.explanation, part.fields) == (throwaway_stage.label, throwaway_stage.summary, ())
    # A stage without parameters always acts: it is never shown as off.
    assert not is_off(Preset("with it", order=DEFAULT_ORDER + (THROWAWAY,)), THROWAWAY)
    registry.unregister(THROWAWAY)
    try:
        assert THROWAWAY not in chain_parts()
    finally:
        registry.register(throwaway_stage)


def test_a_registered_stage_takes_its_place_in_each_rows_order(throwaway_stage):
    # Two rows with the new stage at different places: before top-k 2 it removes id 3 first, so
    # top-k keeps ids 2 and 1; after top-k (which kept ids 3 and 2) it leaves only id 2.
    # Top-k as defined by Fan, Lewis & Dauphin (2018).
    early = Preset("early", top_k=2, order=(THROWAWAY,) + DEFAULT_ORDER)
    late = Preset("late", top_k=2, order=DEFAULT_ORDER + (THROWAWAY,))
    logits = torch.tensor([[1.0, 2.0, 3.0, 4.0]] * 2, dtype=torch.float64)
    history = RowHistory.build([[], []], [[], []], [0, 0], 4)
    out = run_chain(logits, RowParams.from_presets([early, late]), history, keep_stages=True)
    kept = torch.isfinite(out.logits)
    assert kept.tolist() == [[False, True, True, False], [False, False, True, False]]
    assert out.after_stage is not None and THROWAWAY in out.after_stage


def test_every_order_must_name_a_registered_stage_and_only_while_it_is_registered(throwaway_stage):
    with pytest.raises(PresetError, match=THROWAWAY):
        Preset("old order", order=DEFAULT_ORDER)
    registry.unregister(THROWAWAY)
    try:
        with pytest.raises(PresetError, match="order"):
            Preset("new order", order=DEFAULT_ORDER + (THROWAWAY,))
        assert Preset("old order", order=DEFAULT_ORDER).order == DEFAULT_ORDER
    finally:
        registry.register(throwaway_stage)  # the fixture takes it away again
