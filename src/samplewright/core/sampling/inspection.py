"""Summaries of next-token distributions for the step view.

The helpers use numpy only; :func:`step_view` runs the sampling chain (torch,
imported when it is called).

Entropy is Shannon's, in bits (log base 2), over the tokens with nonzero
probability. A cut token is attributed to the first stage, in the preset's
order, after which its probability is zero; stages only ever remove tokens
(``-inf`` stays ``-inf``, and the top token is never removed, so a tiny
probability cannot come back), so that stage is the one that cut it.

Ranks are raw ranks: 1 is the token the unshaped model finds most probable
(ties go to the lower id). A preset's kept set ends at the raw rank of its last
kept token; its curve (``PresetStep.ranked``) and running mass
(``PresetStep.cumulative``) follow the raw ranking, so every preset is read on
the same axis as the model itself.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np

from ..presets import Preset
from ..results import PresetStep, StageEffect, StepView, TokenRow

TokenTexts = Callable[[int], str] | Sequence[str]


def entropy_bits(probs) -> np.ndarray | float:
    """Shannon entropy in bits of each distribution along the last axis.

    Args:
        probs: probabilities (any shape; the last axis is the vocabulary).

    Returns:
        A float for 1-D input, else an array of the leading shape.
    """
    probs = np.asarray(probs, dtype=np.float64)
    logs = np.log2(probs, out=np.zeros_like(probs), where=probs > 0)
    out = 0.0 - (probs * logs).sum(axis=-1)  # 0.0 - x, unlike -x, never gives -0.0
    return float(out) if out.ndim == 0 else out


def softmax(logits) -> np.ndarray:
    """Probabilities from logits along the last axis (float64; ``-inf`` gives 0)."""
    logits = np.asarray(logits, dtype=np.float64)
    shifted = np.exp(logits - logits.max(axis=-1, keepdims=True))
    return shifted / shifted.sum(axis=-1, keepdims=True)


def top_ids(probs, n: int) -> list[int]:
    """The ``n`` most probable token ids, most probable first (ties: lower id first)."""
    probs = np.asarray(probs, dtype=np.float64)
    return [int(i) for i in np.argsort(-probs, kind="stable")[: max(0, n)]]


def ranking(probs) -> np.ndarray:
    """Every token id by raw rank: most probable first, ties to the lower id."""
    return np.argsort(-np.asarray(probs, dtype=np.float64), kind="stable")


def cut_codes(after_stage: Mapping[str, np.ndarray], order: Sequence[str]) -> np.ndarray:
    """For every token id, the index in ``order`` of the first stage after which it is removed (-1: kept)."""
    return _cuts_and_effects(after_stage, order, None)[0]


def stage_effects(
    after_stage: Mapping[str, np.ndarray], order: Sequence[str], raw_probs: np.ndarray
) -> tuple[StageEffect, ...]:
    """How many tokens, and how much raw mass, are left after each stage in ``order``."""
    return _cuts_and_effects(after_stage, order, raw_probs)[1]


def _cuts_and_effects(after_stage, order, raw_probs) -> tuple[np.ndarray, tuple[StageEffect, ...]]:
    """Both of the above from one softmax per stage."""
    codes: np.ndarray | None = None
    effects = []
    for index, name in enumerate(order):
        kept = softmax(after_stage[name]) > 0
        if codes is None:
            codes = np.full(kept.shape, -1, dtype=np.int8)
        codes[~kept & (codes < 0)] = index
        if raw_probs is not None:
            effects.append(StageEffect(name, int(kept.sum()), float(raw_probs[kept].sum())))
    return (codes if codes is not None else np.zeros(0, dtype=np.int8)), tuple(effects)


def table_ids(view: StepView, extra: Sequence[int] = (), head: int = 12) -> list[int]:
    """The token ids a table of the step lists, by raw rank: the ``head`` most probable,
    the drawn token and ``extra`` (e.g. a token picked in the plot), wherever they rank."""
    wanted = {int(i) for i in view.ranked_ids[:head]}
    wanted.update(int(i) for i in extra)
    if view.drawn_id is not None:
        wanted.add(int(view.drawn_id))
    return sorted(wanted, key=view.rank_of)


def cut_by(after_stage: Mapping[str, np.ndarray], order: Sequence[str], ids: Sequence[int]) -> list[str | None]:
    """For each id, the first stage in ``order`` after which it is removed.

    Args:
        after_stage: logits after each stage, by stage name (1-D).
        order: the preset's stage order.
        ids: token ids to attribute.

    Returns:
        One stage name per id, or None for an id that survives every stage.
    """
    id_array = np.asarray(ids, dtype=np.int64)
    found: list[str | None] = [None] * len(id_array)
    for name in order:
        removed = softmax(after_stage[name])[id_array] == 0
        for i in np.flatnonzero(removed):
            if found[i] is None:
                found[i] = name
    return found


def preset_step(
    name: str,
    order: Sequence[str],
    raw_probs: np.ndarray,
    probs: np.ndarray,
    after_stage: Mapping[str, np.ndarray],
    ids: Sequence[int],
    texts: Sequence[str],
    by_rank: np.ndarray | None = None,
) -> PresetStep:
    """Summarise how one preset reshaped the raw distribution at one step.

    Args:
        name: the preset's name.
        order: the preset's stage order.
        raw_probs: the unshaped distribution (temperature 1).
        probs: the preset's shaped distribution.
        after_stage: the preset's logits after each stage.
        ids: the step's top token ids (by raw probability).
        texts: their text pieces.
        by_rank: every id by raw rank (:func:`ranking` of ``raw_probs``; computed when not given).

    Returns:
        The preset's part of the step view.
    """
    kept = probs > 0
    cuts = cut_by(after_stage, order, ids)
    by_rank = ranking(raw_probs) if by_rank is None else by_rank
    ranked = probs[by_rank]
    codes, effects = _cuts_and_effects(after_stage, order, raw_probs)
    if not order:
        codes = np.full(probs.shape, -1, np.int8)
    rows = [
        TokenRow(id=int(i), text=t, raw_p=float(raw_probs[i]), p=float(probs[i]), cut_by=c)
        for i, t, c in zip(ids, texts, cuts, strict=False)
    ]
    return PresetStep(
        name=name,
        probs=probs,
        kept=int(kept.sum()),
        kept_raw_mass=float(raw_probs[kept].sum()),
        entropy_bits=float(entropy_bits(probs)),
        raw_entropy_bits=float(entropy_bits(raw_probs)),
        top=rows,
        order=tuple(order),
        ranked=ranked,
        cumulative=np.cumsum(ranked),
        cut_ranked=codes[by_rank],
        kept_end=int(np.flatnonzero(ranked > 0)[-1]) + 1,
        stages=effects,
    )


def step_view(
    logits,
    presets: Sequence[Preset],
    texts: TokenTexts,
    history: Sequence[int] = (),
    generated: Sequence[int] = (),
    top: int = 20,
    drawn_id: int | None = None,
    context_tokens: int = 0,
) -> StepView:
    """The next-token distribution at one step, raw and as each preset shapes it.

    Args:
        logits: 1-D raw next-token logits (numpy or torch).
        presets: the presets to compare.
        texts: the text of a token id: a function of the id, or a sequence indexed by it.
        history: context token ids (passage + generated), seen by the repetition
            penalty and the no-repeat n-gram rule.
        generated: generated token ids only, seen by frequency/presence.
        top: how many tokens (by raw probability) to list.
        drawn_id: the token the inspected sample drew here, passed through.
        context_tokens: how many tokens come before this step, passed through.

    Returns:
        The step view; each preset's ``probs`` is exactly :func:`chain.shape`'s.

    Raises:
        ValueError: for logits that are empty, NaN or +inf, or history ids outside the vocabulary.
    """
    import torch

    from .chain import RowHistory, RowParams, as_logits_row, run_chain

    row = as_logits_row(logits)
    raw = torch.softmax(row[0], dim=-1).numpy()
    by_rank = ranking(raw)
    ranks = np.empty_like(by_rank)
    ranks[by_rank] = np.arange(1, by_rank.size + 1)
    ids = [int(i) for i in by_rank[: max(0, top)]]
    names = [texts(i) if callable(texts) else texts[i] for i in ids]
    steps = []
    if presets:
        rows = len(presets)
        hist = RowHistory.build(
            [list(history)] * rows, [list(generated)] * rows, [p.no_repeat_ngram_size for p in presets], row.shape[-1]
        )
        out = run_chain(row.expand(rows, -1), RowParams.from_presets(presets), hist, keep_stages=True)
        probs = torch.softmax(out.logits, dim=-1).numpy()
        steps = [
            preset_step(
                preset.name,
                preset.order,
                raw,
                probs[r],
                {name: stage[r].numpy() for name, stage in (out.after_stage or {}).items()},
                ids,
                names,
                by_rank,
            )
            for r, preset in enumerate(presets)
        ]
    return StepView(
        raw_probs=raw,
        raw_entropy_bits=float(entropy_bits(raw)),
        top_ids=ids,
        top_texts=names,
        presets=steps,
        context_tokens=context_tokens,
        drawn_id=drawn_id,
        ranked_ids=by_rank,
        raw_ranked=raw[by_rank],
        raw_cumulative=np.cumsum(raw[by_rank]),
        ranks=ranks,
    )
