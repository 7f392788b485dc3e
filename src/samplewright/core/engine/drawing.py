"""One step's draw for every row of the batch, and what each sample records about it.

Each group of rows (one preset) arrives as its shaped table
(:class:`~samplewright.core.sampling.compact.Shaped`, whole vocabulary or
its live tokens only). The draw is Gumbel-max (Gumbel 1954; Maddison, Tarlow
& Minka 2014, "A* Sampling") with the sample's shared noise read at the
table's ids; the shaped probability, the kept count and the entropy come from
the same table. The raw statistics (probability of the drawn token, entropy)
come from one exponential pass over all rows' raw logits (:func:`raw_statistics`).
"""

from __future__ import annotations

import dataclasses
import math

import torch

from ..sampling.compact import Shaped
from ..sampling.sampler import StepNoise


@dataclasses.dataclass
class Drawn:
    """The tokens of one step and what the sample records about them (plain lists, one entry per row)."""

    ids: torch.Tensor
    token_ids: list[int]
    raw_p: list[float]
    p: list[float]
    kept: list[int]
    raw_entropy: list[float]
    entropy: list[float]


def entropy_bits(log_probs: torch.Tensor, probs: torch.Tensor) -> torch.Tensor:
    """Shannon entropy in bits per row over the nonzero probabilities (as
    :func:`~samplewright.core.sampling.inspection.entropy_bits`). A removed
    token gives ``0 * -inf = nan``, which ``nansum`` leaves out: one pass, no mask."""
    return 0.0 - torch.nansum(probs * log_probs, dim=-1) / math.log(2.0)


@dataclasses.dataclass
class _Part:
    """One group's draw: token ids, their shaped probability, kept counts, entropies (tensors, one entry per row)."""

    ids: torch.Tensor
    p: torch.Tensor
    kept: torch.Tensor
    entropy: torch.Tensor


def _draw_group(shaped: Shaped, noise: StepNoise, rows: slice) -> _Part:
    log_probs = torch.log_softmax(shaped.logits, dim=-1)
    slot = torch.argmax(log_probs + noise.at(rows, shaped.ids), dim=-1, keepdim=True)
    probs = log_probs.exp()
    ids = slot if shaped.ids is None else shaped.ids.gather(-1, slot)
    return _Part(
        ids.squeeze(-1), probs.gather(-1, slot).squeeze(-1), (probs > 0).sum(-1), entropy_bits(log_probs, probs)
    )


def raw_statistics(raw: torch.Tensor, ids: torch.Tensor, shared: bool = False) -> tuple[torch.Tensor, torch.Tensor]:
    """Raw probability of ``ids`` (one per row) and raw entropy in bits, from float64 ``raw`` (rows × vocab).

    With ``m`` the row's largest logit, ``e = exp(z - m)`` and ``S = sum e``,
    ``p = e / S`` and the entropy is ``log Z - E_p[z] = m + log S - (e · z) / S``:
    one exponential pass, two sums and a maximum, with no normalised copy of
    the row (about 2 ms less per step than a softmax, its maximum and a
    ``vecdot`` at 16 rows x 49,152 tokens, measured). A row with a
    ``-inf`` logit (``0 * -inf``) takes the masked form instead. With
    ``shared`` every row holds the first row's logits, computed once.
    """
    if shared:
        raw = raw[:1]
    top = raw.amax(dim=-1, keepdim=True)
    weights = torch.sub(raw, top).exp_()
    total = weights.sum(dim=-1)
    if shared:
        drawn = weights[0, ids] / total[0]
    else:
        drawn = weights.gather(-1, ids.unsqueeze(-1)).squeeze(-1) / total
    # In place: one row-sized buffer per step (a fresh one costs its page faults).
    nats = top.squeeze(-1) + torch.log(total) - weights.mul_(raw).sum(dim=-1) / total
    bad = torch.isnan(nats)
    if bool(bad.any()):
        probs = torch.softmax(raw, dim=-1)
        nats = torch.where(bad, -torch.nansum(probs * torch.log(probs), dim=-1), nats)
    if shared:
        return drawn, nats.expand(len(ids)) / math.log(2.0)
    return drawn, nats / math.log(2.0)


def draw_step(raw: torch.Tensor, groups: list[tuple[slice, Shaped]], noise: StepNoise, shared: bool) -> Drawn:
    """Draw every row's token.

    Args:
        raw: float64 raw logits (rows × vocab).
        groups: each group's batch rows and shaped table, covering every row in order.
        noise: the step's noise for the batch's rows.
        shared: every row holds the same raw logits (the first step), so the
            raw statistics are computed once.
    """
    parts = [_draw_group(shaped, noise, rows) for rows, shaped in groups]
    ids = torch.cat([part.ids for part in parts])
    raw_p, raw_entropy = raw_statistics(raw, ids, shared)
    return Drawn(
        ids=ids,
        token_ids=ids.tolist(),
        raw_p=raw_p.tolist(),
        p=torch.cat([part.p for part in parts]).tolist(),
        kept=torch.cat([part.kept for part in parts]).tolist(),
        raw_entropy=raw_entropy.tolist(),
        entropy=torch.cat([part.entropy for part in parts]).tolist(),
    )
