"""Reading the library folder apart from applying the reading (scan_folder / apply_snapshot),
as the window does with a reading made on a worker thread."""

import threading

import pytest
from test_library import FERRY

from samplewright import Preset
from samplewright.core.errors import LibraryError
from samplewright.core.library.library import PresetLibrary

pytestmark = pytest.mark.usefixtures("private_dirs")


def recorded_events(lib):
    seen = []
    for kind in ("added", "changed", "removed"):
        getattr(lib, kind).connect(lambda record, kind=kind: seen.append((kind, record.name)))
    return seen


def test_a_snapshot_taken_before_a_local_save_does_not_undo_it(lib):
    record = lib.add(FERRY)
    snapshot = lib.scan_folder()  # reads top_k unset
    saved = lib.save(record.edited(record.preset.replace(top_k=9)))
    report = lib.apply_snapshot(snapshot)
    assert not report
    assert lib.get(record.id) == saved and lib.get(record.id).preset.top_k == 9
    # The next reading finds the save on disk and nothing to report.
    assert not lib.rescan() and lib.get(record.id).preset.top_k == 9


def test_a_snapshot_taken_before_a_local_add_or_delete_does_not_undo_them(lib):
    gone = lib.add(FERRY)
    snapshot = lib.scan_folder()
    lib.delete(gone.id)
    new = lib.add(Preset(name="Pier closure"))
    seen = recorded_events(lib)
    assert not lib.apply_snapshot(snapshot)
    assert [r.name for r in lib.records()] == ["Pier closure"] and lib.get(new.id) == new
    assert seen == []


def test_a_colleagues_change_in_the_snapshot_is_reported(lib, folder):
    record = lib.add(FERRY)
    other = PresetLibrary(folder, user="bo", seed=False)
    other.save(other.get(record.id).edited(record.preset.replace(top_k=8)))
    added = other.add(Preset(name="Winter crossings"))
    snapshot = lib.scan_folder()
    mine = lib.add(Preset(name="Quay works"))  # a local write after the reading began
    seen = recorded_events(lib)
    report = lib.apply_snapshot(snapshot)
    assert report.changed == (record.id,) and report.added == (added.id,) and not report.removed
    assert lib.get(record.id).preset.top_k == 8 and lib.get(record.id).modified_by == "bo"
    assert lib.get(mine.id) == mine
    assert sorted(seen) == [("added", "Winter crossings"), ("changed", "Harbour update")]


def test_scan_folder_changes_nothing_and_emits_nothing(lib, folder):
    record = lib.add(FERRY)
    other = PresetLibrary(folder, user="bo", seed=False)
    other.save(other.get(record.id).edited(record.preset.replace(top_k=8)))
    other.add(Preset(name="Winter crossings"))
    (folder / "notes.json").write_text("{broken")
    seen = recorded_events(lib)
    before_records, before_cache = lib.records(), dict(lib._parsed)
    results = []
    worker = threading.Thread(target=lambda: results.append(lib.scan_folder()))
    worker.start()
    worker.join()
    snapshot = results[0]
    assert len(snapshot.records) == 2 and [s.name for s in snapshot.skipped] == ["notes.json"]
    assert seen == [] and lib.records() == before_records and lib._parsed == before_cache
    assert lib.skipped == []
    lib.apply_snapshot(snapshot)
    assert [s.name for s in lib.skipped] == ["notes.json"] and len(seen) == 2


def test_a_snapshot_of_another_folder_is_refused(lib, tmp_path):
    elsewhere = PresetLibrary(tmp_path / "other", create=True, seed=False)
    with pytest.raises(LibraryError, match="cannot update"):
        lib.apply_snapshot(elsewhere.scan_folder())
