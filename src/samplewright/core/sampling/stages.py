"""The sampling stages: each reshapes a batch of next-token logits.

Every stage is a pure function ``(logits, ...) -> new logits`` on a float64
tensor of shape ``(rows, vocab)``, with ``-inf`` marking removed tokens. It
never modifies its input. Parameters are per-row tensors so one batch can
hold rows of different presets. A parameter at its neutral value leaves its
row exactly unchanged.

Truncation stages work on the softmax of their input, i.e. on the
renormalised distribution left by the stage before. Ties are settled towards
the lower token id (a stable sort), which transformers does not promise.

References:
    Temperature: Ackley, Hinton & Sejnowski (1985), "A Learning Algorithm for
        Boltzmann Machines", Cognitive Science 9(1).
    Top-k: Fan, Lewis & Dauphin (2018), "Hierarchical Neural Story
        Generation", ACL 2018.
    Top-p (nucleus): Holtzman, Buys, Du, Forbes & Choi (2020), "The Curious
        Case of Neural Text Degeneration", ICLR 2020, eq. 2.
    Min-p: Nguyen et al. (2024), "Turning Up the Heat: Min-p Sampling for
        Creative and Coherent LLM Outputs", arXiv:2407.01082.
    Typical: Meister, Pimentel, Wiher & Cotterell (2023), "Locally Typical
        Sampling", TACL 11.
    Repetition penalty: Keskar et al. (2019), "CTRL: A Conditional
        Transformer Language Model for Controllable Generation",
        arXiv:1909.05858.
    No-repeat n-gram: Paulus, Xiong & Socher (2017), "A Deep Reinforced Model
        for Abstractive Summarization", arXiv:1705.04304.
    Frequency / presence penalties: no paper; the additive form is a common
        hosted-API convention.
"""

from __future__ import annotations

from collections.abc import Sequence

import torch

NEG_INF = float("-inf")

#: Mass tolerance of top-p and typical sampling: a prefix whose mass reaches
#: ``p - MASS_TOLERANCE`` is enough, so a sum such as 0.5 + 0.3 meets 0.8
#: whatever the rounding.
MASS_TOLERANCE = 1e-6


def _col(values: torch.Tensor) -> torch.Tensor:
    return values.to(torch.float64).unsqueeze(-1)


def temperature(logits: torch.Tensor, t: torch.Tensor) -> torch.Tensor:
    """Divide the logits by ``t`` (per row). ``t = 0`` is greedy: only the
    first arg-max survives (ties to the lowest id, as ``torch.argmax``).
    ``t = 1`` is neutral. Valid range 0 to 5."""
    greedy = t == 0
    out = logits / _col(torch.where(greedy, torch.ones_like(t), t))
    if bool(greedy.any()):
        top = logits.argmax(dim=-1, keepdim=True)
        one_hot = torch.full_like(logits, NEG_INF).scatter(-1, top, 0.0)
        out = torch.where(greedy.unsqueeze(-1), one_hot, out)
    return out


def top_k(logits: torch.Tensor, k: torch.Tensor) -> torch.Tensor:
    """Keep exactly the ``k`` most probable tokens (per row); among tokens tied
    at the k-th place the lower ids are kept. ``k = 0`` is off."""
    k_eff = k.clamp(0, logits.shape[-1])
    k_max = int(k_eff.max())
    if k_max == 0:
        return logits.clone()
    kth = torch.topk(logits, k_max, dim=-1).values.gather(-1, (k_eff.clamp(min=1) - 1).unsqueeze(-1))
    above = logits > kth
    tied = logits == kth
    # Among the ties with the k-th value, keep the lowest ids until k are kept
    # (counting along the row is needed only where more ties than room remain).
    room = k_eff.unsqueeze(-1) - above.sum(-1, keepdim=True)
    if bool((tied.sum(-1, keepdim=True) > room).any()):
        tied = tied & (torch.cumsum(tied, dim=-1) <= room)
    keep = above | tied | (k_eff == 0).unsqueeze(-1)
    return logits.masked_fill(~keep, NEG_INF)


