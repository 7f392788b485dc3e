"""One audition as one batch: every preset's samples generated together.

Each row is one (preset, sample index). All rows start from the same copy of
the passage's key/value cache and advance one token per step in lockstep, so
no padding is needed. A row applies its own preset through per-row parameter
tensors (:class:`~samplewright.core.sampling.chain.RowParams`) and draws with the
coupled Gumbel-max sampler. A row that ends (length, EOS, stop string) leaves
the batch at once: its cache rows, parameters and history are dropped, so it
costs nothing afterwards.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable

import numpy as np
import torch

from ..errors import RequestError
from ..presets import Preset
from ..results import AuditionRequest, AuditionResult, Sample, TokenEvent, TokenStep
from ..sampling import sampler
from ..sampling.chain import RowHistory, RowParams, run_chain
from ..sampling.inspection import entropy_bits


@dataclasses.dataclass
class _Row:
    preset: Preset
    limit: int  # tokens this row may write
    sample: Sample

    @property
    def ids(self) -> list[int]:
        return self.sample.token_ids


class _Tally:
    """Counts tokens for the progress callback: ``total`` is the tokens written
    plus the budget still open, so it shrinks when a row ends early and
    ``done == total`` at the end."""

    def __init__(self, on_token: Callable[[TokenEvent], None] | None, budget: int):
        self.on_token, self.done, self.left = on_token, 0, budget

    def token(self, row: _Row, step: int, token: TokenStep, reason: str | None) -> None:
        self.done += 1
        self.left -= 1
        self._emit(row, step, token, reason)

    def end(self, row: _Row, step: int, reason: str) -> None:
        self._emit(row, step, None, reason)

    def _emit(self, row: _Row, step: int, token: TokenStep | None, reason: str | None) -> None:
        if reason is not None:
            row.sample.stop_reason = reason
            self.left -= row.limit - len(row.sample.tokens)
        if self.on_token is not None:
            self.on_token(
                TokenEvent(
                    row.sample.preset_index,
                    row.sample.sample_index,
                    step,
                    token,
                    reason,
                    self.done,
                    self.done + self.left,
                )
            )


def check_request(request: AuditionRequest) -> None:
    """Raise RequestError (a ValueError) for a request that cannot run."""
    if not request.presets:
        raise RequestError("an audition needs at least one preset")
    if int(request.samples) < 1:
        raise RequestError(f"samples must be at least 1, got {request.samples}")
    if int(request.max_new_tokens) < 1:
        raise RequestError(f"the token budget must be at least 1, got {request.max_new_tokens}")
    if int(request.seed) < 0:
        raise RequestError(f"the seed must be a whole number >= 0, got {request.seed}")


def run_audition(engine, request: AuditionRequest, on_token=None, should_stop=None) -> AuditionResult:
    """Generate an audition with ``engine`` (see :meth:`Engine.audition`)."""
    check_request(request)
    start = time.perf_counter()
    passage = engine.encode_passage(request.passage)
    space = engine.loaded.context_length - len(passage.ids)
    rows = [
        _Row(preset, min(request.max_new_tokens, preset.max_new_tokens, space), Sample(p, s))
        for p, preset in enumerate(request.presets)
        for s in range(request.samples)
    ]
    tally = _Tally(on_token, sum(row.limit for row in rows))
    cancelled = _Batch(engine, passage.ids, rows, int(request.seed)).run(tally, should_stop)
    for row in rows:
        row.sample.text = _cut_at_stop(engine.decode(row.ids), row.preset.stop)[0]
    samples = [
        [row.sample for row in rows[p * request.samples : (p + 1) * request.samples]]
        for p in range(len(request.presets))
    ]
    return AuditionResult(
        request=request,
        passage_ids=list(passage.ids),
        passage_dropped=passage.dropped,
        samples=samples,
        cancelled=cancelled,
        seconds=time.perf_counter() - start,
    )


class NgramBans:
    """The no-repeat n-gram rule for one growing token list, kept up to date one
    token at a time: each (n-1)-gram maps to the tokens that have followed it, so a
    step adds one n-gram instead of rescanning the whole history.

    ``banned()`` always equals ``stages.banned_ngram_tokens(all tokens so far, n)``.
    """

    def __init__(self, ids, n: int):
        self.n, self.length = n, 0
        self.tail: list[int] = []
        self.follow: dict[tuple[int, ...], set[int]] = {}
        for token in ids:
            self.push(int(token))

    def push(self, token: int) -> None:
        """Add the next token (and the n-gram it completes)."""
        self.length += 1
        if self.n <= 0:
            return
        if self.length >= self.n:
            self.follow.setdefault(tuple(self.tail), set()).add(token)
        self.tail = (self.tail + [token])[-(self.n - 1) :] if self.n > 1 else []

    def banned(self) -> set[int]:
        """The tokens that would repeat an n-gram already in the list."""
        if self.n <= 0 or self.length < self.n:
            return set()
        return set(self.follow.get(tuple(self.tail), ()))


def _stop_window(stops) -> int:
    """How many final tokens to decode to see a stop string the newest token completes.

    A token holds at least one byte, so a stop string spans at most its UTF-8
    length in tokens; 4 more cover a character cut at the window's start (UTF-8
    characters are at most 4 bytes) and a tokenizer dropping a leading space.
    """
    return max(len(stop.encode("utf-8")) for stop in stops) + 4


def _cut_at_stop(text: str, stops) -> tuple[str, bool]:
    """``text`` cut before the earliest stop string, and whether one was found."""
    found = [text.find(s) for s in stops if s in text]
    return (text[: min(found)], True) if found else (text, False)


@dataclasses.dataclass
class _Drawn:
    """The tokens of one step and what the sample records about them."""

    ids: torch.Tensor
    raw_p: list[float]
    p: list[float]
    kept: list[int]
    raw_entropy: list[float]
    entropy: list[float]


class _Batch:
    """The rows still generating, with their cache, parameters and history."""

    def __init__(self, engine, passage_ids: list[int], rows: list[_Row], seed: int):
        self.engine, self.rows, self.seed = engine, list(rows), seed
        self.eos = engine.loaded.eos_ids
        state = engine.passage_state(passage_ids)
        self.vocab = state.logits.shape[-1]
        self.logits = state.logits.unsqueeze(0).expand(len(rows), -1)
        self.cache = engine.copy_cache(state, len(rows))
        presets = [row.preset for row in rows]
        self.params = RowParams.from_presets(presets)
        self.history = RowHistory.build(
            [passage_ids] * len(rows), [[]] * len(rows), [p.no_repeat_ngram_size for p in presets], self.vocab
        )
        passage_bans = {n: NgramBans(passage_ids, n) for n in {p.no_repeat_ngram_size for p in presets} if n}
        self.ngrams = [_copy_bans(passage_bans.get(p.no_repeat_ngram_size)) for p in presets]

    def run(self, tally: _Tally, should_stop) -> bool:
        """Generate until every row has ended; True if cancelled."""
        step = 0
        while self.rows:
            if should_stop is not None and should_stop():
                for row in self.rows:
                    tally.end(row, step, "cancelled")
                return True
            drawn = self._draw(step)
            finished = [i for i, row in enumerate(self.rows) if self._record(row, i, drawn, step, tally)]
            self._advance(drawn.ids, finished)
            step += 1
        return False

    def _shaped(self) -> torch.Tensor:
        """Every row's final logits. The chain runs once per preset: it skips a
        stage only when that stage is neutral for all the rows it is given."""
        groups: dict[int, list[int]] = {}
        for i, row in enumerate(self.rows):
            groups.setdefault(row.sample.preset_index, []).append(i)
        if len(groups) == 1:
            return run_chain(self.logits, self.params, self.history).logits
        final = torch.empty(self.logits.shape, dtype=torch.float64)
        for rows in groups.values():
            index = torch.tensor(rows, dtype=torch.long)
            final[index] = run_chain(self.logits[index], self.params.select(rows), self.history.select(rows)).logits
        return final

    def _draw(self, step: int) -> _Drawn:
        final = self._shaped()
        log_probs = torch.log_softmax(final, dim=-1)
        raw_log_probs = torch.log_softmax(self.logits.to(torch.float64), dim=-1)
        # One noise vector per sample index: every preset's sample i shares it.
        noises = {
            i: sampler.noise(self.seed, i, step, self.vocab)
            for i in sorted({row.sample.sample_index for row in self.rows})
        }
        gumbels = torch.stack([noises[row.sample.sample_index] for row in self.rows])
        ids = sampler.draw(log_probs, gumbels)
        probs, raw_probs = log_probs.exp(), raw_log_probs.exp()
        pick = ids.unsqueeze(-1)
        return _Drawn(
            ids=ids,
            raw_p=raw_probs.gather(-1, pick).squeeze(-1).tolist(),
            p=probs.gather(-1, pick).squeeze(-1).tolist(),
            kept=(probs > 0).sum(-1).tolist(),
            raw_entropy=np.atleast_1d(entropy_bits(raw_probs.numpy())).tolist(),
            entropy=np.atleast_1d(entropy_bits(probs.numpy())).tolist(),
        )

    def _record(self, row: _Row, i: int, drawn: _Drawn, step: int, tally: _Tally) -> bool:
        """Add row ``i``'s token to its sample; True when the row has ended."""
        token_id = int(drawn.ids[i])
        if token_id in self.eos:
            tally.end(row, step, "eos")
            return True
        token = TokenStep(
            token_id,
            self.engine.token_text(token_id),
            drawn.raw_p[i],
            drawn.p[i],
            drawn.kept[i],
            drawn.raw_entropy[i],
            drawn.entropy[i],
        )
        row.sample.tokens.append(token)
        reason = None
        stops = row.preset.stop
        if stops and _cut_at_stop(self.engine.decode(row.ids[-_stop_window(stops) :]), stops)[1]:
            reason = "stop"
        elif len(row.sample.tokens) >= row.limit:
            reason = "length"
        tally.token(row, step, token, reason)
        return reason is not None

    def _advance(self, ids: torch.Tensor, finished: list[int]) -> None:
        """Drop the finished rows, update the histories and run the model one step."""
        if finished:
            keep = [i for i in range(len(self.rows)) if i not in set(finished)]
            if not keep:
                self.rows = []
                return
            index = torch.tensor(keep, dtype=torch.long)
            self.cache.batch_select_indices(index)
            self.params, self.history = self.params.select(keep), self.history.select(keep)
            self.rows, ids = [self.rows[i] for i in keep], ids[index]
            self.ngrams = [self.ngrams[i] for i in keep]
        self._extend_history(ids)
        self.logits, self.cache = self.engine.forward(ids.unsqueeze(-1), self.cache)

    def _extend_history(self, ids: torch.Tensor) -> None:
        rows = torch.arange(len(self.rows))
        self.history.seen[rows, ids] = True
        self.history.counts[rows, ids] += 1
        for r, bans in enumerate(self.ngrams):
            if bans is not None:
                bans.push(int(ids[r]))
                banned = bans.banned()
                self.history.banned[r] = False
                if banned:
                    self.history.banned[r, sorted(banned)] = True


def _copy_bans(bans: NgramBans | None) -> NgramBans | None:
    """A row's own copy of the passage's n-gram index (None when the rule is off)."""
    if bans is None:
        return None
    copy = NgramBans((), bans.n)
    copy.length, copy.tail = bans.length, list(bans.tail)
    copy.follow = {key: set(value) for key, value in bans.follow.items()}
    return copy
