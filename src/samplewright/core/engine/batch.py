"""One audition as one batch: every preset's samples generated together.

Each row is one (preset, sample index). All rows continue the same passage
and advance one token per step in lockstep, so no padding is needed. A row
applies its own preset through per-row parameter tensors
(:class:`~samplewright.core.sampling.chain.RowParams`) and draws with the
coupled Gumbel-max sampler. A row that ends (length, EOS, stop string) leaves
the batch at once: its cache rows, parameters and history are dropped, so it
costs nothing afterwards.

The batch sees the model only through
:class:`~samplewright.core.engine.backend.ModelBackend` (start the rows'
cache from the passage's, run all rows one step, decode tokens).
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable

import torch

from ..errors import RequestError
from ..presets import Preset
from ..results import AuditionRequest, AuditionResult, Sample, TokenEvent, TokenStep
from ..sampling import compact, sampler
from ..sampling.chain import RowHistory, RowParams
from .backend import ModelBackend, PassageState, PassageTokens
from .drawing import Drawn, draw_step

#: Rows × tokens up to which the rows' generated part is allocated in full at
#: the start; larger runs start at ``GROWING_CAPACITY`` tokens and double.
FULL_CAPACITY_TOKENS = 8192
GROWING_CAPACITY = 128


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
    ``done == total`` at the end. The stop reason itself is set on the sample
    where the token is recorded (:meth:`_Batch._record`)."""

    def __init__(self, on_token: Callable[[TokenEvent], None] | None, budget: int):
        self.on_token, self.done, self.left = on_token, 0, budget

    def emit(self, row: _Row, step: int, token: TokenStep | None) -> None:
        """Count ``token`` (None: the row ended without one) and report it."""
        if token is not None:
            self.done += 1
            self.left -= 1
        reason = row.sample.stop_reason
        if reason is not None:
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


