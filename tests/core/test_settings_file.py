"""The portable settings file: schema, refusals, migration, the round trip, the import
preview and writes, and check_file. The schema is checked with the jsonschema package
(the reference implementation of JSON Schema draft 2020-12), not with our own code."""

import copy
import json
import math
import tempfile
from pathlib import Path

import jsonschema
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from samplewright import Preset, PresetError, __version__
from samplewright.core.errors import LibraryError
from samplewright.core.fields import NumberField
from samplewright.core.library import settings_file, storage
from samplewright.core.library.importing import ImportStopped, apply_import, preview_import
from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.settings_file import (
    FORMAT_VERSION,
    MAX_BYTES,
    check_file,
    export_preset_file,
    export_settings,
    migrate,
    read_settings,
    schema,
)
from samplewright.core.presets import DEFAULT_ORDER, FIELDS, MAX_TEXT
from samplewright.core.sampling import registry
from samplewright.core.text_rules import BIDI_CONTROLS

#: The numeric parameters' typed descriptions (src/samplewright/core/fields.py; the stages' own from the stage
#: registry, src/samplewright/core/sampling/registry.py).
NUMBER_FIELDS = [f for f in FIELDS.values() if isinstance(f, NumberField)]

VALIDATOR = jsonschema.Draft202012Validator

NOTICE = Preset(name="Timetable change", temperature=0.3, top_k=20, stop=("\n\n",))
LETTER = Preset(
    name="Lost property reply",
    description="Kind and short",
    temperature=0.8,
    top_p=0.9,
    order=("penalties", "top_p", "temperature", "top_k", "min_p", "typical_p"),
)


def document(*presets, **changes):
    doc = settings_file.settings_json(presets or (NOTICE, LETTER), exported_by="ingrid", model="tiny")
    doc.update(changes)
    return doc


def write(path: Path, obj) -> Path:
    path.write_text(json.dumps(obj), encoding="utf-8")
    return path


def snapshot(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and not p.name.startswith(".samplewright.lock")
    }


# -- schema and export --------------------------------------------------------------------------


def test_the_schema_is_a_valid_draft_2020_12_schema():
    VALIDATOR.check_schema(schema())
    assert schema()["$schema"] == "https://json-schema.org/draft/2020-12/schema"


def test_schema_text_limits_match_the_preset_limits():
    item = schema()["$defs"]["preset"]["properties"]
    assert item["name"]["maxLength"] == MAX_TEXT["name"]
    assert item["description"]["maxLength"] == MAX_TEXT["description"]
    assert item["notes"]["maxLength"] == MAX_TEXT["notes"]
    assert item["tags"]["items"]["maxLength"] == MAX_TEXT["tag"]
    assert item["stop"]["items"]["maxLength"] == MAX_TEXT["stop"]


@pytest.mark.parametrize("field", NUMBER_FIELDS, ids=[f.name for f in NUMBER_FIELDS])
def test_schema_bounds_match_the_typed_field_descriptions(field):
    # JSON Schema draft 2020-12 validation vocabulary: minimum/maximum include the bound,
    # exclusiveMinimum/exclusiveMaximum exclude it; "integer" admits 5.0 as well as 5.
    item = schema()["$defs"]["preset"]["properties"][field.name]
    assert item["type"] == ("integer" if field.integer else "number")
    low_key = "exclusiveMinimum" if field.low_open else "minimum"
    high_key = "exclusiveMaximum" if field.high_open else "maximum"
    assert item[low_key] == field.low and item[high_key] == field.high
    assert {"minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum"} & set(item) == {low_key, high_key}
    assert item["default"] == field.default


def test_schema_order_names_exactly_the_registered_stages():
    item = schema()["$defs"]["preset"]["properties"]["order"]
    assert item["items"]["enum"] == list(registry.names()) == item["default"]
    assert item["minItems"] == item["maxItems"] == len(registry.names())
    # Every stage field and the preset's other parameters are properties of the schema.
    assert set(FIELDS) <= set(schema()["$defs"]["preset"]["properties"])


