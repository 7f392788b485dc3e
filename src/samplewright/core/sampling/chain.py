"""The sampling chain: a preset's stages applied in the preset's order.

``run_chain`` works on a batch in which every row may carry a different
preset; rows sharing a stage order are processed together. :func:`shape` is
the single-row, float64 definition of what a preset means; the engine's
batched sampling calls the same ``run_chain``, so the two cannot drift apart.

The default order is transformers' (``generate()`` builds repetition penalty
and no-repeat n-gram first, then temperature, top-k, top-p, min-p, typical).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Sequence

import numpy as np
import torch

from ..presets import Preset
from . import stages

PENALTY_PARTS = ("repetition", "frequency_presence", "no_repeat_ngram")


@dataclasses.dataclass
class RowParams:
    """Per-row parameter tensors (length = rows) for a batch of presets."""

    temperature: torch.Tensor
    top_k: torch.Tensor
    top_p: torch.Tensor
    min_p: torch.Tensor
    typical_p: torch.Tensor
    repetition_penalty: torch.Tensor
    frequency_penalty: torch.Tensor
    presence_penalty: torch.Tensor
    no_repeat_ngram_size: list[int]
    orders: list[tuple[str, ...]]

    @classmethod
    def from_presets(cls, presets: Sequence[Preset]) -> RowParams:
        """Stack the parameters of ``presets``, one row each."""

        def col(name, dtype=torch.float64):
            return torch.tensor([getattr(p, name) for p in presets], dtype=dtype)

        return cls(
            temperature=col("temperature"),
            top_k=col("top_k", torch.long),
            top_p=col("top_p"),
            min_p=col("min_p"),
            typical_p=col("typical_p"),
            repetition_penalty=col("repetition_penalty"),
            frequency_penalty=col("frequency_penalty"),
            presence_penalty=col("presence_penalty"),
            no_repeat_ngram_size=[p.no_repeat_ngram_size for p in presets],
            orders=[tuple(p.order) for p in presets],
        )

    def select(self, rows: Sequence[int]) -> RowParams:
        """The parameters of the given rows only."""
        index = torch.as_tensor(list(rows), dtype=torch.long)
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        for name, value in out.items():
            out[name] = value[index] if isinstance(value, torch.Tensor) else [value[i] for i in rows]
        return RowParams(**out)


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


def _penalties(logits, params: RowParams, history: RowHistory) -> torch.Tensor:
    # Inside the stage: repetition, then frequency/presence, then no-repeat n-gram.
    out = stages.repetition_penalty(logits, params.repetition_penalty, history.seen)
    out = stages.frequency_presence(out, params.frequency_penalty, params.presence_penalty, history.counts)
    return stages.no_repeat_ngram(out, history.banned)


STAGES = {
    "penalties": _penalties,
    "temperature": lambda z, p, h: stages.temperature(z, p.temperature),
    "top_k": lambda z, p, h: stages.top_k(z, p.top_k),
    "top_p": lambda z, p, h: stages.top_p(z, p.top_p),
    "min_p": lambda z, p, h: stages.min_p(z, p.min_p),
    "typical_p": lambda z, p, h: stages.typical_p(z, p.typical_p),
}


def _is_neutral(name: str, params: RowParams, history: RowHistory) -> bool:
    """True when every row's parameters leave this stage a no-op, so the batch
    can skip it (the sorts in top-k, top-p and typical are the chain's cost)."""
    if name == "penalties":
        return (
            bool((params.repetition_penalty == 1).all())
            and bool((params.frequency_penalty == 0).all())
            and bool((params.presence_penalty == 0).all())
            and not bool(history.banned.any())
        )
    neutral = {
        "temperature": (params.temperature, 1),
        "top_k": (params.top_k, 0),
        "top_p": (params.top_p, 1),
        "min_p": (params.min_p, 0),
        "typical_p": (params.typical_p, 1),
    }
    values, off = neutral[name]
    return bool((values == off).all())


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
    after = {name: torch.empty_like(logits) for name in STAGES} if keep_stages else None
    for order, rows in groups.items():
        index = torch.as_tensor(rows, dtype=torch.long)
        part = _run_group(logits[index], params.select(rows), history.select(rows), order, keep_stages)
        final[index] = part.logits
        if after is not None:
            for name, value in (part.after_stage or {}).items():
                after[name][index] = value
    return ChainOutput(final, after)


def _run_group(logits, params, history, order, keep_stages) -> ChainOutput:
    after: dict[str, torch.Tensor] | None = {} if keep_stages else None
    current = logits
    for name in order:
        if not _is_neutral(name, params, history):
            current = _keep_one_if_empty(current, _greedy_if_infinite(STAGES[name](current, params, history)))
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
