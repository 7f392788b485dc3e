"""The audition session: collects token events per column and ignores stale runs."""

from __future__ import annotations

import pytest

from samplewright.core.engine.session import AuditionSession, SampleRef, StepRef
from samplewright.core.presets import Preset
from samplewright.core.results import AuditionRequest, AuditionResult, Sample, TokenEvent, TokenStep


def token(i):
    return TokenStep(i, f"t{i}", 0.5, 0.5, 3, 1.0, 0.8)


def event(preset, sample, step, stop=None):
    return TokenEvent(preset, sample, step, token(step), stop, step + 1, 10)


def request(names, samples=2):
    return AuditionRequest("Dear passengers", [Preset(n) for n in names], samples=samples, max_new_tokens=3)


def test_events_fill_the_right_cells_and_stale_ones_are_ignored():
    session = AuditionSession()
    added = []
    session.token_added.connect(lambda c, r, s, t: added.append((c, r, s)))
    old = session.begin(request(["A", "B"]))
    new = session.begin(request(["A", "B"]))
    assert not session.add_events(old, [event(0, 0, 0)])
    assert session.add_events(new, [event(1, 1, 0), event(1, 1, 1, stop="length")])
    assert added == [(1, 1, 0), (1, 1, 1)]
    assert session.sample(SampleRef(1, 1)).token_ids == [0, 1]
    assert session.sample(SampleRef(1, 1)).stop_reason == "length"
    assert session.sample(SampleRef(0, 0)).tokens == []


def test_regenerating_one_column_keeps_the_others():
    session = AuditionSession()
    first = session.begin(request(["A", "B"], samples=1))
    session.add_events(first, [event(0, 0, 0), event(1, 0, 0)])
    again = session.begin(request(["B2"], samples=1), columns=[1])
    assert session.sample(SampleRef(0, 0)).token_ids == [0]
    assert session.sample(SampleRef(1, 0)).tokens == []
    result = AuditionResult(request(["B2"], samples=1), [1, 2], 0, [[Sample(0, 0, [token(7)], "eos", "t7")]])
    ended = []
    session.finished.connect(lambda serial, cancelled: ended.append(serial))
    assert session.finish(again, result, [{"mean_length": 1.0}])
    assert ended == [again]
    assert [p.name for p in session.presets] == ["A", "B2"]
    assert session.sample(SampleRef(1, 0)).token_ids == [7]
    assert session.sample(SampleRef(1, 0)).preset_index == 1
    assert session.metrics == [None, {"mean_length": 1.0}]
    assert not session.finish(first, result, [])


def test_abandon_makes_the_running_run_stale():
    session = AuditionSession()
    serial = session.begin(request(["A"]))
    session.abandon()
    assert not session.running
    assert not session.add_events(serial, [event(0, 0, 0)])


def test_clear_forgets_every_sample_and_stales_the_running_run():
    session = AuditionSession()
    serial = session.begin(request(["A", "B"]))
    session.add_events(serial, [event(0, 0, 0)])
    session.clear()
    assert session.sample(SampleRef(0, 0)) is None and session.sample_count() == 0
    assert session.presets == [] and not session.running
    assert not session.add_events(serial, [event(0, 0, 1)])


def test_the_run_serial_can_come_from_outside_and_only_grows():
    session = AuditionSession()
    assert session.begin(request(["A"]), serial=7) == 7  # e.g. the engine's request serial
    assert session.add_events(7, [event(0, 0, 0)]) and not session.add_events(6, [event(0, 0, 1)])
    with pytest.raises(ValueError):
        session.begin(request(["A"]), serial=7)
    assert session.begin(request(["A"])) == 8


def test_columns_remember_their_record_and_whether_they_were_drafts():
    session = AuditionSession()
    full = request(["A", "B"], samples=1)
    session.begin(full, record_ids=["rec-a", "rec-b"], drafts=[False, True])
    assert session.record_ids == ["rec-a", "rec-b"] and [session.is_draft(c) for c in (0, 1, 2)] == [False, True, False]
    again = session.regenerate_request(1, Preset("B saved"))
    assert (again.passage, again.samples, again.max_new_tokens, again.seed) == (
        full.passage,
        full.samples,
        full.max_new_tokens,
        full.seed,
    )
    session.begin(again, columns=[1], record_ids=["rec-b"], drafts=[False])
    assert session.drafts == [False, False] and session.request is full  # the full run's settings stay
    with pytest.raises(ValueError):
        session.begin(request(["A", "B"]), drafts=[True])
    session.clear()
    assert session.request is None and session.regenerate_request(0, Preset("A")) is None


def test_the_inspected_step_is_clamped_and_dropped_when_its_column_is_rewritten():
    session = AuditionSession()
    serial = session.begin(request(["A", "B"], samples=1))
    assert session.inspect(0, 0, 0) is None  # no tokens yet: nothing to inspect
    session.add_events(serial, [event(0, 0, 0), event(0, 0, 1), event(1, 0, 0)])
    assert session.inspect(0, 0, 9) == StepRef(0, 0, 1)  # the sample's last step
    assert session.inspected_text() == "t1" and session.inspected_sample().token_ids == [0, 1]
    session.begin(request(["B2"], samples=1), columns=[1])
    assert session.inspected == StepRef(0, 0, 1)  # another column was rewritten
    session.begin(request(["A2"], samples=1), columns=[0])
    assert session.inspected is None and session.inspected_text() is None


def test_the_smaller_token_limit_applies_and_is_named():
    # transformers' generate() semantics carried over: a row stops at the smaller of the two budgets.
    session = AuditionSession()
    run = AuditionRequest("Dear passengers", [Preset("short", max_new_tokens=2), Preset("long")], max_new_tokens=3)
    session.begin(run)
    assert session.token_limit(0) == (2, "preset")
    assert session.token_limit(1) == (3, "audition")
    assert session.token_limit(5) is None


def test_a_column_written_again_with_its_own_seed_says_so():
    session = AuditionSession()
    session.begin(request(["A", "B"], samples=1))
    assert not session.own_numbers(0)
    again = session.regenerate_request(0, Preset("A"), seed=99)
    assert again is not None and again.seed == 99
    session.begin(again, [0])
    assert session.own_numbers(0) and not session.own_numbers(1)
    assert session.regenerate_request(1, Preset("B")).seed == session.request.seed