def test_export_writes_a_schema_valid_file_that_reads_back(tmp_path):
    path = tmp_path / "team.json"
    written = export_settings([NOTICE, LETTER], path, exported_by="ingrid", model="SmolLM2-135M-Instruct")
    data = json.loads(path.read_text("utf-8"))
    jsonschema.validate(data, schema(), cls=VALIDATOR)
    assert data["format"] == "samplewright-settings" and data["format_version"] == 1
    assert data["tool_version"] == __version__ and data["exported_by"] == "ingrid"
    assert data["presets"][1]["order"] == list(LETTER.order)
    back = read_settings(path)
    assert back.presets == (NOTICE, LETTER) and back == written
    assert back.model == "SmolLM2-135M-Instruct"


def test_export_refuses_duplicate_names_and_an_empty_list(tmp_path):
    with pytest.raises(LibraryError, match="two presets are named"):
        export_settings([NOTICE, NOTICE.replace(top_k=3)], tmp_path / "a.json")
    with pytest.raises(LibraryError, match="presets"):
        export_settings([], tmp_path / "b.json")
    assert list(tmp_path.iterdir()) == []


# -- refusals -----------------------------------------------------------------------------------


def test_a_file_over_5_mb_is_refused(tmp_path):
    path = tmp_path / "big.json"
    text = json.dumps(document())
    path.write_text(text[:-1] + " " * (MAX_BYTES - len(text) + 1) + "}", encoding="utf-8")
    assert path.stat().st_size == MAX_BYTES + 1
    with pytest.raises(LibraryError, match="larger than 5 MB"):
        read_settings(path)


@pytest.mark.parametrize(
    "data, words",
    [
        (b"presets: [fast, slow]", "not valid JSON"),
        (b"\xff\xfe{}", "not UTF-8"),
        (b'{"format": "samplewright-settings", "format_version": 1, "presets": [], "presets": []}', "appears twice"),
        (b"[1, 2, 3]", "not a Samplewright settings file"),
        (b'{"format": "samplewright-preset"}', "library preset file"),
    ],
)
def test_files_that_are_not_settings_files_are_refused(tmp_path, data, words):
    (tmp_path / "x.json").write_bytes(data)
    with pytest.raises(LibraryError, match=words):
        read_settings(tmp_path / "x.json")


def test_a_newer_format_version_is_refused_with_update_advice(tmp_path):
    path = write(tmp_path / "future.json", document(format_version=FORMAT_VERSION + 1, hologram=True))
    with pytest.raises(LibraryError, match="newer Samplewright.*update Samplewright to read it"):
        read_settings(path)


@pytest.mark.parametrize(
    "change, place",
    [
        (lambda d: d["presets"][1].update(top_p=1.5), "presets[1].top_p"),
        (lambda d: d["presets"][0].update(name="n" * 121), "presets[0].name"),
        (lambda d: d["presets"][0].update(notes="n" * 10001), "presets[0].notes"),
        (lambda d: d["presets"][0].update(stop=[""]), "presets[0].stop[0]"),
        (lambda d: d["presets"][0].update(temprature=1), "presets[0]"),
        (lambda d: d["presets"][0].update(order=["top_k"] * 6), "presets[0].order"),
        (lambda d: d.pop("exported_by"), "exported_by"),
        (lambda d: d.update(macro="rm -rf /"), "macro"),
    ],
)
def test_a_schema_mismatch_is_refused_naming_the_place(tmp_path, change, place):
    doc = document()
    change(doc)
    with pytest.raises(LibraryError, match="does not match") as err:
        read_settings(write(tmp_path / "x.json", doc))
    assert place in str(err.value)
    assert len(str(err.value)) < 400  # a long field is not echoed in full


def test_duplicate_names_in_a_file_are_refused(tmp_path):
    with pytest.raises(LibraryError, match="two presets are named 'Timetable change'"):
        read_settings(write(tmp_path / "x.json", document(NOTICE, NOTICE.replace(top_k=1))))


def test_text_in_a_file_is_only_ever_data(tmp_path):
    trap = tmp_path / "pwned"
    preset = Preset(name="__import__('os').system('touch pwned')", notes=f"{{{{7*7}}}} open('{trap}', 'w')")
    back = read_settings(write(tmp_path / "x.json", document(preset))).presets[0]
    assert back == preset and not trap.exists()


# -- migration ----------------------------------------------------------------------------------


def test_migrators_run_one_version_step_at_a_time(monkeypatch):
    steps = []
    monkeypatch.setitem(settings_file._MIGRATORS, 1, lambda d: steps.append(1) or {**d, "renamed": True})
    monkeypatch.setitem(settings_file._MIGRATORS, 2, lambda d: steps.append(2) or {**d, "again": True})
    out = migrate({"format_version": 1}, current=3)
    assert out == {"format_version": 3, "renamed": True, "again": True} and steps == [1, 2]
    with pytest.raises(LibraryError, match="not one Samplewright knows"):
        migrate({"format_version": 0})
    assert migrate({"format_version": 1}) == {"format_version": 1}


