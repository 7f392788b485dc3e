"""Summaries of next-token distributions for the step view.

The helpers use numpy only; :func:`step_view` runs the sampling chain (torch,
imported when it is called).

Entropy is Shannon's, in bits (log base 2), over the tokens with nonzero
probability. A cut token is attributed to the first stage, in the preset's
order, after which its probability is zero; stages only ever remove tokens
(``-inf`` stays ``-inf``, and the top token is never removed, so a tiny
probability cannot come back), so that stage is the one that cut it.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np

from ..presets import Preset
from ..results import PresetStep, StepView, TokenRow
from .stage_parts import stages_kept

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

    Returns:
        The preset's part of the step view.
    """
    kept = probs > 0
    cuts = cut_by(after_stage, order, ids)
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
        stages=stages_kept(order, raw_probs, after_stage),
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
    ids = top_ids(raw, top)
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
    )
