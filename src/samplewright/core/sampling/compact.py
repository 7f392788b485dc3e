"""The chain on the live tokens only: the audition batch's lean path.

:func:`~samplewright.core.sampling.chain.run_chain` (and :func:`shape`, the
single-row definition) always works on the whole vocabulary. After a
truncation stage (top-k, top-p, min-p, typical) a row keeps a few hundred
tokens of tens of thousands, and every later operation on the removed ones is
wasted: a removed token has logit ``-inf``, which every stage keeps at
``-inf``, and probability 0, which adds nothing to a softmax, an entropy or a
Gumbel-max draw. So :func:`shape_group` runs the same stages, in the same
order, with the same guards, and once every row of the group has at most
``COMPACT_LIMIT`` live tokens it gathers them (ids in ascending order, so
"ties to the lower id" keeps its meaning as "ties to the earlier position")
and runs the rest of the chain on that narrow table.

The stages see a narrower ``logits`` and a :class:`RowHistory` gathered at
the same ids; they act per token through those two and settle ties by
position, so they give the same values (up to the rounding of sums taken in a
different order: far below 1e-9). The step view keeps the full path.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import torch

from . import registry
from .chain import RowHistory, RowParams, _greedy_if_infinite, _is_neutral, _keep_one_if_empty
from .stages import NEG_INF

#: Widest live set (tokens per row, the group's widest row) that is gathered
#: into a compact table; a wider one stays on the whole vocabulary.
COMPACT_LIMIT = 4096


@dataclasses.dataclass
class Shaped:
    """A group's final logits: ``logits[r, j]`` is the logit of token ``ids[r, j]``.

    ``ids`` is None when the table spans the whole vocabulary in id order.
    In a compact table each row's live ids come first in ascending order;
    the rest of the row is padding (id 0, logit ``-inf``).
    """

    logits: torch.Tensor
    ids: torch.Tensor | None = None


def active_stages(order: Sequence[str], params: RowParams) -> tuple[str, ...]:
    """The stages of ``order`` that are not neutral for every row of ``params``
    (the ones :func:`~samplewright.core.sampling.chain.run_chain` would run)."""
    return tuple(name for name in order if not _is_neutral(name, params))


def guarded(before: torch.Tensor, after: torch.Tensor) -> torch.Tensor:
    """The chain's two guards (greedy over ``+inf``, then keep one token if a
    row is empty) with one reduction when neither applies: a row whose largest
    logit is finite has no ``+inf`` and is not empty. Anything else (``+inf``,
    an empty row, NaN) goes through the guards themselves."""
    if bool(torch.isfinite(after.amax(dim=-1)).all()):
        return after
    return _keep_one_if_empty(before, _greedy_if_infinite(after))


def shape_group(logits: torch.Tensor, params: RowParams, history: RowHistory, stages: Sequence[str]) -> Shaped:
    """Apply ``stages`` (active stages, in chain order) to float64 ``logits``
    (rows × vocab), compacting the table once every row is narrow enough.

    Equals ``run_chain(logits, params, history).logits`` on the ids it keeps,
    with ``-inf`` everywhere else.
    """
    current, ids = logits, None
    for position, name in enumerate(stages):
        current = guarded(current, registry.stage(name).apply(current, params, history))
        if ids is None:
            compact = _compact(current)
            if compact is not None:
                current, ids = compact
                if position + 1 < len(stages):
                    history = _gather_history(history, ids)
    return Shaped(current, ids)


def _compact(logits: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor] | None:
    """The live tokens of every row gathered in ascending id order (logits and
    ids, padded with ``-inf`` / id 0), or None when a row has more than
    ``COMPACT_LIMIT`` or more than half the vocabulary (too wide to gain)."""
    live = logits > NEG_INF
    counts = live.sum(dim=-1)
    width = int(counts.max())
    if width > min(COMPACT_LIMIT, logits.shape[-1] // 2):
        return None
    rows, cols = live.nonzero(as_tuple=True)  # row-major, so ascending ids within a row
    slots = torch.arange(rows.numel()) - (torch.cumsum(counts, 0) - counts)[rows]
    ids = torch.zeros(logits.shape[0], width, dtype=torch.long)
    ids[rows, slots] = cols
    narrow = torch.full((logits.shape[0], width), NEG_INF, dtype=logits.dtype)
    narrow[rows, slots] = logits[rows, cols]
    return narrow, ids


def _gather_history(history: RowHistory, ids: torch.Tensor) -> RowHistory:
    """The history columns of ``ids`` (padding slots read token 0; their logit is ``-inf`` whatever they read)."""
    return RowHistory(history.seen.gather(-1, ids), history.counts.gather(-1, ids), history.banned.gather(-1, ids))