# -- property tests -----------------------------------------------------------------------------


# Valid presets hold printable text (core/text_rules.py): one-line fields no control or format
# characters; descriptions and stop strings also tabs and line breaks, no bidirectional controls.
LINE_CHARACTERS = st.characters(blacklist_categories=("Cs", "Cc", "Cf", "Zl", "Zp"))
TEXT_CHARACTERS = st.characters(
    blacklist_categories=("Cs", "Cc", "Zl", "Zp"), whitelist_characters="\n\t", blacklist_characters=BIDI_CONTROLS
)


def text(max_size, alphabet=TEXT_CHARACTERS):
    return st.text(alphabet, max_size=max_size)


names = st.text(LINE_CHARACTERS, min_size=1, max_size=MAX_TEXT["name"]).filter(lambda s: s.strip())
presets = st.builds(
    Preset,
    name=names,
    description=text(200),
    notes=text(300),
    tags=st.lists(text(MAX_TEXT["tag"], LINE_CHARACTERS), max_size=5).map(tuple),
    **{
        f.name: (
            st.integers(int(f.low), int(f.high))
            if f.integer
            else st.floats(f.low, f.high, exclude_min=f.low_open, exclude_max=f.high_open)
        )
        for f in NUMBER_FIELDS
    },
    stop=st.lists(st.text(TEXT_CHARACTERS, min_size=1, max_size=MAX_TEXT["stop"]), max_size=4).map(tuple),
    order=st.permutations(DEFAULT_ORDER).map(tuple),
)


@settings(max_examples=60, deadline=None)
@given(st.lists(presets, min_size=1, max_size=4, unique_by=lambda p: p.name))
def test_round_trip_preset_to_settings_file_to_preset(chosen):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "team.json"
        export_settings(chosen, path)
        # Any valid preset exports to a document the reference validator accepts.
        jsonschema.validate(json.loads(path.read_bytes()), schema(), cls=VALIDATOR)
        assert read_settings(path).presets == tuple(chosen)


def _near(low, high):
    return st.sampled_from([low, high, low - 1e-9, high + 1e-9, 0, 1, -1, 0.5, 10**15])


ODD = st.one_of(
    st.none(),
    st.booleans(),
    st.text(max_size=3),
    st.lists(st.integers(), max_size=2),
    st.floats(allow_nan=False),
    st.integers(-(10**15), 10**15),
)
FIELD_VALUES = {
    "name": st.one_of(
        st.text(max_size=4), st.sampled_from(["x" * 120, "x" * 121, " ", "a\n", "a\u2028", "a\x1b[2J", "\u202e"]), ODD
    ),
    "description": st.one_of(st.text(max_size=3), st.just("d" * 2001), ODD),
    "tags": st.one_of(st.lists(st.text(max_size=3), max_size=3), st.just(["t" * 61]), st.just(["t"] * 33), ODD),
    # Each numeric field near and on its bounds, read from its typed description.
    **{f.name: st.one_of(_near(f.low, f.high), ODD) for f in NUMBER_FIELDS},
    "top_k": st.one_of(_near(0, 10**6), st.sampled_from([2.0, 2.5]), ODD),
    "top_p": st.one_of(_near(0, 1), st.just(-0.0), ODD),
    "stop": st.one_of(st.lists(st.text(max_size=2), max_size=3), st.just(["s"] * 17), ODD),
    "order": st.one_of(
        st.permutations(DEFAULT_ORDER).map(list),
        st.just(list(DEFAULT_ORDER[:5]) + ["top_k"]),
        st.lists(
            st.sampled_from(DEFAULT_ORDER + ("typical",)), min_size=len(DEFAULT_ORDER), max_size=len(DEFAULT_ORDER)
        ),
        ODD,
    ),
    "colour": ODD,
}


@st.composite
def preset_dicts(draw):
    """A valid preset's dict with up to two fields replaced by edge or odd values, maybe one removed."""
    candidate = draw(presets).to_dict()
    del candidate["created"], candidate["modified"]
    for field in draw(st.lists(st.sampled_from(sorted(FIELD_VALUES)), max_size=2, unique=True)):
        candidate[field] = draw(FIELD_VALUES[field])
    for field in draw(st.lists(st.sampled_from(sorted(candidate)), max_size=1)):
        del candidate[field]
    return candidate


