"""Coupled drawing of tokens: the Gumbel-max trick with shared noise.

If ``g_i = -log(-log u_i)`` with ``u_i`` independent and uniform on (0, 1),
then ``argmax_i (log p_i + g_i)`` is distributed as ``p`` (Gumbel 1954; the
trick as a sampler: Maddison, Tarlow & Minka 2014, "A* Sampling", NeurIPS).
Tokens with ``p_i = 0`` (``log p_i = -inf``) can never win.

Coupling: the noise for one step of one sample is a single vector over the
whole vocabulary, in id order, drawn from a generator keyed by
``(seed, sample index, step)``. It does not depend on the preset, the batch
size, the row's position or which rows already finished, so sample ``i`` of
every preset shares one random stream and two presets differ only where
their distributions differ ("common random numbers", common practice in
simulation).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch

#: Largest float64 below 1 and smallest positive normal float64: the noise's
#: uniforms stay strictly inside (0, 1), so no token gets infinite noise.
U_MAX = 1.0 - 2.0**-53
U_MIN = float(np.finfo(np.float64).tiny)


def uniforms(seed: int, sample_index: int, step: int, vocab: int) -> np.ndarray:
    """The uniforms of one (seed, sample index, step), one per token id, in (0, 1).

    Args:
        seed: the audition's run seed (>= 0).
        sample_index: which sample of each preset (>= 0).
        step: position of the token in the sample (>= 0).
        vocab: number of token ids.

    Returns:
        float64 array of shape ``(vocab,)``.
    """
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, sample_index, step])))
    return np.clip(rng.random(vocab), U_MIN, U_MAX)


def gumbel(u) -> torch.Tensor:
    """Standard Gumbel noise ``-log(-log u)`` from uniforms in (0, 1) (float64 tensor)."""
    u = torch.as_tensor(u, dtype=torch.float64)
    return -torch.log(-torch.log(u))


def noise(seed: int, sample_index: int, step: int, vocab: int) -> torch.Tensor:
    """The Gumbel noise shared by sample ``sample_index`` of every preset at ``step``."""
    return gumbel(uniforms(seed, sample_index, step, vocab))


def draw(log_probs: torch.Tensor, gumbels: torch.Tensor) -> torch.Tensor:
    """Gumbel-max: the token id of each row, ``argmax(log p + g)``.

    Args:
        log_probs: (rows, vocab) log-probabilities (``-inf`` for removed tokens).
        gumbels: (rows, vocab) Gumbel noise, one row per row of ``log_probs``.

    Returns:
        (rows,) long tensor of token ids.
    """
    return torch.argmax(log_probs + gumbels, dim=-1)


def noise_rows(seed: int, sample_indices: Sequence[int], step: int, vocab: int) -> torch.Tensor:
    """The noise of every row of a batch at ``step``, in one call.

    Row ``r`` gets exactly :func:`noise` ``(seed, sample_indices[r], step, vocab)``:
    each distinct sample index draws its own keyed stream once, and the
    Gumbel transform runs once over all of them.

    Returns:
        float64 tensor of shape ``(len(sample_indices), vocab)``.
    """
    distinct = sorted(set(int(i) for i in sample_indices))
    u = np.stack([uniforms(seed, i, step, vocab) for i in distinct])
    table = gumbel(u)
    if len(distinct) == len(sample_indices) and distinct == [int(i) for i in sample_indices]:
        return table
    where = {index: row for row, index in enumerate(distinct)}
    return table.index_select(0, torch.tensor([where[int(i)] for i in sample_indices], dtype=torch.long))
