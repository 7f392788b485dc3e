"""Percentile bootstrap intervals with resampling within groups (passages).

Efron & Tibshirani (1993), "An Introduction to the Bootstrap", Chapman & Hall:
the percentile interval (ch. 13) of a statistic's bootstrap distribution. The
samples of each passage are resampled with replacement within that passage
(a stratified bootstrap, ch. 8 on structured data), so every resample keeps
each passage's number of samples. The draws follow scipy.stats.bootstrap's
order (one ``integers(0, n, (resamples, n))`` call per group, in group order,
on one ``numpy.random.Generator``) and the interval is its ``quantile`` with
linear interpolation, so the two agree to rounding for the same generator.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np

Statistic = Literal["pooled_mean", "mean_of_means"]
RESAMPLES = 2000
CONFIDENCE = 0.95


def statistic_value(groups: Sequence[Sequence[float]], statistic: Statistic) -> float:
    """The statistic on the data itself: the mean of all values (``pooled_mean``),
    or the mean over groups of each group's mean (``mean_of_means``)."""
    arrays = [np.asarray(g, dtype=np.float64) for g in groups]
    if statistic == "pooled_mean":
        return float(np.concatenate(arrays).mean())
    return float(np.mean([a.mean() for a in arrays]))


def bootstrap_distribution(
    groups: Sequence[Sequence[float]], statistic: Statistic, resamples: int, rng: np.random.Generator
) -> np.ndarray:
    """The statistic over ``resamples`` resamples, each group resampled within itself."""
    arrays = [np.asarray(g, dtype=np.float64) for g in groups]
    sums, means = np.zeros(resamples), np.zeros(resamples)
    for values in arrays:
        n = values.shape[-1]
        drawn = values[rng.integers(0, n, (resamples, n))]
        sums += drawn.sum(axis=-1)
        means += drawn.mean(axis=-1)
    if statistic == "pooled_mean":
        return sums / sum(a.shape[-1] for a in arrays)
    return means / len(arrays)


def percentile_interval(
    groups: Sequence[Sequence[float]],
    statistic: Statistic = "pooled_mean",
    *,
    resamples: int = RESAMPLES,
    confidence: float = CONFIDENCE,
    rng: np.random.Generator | int = 0,
) -> tuple[float, float]:
    """The two-sided percentile bootstrap interval of ``statistic`` (Efron & Tibshirani 1993).

    Args:
        groups: the values of each group (passage); empty groups must be left out.
        statistic: ``pooled_mean`` (each value weighs the same) or ``mean_of_means``.
        resamples: how many bootstrap resamples.
        confidence: the interval's level, e.g. 0.95.
        rng: a generator, or a seed for ``numpy.random.default_rng``.

    Returns:
        (low, high).
    """
    if not groups or any(len(g) == 0 for g in groups):
        raise ValueError("every group needs at least one value")
    generator = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    theta = bootstrap_distribution(groups, statistic, resamples, generator)
    alpha = (1 - confidence) / 2
    low, high = np.quantile(theta, [alpha, 1 - alpha])
    return float(low), float(high)