@settings(max_examples=400, deadline=None)
@given(preset_dicts())
def test_schema_and_preset_validation_agree(candidate):
    # created/modified are left out: the schema only limits their length, Preset parses the date.
    schema_ok = VALIDATOR(schema()).is_valid(document() | {"presets": [candidate]})
    try:
        Preset.from_dict(candidate)
        preset_ok = True
    except PresetError:
        preset_ok = False
    assert schema_ok == preset_ok, candidate


def _mutations():
    paths = st.sampled_from(
        [
            (),
            ("presets",),
            ("presets", 0),
            ("presets", 1),
            ("presets", 0, "top_k"),
            ("presets", 1, "order"),
            ("format_version",),
            ("presets", 0, "name"),
        ]
    )
    values = st.one_of(
        ODD, st.dictionaries(st.text(max_size=5), ODD, max_size=2), st.builds(dict, name=st.just("Pier"))
    )
    return st.lists(st.tuples(paths, st.text(max_size=8), values, st.booleans()), min_size=1, max_size=3)


def _mutate(doc, mutations):
    for path, key, value, delete in mutations:
        target = doc
        for part in path:
            try:
                target = target[part]
            except (KeyError, IndexError, TypeError):
                break
        if isinstance(target, dict):
            keys = sorted(target) or [key]
            if delete:
                target.pop(keys[len(key) % len(keys)], None)
            else:
                target[keys[len(key) % len(keys)] if key else key] = copy.deepcopy(value)
        elif isinstance(target, list) and target:
            target[len(key) % len(target)] = copy.deepcopy(value)
    return doc


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_mutations(), st.one_of(st.just(0), st.integers(1, 400)), st.sampled_from(["keep_both", "overwrite", "skip"]))
def test_the_importer_on_malformed_documents_never_crashes_or_half_writes(mutations, cut, choice):
    base = document(NOTICE.replace(top_k=3), LETTER, Preset(name="Pier closure"))
    data = json.dumps(_mutate(copy.deepcopy(base), mutations)).encode()
    if cut:
        data = data[:-cut]
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        lib = PresetLibrary(folder / "lib", create=True, seed=False)
        lib.add(NOTICE)
        (folder / "in.json").write_bytes(data)
        before = snapshot(folder / "lib")
        try:
            doc = read_settings(folder / "in.json")
        except LibraryError:
            assert snapshot(folder / "lib") == before  # refused: nothing written
            return
        apply_import(preview_import(doc, lib), lib, choice)
        again = PresetLibrary(folder / "lib", seed=False)
        assert again.skipped == [] and not list((folder / "lib").rglob("*.partial"))
        assert {p.name for p in doc.presets} <= {r.name for r in again.records()}


# -- import preview and apply -------------------------------------------------------------------


@pytest.fixture
def lib(tmp_path):
    lib = PresetLibrary(tmp_path / "lib", create=True, seed=False)
    for preset in (NOTICE, LETTER, Preset(name="Greedy", temperature=0)):
        lib.add(preset)
    return lib


def incoming():
    return settings_file.SettingsDocument(
        (
            NOTICE,  # same everything -> unchanged
            LETTER.replace(description="Kinder"),  # same parameters, other text -> update
            Preset(name="Greedy", temperature=0.2),  # same name, other parameters -> conflict
            Preset(name="Ferry strike notice"),
        )
    )  # new -> add


def test_preview_sorts_presets_into_add_update_conflict_unchanged_and_writes_nothing(lib):
    before = snapshot(lib.folder)
    plan = preview_import(incoming(), lib)
    assert [(i.name, i.action) for i in plan.items] == [
        ("Timetable change", "unchanged"),
        ("Lost property reply", "update"),
        ("Greedy", "conflict"),
        ("Ferry strike notice", "add"),
    ]
    assert plan.conflicts[0].differences == {"temperature": (0.0, 0.2)}
    assert "conflict   Greedy  (temperature: 0.0 -> 0.2)" in plan.lines()
    assert snapshot(lib.folder) == before


