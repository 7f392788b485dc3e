"""The editor's draft without Qt: what counts as unsaved, which edits an audition may use,
how a colleague's save meets the edits, and that a save states the revision the edits
started from (optimistic concurrency: a write names the version it read and is refused
when another write came in between; common practice, e.g. HTTP's If-Match, RFC 9110 §13.1.1)."""

import pytest

from samplewright import Preset
from samplewright.core.library.draft import Draft
from samplewright.core.library.library import PresetLibrary, SaveConflict
from samplewright.core.library.records import PresetRecord

pytestmark = pytest.mark.usefixtures("private_dirs")

NOTICE = Preset(name="Quay notice", description="Short notices for the pier boards", temperature=0.6, top_p=0.9)


@pytest.fixture
def team(folder):
    """The team library as ingrid, and the same folder as her colleague tomas."""
    return PresetLibrary(folder, user="ingrid", seed=False), PresetLibrary(folder, user="tomas", seed=False)


def test_a_loaded_record_has_no_unsaved_edits_until_something_is_typed():
    draft, loaded = Draft(), []
    draft.loaded.connect(loaded.append)
    assert not draft.dirty  # nothing loaded
    record = _record(NOTICE)
    draft.load(record)
    assert loaded == [record] and not draft.dirty and draft.edits == NOTICE
    draft.update(NOTICE.replace(temperature=0.8))
    assert draft.dirty and draft.problem is None
    draft.update(NOTICE)  # typed back to the saved value
    assert not draft.dirty


def test_an_invalid_field_is_unsaved_and_keeps_its_reason():
    draft = Draft()
    draft.load(_record(NOTICE))
    draft.update(None, "top_p: 1.5 is above 1")
    assert draft.dirty and draft.edits is None and draft.problem == "top_p: 1.5 is above 1"


def test_only_valid_edits_of_the_same_preset_can_be_auditioned():
    draft = Draft()
    record = _record(NOTICE)
    draft.load(record)
    assert draft.usable_edits(record.id) == (None, None)  # nothing edited: the saved preset is used
    edited = NOTICE.replace(top_p=0.8)
    draft.update(edited)
    assert draft.usable_edits(record.id) == (edited, None)
    assert draft.usable_edits("another-record") == (None, None)
    draft.update(None, "top_p: 1.5 is above 1")
    assert draft.usable_edits(record.id) == (None, "top_p: 1.5 is above 1")


def test_a_newer_record_reloads_a_clean_draft_and_keeps_edits(team):
    mine, colleague = team
    record = mine.add(NOTICE)
    draft = Draft()
    draft.load(record)
    assert draft.library_moved(record) == "same"
    assert draft.library_moved(None) == "same"  # deleted elsewhere: the edits stay where they are
    colleague.rescan()
    theirs = colleague.save(colleague.get(record.id).edited(NOTICE.replace(top_p=0.5)))
    assert draft.library_moved(theirs) == "reload"
    draft.update(NOTICE.replace(temperature=0.45))
    assert draft.library_moved(theirs) == "keep_edits"


def test_saving_the_draft_names_the_revision_it_started_from(team):
    mine, colleague = team
    record = mine.add(NOTICE)
    draft = Draft()
    draft.load(record)
    draft.update(NOTICE.replace(temperature=0.45))
    colleague.rescan()
    colleague.save(colleague.get(record.id).edited(NOTICE.replace(top_p=0.5)))
    assert draft.record is not None and draft.edits is not None
    with pytest.raises(SaveConflict):  # the colleague's revision 2 came in between
        mine.save(draft.record.edited(draft.edits))
    mine.rescan()
    draft.load(mine.get(record.id))  # start again from their revision
    draft.update(draft.record.preset.replace(temperature=0.45))
    saved = mine.save(draft.record.edited(draft.edits))
    assert (saved.revision, saved.preset.top_p, saved.preset.temperature) == (3, 0.5, 0.45)


def test_a_save_or_a_question_marks_the_draft_busy_and_always_ends():
    draft = Draft()
    with draft.saving_now():
        assert draft.busy and draft.saving
    with pytest.raises(RuntimeError), draft.asking_now():
        assert draft.busy and draft.asking
        raise RuntimeError("the dialog closed with an error")
    assert not draft.busy


def _record(preset):
    """A saved record as the library would hand it out, without a folder."""
    return PresetRecord("0" * 32, 1, preset, "2026-12-01T08:00:00+00:00", "ingrid")