#: How many leading tokens are ranked, widest last: a row not settled among the
#: first width's candidates is ranked again (among coarse levels, then the next
#: widths), and a row settled in none of them is ranked in full. Small widths
#: are cheap (``torch.topk``'s cost grows with the width) and settle peaked rows.
RANKING_WIDTHS = (64, 1024, 8192)

#: Coarse levels: a token's level is how far its log-domain key lies below the
#: row's best, in steps of ``1 / LEVEL_STEPS`` nats, capped at ``LEVELS - 1``.
#: The candidates are the levels that hold the mass; at most ``LEVEL_CANDIDATES`` per row.
LEVELS = 256
LEVEL_STEPS = 4.0
LEVEL_CANDIDATES = 16384


def _prefix_keep(probs_sorted: torch.Tensor, mass: torch.Tensor) -> torch.Tensor:
    before = torch.cumsum(probs_sorted, dim=-1) - probs_sorted
    keep = before < _col(mass) - MASS_TOLERANCE
    keep[..., 0] = True
    return keep


def _prefix_among_top(probs, key, mass, m: int) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
    """The prefix of :func:`_prefix_until_mass` ranked among the top ``m`` keys
    only: the ranked ids, how many of them are kept, and per row whether it is
    settled there (its last kept key is strictly above every key left out, so
    a full sort would keep the same)."""
    values, ids = torch.topk(key, m, dim=-1, sorted=False)
    # Candidates in id order first, so the stable sort by value puts ties lower id first.
    by_id = torch.sort(ids, dim=-1).indices
    values, ids = values.gather(-1, by_id), ids.gather(-1, by_id)
    by_value = torch.sort(values, dim=-1, descending=True, stable=True).indices
    values, ids = values.gather(-1, by_value), ids.gather(-1, by_value)
    count = _prefix_keep(probs.gather(-1, ids), mass).sum(-1)
    settled = (values.gather(-1, (count - 1).unsqueeze(-1)) > values[..., -1:]).squeeze(-1)
    return ids, count, settled


def _level_candidates(probs, coarse, mass) -> torch.Tensor:
    """Per row, the tokens of the coarse levels (of ``coarse``, a log-domain
    stand-in for the key) whose probability, best level first, reaches ``mass``."""
    # The difference first: scaling the best logit alone can overflow near the float64 limit
    # (inf - inf = NaN, and NaN has no integer level).
    distance = torch.sub(coarse.amax(dim=-1, keepdim=True), coarse).mul_(LEVEL_STEPS)
    distance = distance.clamp_(max=LEVELS - 1)
    levels = distance.to(torch.long)
    held = torch.zeros(probs.shape[0], LEVELS, dtype=probs.dtype).scatter_add_(-1, levels, probs)
    last_level = (torch.cumsum(held, dim=-1) < _col(mass) - MASS_TOLERANCE).sum(-1, keepdim=True)
    return levels <= last_level


