"""The audition batch's per-row incremental state equals its from-scratch definition."""

from hypothesis import given, settings
from hypothesis import strategies as st

from samplewright.core.engine.batch import NgramBans, _copy_bans
from samplewright.core.sampling import stages


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(0, 5), max_size=60), st.lists(st.integers(0, 5), max_size=30), st.integers(0, 5))
def test_incremental_ngram_bans_equal_a_full_rescan_at_every_step(passage, sample, n):
    # stages.banned_ngram_tokens is checked against transformers' NoRepeatNGramLogitsProcessor in
    # tests/core/test_stages_reference.py; a small alphabet (0..5) makes repeated n-grams common.
    bans = _copy_bans(NgramBans(passage, n)) if n else None
    history = list(passage)
    if bans is None:
        assert stages.banned_ngram_tokens(history, n) == set()
        return
    assert bans.banned() == stages.banned_ngram_tokens(history, n)
    for token in sample:
        bans.push(token)
        history.append(token)
        assert bans.banned() == stages.banned_ngram_tokens(history, n)


def test_a_copy_does_not_share_state_with_the_passage_index():
    passage_index = NgramBans([1, 2, 1], 2)
    row = _copy_bans(passage_index)
    row.push(2)  # the row now ends in 2, after which 1 followed once
    assert row.banned() == {1}
    assert passage_index.banned() == {2}  # still after "...1": 2 followed 1
