"""An audition says what it belongs to: a real library in a temporary folder is
changed the way a user would (edit, rename, delete, another folder, another passage)."""

from __future__ import annotations

from samplewright import Preset
from samplewright.core.engine.staleness import staleness
from samplewright.core.library.library import PresetLibrary

PASSAGE = "The 07:40 sailing to the north pier is cancelled today"


def _lib(tmp_path):
    library = PresetLibrary(tmp_path / "lib", create=True, seed=False)
    record = library.add(Preset("Pier notice", temperature=0.7))
    return library, record


def _check(library, presets, ids, drafts, passage=PASSAGE, folder=None):
    return staleness(
        presets,
        ids,
        drafts,
        lambda i: next((r for r in library.records() if r.id == i), None),
        (PASSAGE, library.folder),
        (passage, folder or library.folder),
    )


def test_an_unchanged_audition_is_current(tmp_path):
    library, record = _lib(tmp_path)
    report = _check(library, [record.preset], [record.id], [False])
    assert not report.any and report.saved_drafts == (False,)


def test_a_changed_value_marks_the_column_and_a_rename_does_not(tmp_path):
    library, record = _lib(tmp_path)
    renamed = library.save(record.edited(record.preset.replace(name="Harbour notice")))
    assert not _check(library, [record.preset], [record.id], [False]).any
    library.save(renamed.edited(renamed.preset.replace(temperature=1.1)))
    report = _check(library, [record.preset], [record.id], [False])
    assert report.columns[0] is not None and "changed" in report.columns[0] and "revision 3" in report.columns[0]


def test_a_deleted_preset_marks_its_column(tmp_path):
    library, record = _lib(tmp_path)
    library.delete(record.id)
    report = _check(library, [record.preset], [record.id], [False])
    assert report.columns[0] is not None and "deleted" in report.columns[0]


def test_a_saved_draft_loses_its_mark(tmp_path):
    library, record = _lib(tmp_path)
    tried = record.preset.replace(temperature=0.3)
    assert _check(library, [tried], [record.id], [True]).saved_drafts == (False,)
    library.save(record.edited(tried))
    report = _check(library, [tried], [record.id], [True])
    assert report.saved_drafts == (True,) and not report.any


def test_another_passage_or_folder_marks_the_audition(tmp_path):
    library, record = _lib(tmp_path)
    moved = _check(library, [record.preset], [record.id], [False], passage="Timetable for the winter")
    assert moved.audition is not None and "passage changed" in moved.audition
    # Trailing white space is not a different passage.
    assert not _check(library, [record.preset], [record.id], [False], passage=PASSAGE + "\n").any
    other = _check(library, [record.preset], [record.id], [False], folder=tmp_path / "team")
    assert other.audition is not None and "another library folder" in other.audition