def _prefix_among(probs, key, mass, candidates) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor] | None:
    """The prefix ranked among the ``candidates`` (bool, rows × vocab) only: the
    ranked ids (padded with id ``vocab``), how many are kept, and per row
    whether it is settled there (its last kept key strictly above every key
    outside them); None when a row has more than ``LEVEL_CANDIDATES``."""
    rows_n, vocab = probs.shape
    counts = candidates.sum(-1)
    width = int(counts.max())
    if width > LEVEL_CANDIDATES:
        return None
    rows, cols = candidates.nonzero(as_tuple=True)  # ascending ids within a row
    slots = torch.arange(rows.numel()) - (torch.cumsum(counts, 0) - counts)[rows]
    # Padding: key -inf, probability 0, id ``vocab`` (a spare column dropped at the end).
    ids = torch.full((rows_n, width), vocab, dtype=torch.long)
    values = torch.full((rows_n, width), NEG_INF, dtype=key.dtype)
    chosen = torch.zeros((rows_n, width), dtype=probs.dtype)
    ids[rows, slots], values[rows, slots], chosen[rows, slots] = cols, key[rows, cols], probs[rows, cols]
    by_value = torch.sort(values, dim=-1, descending=True, stable=True).indices
    values, ids = values.gather(-1, by_value), ids.gather(-1, by_value)
    count = _prefix_keep(chosen.gather(-1, by_value), mass).sum(-1)
    outside = torch.where(candidates, NEG_INF, key).amax(dim=-1, keepdim=True)
    settled = (values.gather(-1, (count - 1).unsqueeze(-1)) > outside).squeeze(-1)
    return ids, count, settled


class _Ranked:
    """Rows' ranked ids and how many of each are kept, collected over the tries."""

    def __init__(self, rows_n: int) -> None:
        self.parts: list[tuple[torch.Tensor | None, torch.Tensor, torch.Tensor]] = []
        self.rows_n = rows_n

    def add(self, rows: torch.Tensor | None, ids: torch.Tensor, count: torch.Tensor) -> None:
        """Record ``ids`` (ranked, rows of ``rows``; None: every row) of which the first ``count`` are kept."""
        if ids.shape[0]:
            self.parts.append((rows, ids, count))

    def table(self, vocab: int) -> torch.Tensor:
        """The kept ids of every row in ascending order, padded at the end with id ``vocab``."""
        width = max(int(count.max()) for _, _, count in self.parts)
        table = torch.full((self.rows_n, width), vocab, dtype=torch.long)
        for rows, ids, count in self.parts:
            part = ids[:, :width]
            kept = torch.arange(part.shape[-1]).unsqueeze(0) < count.unsqueeze(-1)
            part = torch.where(kept, part, vocab)
            if rows is None:
                table[:, : part.shape[-1]] = part
            else:
                table[rows, : part.shape[-1]] = part
        return torch.sort(table, dim=-1).values


def _settle(ranked: _Ranked, tried, probs, key, mass, m: int, open_rows) -> torch.Tensor:
    """Rank the rows ``tried`` among their top ``m`` keys, record the settled
    ones' prefixes in ``ranked``; returns the rows of ``open_rows`` still open."""
    if not tried.numel():
        return open_rows
    sub_probs, sub_key, sub_mass = _rows_of(tried, probs, key, mass)
    ids, count, settled = _prefix_among_top(sub_probs, sub_key, sub_mass, m)
    done = tried[settled]
    ranked.add(done, ids[settled], count[settled])
    return open_rows[~torch.isin(open_rows, done)]


def _rows_of(rows: torch.Tensor, *tensors: torch.Tensor) -> list[torch.Tensor]:
    """The ``rows`` of each tensor; no copy when ``rows`` is every row, one
    copy for a tensor passed twice (top-p ranks its probabilities by themselves)."""
    if rows.numel() == tensors[0].shape[0]:
        return list(tensors)
    picked: dict[int, torch.Tensor] = {}
    return [picked.setdefault(id(t), t[rows]) for t in tensors]


