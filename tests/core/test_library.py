"""The shared preset library in one process: files, revisions, conflicts, history, trash,
skipped files, events, per-user state and the error messages for broken folders."""

import errno
import json
import os
import uuid
from pathlib import Path

import jsonschema
import pytest

from samplewright import Preset
from samplewright.core.errors import LibraryError
from samplewright.core.events import Emitter
from samplewright.core.library import library as library_module
from samplewright.core.library import records, storage
from samplewright.core.library import scanning as scanning_module
from samplewright.core.library.library import (
    HISTORY_LIMIT,
    PresetLibrary,
    SaveConflict,
    default_library_dir,
    starter_presets,
)
from samplewright.core.library.settings_file import export_preset_file, schema
from samplewright.core.library.user_state import UserState, default_config_dir
from samplewright.core.presets import differences

pytestmark = pytest.mark.usefixtures("private_dirs")

FERRY = Preset(name="Harbour update", description="Weekly note for the quay staff", temperature=0.7, top_p=0.9)


def snapshot(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and not p.name.startswith(".samplewright.lock")
    }


# -- files --------------------------------------------------------------------------------------


def test_new_empty_library_is_seeded_with_the_starter_presets(tmp_path):
    lib = PresetLibrary(tmp_path / "fresh", create=True)
    names = [r.name for r in lib.records()]
    assert sorted(names) == sorted(p.name for p in starter_presets())
    assert 5 <= len(names) <= 7
    assert {"Greedy baseline", "Timetable notice — exact"} <= set(names)


def test_starter_file_is_a_schema_valid_settings_file():
    # Checked with the jsonschema package directly (reference implementation of JSON Schema).
    data = Path(library_module.__file__).parents[2] / "resources" / "presets" / "starter.json"
    jsonschema.validate(json.loads(data.read_text("utf-8")), schema(), cls=jsonschema.Draft202012Validator)


def test_a_folder_with_files_is_not_seeded(folder):
    (folder / "notes.txt").write_text("ours")
    assert PresetLibrary(folder).records() == []


def test_default_folders_follow_the_environment(tmp_path):
    assert default_library_dir() == tmp_path / "personal"
    assert default_config_dir() == tmp_path / "config"
    lib = PresetLibrary(default_library_dir())  # the personal library is created on first use
    assert lib.folder.is_dir() and lib.records()


def test_a_missing_shared_folder_is_an_error_not_created(tmp_path):
    with pytest.raises(LibraryError, match="is not there"):
        PresetLibrary(tmp_path / "unplugged")
    assert not (tmp_path / "unplugged").exists()


def test_record_file_is_sorted_indented_json_named_by_a_uuid4_id(lib, folder):
    record = lib.add(FERRY)
    path = folder / f"{record.id}.json"
    text = path.read_text("utf-8")
    data = json.loads(text)
    # Diff-friendly (common practice): one key per line, indented by two spaces per level, keys sorted
    # at every level, non-ASCII kept as written, a final newline.
    lines = text.split("\n")
    assert text.endswith("}\n") and lines[0] == "{" and lines[-1] == ""
    top_keys = [line.split('"')[1] for line in lines if line.startswith('  "')]
    assert top_keys == sorted(data) and len(top_keys) == len(data)
    inner_keys = [line.split('"')[1] for line in lines if line.startswith('    "')]
    assert inner_keys == sorted(data["preset"]) and len(inner_keys) == len(data["preset"])
    assert not any(line.startswith("\t") for line in lines)
    island = lib.add(FERRY.replace(name="Ærø crossing"))
    assert '"name": "Ærø crossing"' in (folder / island.file_name).read_text("utf-8")
    assert uuid.UUID(hex=record.id).version == 4
    assert data["format"] == "samplewright-preset" and data["format_version"] == 1
    assert data["revision"] == 1 and data["modified_by"] == "ingrid"
    assert Preset.from_dict(data["preset"]).parameters() == FERRY.parameters()
    assert PresetLibrary(folder, seed=False).get(record.id) == record


