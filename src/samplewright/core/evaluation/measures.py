"""The measures of an evaluation run, per sample, per passage and pooled.

Per sample (see docs/evaluation.md for every definition and source):
coherence, diversity, distinct-1/2/3 of the sample's own words, seq-rep-4,
length and whether it degenerated; and each sample's BLEU against the other
samples of its passage, whose mean is the passage's self-BLEU. Pooled over a
run: per-sample measures are the mean over all of a preset's samples (each
sample weighs the same); self-BLEU is the mean over passages of each
passage's value. Every value comes with a 95% percentile bootstrap interval
(:mod:`.bootstrap`), resampling samples within each passage. An undefined
value is ``None`` with its reason, never NaN.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..results import Sample
from ..sampling import metrics
from .bootstrap import RESAMPLES, Statistic, percentile_interval, statistic_value

#: Per-sample measures, as in the CSV export.
SAMPLE_KEYS = ("coherence", "diversity", "distinct_1", "distinct_2", "distinct_3", "seq_rep_4", "length", "degenerate")
#: Measures of a preset over a passage or a run, as in ``--json``.
MEASURE_KEYS = (
    "coherence",
    "diversity",
    "self_bleu",
    "distinct_1",
    "distinct_2",
    "distinct_3",
    "seq_rep_4",
    "mean_length",
    "degenerate_share",
)
#: Which per-sample value each measure averages ("bleu": a sample's BLEU against the others).
SOURCE = {
    "coherence": "coherence",
    "diversity": "diversity",
    "self_bleu": "bleu",
    "distinct_1": "distinct_1",
    "distinct_2": "distinct_2",
    "distinct_3": "distinct_3",
    "seq_rep_4": "seq_rep_4",
    "mean_length": "length",
    "degenerate_share": "degenerate",
}
HIGHER_IS_BETTER = {
    "coherence": True,
    "diversity": True,
    "self_bleu": False,
    "distinct_1": True,
    "distinct_2": True,
    "distinct_3": True,
    "seq_rep_4": False,
    "mean_length": True,
    "degenerate_share": False,
}
LABELS = {
    "coherence": "coherence (nats/token)",
    "diversity": "diversity",
    "self_bleu": "self-BLEU",
    "distinct_1": "distinct-1",
    "distinct_2": "distinct-2",
    "distinct_3": "distinct-3",
    "seq_rep_4": "seq-rep-4",
    "mean_length": "length (tokens)",
    "degenerate_share": "degenerate share",
}
_UNDEFINED = {
    "coherence": "no sample wrote a token",
    "diversity": "every sample has fewer than 4 words",
    "self_bleu": "no passage has two samples to compare",
    "distinct_1": "no sample has a word",
    "distinct_2": "every sample has fewer than 2 words",
    "distinct_3": "every sample has fewer than 3 words",
    "seq_rep_4": "every sample has fewer than 4 tokens",
    "mean_length": "no samples",
    "degenerate_share": "no samples",
}


def statistic_of(key: str) -> Statistic:
    """How a measure pools over passages."""
    return "mean_of_means" if key == "self_bleu" else "pooled_mean"


def sample_values(sample: Sample) -> dict[str, float | None]:
    """The per-sample measures of one sample (``SAMPLE_KEYS``)."""
    ids = sample.token_ids
    return {
        "coherence": metrics.coherence(t.raw_p for t in sample.tokens),
        "diversity": metrics.diversity(sample.text),
        "distinct_1": metrics.distinct_n([sample.text], 1),
        "distinct_2": metrics.distinct_n([sample.text], 2),
        "distinct_3": metrics.distinct_n([sample.text], 3),
        "seq_rep_4": metrics.seq_rep_n([ids], 4),
        "length": float(len(ids)),
        "degenerate": 1.0 if metrics.is_degenerate(ids, sample.stop_reason) else 0.0,
    }


def sample_bleus(texts: Sequence[str]) -> list[float | None]:
    """Each text's sentence BLEU (sacrebleu, 0–1) against all the others; None with fewer than two."""
    import sacrebleu

    texts = list(texts)
    if len(texts) < 2:
        return [None] * len(texts)
    return [sacrebleu.sentence_bleu(h, texts[:i] + texts[i + 1 :]).score / 100.0 for i, h in enumerate(texts)]


def passage_table(samples: Sequence[Sample]) -> list[dict[str, float | None]]:
    """Per-sample values of one preset on one passage, with ``bleu`` added."""
    rows = [sample_values(s) for s in samples]
    for row, bleu in zip(rows, sample_bleus([s.text for s in samples]), strict=True):
        row["bleu"] = bleu
    return rows


@dataclasses.dataclass(frozen=True)
class Estimate:
    """One measure's value with its 95% interval; ``None`` where undefined (``reason`` says why)."""

    value: float | None
    low: float | None = None
    high: float | None = None
    defined: int = 0  # samples (or passages, for self-BLEU) with a value
    undefined: int = 0  # samples without one
    reason: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON form."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Estimate:
        """The estimate of its JSON form."""
        return cls(**data)


def estimate(key: str, tables: Sequence[Sequence[dict[str, float | None]]], seed: Sequence[int]) -> Estimate:
    """One measure over the per-sample tables of one or more passages.

    Args:
        key: one of ``MEASURE_KEYS``.
        tables: per passage, the rows of :func:`passage_table`.
        seed: entropy for the bootstrap's generator (the same seed gives the same interval).
    """
    source = SOURCE[key]
    groups = [[v for row in table if (v := row[source]) is not None] for table in tables]
    undefined = sum(len(t) for t in tables) - sum(len(g) for g in groups)
    groups = [g for g in groups if g]
    if not groups:
        return Estimate(None, undefined=undefined, reason=_UNDEFINED[key])
    statistic = statistic_of(key)
    value = statistic_value(groups, statistic)
    defined = len(groups) if statistic == "mean_of_means" else sum(len(g) for g in groups)
    if sum(len(g) for g in groups) < 2:
        return Estimate(value, defined=defined, undefined=undefined, reason="one value only: no interval")
    low, high = percentile_interval(groups, statistic, resamples=RESAMPLES, rng=np.random.default_rng(list(seed)))
    return Estimate(value, low, high, defined, undefined)


def estimates(tables: Sequence[Sequence[dict[str, float | None]]], seed: Sequence[int]) -> dict[str, Estimate]:
    """Every measure (``MEASURE_KEYS``) over the given passages' tables."""
    return {key: estimate(key, tables, [*seed, k]) for k, key in enumerate(MEASURE_KEYS)}