@pytest.mark.parametrize(
    "choice, greedy_temps",
    [
        ("keep_both", {"Greedy": 0.0, "Greedy (copy)": 0.2}),
        ("overwrite", {"Greedy": 0.2}),
        ("take_theirs", {"Greedy": 0.0}),
        ("skip", {"Greedy": 0.0}),
    ],
)
def test_apply_import_follows_the_choice_for_conflicts(lib, choice, greedy_temps):
    written = apply_import(preview_import(incoming(), lib), lib, {"Greedy": choice})
    after = PresetLibrary(lib.folder, seed=False)
    temps = {r.name: r.preset.temperature for r in after.records() if r.name.startswith("Greedy")}
    assert temps == greedy_temps
    assert after.find("Lost property reply").preset.description == "Kinder"
    assert after.find("Ferry strike notice").revision == 1
    assert "Timetable change" not in [r.name for r in written]
    if choice == "overwrite":
        assert [r.preset.temperature for r in after.history(after.find("Greedy").id)] == [0.0]


def test_apply_import_without_a_choice_for_a_conflict_writes_nothing(lib):
    before = snapshot(lib.folder)
    with pytest.raises(LibraryError, match="'Greedy'.*choose"):
        apply_import(preview_import(incoming(), lib), lib)
    with pytest.raises(LibraryError, match="Unknown choice"):
        apply_import(preview_import(incoming(), lib), lib, "merge")
    assert snapshot(lib.folder) == before


def test_an_import_failing_part_way_writes_nothing_and_can_be_run_again(lib, monkeypatch):
    # Issue 8, defect 2 and 6: an import is whole or nothing (a preset's write failing on a full
    # disk takes back the ones already written).
    plan = preview_import(incoming(), lib)
    before = snapshot(lib.folder)
    real = storage.atomic_write
    calls = []

    def fail_on_the_second_preset(path, data):
        if not path.parent.name.startswith(".") and path.suffix == ".json":
            calls.append(path)
            if len(calls) == 2:
                raise OSError(28, "No space left on device")
        return real(path, data)

    monkeypatch.setattr(storage, "atomic_write", fail_on_the_second_preset)
    with pytest.raises(ImportStopped, match="is full.*Nothing was imported") as err:
        apply_import(plan, lib, "keep_both")
    monkeypatch.undo()
    assert err.value.written == () and len(calls) == 2
    assert snapshot(lib.folder) == before and not list(lib.folder.rglob("*.partial"))
    after = PresetLibrary(lib.folder, seed=False)
    assert after.skipped == [] and after.records() == lib.records()
    # Running it again writes the whole plan.
    written = apply_import(preview_import(incoming(), after), after, "keep_both")
    assert {"Greedy (copy)", "Ferry strike notice", "Lost property reply"} <= {r.name for r in written}


# -- check_file ---------------------------------------------------------------------------------


def test_check_file_recognises_the_three_kinds(tmp_path, lib):
    export_settings([NOTICE], tmp_path / "team.json", exported_by="ingrid")
    assert check_file(tmp_path / "team.json").startswith(
        "team.json: a valid settings file (format version 1) with 1 preset(s): 'Timetable change'"
    )
    record = lib.find("Greedy")
    assert "a valid library preset 'Greedy', revision 1" in check_file(lib.folder / record.file_name)
    export_preset_file(LETTER, tmp_path / "one.json")
    verdict = check_file(tmp_path / "one.json")
    assert verdict.startswith("one.json: a valid preset 'Lost property reply' (")
    # LETTER sets temperature 0.8 and top_p 0.9; the summary names both settings with their values.
    assert "temperature=0.8" in verdict and "top_p=0.9" in verdict and verdict.endswith(")")


def test_check_file_raises_on_problems(tmp_path):
    with pytest.raises(PresetError, match="top_p"):
        check_file(write(tmp_path / "a.json", {"name": "x", "top_p": 2}))
    with pytest.raises(LibraryError, match="another kind"):
        check_file(write(tmp_path / "b.json", {"format": "ferry-timetable"}))
    with pytest.raises(LibraryError, match="presets\\[0\\].temperature"):
        check_file(write(tmp_path / "c.json", document(NOTICE) | {"presets": [{"name": "x", "temperature": 9}]}))
    with pytest.raises(LibraryError, match="There is no file"):
        check_file(tmp_path / "missing.json")
    with pytest.raises(LibraryError, match="not usable JSON \\(Infinity is not a number JSON allows\\)"):
        check_file(write(tmp_path / "d.json", {"name": "x", "temperature": math.inf}))