def test_save_moves_the_revision_on_and_keeps_the_previous_in_history(lib, folder):
    first = lib.add(FERRY)
    second = lib.save(first.edited(first.preset.replace(temperature=0.4)))
    assert second.revision == 2 and second.id == first.id
    assert [r.revision for r in lib.history(first.id)] == [1]
    assert lib.revision(first.id, 1).preset.temperature == 0.7
    assert (folder / ".history" / first.id / "1.json").is_file()


def test_history_keeps_the_last_twenty_revisions(lib):
    record = lib.add(FERRY)
    for step in range(HISTORY_LIMIT + 5):
        record = lib.save(record.edited(record.preset.replace(max_new_tokens=10 + step)))
    kept = [r.revision for r in lib.history(record.id)]
    assert record.revision == HISTORY_LIMIT + 6
    assert kept == list(range(record.revision - 1, record.revision - 1 - HISTORY_LIMIT, -1))
    assert lib.revision(record.id, 7).preset.max_new_tokens == 10 + 5
    with pytest.raises(LibraryError, match="not kept"):
        lib.revision(record.id, 2)


def test_diff_lists_changed_fields_between_revisions_and_presets(lib):
    first = lib.add(FERRY)
    second = lib.save(first.edited(first.preset.replace(top_k=40, tags=("notices",))))
    diff = lib.diff(lib.revision(first.id, 1), second)
    assert diff == {"top_k": (0, 40), "tags": ([], ["notices"])}
    plain = Preset(name="a", temperature=0.2)
    assert lib.diff(plain, plain.replace(temperature=0.3)) == differences(plain, plain.replace(temperature=0.3))


# -- conflicts ----------------------------------------------------------------------------------


def _two_views(folder):
    mine = PresetLibrary(folder, user="mine", seed=False)
    theirs = PresetLibrary(folder, user="theirs", seed=False)
    return mine, theirs


def test_saving_over_a_newer_revision_is_a_conflict_with_both_versions(lib, folder):
    base = lib.add(FERRY)
    mine_lib, their_lib = _two_views(folder)
    theirs = their_lib.save(their_lib.get(base.id).edited(base.preset.replace(temperature=1.2)))
    edited = mine_lib.get(base.id).edited(base.preset.replace(temperature=0.2))
    before = snapshot(folder)
    with pytest.raises(SaveConflict) as err:
        mine_lib.save(edited)
    assert err.value.mine.preset.temperature == 0.2
    assert err.value.theirs == theirs
    assert "theirs" in str(err.value) and "keep both" in str(err.value)
    assert snapshot(folder) == before


@pytest.mark.parametrize("choice", ["keep_both", "take_theirs", "overwrite"])
def test_each_conflict_choice_loses_nothing_silently(lib, folder, choice):
    base = lib.add(FERRY)
    mine_lib, their_lib = _two_views(folder)
    their_lib.save(their_lib.get(base.id).edited(base.preset.replace(temperature=1.2)))
    with pytest.raises(SaveConflict) as err:
        mine_lib.save(mine_lib.get(base.id).edited(base.preset.replace(temperature=0.2)))
    result = mine_lib.resolve_conflict(err.value, choice)
    on_disk = {r.name: r.preset.temperature for r in PresetLibrary(folder, seed=False).records()}
    history = [r.preset.temperature for r in mine_lib.history(base.id)]
    if choice == "keep_both":
        assert on_disk == {"Harbour update": 1.2, "Harbour update (copy)": 0.2}
        assert result.name == "Harbour update (copy)"
    elif choice == "take_theirs":
        assert on_disk == {"Harbour update": 1.2} and result.preset.temperature == 1.2
        assert mine_lib.get(base.id).preset.temperature == 1.2
    else:
        assert on_disk == {"Harbour update": 0.2} and result.revision == 3
        assert history == [1.2, 0.7]


def test_saving_a_preset_someone_deleted_is_a_conflict(lib, folder):
    base = lib.add(FERRY)
    mine_lib, their_lib = _two_views(folder)
    their_lib.delete(base.id)
    with pytest.raises(SaveConflict, match="deleted") as err:
        mine_lib.save(mine_lib.get(base.id).edited(base.preset.replace(top_k=5)))
    assert err.value.theirs is None
    restored = mine_lib.resolve_conflict(err.value, "overwrite")
    assert restored.id == base.id and restored.revision == 2 and restored.preset.top_k == 5


