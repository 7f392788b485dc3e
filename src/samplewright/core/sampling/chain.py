"""The sampling chain: a preset's stages applied in the preset's order.

``run_chain`` works on a batch in which every row may carry a different
preset; rows sharing a stage order are processed together. :func:`shape` is
the single-row, float64 definition of what a preset means; the engine's
batched sampling calls the same ``run_chain``, so the two cannot drift apart.

Which stages exist, their functions and their neutral values come from the
stage registry (``core/sampling/registry.py``). The default order is
transformers' (``generate()`` builds repetition penalty and no-repeat n-gram
first, then temperature, top-k, top-p, min-p, typical).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import torch

from ..presets import Preset
from . import registry, stages


@dataclasses.dataclass
class RowParams:
    """Per-row parameter tensors (length = rows) for a batch of presets.

    ``values`` holds one tensor per field of every registered stage (integer
    fields as ``torch.long``, the rest float64); ``params.top_p`` reads
    ``params.values["top_p"]``. ``orders`` holds each row's stage order.
    """

    values: dict[str, torch.Tensor]
    orders: list[tuple[str, ...]]

    @classmethod
    def from_presets(cls, presets: Sequence[Preset]) -> RowParams:
        """Stack the parameters of ``presets``, one row each."""
        values = {
            field.name: torch.tensor(
                [getattr(p, field.name) for p in presets], dtype=torch.long if field.integer else torch.float64
            )
            for field in registry.stage_fields()
        }
        return cls(values=values, orders=[tuple(p.order) for p in presets])

    def __getattr__(self, name: str) -> torch.Tensor:
        # Only called when normal lookup fails: a stage field by name.
        values = self.__dict__.get("values", {})
        if name in values:
            return values[name]
        raise AttributeError(name)

    def select(self, rows: Sequence[int]) -> RowParams:
        """The parameters of the given rows only."""
        index = torch.as_tensor(list(rows), dtype=torch.long)
        return RowParams({name: value[index] for name, value in self.values.items()}, [self.orders[i] for i in rows])


@dataclasses.dataclass
class RowHistory:
    """What the penalty stages see, per row (rows × vocab tensors).

    ``seen`` marks ids in the passage and the generated tokens (repetition
    penalty), ``counts`` counts generated tokens only (frequency/presence),
    ``banned`` marks tokens forbidden by the no-repeat n-gram rule.
    """

    seen: torch.Tensor
    counts: torch.Tensor
    banned: torch.Tensor

    @classmethod
    def build(
        cls,
        histories: Sequence[Sequence[int]],
        generated: Sequence[Sequence[int]],
        ngram_sizes: Sequence[int],
        vocab: int,
    ) -> RowHistory:
        """Build the tensors from token-id lists, one list per row."""
        rows = len(histories)
        seen = torch.zeros(rows, vocab, dtype=torch.bool)
        counts = torch.zeros(rows, vocab, dtype=torch.int32)
        banned = torch.zeros(rows, vocab, dtype=torch.bool)
        for r in range(rows):
            ids = _checked_ids(histories[r], vocab)
            if ids:
                seen[r, ids] = True
            gen = _checked_ids(generated[r], vocab)
            if gen:
                counts[r] += torch.bincount(torch.tensor(gen), minlength=vocab).to(torch.int32)
            ban = stages.banned_ngram_tokens(ids, ngram_sizes[r])
            if ban:
                banned[r, sorted(ban)] = True
        return cls(seen, counts, banned)

    def select(self, rows: Sequence[int]) -> RowHistory:
        """The history of the given rows only."""
        index = torch.as_tensor(list(rows), dtype=torch.long)
        return RowHistory(self.seen[index], self.counts[index], self.banned[index])


def _checked_ids(ids: Iterable[int], vocab: int) -> list[int]:
    ids = [int(i) for i in ids]
    bad = [i for i in ids if not 0 <= i < vocab]
    if bad:
        raise ValueError(f"token id {bad[0]} is outside the vocabulary of {vocab} tokens")
    return ids


def _is_neutral(name: str, params: RowParams) -> bool:
    """True when every row's parameters sit at the stage's neutral values, so
    the batch can skip it (the sorts in top-k, top-p and typical are the
    chain's cost). The neutral values come from the stage registry."""
    neutral = registry.stage(name).neutral
    if not neutral:
        return False  # a stage without fields always runs
    return all(bool((params.values[field] == value).all()) for field, value in neutral.items())


def _keep_one_if_empty(before: torch.Tensor, after: torch.Tensor) -> torch.Tensor:
    """Where a stage removed every token of a row, keep that row's most
    probable token (by the stage's input) so no distribution is ever NaN."""
    empty = torch.isneginf(after).all(dim=-1)
    if not bool(empty.any()):
        return after
    top = before.argmax(dim=-1, keepdim=True)
    rescue = torch.full_like(after, stages.NEG_INF).scatter(-1, top, before.gather(-1, top))
    return torch.where(empty.unsqueeze(-1), rescue, after)


def _greedy_if_infinite(after: torch.Tensor) -> torch.Tensor:
    """Where a stage's division overflowed to +inf (a temperature or repetition
    penalty near 0, or logits near the float64 limit), make that row greedy over
    its +inf entries: the first such id keeps logit 0, every other id -inf (ties
    to the lower id, as temperature 0). A softmax over +inf would give NaN."""
    infinite = torch.isposinf(after)
    rows = infinite.any(dim=-1)
    if not bool(rows.any()):
        return after
    first = infinite.to(torch.uint8).argmax(dim=-1, keepdim=True)  # argmax gives the first maximum
    one_hot = torch.full_like(after, stages.NEG_INF).scatter(-1, first, 0.0)
    return torch.where(rows.unsqueeze(-1), one_hot, after)


@dataclasses.dataclass
class ChainOutput:
    """Final logits, and optionally the logits after each stage (by name)."""

    logits: torch.Tensor
    after_stage: dict[str, torch.Tensor] | None = None


def run_chain(logits: torch.Tensor, params: RowParams, history: RowHistory, keep_stages: bool = False) -> ChainOutput:
    """Apply each row's preset chain to ``logits`` (rows × vocab).

    Returns new float64 logits with ``-inf`` for removed tokens; the input is
    not modified. With ``keep_stages`` the logits after every stage are kept.
    """
    logits = logits.to(torch.float64)
    groups: dict[tuple[str, ...], list[int]] = {}
    for row, order in enumerate(params.orders):
        groups.setdefault(order, []).append(row)
    if len(groups) == 1:
        return _run_group(logits, params, history, next(iter(groups)), keep_stages)
    final = torch.empty_like(logits)
    after = {name: torch.empty_like(logits) for name in _stages_named(groups)} if keep_stages else None
    for order, rows in groups.items():
        index = torch.as_tensor(rows, dtype=torch.long)
        part = _run_group(logits[index], params.select(rows), history.select(rows), order, keep_stages)
        final[index] = part.logits
        if after is not None:
            for name, value in (part.after_stage or {}).items():
                after[name][index] = value
    return ChainOutput(final, after)


def _stages_named(groups: Mapping[tuple[str, ...], list[int]]) -> list[str]:
    """Every stage named in any of the groups' orders, once each."""
    return list(dict.fromkeys(name for order in groups for name in order))


def _run_group(logits, params, history, order, keep_stages) -> ChainOutput:
    after: dict[str, torch.Tensor] | None = {} if keep_stages else None
    current = logits
    for name in order:
        if not _is_neutral(name, params):
            stage = registry.stage(name)
            current = _keep_one_if_empty(current, _greedy_if_infinite(stage.apply(current, params, history)))
        if after is not None:
            after[name] = current
    return ChainOutput(current, after)


def as_logits_row(logits) -> torch.Tensor:
    """Turn 1-D numpy or torch logits into a float64 torch row of shape (1, V)."""
    if isinstance(logits, torch.Tensor):
        row = logits.detach().to("cpu", torch.float64)
    else:
        row = torch.from_numpy(np.asarray(logits, dtype=np.float64).copy())
    if row.ndim != 1 or row.shape[0] == 0:
        raise ValueError(f"logits must be a non-empty 1-D array, got shape {tuple(row.shape)}")
    if torch.isnan(row).any() or torch.isposinf(row).any():
        raise ValueError("logits must not contain NaN or +inf")
    if torch.isneginf(row).all():
        raise ValueError("logits must keep at least one finite value")
    return row.unsqueeze(0)


def shape(logits, preset: Preset, history: Sequence[int] = (), generated: Sequence[int] = ()) -> np.ndarray:
    """The exact distribution ``preset`` samples from (float64, sums to 1).

    Args:
        logits: 1-D raw next-token logits (numpy or torch).
        preset: the preset whose chain is applied.
        history: context token ids (passage + generated), seen by the
            repetition penalty and the no-repeat n-gram rule.
        generated: generated token ids only, seen by frequency/presence.
    """
    row = as_logits_row(logits)
    params = RowParams.from_presets([preset])
    hist = RowHistory.build([list(history)], [list(generated)], [preset.no_repeat_ngram_size], row.shape[-1])
    final = run_chain(row, params, hist).logits
    return torch.softmax(final, dim=-1)[0].numpy()
