"""Fuzzing the settings-file reader and the import path with hostile documents (issue 8): deep
nesting, invalid Unicode, control characters, huge values, duplicate keys, mutated valid
documents and broken bytes. Whatever arrives: never a crash (only the program's own one-line
errors), never a partial write, and an accepted import leaves only valid files behind.

Bounded (a few hundred examples, small sizes) so that `make test` stays fast; hypothesis
(MacIver et al., 2019, "Hypothesis: a new approach to property-based testing") shrinks a
failure to a small document.
"""

import json
import tempfile
import unicodedata
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from samplewright import Preset
from samplewright.core.errors import SamplewrightError
from samplewright.core.library.importing import IMPORT_CHOICES, apply_import, preview_import
from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.records import decode_record
from samplewright.core.library.settings_file import check_file, parse_settings, read_importable

VALID = {
    "format": "samplewright-settings",
    "format_version": 1,
    "exported_by": "tomas",
    "exported_at": "2025-05-02T09:14:00+00:00",
    "tool_version": "0.1.0",
    "presets": [
        {"name": "Pier notice", "temperature": 0.7, "tags": ["north pier"]},
        {"name": "Greedy", "temperature": 0.0, "notes": "for the timetable"},
        {
            "name": "Crew newsletter",
            "min_p": 0.05,
            "order": ["temperature", "penalties", "top_k", "top_p", "min_p", "typical_p"],
        },
    ],
}
HOSTILE_TEXT = st.sampled_from(
    ["\x1b[31m", "\x9b", "\u202e", "\u200b", "\u2028", "\x00", "\ufeff", "é", "東", "🙂", "\\", '"', "\n"]
)
PLACES = [("presets", 0, "name"), ("presets", 1, "tags"), ("presets", 2, "notes"), ("exported_by",), ("model",)]


def _set(doc: dict, place: tuple, value) -> dict:
    target = doc
    for part in place[:-1]:
        target = target[part]
    target[place[-1]] = value
    return doc


def _fresh() -> dict:
    return json.loads(json.dumps(VALID))


@st.composite
def nested(draw):
    depth = draw(st.sampled_from([2, 15, 16, 17, 40, 900, 985, 990, 3000]))
    opener, closer = draw(st.sampled_from([("[", "]"), ('{"a":', "}")]))
    text = json.dumps(_fresh())
    inner = opener * depth + "1" + closer * depth if opener == '{"a":' else opener * depth + closer * depth
    return text.replace('["north pier"]', inner, 1).encode()


@st.composite
def odd_text(draw):
    value = "".join(draw(st.lists(st.one_of(HOSTILE_TEXT, st.text(max_size=3)), min_size=1, max_size=6)))
    return json.dumps(_set(_fresh(), draw(st.sampled_from(PLACES)), value), ensure_ascii=draw(st.booleans())).encode()


@st.composite
def surrogates(draw):
    code = draw(st.integers(0xD800, 0xDFFF))
    text = json.dumps(_fresh())
    target = draw(st.sampled_from(['"Pier notice"', '"tomas"', '"north pier"', '"name"']))
    return text.replace(target, target[:-1] + f"\\u{code:04x}" + '"', 1).encode()


@st.composite
def huge(draw):
    size = draw(st.sampled_from([200, 10_000, 300_000]))
    value = draw(st.sampled_from(["x" * size, [1] * (size // 10), "9" * size]))
    place = draw(st.sampled_from([*PLACES, ("presets", 0, "temperature"), ("presets", 1, "x" * size)]))
    return json.dumps(_set(_fresh(), place, value)).encode()


@st.composite
def duplicate_keys(draw):
    text = json.dumps(_fresh())
    key = draw(st.sampled_from(['"name": "Pier notice"', '"format_version": 1', '"temperature": 0.0']))
    return text.replace(key, key + ", " + key.replace("Pier notice", "Ramp"), 1).encode()


@st.composite
def mutated(draw):
    doc = _fresh()
    for _ in range(draw(st.integers(1, 3))):
        place = draw(st.sampled_from([*PLACES, ("presets", 0, "top_k"), ("format_version",), ("presets", 2, "order")]))
        value = draw(
            st.one_of(
                st.none(),
                st.booleans(),
                st.integers(-(10**40), 10**40),
                st.floats(),
                st.text(max_size=5),
                st.lists(st.integers(), max_size=3),
                st.just({"name": "Pier notice"}),
            )
        )
        _set(doc, place, value)
    return json.dumps(doc, allow_nan=True).encode()


@st.composite
def broken_bytes(draw):
    data = bytearray(json.dumps(_fresh()).encode())
    for _ in range(draw(st.integers(1, 4))):
        data[draw(st.integers(0, len(data) - 1))] = draw(st.integers(0, 255))
    return bytes(data[: draw(st.integers(1, len(data)))])


DOCUMENTS = st.one_of(nested(), odd_text(), surrogates(), huge(), duplicate_keys(), mutated(), broken_bytes())


def _files(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


# Control functions a terminal acts on are the C0 and C1 sets (ECMA-48, 5th edition, 1991: Unicode
# category Cc); explicit directional formatting characters reorder what is shown (Unicode Standard
# Annex #9); lone surrogates cannot be encoded. None may reach a terminal.
_UNSAFE_CATEGORIES = {"Cc", "Cs", "Zl", "Zp"}
_BIDI = set("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")


def _clean(message: str) -> bool:
    """One line, short enough for a terminal, with nothing a terminal would act on."""
    return (
        "\n" not in message
        and len(message) < 4000
        and not any(unicodedata.category(ch) in _UNSAFE_CATEGORIES or ch in _BIDI for ch in message)
    )


@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(DOCUMENTS, st.sampled_from(IMPORT_CHOICES))
def test_hostile_settings_files_never_crash_and_never_half_write(data, choice):
    with tempfile.TemporaryDirectory() as temp:
        path, team = Path(temp) / "incoming.json", Path(temp) / "team"
        path.write_bytes(data)
        try:
            parse_settings(data, "incoming.json")
        except SamplewrightError as exc:
            assert _clean(str(exc)), str(exc)[:300]
        try:
            verdict = check_file(path)
        except SamplewrightError as exc:
            assert _clean(str(exc)), str(exc)[:300]
        else:  # printed by `samplewright check`: it must be printable text, valid as UTF-8
            assert _clean(verdict) and verdict.encode("utf-8"), verdict[:300]
        library = PresetLibrary(team, user="ingrid", create=True, seed=False)
        library.add(Preset(name="Greedy", temperature=0.2))
        before = _files(team)
        try:
            document = read_importable(path)
            apply_import(preview_import(document, library), library, choice)
        except SamplewrightError as exc:
            assert _clean(str(exc)), str(exc)[:300]
            assert _files(team) == before  # refused whole: nothing written
        after = PresetLibrary(team, seed=False)
        assert after.skipped == []
        for name, content in _files(team).items():
            assert not name.endswith(".partial")
            if name.endswith(".json") and not name.startswith("."):
                decode_record(content)  # every file left is a whole, valid preset
        names = [r.name for r in after.records()]
        assert len(set(names)) == len(names)
        assert all(_clean(name) and name.encode("utf-8") for name in names), names