def test_names_are_unique_and_copies_get_free_names(lib):
    lib.add(FERRY)
    with pytest.raises(LibraryError, match="already in the library"):
        lib.add(FERRY.replace(temperature=0.1))
    lib.add(FERRY.replace(name="Harbour update (copy)"))
    assert lib.unused_name("Harbour update", "copy") == "Harbour update (copy 2)"
    long_name = "x" * 120
    assert len(lib.unused_name(long_name, "copy")) == 120


def test_two_libraries_on_one_folder_cannot_both_add_a_name(lib, folder):
    # Each object loaded the folder before either wrote, so neither one's memory knows the other's
    # preset; the name check must look at the folder itself (docs/library.md: the second is refused).
    other = PresetLibrary(folder, user="tomas", seed=False, lock_timeout=1.0)
    lib.add(FERRY)
    with pytest.raises(LibraryError, match="'Harbour update' is already in the library"):
        other.add(FERRY.replace(temperature=0.2))
    assert [r.name for r in PresetLibrary(folder, seed=False).records()] == ["Harbour update"]


def test_restore_checks_names_on_disk_not_in_memory(lib, folder):
    record = lib.add(FERRY)
    lib.delete(record.id)
    PresetLibrary(folder, user="tomas", seed=False).add(FERRY.replace(temperature=0.1))
    restored = lib.restore(record.id)  # lib has not rescanned: its memory has no 'Harbour update'
    assert restored.name == "Harbour update (restored)"
    names = sorted(r.name for r in PresetLibrary(folder, seed=False).records())
    assert names == ["Harbour update", "Harbour update (restored)"]


def test_rescan_reads_again_only_the_files_that_changed(lib, folder):
    # The window rescans on a timer; an unchanged file (same mtime, size, inode) keeps its parsed record.
    first, second = lib.add(FERRY), lib.add(FERRY.replace(name="Tide table"))
    other = PresetLibrary(folder, user="tomas", seed=False)
    lib.rescan()  # reads the file of the last add (written after the add's own scan)
    before = scanning_module.files_parsed
    assert not lib.rescan()
    assert scanning_module.files_parsed == before
    changed = other.save(other.get(second.id).edited(second.preset.replace(top_p=0.5)))
    (folder / "notes.json").write_text("{ not json", encoding="utf-8")
    before = scanning_module.files_parsed
    report = lib.rescan()
    assert scanning_module.files_parsed == before + 2  # the saved preset and the new file only
    assert report.changed == (second.id,) and lib.get(second.id) == changed
    assert lib.get(first.id) == first and [s.name for s in lib.skipped] == ["notes.json"]
    before = scanning_module.files_parsed
    lib.rescan()
    assert scanning_module.files_parsed == before and [s.name for s in lib.skipped] == ["notes.json"]


def test_find_by_id_name_and_case(lib):
    record = lib.add(FERRY)
    assert lib.find(record.id) == record
    assert lib.find("Harbour update") == record
    assert lib.find("  harbour UPDATE ") == record
    with pytest.raises(LibraryError, match="No preset named 'Ferry'.*'Harbour update'"):
        lib.find("Ferry")


# -- trash --------------------------------------------------------------------------------------


def test_delete_moves_to_trash_and_restore_brings_it_back_whole(lib, folder):
    record = lib.add(FERRY)
    original = (folder / record.file_name).read_bytes()
    lib.delete(record.id)
    assert not (folder / record.file_name).exists()
    assert [r.id for r in lib.trash()] == [record.id]
    assert lib.records() == []
    restored = lib.restore(record.id)
    assert restored == record and (folder / record.file_name).read_bytes() == original
    assert lib.trash() == []


def test_restore_under_a_taken_name_comes_back_renamed(lib):
    record = lib.add(FERRY)
    lib.delete(record.id)
    lib.add(FERRY.replace(temperature=0.1))
    restored = lib.restore(record.id)
    assert restored.name == "Harbour update (restored)" and restored.preset.temperature == 0.7
    with pytest.raises(LibraryError, match="holds no preset .* any more"):
        lib.restore(record.id)


# -- skipped files ------------------------------------------------------------------------------


