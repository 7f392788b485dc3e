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
    return np.clip(_stream(seed, sample_index, step).random(vocab), U_MIN, U_MAX)


def _stream(seed: int, sample_index: int, step: int) -> np.random.Generator:
    """The generator keyed by (seed, sample index, step)."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, sample_index, step])))


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

    Row ``r`` gets exactly :func:`noise` ``(seed, sample_indices[r], step, vocab)``.

    Returns:
        float64 tensor of shape ``(len(sample_indices), vocab)``.
    """
    return StepNoise(seed, sample_indices, step, vocab).at(slice(None))


class StepNoise:
    """The noise of one step for every row of a batch, read where it is needed.

    Each distinct sample index draws its keyed stream once, over the whole
    vocabulary in id order (so the coupling never depends on which tokens a
    row keeps); :meth:`at` clips and Gumbel-transforms only the entries asked
    for. ``at(rows, ids)[r, j]`` equals ``noise(seed, index of row r, step,
    vocab)[ids[r, j]]`` exactly (the clip and the transform act element by
    element).
    """

    def __init__(self, seed: int, sample_indices: Sequence[int], step: int, vocab: int):
        distinct = sorted(set(int(i) for i in sample_indices))
        where = {index: row for row, index in enumerate(distinct)}
        table = np.empty((len(distinct), vocab))
        for row, index in enumerate(distinct):  # each stream writes its row in place: no stacking copy
            _stream(seed, index, step).random(out=table[row])
        self.table = torch.from_numpy(table)
        self.row_of = torch.tensor([where[int(i)] for i in sample_indices], dtype=torch.long)

    def at(self, rows: slice, ids: torch.Tensor | None = None) -> torch.Tensor:
        """Gumbel noise for the batch rows ``rows``: every id (``ids`` None) or
        the ids of ``ids`` (rows × width long), as a float64 tensor of the same shape."""
        which = self.row_of[rows]
        u = self.table.index_select(0, which) if ids is None else self.table[which.unsqueeze(-1), ids]
        return gumbel(u.clamp(U_MIN, U_MAX))
