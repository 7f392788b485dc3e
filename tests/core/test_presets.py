"""Preset validation, defaults and the exact plain-JSON round trip."""

import json
import math
import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from samplewright import Preset, PresetError
from samplewright.core.fields import NumberField
from samplewright.core.presets import DEFAULT_ORDER, FIELDS, PARAMETERS, differences, validate_field

BAD_VALUES = {
    "temperature": [-0.1, 5.01, math.nan, math.inf, "1", True, None, 10**400],
    "top_k": [-1, 2.5, "3", True, math.inf, 10**400],
    "top_p": [0, -0.5, 1.01, math.nan],
    "min_p": [-0.01, 1.0, 1.5],
    "typical_p": [0, 1.2, -1],
    "repetition_penalty": [0, -1, 10.5],
    "frequency_penalty": [-2.01, 2.5],
    "presence_penalty": [-3, 2.01],
    "no_repeat_ngram_size": [-1, 1.5, 33],
    "max_new_tokens": [0, 513, 3.3],
    "stop": ["\n", [""], [1], ["x"] * 17],
    "order": [
        ["temperature"],
        list(DEFAULT_ORDER) + ["top_k"],
        ["penalties", "temperature", "top_k", "top_p", "min_p", "typicality"],
        "penalties",
    ],
    "name": ["", "   ", "two\nlines", "x" * 121, 5],
    "tags": ["one", [3], ["t" * 61]],
    "created": ["yesterday", 12],
}


@pytest.mark.parametrize("field, value", [(f, v) for f, vs in BAD_VALUES.items() for v in vs])
def test_every_invalid_parameter_is_rejected_with_its_name(field, value):
    data = {"name": "x", field: value}
    with pytest.raises(PresetError) as err:
        Preset.from_dict(data)
    assert err.value.field == field
    assert field in str(err.value)
    assert isinstance(err.value, ValueError)


# The ranges as docs/settings-format.md states them, written out here rather than read from FIELDS;
# each bad value lies beyond the upper end so none of the range's words is already in the value.
@pytest.mark.parametrize(
    "field, value, allowed",
    [
        ("temperature", 5.5, "0 to 5"),
        ("top_k", 1_000_001, "0 to 1000000"),
        ("top_p", 1.25, "above 0 up to 1"),
        ("min_p", 1.0, "0 up to, not including, 1"),
        ("typical_p", 1.5, "above 0 up to 1"),
        ("repetition_penalty", 10.5, "above 0 up to 10"),
        ("frequency_penalty", 2.5, "-2 to 2"),
        ("presence_penalty", 3.0, "-2 to 2"),
        ("no_repeat_ngram_size", 33, "0 to 32"),
        ("max_new_tokens", 513, "1 to 512"),
    ],
)
def test_message_names_value_and_allowed_range(field, value, allowed):
    with pytest.raises(PresetError) as err:
        validate_field(field, value)
    message = str(err.value)
    assert message.startswith(f"{field}: ") and repr(value) in message
    assert f"allowed: {allowed}" in message or f"allowed: a whole number from {allowed}" in message


NUMBER_FIELDS = [f for f in FIELDS.values() if isinstance(f, NumberField)]


@pytest.mark.parametrize("field", NUMBER_FIELDS, ids=[f.name for f in NUMBER_FIELDS])
def test_range_check_and_message_come_from_the_typed_field_description(field):
    # One description (src/samplewright/core/fields.py) gives the check and the words: an end is
    # accepted exactly when it is not open, a value past either end is refused, and the message
    # quotes the description's own "allowed" text (the editor shows the same text).
    step = 1 if field.integer else 1e-9
    for end, is_open, outside in (
        (field.low, field.low_open, field.low - step),
        (field.high, field.high_open, field.high + step),
    ):
        end = int(end) if field.integer else end
        if is_open:
            with pytest.raises(PresetError):
                validate_field(field.name, end)
        else:
            assert validate_field(field.name, end) == end
        with pytest.raises(PresetError) as err:
            validate_field(field.name, int(outside) if field.integer else outside)
        assert str(err.value).endswith(f"allowed: {field.allowed}")
    if field.neutral is not None:
        assert field.allowed.endswith(f"({field.neutral:g} = off)")


def test_preset_errors_are_user_facing_and_still_value_errors():
    from samplewright.core.errors import SamplewrightError

    with pytest.raises(PresetError) as err:
        validate_field("top_p", 2)
    assert isinstance(err.value, SamplewrightError) and isinstance(err.value, ValueError)
    assert err.value.field == "top_p"