def _valid_bytes(record_id="0" * 32, **changes):
    data = records.PresetRecord(record_id, 1, FERRY, "2025-05-02T09:14:00+00:00", "ingrid").to_json()
    data.update(changes)
    return json.dumps(data).encode()


BAD_FILES = {
    "corrupt.json": (b'{"format": "samplewright-preset", \x00\xff', "not UTF-8"),
    "truncated.json": (_valid_bytes(record_id="2" * 32)[:90], "not valid JSON"),
    "foreign.json": (b'{"colour": "teal", "rows": [1, 2]}', "no format tag"),
    "other-tool.json": (b'{"format": "ferry-timetable", "stops": []}', "another kind"),
    "newer.json": (_valid_bytes(format_version=2), "newer Samplewright"),
    "bad-value.json": (_valid_bytes(preset={"name": "x", "top_p": 1.5}), "top_p"),
    "unknown-key.json": (_valid_bytes(preset={"name": "x", "temprature": 0.5}), "temprature"),
    "extra-key.json": (_valid_bytes(colour="teal"), "unknown key 'colour'"),
    "nan.json": (_valid_bytes().replace(b'"temperature": 0.7', b'"temperature": NaN'), "NaN"),
    "twice.json": (b'{"format": "samplewright-preset", "format": "x"}', "appears twice"),
    "copied.json": (_valid_bytes(record_id="1" * 32), "does not match the id"),
    "single.json": (json.dumps(FERRY.to_dict()).encode(), "single preset file"),
    "team.json": (b'{"format": "samplewright-settings", "format_version": 1}', "settings file"),
    "README.txt": (b"Team presets live here.", "not a preset file"),
}


def test_invalid_files_are_skipped_with_reasons_and_left_byte_identical(lib, folder):
    for name, (data, _) in BAD_FILES.items():
        (folder / name).write_bytes(data)
    good = lib.add(FERRY)
    lib.rescan()
    reasons = {s.name: s.reason for s in lib.skipped}
    assert set(reasons) == set(BAD_FILES)
    for name, (_, expected) in BAD_FILES.items():
        assert expected in reasons[name], (name, reasons[name])
    lib.save(good.edited(good.preset.replace(top_k=3)))
    lib.delete(good.id)
    PresetLibrary(folder, seed=False).rescan()
    for name, (data, _) in BAD_FILES.items():
        assert (folder / name).read_bytes() == data


def test_saving_over_a_file_that_became_invalid_refuses_and_leaves_it(lib, folder):
    record = lib.add(FERRY)
    (folder / record.file_name).write_bytes(b"{broken")
    with pytest.raises(LibraryError, match="not a valid preset"):
        lib.save(record.edited(FERRY.replace(top_k=2)))
    assert (folder / record.file_name).read_bytes() == b"{broken"


# -- events and rescan --------------------------------------------------------------------------


def test_events_follow_own_writes_and_rescan(lib, folder):
    seen = []
    for kind in ("added", "changed", "removed"):
        getattr(lib, kind).connect(lambda record, kind=kind: seen.append((kind, record.name)))
    record = lib.add(FERRY)
    record = lib.save(record.edited(record.preset.replace(top_k=9)))
    other = PresetLibrary(folder, seed=False)
    other.save(other.get(record.id).edited(record.preset.replace(top_k=8)))
    other.add(Preset(name="Pier closure"))
    report = lib.rescan()
    assert report.changed == (record.id,) and len(report.added) == 1 and not report.removed
    lib.delete(record.id)
    assert seen == [
        ("added", "Harbour update"),
        ("changed", "Harbour update"),
        ("added", "Pier closure"),
        ("changed", "Harbour update"),
        ("removed", "Harbour update"),
    ]
    assert not lib.rescan()


def test_emitter_connect_disconnect_and_self_disconnect():
    emitter, calls = Emitter(), []

    def once(value):
        calls.append(("once", value))
        emitter.disconnect(once)

    emitter.connect(once)
    emitter.connect(lambda value: calls.append(("always", value)))
    emitter.emit(1)
    emitter.emit(2)
    assert calls == [("once", 1), ("always", 1), ("always", 2)]
    with pytest.raises(ValueError):
        emitter.disconnect(once)