def run_audition(
    model: ModelBackend,
    passage: PassageTokens,
    state: PassageState,
    request: AuditionRequest,
    on_token: Callable[[TokenEvent], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    started: float | None = None,
) -> AuditionResult:
    """Generate an audition of ``passage`` (whose forward pass is ``state``) with ``model``.

    See :meth:`samplewright.core.engine.engine.Engine.audition`; ``started``
    is the ``time.perf_counter()`` the reported seconds count from.
    """
    check_request(request)
    start = time.perf_counter() if started is None else started
    space = model.context_length - len(passage.ids)
    rows = [
        _Row(preset, min(request.max_new_tokens, preset.max_new_tokens, space), Sample(p, s))
        for p, preset in enumerate(request.presets)
        for s in range(request.samples)
    ]
    tally = _Tally(on_token, sum(row.limit for row in rows))
    cancelled = _Batch(model, state, rows, int(request.seed)).run(tally, should_stop)
    for row in rows:
        row.sample.text = _cut_at_stop(model.decode(row.ids), row.preset.stop)[0]
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
class _Group:
    """Consecutive batch rows of one preset: their parameters and the stages that act for them."""

    rows: slice
    params: RowParams
    stages: tuple[str, ...]


class _Batch:
    """The rows still generating, with their cache, parameters and history."""

    def __init__(self, model: ModelBackend, state: PassageState, rows: list[_Row], seed: int):
        self.model, self.rows, self.seed = model, list(rows), seed
        self.eos = model.eos_ids
        passage_ids = list(state.ids)
        self.vocab = state.logits.shape[-1]
        self.logits = state.logits.unsqueeze(0).expand(len(rows), -1)
        longest = max(row.limit for row in rows)
        full = len(rows) * longest <= FULL_CAPACITY_TOKENS
        self.cache = model.start_rows(state, len(rows), longest if full else min(longest, GROWING_CAPACITY))
        presets = [row.preset for row in rows]
        self.params = RowParams.from_presets(presets)
        self.history = RowHistory.build(
            [passage_ids] * len(rows), [[]] * len(rows), [p.no_repeat_ngram_size for p in presets], self.vocab
        )
        passage_bans = {n: NgramBans(passage_ids, n) for n in {p.no_repeat_ngram_size for p in presets} if n}
        self.ngrams = [_copy_bans(passage_bans.get(p.no_repeat_ngram_size)) for p in presets]
        self.shared_logits = True  # every row still holds the passage's logits
        self.raw_buffer: torch.Tensor | None = None
        self.groups = self._group()

    def run(self, tally: _Tally, should_stop) -> bool:
        """Generate until every row has ended; True if cancelled."""
        # Each step:
        # 1. stop at once (every row marked "cancelled") if the caller asks;
        # 2. shape every row's logits with its preset's chain and draw one
        #    token per row with that sample's shared noise (_draw);
        # 3. record each row's token and decide whether the row ends there
        #    (EOS, a stop string, its length), setting its stop reason (_record);
        # 4. drop the rows that ended, extend the others' histories and run the
        #    model one step for them all (_advance).
        step = 0
        while self.rows:
            if should_stop is not None and should_stop():
                for row in self.rows:
                    row.sample.stop_reason = "cancelled"
                    tally.emit(row, step, None)
                return True
            drawn = self._draw(step)
            finished = [i for i, row in enumerate(self.rows) if self._record(row, i, drawn, step, tally)]
            self._advance(drawn.ids, finished)
            step += 1
        return False

    def _group(self) -> list[_Group]:
        """The rows as runs of one preset (rows are kept in preset order, so
        each preset is one run); rebuilt only when rows leave."""
        groups: list[_Group] = []
        start = 0
        for i in range(1, len(self.rows) + 1):
            if i == len(self.rows) or self.rows[i].sample.preset_index != self.rows[start].sample.preset_index:
                params = self.params.select(range(start, i))
                groups.append(_Group(slice(start, i), params, compact.active_stages(params.orders[0], params)))
                start = i
        return groups

    def _draw(self, step: int) -> Drawn:
        """Shape each group's logits with its preset's chain (on the live tokens
        once truncation leaves few) and draw every row with its sample's shared noise."""
        if self.shared_logits:
            raw = self.logits[:1].to(torch.float64).expand(len(self.rows), -1)
        else:
            # One float64 buffer for the whole run (rows only leave, so a prefix
            # always fits): a fresh 6 MB table per step cost its page faults.
            # Nothing keeps ``raw`` past this step (the draw returns plain lists).
            if self.raw_buffer is None:
                self.raw_buffer = torch.empty(self.logits.shape, dtype=torch.float64)
            raw = self.raw_buffer[: len(self.rows)]
            raw.copy_(self.logits)
        history = self.history
        shaped = [
            (
                group.rows,
                compact.shape_group(
                    raw[group.rows],
                    group.params,
                    RowHistory(history.seen[group.rows], history.counts[group.rows], history.banned[group.rows]),
                    group.stages,
                ),
            )
            for group in self.groups
        ]
        # One noise vector per sample index, drawn for all rows at once: every preset's sample i shares it.
        noise = sampler.StepNoise(self.seed, [row.sample.sample_index for row in self.rows], step, self.vocab)
        return draw_step(raw, shaped, noise, self.shared_logits)

    def _record(self, row: _Row, i: int, drawn: Drawn, step: int, tally: _Tally) -> bool:
        """Add row ``i``'s token to its sample and set the stop reason if the row ends; True when it has ended."""
        token_id = drawn.token_ids[i]
        if token_id in self.eos:
            row.sample.stop_reason = "eos"
            tally.emit(row, step, None)
            return True
        token = TokenStep(
            token_id,
            self.model.token_text(token_id),
            drawn.raw_p[i],
            drawn.p[i],
            drawn.kept[i],
            drawn.raw_entropy[i],
            drawn.entropy[i],
        )
        row.sample.tokens.append(token)
        stops = row.preset.stop
        if stops and _cut_at_stop(self.model.decode(row.ids[-_stop_window(stops) :]), stops)[1]:
            row.sample.stop_reason = "stop"
        elif len(row.sample.tokens) >= row.limit:
            row.sample.stop_reason = "length"
        tally.emit(row, step, token)
        return row.sample.stop_reason is not None

    def _advance(self, ids: torch.Tensor, finished: list[int]) -> None:
        """Drop the finished rows, update the histories and run the model one step."""
        if finished:
            ended = set(finished)
            keep = [i for i in range(len(self.rows)) if i not in ended]
            if not keep:
                self.rows = []
                return
            index = torch.tensor(keep, dtype=torch.long)
            self.cache.batch_select_indices(index)
            self.params, self.history = self.params.select(keep), self.history.select(keep)
            self.rows, ids = [self.rows[i] for i in keep], ids[index]
            self.ngrams = [self.ngrams[i] for i in keep]
            self.groups = self._group()
        self._extend_history(ids)
        self.logits = self.model.step(ids, self.cache)
        self.shared_logits = False

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
