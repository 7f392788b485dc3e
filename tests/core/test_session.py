"""The audition session: collects token events per column and ignores stale runs."""

from __future__ import annotations

from samplewright.core.engine.session import AuditionSession, SampleRef
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