# -- broken folders: each error says what happened, nothing is lost ------------------------------

OS_FAILURES = [
    (OSError(errno.ENOSPC, "No space left on device"), "is full"),
    (PermissionError(errno.EACCES, "Permission denied"), "permission"),
    (OSError(errno.EROFS, "Read-only file system"), "read-only"),
]


@pytest.mark.parametrize("error, words", OS_FAILURES)
def test_a_failing_replace_leaves_the_old_version_and_says_why(lib, folder, monkeypatch, error, words):
    # Tests run as root, where chmod does not stop writes: the refusal is injected at os.replace.
    record = lib.add(FERRY)
    before = snapshot(folder)

    def refuse(*args, **kwargs):
        raise error

    monkeypatch.setattr(storage.os, "replace", refuse)
    edited = record.edited(record.preset.replace(temperature=0.1))
    with pytest.raises(LibraryError, match=words) as err:
        lib.save(edited)
    assert "Nothing in the library was changed" in str(err.value)
    monkeypatch.undo()
    assert snapshot(folder) == before
    assert lib.get(record.id) == record
    assert not [p for p in folder.rglob("*") if p.name.endswith(storage.TEMP_SUFFIX)]
    # The edit is still in memory and can be saved elsewhere.
    path = export_preset_file(edited.preset, folder.parent / "rescued.json")
    assert Preset.from_dict(json.loads(path.read_text("utf-8"))) == edited.preset


def test_a_full_disk_while_writing_the_temporary_file(lib, folder, monkeypatch):
    record = lib.add(FERRY)
    before = snapshot(folder)
    real_fsync = os.fsync

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(storage.os, "fsync", full)
    with pytest.raises(LibraryError, match="is full"):
        lib.save(record.edited(record.preset.replace(top_k=1)))
    monkeypatch.setattr(storage.os, "fsync", real_fsync)
    assert snapshot(folder) == before


def test_a_folder_that_disappears(lib, folder):
    record = lib.add(FERRY)
    for path in sorted(folder.rglob("*"), reverse=True):
        path.rmdir() if path.is_dir() else path.unlink()
    folder.rmdir()
    with pytest.raises(LibraryError, match="is not there"):
        lib.save(record.edited(record.preset.replace(top_k=1)))
    with pytest.raises(LibraryError, match="is not there"):
        lib.rescan()
    assert not folder.exists()  # the lock did not recreate it
    assert lib.get(record.id) == record


def test_export_preset_file_reports_a_refused_folder(tmp_path, monkeypatch):
    monkeypatch.setattr(
        storage.tempfile,
        "mkstemp",
        lambda **kw: (_ for _ in ()).throw(PermissionError(errno.EACCES, "Permission denied")),
    )
    with pytest.raises(LibraryError, match="permission.*No file was written"):
        export_preset_file(FERRY, tmp_path / "x.json")


# -- per-user state -----------------------------------------------------------------------------


def test_user_state_lives_in_the_config_folder_not_the_library(lib, folder, tmp_path):
    record = lib.add(FERRY)
    state = UserState()
    state.set_favourite(record.id)
    state.last_library = folder
    state.view["sort"] = "name"
    state.save()
    again = UserState()
    assert again.is_favourite(record.id) and again.last_library == folder and again.view == {"sort": "name"}
    assert (tmp_path / "config" / "state.json").is_file()
    assert not any("state" in p.name for p in folder.rglob("*"))
    again.set_favourite(record.id, on=False)
    assert not again.is_favourite(record.id)


def test_unreadable_user_state_starts_empty_with_a_note(tmp_path):
    (tmp_path / "config").mkdir()
    (tmp_path / "config" / "state.json").write_text("[not, json")
    state = UserState()
    assert state.favourites == set() and "could not be read" in state.problem


def test_library_code_loads_without_torch_or_qt():
    # The library must open fast and headless (project rule: no torch or Qt at module level).
    import subprocess
    import sys

    code = (
        "import sys, samplewright.core.library.library, samplewright.core.library.settings_file, "
        "samplewright.core.library.importing, samplewright.core.library.user_state, samplewright.cli_exchange; "
        "print(sorted(m for m in ('torch', 'PySide6', 'pyqtgraph') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
