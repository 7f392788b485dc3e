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
from . import stages as kernels
from .chain import RowHistory, RowParams, _greedy_if_infinite, _is_neutral, _keep_one_if_empty
from .stages import NEG_INF

#: Widest live set (tokens per row, the group's widest row) that is gathered
#: into a compact table; a wider one stays on the whole vocabulary.
COMPACT_LIMIT = 16384


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
        narrow, after = _narrowed(name, current, params) if ids is None else (None, None)
        if narrow is not None:
            current, ids = narrow
            if position + 1 < len(stages):
                history = _gather_history(history, ids)
            continue
        if after is None:
            after = registry.stage(name).apply(current, params, history)
        if ids is not None:
            current = guarded(current, after)
            continue
        current = guarded(current, after)
        # A row that has lost no token keeps the whole vocabulary: no gain in gathering.
        if current is not after or bool(torch.isneginf(after.amin(dim=-1)).all()):
            compact = _compact(current)
            if compact is not None:
                current, ids = compact
                if position + 1 < len(stages):
                    history = _gather_history(history, ids)
    return Shaped(current, ids)


#: The truncation stages whose kept tokens can be had as a mask: the live set
#: is gathered from it directly (the stage itself is ``logits.masked_fill(~kept, -inf)``).
_KEPT = {"top_p": kernels.top_p_kept, "min_p": kernels.min_p_kept, "typical_p": kernels.typical_p_kept}
#: The built-in stage functions these shortcuts stand for (a stage registered
#: again under one of these names runs as it is).
_BUILT_IN = {name: registry.stage(name).apply for name in ("top_k", *_KEPT)}


def _narrowed(name: str, logits: torch.Tensor, params: RowParams):
    """For a truncation stage on the whole vocabulary: its result already
    compact (``(narrow, ids)``, None when too wide), and its plain result when
    that had to be made (else None). A compact result whose rows are not all
    finite at their best (``+inf``, nothing kept) is refused, so the guards run
    on the plain result."""
    if name not in _BUILT_IN or registry.stage(name).apply is not _BUILT_IN[name]:
        return None, None
    if name == "top_k":
        return _top_k_narrow(logits, params), None
    if name == "top_p":
        table = kernels.top_p_table(logits, params.values[name])
        if table is not None:
            return _from_table(logits, table)
    kept = _KEPT[name](logits, params.values[name])
    narrow = _gather(logits, kept)
    if narrow is not None and bool(torch.isfinite(narrow[0].amax(dim=-1)).all()):
        return narrow, None
    return None, logits.masked_fill(~kept, NEG_INF)


def _top_k_narrow(logits: torch.Tensor, params: RowParams) -> tuple[torch.Tensor, torch.Tensor] | None:
    """Top-k's result already compact (logits and ascending ids), or None to take the plain stage.

    Every token top-k keeps lies at or above the row's k-th value, so those
    few are gathered first and the stage's own rule runs on them: above the
    k-th value stay, and of the ties with it the lowest ids until k are kept
    (the ties keep their id order in the gathered table). Kept logits are
    unchanged and finite, so neither guard acts. Rows with different k, or
    with fewer than k live tokens, take the plain stage.
    """
    k = params.values["top_k"]
    first = int(k[0])
    if not 0 < first <= min(COMPACT_LIMIT, logits.shape[-1] // 2) or not bool((k == first).all()):
        return None
    kth = torch.topk(logits, first, dim=-1).values[:, -1:]
    if not bool(torch.isfinite(kth).all()):
        return None
    gathered = _gather(logits, logits >= kth)
    if gathered is None:
        return None
    narrow, ids = gathered
    above, tied = narrow > kth, narrow == kth
    room = first - above.sum(-1, keepdim=True)
    keep = above | (tied & (torch.cumsum(tied, dim=-1) <= room))
    return narrow.masked_fill(~keep, NEG_INF), ids


def _from_table(logits: torch.Tensor, table: torch.Tensor):
    """:func:`_narrowed`'s answer for a stage whose kept ids came as a table
    (ascending ids per row, padded at the end with id ``vocab``)."""
    vocab = logits.shape[-1]
    padding = table == vocab
    if table.shape[-1] <= min(COMPACT_LIMIT, vocab // 2):
        ids = table.masked_fill(padding, 0)
        narrow = logits.gather(-1, ids).masked_fill_(padding, NEG_INF)
        if bool(torch.isfinite(narrow.amax(dim=-1)).all()):
            return (narrow, ids), None
    return None, logits.masked_fill(~kernels.kept_from_table(table, vocab), NEG_INF)


def _compact(logits: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor] | None:
    """The live tokens of every row gathered in ascending id order, or None
    when a row has too many (see :func:`_gather`)."""
    return _gather(logits, logits > NEG_INF)


def _gather(logits: torch.Tensor, chosen: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor] | None:
    """The ``chosen`` tokens (bool, rows × vocab) of every row in ascending id
    order: logits and ids, padded with ``-inf`` / id 0; None when a row has
    more than ``COMPACT_LIMIT`` or more than half the vocabulary (too wide to gain)."""
    counts = chosen.sum(dim=-1)
    width = int(counts.max())
    if width > min(COMPACT_LIMIT, logits.shape[-1] // 2):
        return None
    rows, cols = chosen.nonzero(as_tuple=True)  # row-major, so ascending ids within a row
    slots = torch.arange(rows.numel()) - (torch.cumsum(counts, 0) - counts)[rows]
    ids = torch.zeros(logits.shape[0], width, dtype=torch.long)
    ids[rows, slots] = cols
    narrow = torch.full((logits.shape[0], width), NEG_INF, dtype=logits.dtype)
    narrow[rows, slots] = logits[rows, cols]
    return narrow, ids


def _gather_history(history: RowHistory, ids: torch.Tensor) -> RowHistory:
    """The history columns of ``ids`` (padding slots read token 0; their logit is ``-inf`` whatever they read)."""
    return RowHistory(history.seen.gather(-1, ids), history.counts.gather(-1, ids), history.banned.gather(-1, ids))