def _prefix_table(probs: torch.Tensor, key: torch.Tensor, mass: torch.Tensor, coarse=None) -> torch.Tensor:
    """The tokens :func:`_prefix_until_mass` keeps, as a table of ids (rows ×
    the widest row's count) in ascending order, padded at the end with id ``vocab``."""
    vocab = probs.shape[-1]
    ranked = _Ranked(probs.shape[0])
    open_rows = torch.arange(probs.shape[0])
    # m tokens hold at most m times the largest probability: a row that needs more skips that width.
    needs = (mass - MASS_TOLERANCE) / probs.amax(dim=-1)
    if RANKING_WIDTHS[0] < vocab:
        if bool((needs <= RANKING_WIDTHS[0]).all()):
            ids, count, settled = _prefix_among_top(probs, key, mass, RANKING_WIDTHS[0])
            if bool(settled.all()):
                ranked.add(None, ids, count)
                return ranked.table(vocab)
            ranked.add(open_rows[settled], ids[settled], count[settled])
            open_rows = (~settled).nonzero().flatten()
        else:
            open_rows = _settle(
                ranked, open_rows[needs <= RANKING_WIDTHS[0]], probs, key, mass, RANKING_WIDTHS[0], open_rows
            )
    if coarse is not None and open_rows.numel():
        sub_probs, sub_key, sub_mass, sub_coarse = _rows_of(open_rows, probs, key, mass, coarse)
        part = _prefix_among(sub_probs, sub_key, sub_mass, _level_candidates(sub_probs, sub_coarse, sub_mass))
        if part is not None:
            ids, count, settled = part
            ranked.add(open_rows[settled], ids[settled], count[settled])
            open_rows = open_rows[~settled]
    for m in RANKING_WIDTHS[1:]:
        if m >= vocab or not open_rows.numel():
            break
        open_rows = _settle(ranked, open_rows[needs[open_rows] <= m], probs, key, mass, m, open_rows)
    if open_rows.numel():
        order = torch.sort(key[open_rows], dim=-1, descending=True, stable=True).indices
        count = _prefix_keep(probs[open_rows].gather(-1, order), mass[open_rows]).sum(-1)
        ranked.add(open_rows, order, count)
    return ranked.table(vocab)


def kept_from_table(table: torch.Tensor, vocab: int) -> torch.Tensor:
    """A table of ids padded with id ``vocab`` as a bool mask (rows × vocab)."""
    keep = torch.zeros(table.shape[0], vocab + 1, dtype=torch.bool)
    return keep.scatter_(-1, table, True)[:, :vocab]


def _prefix_until_mass(probs: torch.Tensor, key: torch.Tensor, mass: torch.Tensor, coarse=None) -> torch.Tensor:
    """Rank tokens by ``key`` (descending, ties lower id first) and keep the
    shortest prefix whose probability reaches ``mass - MASS_TOLERANCE``;
    always at least the first token.

    A full sort of the vocabulary costs more than the model's forward pass, so
    only candidates are ranked: the top ``RANKING_WIDTHS[0]`` keys, then (for
    rows not settled there) the coarse levels of ``coarse`` that hold the mass
    (a log-domain tensor ordered about like ``key``), then the wider widths; a
    row settled in none of them is ranked in full. Each try checks that the
    prefix is settled among its candidates, so the result equals a full stable sort.
    """
    return kept_from_table(_prefix_table(probs, key, mass, coarse), probs.shape[-1])


def top_p(logits: torch.Tensor, p: torch.Tensor) -> torch.Tensor:
    """Nucleus sampling: keep the shortest run of most probable tokens (ties:
    lower id first) whose mass reaches ``p`` (within ``MASS_TOLERANCE``).
    ``p = 1`` is off and skips the row."""
    return logits.masked_fill(~top_p_kept(logits, p), NEG_INF)


def top_p_kept(logits: torch.Tensor, p: torch.Tensor) -> torch.Tensor:
    """The tokens :func:`top_p` keeps (bool, rows × vocab)."""
    probs = torch.softmax(logits, dim=-1)
    # The logits order the tokens as their probabilities do (up to rounding, which the ranking checks).
    keep = _prefix_until_mass(probs, probs, p, coarse=logits)
    if bool((p >= 1).any()):
        keep |= (p >= 1).unsqueeze(-1)
    return keep


def top_p_table(logits: torch.Tensor, p: torch.Tensor) -> torch.Tensor | None:
    """The tokens :func:`top_p` keeps as a table of ids per row, ascending,
    padded at the end with id ``vocab``; None when a row has ``p >= 1`` (keeps all)."""
    if bool((p >= 1).any()):
        return None
    probs = torch.softmax(logits, dim=-1)
    return _prefix_table(probs, probs, p, coarse=logits)


