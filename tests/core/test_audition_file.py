"""Audition run files: what the window shows is written and read back unchanged;
damaged, foreign and newer files are refused with a plain reason."""

from __future__ import annotations

import json
import math

import pytest

from samplewright.core.engine.audition_file import (
    FORMAT,
    AuditionFileError,
    load_audition,
    runs_folder,
    save_audition,
)
from samplewright.core.engine.session import AuditionSession
from samplewright.core.presets import Preset
from samplewright.core.results import AuditionRequest, AuditionResult, Sample, TokenStep
from samplewright.core.sampling.metrics import PresetMetrics


def finished_session(tmp_path) -> AuditionSession:
    session = AuditionSession()
    presets = [Preset("Pier notice", temperature=0.7, max_new_tokens=2), Preset("Newsletter — lively")]
    request = AuditionRequest("Dear passengers, from Monday", presets, samples=2, max_new_tokens=3, seed=42)
    serial = session.begin(request, record_ids=["a" * 32, None], drafts=[True, False], library_folder=tmp_path)
    samples = [
        [Sample(c, r, [TokenStep(7 + r, " Dvořák", 0.25, 0.5, 12, 3.5, 2.0)], "length", " Dvořák") for r in range(2)]
        for c in range(2)
    ]
    result = AuditionResult(request, [1, 2, 3], 0, samples)
    metrics = [PresetMetrics.from_dict({"distinct_1": 1.0, "self_bleu": math.nan, "stop_reasons": {"length": 2}}), None]
    assert session.finish(serial, result, metrics)
    return session


def test_an_audition_comes_back_as_it_was_saved(tmp_path):
    session = finished_session(tmp_path)
    path = save_audition(session, runs_folder(tmp_path) / "one.json", model="tiny")
    saved = load_audition(path)
    again = AuditionSession()
    again.restore(saved)
    assert again.presets == session.presets
    assert [[s.tokens for s in col] for col in again.samples] == [[s.tokens for s in col] for col in session.samples]
    assert [[s.text for s in col] for col in again.samples] == [[" Dvořák"] * 2] * 2
    assert again.record_ids == session.record_ids and again.drafts == [True, False]
    assert again.request.seed == 42 and again.seeds == [42, 42] and again.token_limit(0) == (2, "preset")
    assert again.passage_ids == [1, 2, 3] and again.library_folder == tmp_path
    # A non-finite metric (self-BLEU of a single sample is undefined) is kept as "undefined", not NaN.
    assert again.metrics[0].self_bleu is None and again.metrics[0].distinct_1 == 1.0
    assert again.metrics[0].stop_reasons == {"length": 2} and again.metrics[1] is None
    assert saved.model == "tiny"
    assert json.loads(path.read_text(encoding="utf-8"))["format"] == FORMAT


def test_nothing_to_save_before_a_run(tmp_path):
    with pytest.raises(AuditionFileError, match="generate one first"):
        save_audition(AuditionSession(), tmp_path / "none.json")


@pytest.mark.parametrize(
    "content, reason",
    [
        (b"{not json", "Could not read"),
        (json.dumps({"format": "samplewright-evaluation-run", "version": 1}).encode(), "not a Samplewright audition"),
        (json.dumps({"format": FORMAT, "version": 99}).encode(), "version 99"),
        (json.dumps({"format": FORMAT, "version": 1, "columns": []}).encode(), "damaged"),
    ],
)
def test_bad_files_are_refused_with_the_reason(tmp_path, content, reason):
    path = tmp_path / "bad.json"
    path.write_bytes(content)
    with pytest.raises(AuditionFileError, match=reason):
        load_audition(path)
    with pytest.raises(AuditionFileError, match="does not exist"):
        load_audition(tmp_path / "missing.json")
