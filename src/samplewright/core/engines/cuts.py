"""Whether a truncation stage's cut fell on a tie, for the fidelity verdict.

Two chains that agree on every distribution may still keep different tokens
where tokens tie at a cut: samplewright keeps lower ids among equal logits,
transformers and vLLM keep every tied token, and a mass cut (top-p, typical)
whose prefix mass lies within rounding of ``p`` can go either way. The verdict
"exact except ties" needs those steps named, and this module names them from a
stage's input and output logits alone, so it works for any engine's stages.
"""

from __future__ import annotations

import torch

#: Two keys closer than this (relative) count as tied.
KEY_TOLERANCE = 1e-12
#: A prefix mass closer than this to the cut's threshold counts as on the edge
#: (samplewright's own mass tolerance is 1e-6; this covers it with room).
MASS_EDGE = 2e-6


def _tied(removed_keys: torch.Tensor, kept_keys: torch.Tensor) -> bool:
    if removed_keys.numel() == 0 or kept_keys.numel() == 0:
        return False
    best_removed, worst_kept = float(removed_keys.max()), float(kept_keys.min())
    return best_removed >= worst_kept - KEY_TOLERANCE * max(1.0, abs(worst_kept))


def _mass_on_edge(probs: torch.Tensor, key: torch.Tensor, kept: torch.Tensor, mass: float) -> bool:
    """The kept prefix (ranked by ``key``) or that prefix without its last token
    has a mass within ``MASS_EDGE`` of the threshold."""
    kept_mass = float(probs[kept].sum())
    last = float(probs[kept][key[kept].argmin()]) if bool(kept.any()) else 0.0
    return abs(kept_mass - mass) < MASS_EDGE or abs(kept_mass - last - mass) < MASS_EDGE


def typical_key(logits: torch.Tensor) -> torch.Tensor:
    """Closeness of each token's surprisal to the entropy (higher = kept first), as
    typical sampling ranks them (Meister et al. 2023, "Locally Typical Sampling")."""
    log_probs = torch.log_softmax(logits, dim=-1)
    probs = log_probs.exp()
    live = probs > 0
    entropy = -torch.where(live, probs * log_probs, torch.zeros_like(probs)).sum()
    return torch.where(live, -(-log_probs - entropy).abs(), torch.full_like(probs, float("-inf")))


def cut_on_tie(kind: str, value: float, before: torch.Tensor, after: torch.Tensor) -> bool:
    """True when the cut a stage made from ``before`` to ``after`` (1-D logits) fell on a tie.

    Args:
        kind: ``top_k``, ``top_p``, ``min_p`` or ``typical_p``; any other stage never cuts on a tie.
        value: the stage's parameter (p for the mass cuts, the fraction for min-p).
        before, after: the stage's input and output logits (``-inf`` = removed).
    """
    live = torch.isfinite(before)
    kept = torch.isfinite(after)
    removed = live & ~kept
    if kind not in ("top_k", "top_p", "min_p", "typical_p") or not bool(removed.any()):
        return False
    probs = torch.softmax(before, dim=-1)
    if kind == "typical_p":
        key = typical_key(before)
        return _tied(key[removed], key[kept]) or _mass_on_edge(probs, key, kept, value)
    if _tied(before[removed], before[kept]):
        return True
    if kind == "top_p":
        return _mass_on_edge(probs, before, kept, value)
    if kind == "min_p":
        ratio = probs[removed].max() / probs.max()
        return abs(float(ratio) - value) < 1e-9
    return False