def min_p(logits: torch.Tensor, fraction: torch.Tensor) -> torch.Tensor:
    """Keep tokens whose probability is at least ``fraction`` times the top
    token's. ``fraction = 0`` is off; the top token always stays."""
    return logits.masked_fill(~min_p_kept(logits, fraction), NEG_INF)


def min_p_kept(logits: torch.Tensor, fraction: torch.Tensor) -> torch.Tensor:
    """The tokens :func:`min_p` keeps (bool, rows × vocab)."""
    probs = torch.softmax(logits, dim=-1)
    threshold = _col(fraction) * probs.max(dim=-1, keepdim=True).values
    return ~(probs < threshold)


def typical_p(logits: torch.Tensor, mass: torch.Tensor) -> torch.Tensor:
    """Locally typical sampling: rank tokens by how far their surprisal lies
    from the distribution's entropy and keep the closest ones until they hold
    ``mass`` (ties: lower id first). ``mass = 1`` is off and skips the row."""
    return logits.masked_fill(~typical_p_kept(logits, mass), NEG_INF)


def typical_p_kept(logits: torch.Tensor, mass: torch.Tensor) -> torch.Tensor:
    """The tokens :func:`typical_p` keeps (bool, rows × vocab)."""
    log_probs = torch.log_softmax(logits, dim=-1)
    probs = log_probs.exp()
    live = probs > 0
    entropy = -torch.where(live, probs * log_probs, torch.zeros_like(probs)).sum(-1, keepdim=True)
    # Closeness = minus the distance of the surprisal from the entropy; removed tokens never rank.
    closeness = torch.where(live, -(-log_probs - entropy).abs(), torch.full_like(probs, NEG_INF))
    keep = _prefix_until_mass(probs, closeness, mass, coarse=closeness)
    if bool((mass >= 1).any()):
        keep |= (mass >= 1).unsqueeze(-1)
    return keep


def repetition_penalty(logits: torch.Tensor, penalty: torch.Tensor, seen: torch.Tensor) -> torch.Tensor:
    """Penalise every distinct token id marked in ``seen`` (bool, rows × vocab)
    once: a positive logit is divided by ``penalty``, a negative one
    multiplied. ``penalty = 1`` is off."""
    rows, ids = seen.nonzero(as_tuple=True)  # only the marked tokens change: a few of the vocabulary
    values, p = logits[rows, ids], penalty.to(torch.float64)[rows]
    out = logits.clone()
    out[rows, ids] = torch.where(values > 0, values / p, values * p)
    return out


def frequency_presence(
    logits: torch.Tensor, frequency: torch.Tensor, presence: torch.Tensor, counts: torch.Tensor
) -> torch.Tensor:
    """Subtract ``count × frequency + [count > 0] × presence`` from each logit,
    where ``counts`` (rows × vocab) counts the generated tokens only."""
    counts = counts.to(torch.float64)
    return logits - counts * _col(frequency) - (counts > 0).to(torch.float64) * _col(presence)


def banned_ngram_tokens(history: Sequence[int], n: int) -> set[int]:
    """Token ids that would complete an n-gram already present in ``history``."""
    if n <= 0 or len(history) < n:
        return set()
    history = list(history)
    if n == 1:
        return set(history)
    tail = history[len(history) - n + 1 :]
    return {history[s + n - 1] for s in range(len(history) - n + 1) if history[s : s + n - 1] == tail}


def no_repeat_ngram(logits: torch.Tensor, banned: torch.Tensor) -> torch.Tensor:
    """Remove the tokens marked in ``banned`` (bool, rows × vocab), as
    computed by :func:`banned_ngram_tokens`."""
    return logits.masked_fill(banned, NEG_INF)