def test_unknown_key_is_rejected_by_name():
    with pytest.raises(PresetError, match="temprature"):
        Preset.from_dict({"name": "x", "temprature": 0.7})


def test_missing_name_and_non_mapping():
    with pytest.raises(PresetError, match="name"):
        Preset.from_dict({"temperature": 0.7})
    with pytest.raises(PresetError):
        Preset.from_dict(["name", "x"])


def test_defaults_are_neutral():
    p = Preset("plain")
    assert (p.temperature, p.top_k, p.top_p, p.min_p, p.typical_p) == (1.0, 0, 1.0, 0.0, 1.0)
    assert (p.repetition_penalty, p.frequency_penalty, p.presence_penalty, p.no_repeat_ngram_size) == (1.0, 0, 0, 0)
    assert p.order == DEFAULT_ORDER and p.max_new_tokens == 64 and p.stop == ()


def test_boundaries_are_accepted():
    Preset(
        "b",
        temperature=0,
        top_p=1,
        min_p=0,
        typical_p=1e-9,
        frequency_penalty=-2,
        presence_penalty=2,
        max_new_tokens=512,
        repetition_penalty=10,
    )


def test_integral_floats_become_integers():
    assert Preset.from_dict({"name": "x", "top_k": 5.0}).top_k == 5


def test_replace_validates():
    with pytest.raises(PresetError, match="top_p"):
        Preset("x").replace(top_p=2)
    assert Preset("x").replace(temperature=0.5).temperature == 0.5


def test_differences():
    a, b = Preset("a"), Preset("a", temperature=0.5, stop=("\n\n",))
    assert differences(a, b) == {"temperature": (1.0, 0.5), "stop": ([], ["\n\n"])}


finite = dict(allow_nan=False, allow_infinity=False)
# Printable text only: names and tags refuse control and invisible characters (core/text_rules.py).
PRINTABLE = st.characters(blacklist_categories=("Cs", "Cc", "Cf", "Zl", "Zp"))
presets = st.builds(
    Preset,
    name=st.text(st.characters(blacklist_categories=("Cs", "Cc", "Cf", "Zl", "Zp")), min_size=1, max_size=40).filter(
        lambda s: s.strip() == s and s
    ),
    description=st.text(PRINTABLE, max_size=50),
    tags=st.lists(st.text(PRINTABLE, min_size=1, max_size=10).map(str.strip).filter(bool), max_size=4, unique=True).map(
        tuple
    ),
    temperature=st.floats(0, 5, **finite),
    top_k=st.integers(0, 1000),
    top_p=st.floats(1e-6, 1, **finite),
    min_p=st.floats(0, 0.999, **finite),
    typical_p=st.floats(1e-6, 1, **finite),
    repetition_penalty=st.floats(0.01, 10, **finite),
    frequency_penalty=st.floats(-2, 2, **finite),
    presence_penalty=st.floats(-2, 2, **finite),
    no_repeat_ngram_size=st.integers(0, 32),
    max_new_tokens=st.integers(1, 512),
    stop=st.lists(st.text(PRINTABLE, min_size=1, max_size=5), max_size=3).map(tuple),
    order=st.permutations(DEFAULT_ORDER).map(tuple),
)


@settings(max_examples=150, deadline=None)
@given(presets)
def test_round_trip_is_exact_through_json(preset):
    data = preset.to_dict()
    assert json.loads(json.dumps(data)) == data
    assert Preset.from_dict(json.loads(json.dumps(data))) == preset
    assert set(preset.parameters()) == set(PARAMETERS)


def test_core_never_imports_qt():
    # The headless split (DEVELOPERS.md, "Rules of the code"): importing the whole core must not load Qt.
    code = (
        "import sys, samplewright, samplewright.core.sampling.chain, samplewright.core.sampling.metrics, "
        "samplewright.core.presets, samplewright.cli\n"
        "import pkgutil, importlib, samplewright.core as c\n"
        "for m in pkgutil.iter_modules(c.__path__): importlib.import_module('samplewright.core.' + m.name)\n"
        "bad = [m for m in sys.modules if m.startswith(('PySide6', 'pyqtgraph'))]\n"
        "assert not bad, bad\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


def test_presets_module_stays_light():
    # Editing and storing presets must not pay for torch (DEVELOPERS.md, "Rules of the code").
    code = "import sys, samplewright; assert 'torch' not in sys.modules, 'torch imported'"
    subprocess.run([sys.executable, "-c", code], check=True)
