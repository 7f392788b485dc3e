"""Running an evaluation: one batched audition per passage, saved after each.

Step by step, for each passage not finished yet:
1. frame the passage (plain continuation or the chat template) and encode it;
2. split the presets into chunks whose rows (presets × samples) fit the memory
   cap :data:`ROW_MEMORY_CAP` (each row holds its own copy of the passage's
   key/value cache; usually all presets fit in one chunk);
3. run each chunk as one engine audition with the passage's own seed
   (:func:`plan.passage_seed`): all presets' sample i share one random stream,
   and finished rows leave the batch (the engine does that);
4. compute the per-sample measures, add the passage to the run and write the
   run file atomically.
Cancelling drops the unfinished passage only; :func:`run_evaluation` given a
loaded run continues where it stopped.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from ..errors import RequestError
from ..library.storage import current_user
from ..results import AuditionRequest, Sample, TokenEvent
from ..version import VERSION
from .plan import RunPlan, passage_seed
from .run import EvaluationRun, PassageOutcome
from .run_file import save_run

#: Bytes of key/value cache and logits all rows of one batch may hold together.
ROW_MEMORY_CAP = 1 << 30


@dataclasses.dataclass(frozen=True)
class RunProgress:
    """How far a run is: tokens done of the upper bound, passages, seconds and an estimate of time left."""

    done_tokens: int
    total_tokens: int
    passages_done: int
    passages_total: int
    seconds: float
    seconds_left: float | None

    def time_left(self) -> str:
        """Time left as the terminal's bar writes it (tqdm's ``format_interval``: "01:05", "1:01:40"),
        or "" before any token has set a pace."""
        if self.seconds_left is None:
            return ""
        from tqdm import tqdm

        return str(tqdm.format_interval(max(0.0, self.seconds_left)))

    def describe(self) -> str:
        """One line for the window: tokens done of the upper bound, the passage, the pace and time left."""
        passage = min(self.passages_done + 1, self.passages_total)
        line = f"{self.done_tokens:,} of {self.total_tokens:,} tokens · passage {passage} of {self.passages_total}"
        if self.seconds > 0 and self.done_tokens:
            line += f" · {self.done_tokens / self.seconds:.1f} tokens/s"
        left = self.time_left()
        return f"{line} · {left} left" if left else line


def model_identity(loaded: Any) -> dict[str, Any]:
    """The model's identity as stored in run files."""
    return {
        "name": loaded.name,
        "source": str(loaded.source) if loaded.source else None,
        "parameters": int(loaded.n_parameters),
        "vocab_size": int(loaded.vocab_size),
        "context_length": int(loaded.context_length),
        "precision": str(getattr(loaded, "precision", "float32")),
    }


def row_bytes(loaded: Any, positions: int) -> int:
    """Estimated bytes one batch row holds: its float32 key/value cache over ``positions``
    plus a few float64 copies of the logits the chain works on."""
    config = loaded.model.config.get_text_config()
    heads = getattr(config, "num_key_value_heads", None) or config.num_attention_heads
    head_dim = getattr(config, "head_dim", None) or config.hidden_size // config.num_attention_heads
    return 2 * config.num_hidden_layers * heads * head_dim * 4 * positions + 6 * 8 * loaded.vocab_size


def preset_chunks(count: int, samples: int, per_row: int, cap: int = ROW_MEMORY_CAP) -> list[range]:
    """Consecutive ranges of preset indices whose rows fit ``cap`` (at least one preset each)."""
    per_chunk = max(1, cap // max(1, per_row * samples))
    return [range(start, min(count, start + per_chunk)) for start in range(0, count, per_chunk)]


def new_run(engine: Any, plan: RunPlan) -> EvaluationRun:
    """An empty run of ``plan`` on ``engine``'s model."""
    return EvaluationRun(plan, model_identity(engine.loaded), user=current_user(), tool_version=VERSION)


def run_evaluation(
    engine: Any,
    run: EvaluationRun,
    *,
    path: str | Path | None = None,
    on_progress: Callable[[RunProgress], None] | None = None,
    on_passage: Callable[[int], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> EvaluationRun:
    """Generate the passages of ``run`` not finished yet, saving after each one.

    Args:
        engine: a :class:`~samplewright.core.engine.engine.Engine`.
        run: a new run (:func:`new_run`) or one loaded to be resumed.
        path: the run file to write after each passage (None: keep in memory only).
        on_progress: called with a :class:`RunProgress` on every token.
        on_passage: called with a passage's index when it is finished and saved.
        should_stop: checked before every step; True cancels (finished passages stay).

    Returns:
        The run, ``cancelled`` set when ``should_stop`` ended it.

    Raises:
        RequestError: the run's model differs from the engine's.
        PassageError: a passage framing the model cannot use.
        RunFileError: the run file cannot be written.
    """
    if run.model.get("vocab_size") != engine.loaded.vocab_size or run.model.get("name") != engine.loaded.name:
        raise RequestError(
            f"The run was made with {run.model.get('name')}; "
            f"load that model to continue it (now: {engine.loaded.name})."
        )
    plan, start = run.plan, time.perf_counter()
    run.cancelled = False
    todo = [j for j in range(len(plan.passages)) if j not in run.outcomes]
    tally = _Tally(run, plan, todo, on_progress, start)
    for j in todo:
        outcome = _run_passage(engine, plan, j, tally, should_stop)
        if outcome is None:
            run.cancelled = True
            break
        run.add(j, outcome)
        tally.passage_done(outcome)
        if path is not None:
            save_run(run, path)
        if on_passage is not None:
            on_passage(j)
    return run


def _run_passage(engine, plan: RunPlan, j: int, tally: _Tally, should_stop) -> PassageOutcome | None:
    passage = plan.passages[j]
    prompt = passage.framing.prompt(passage.text, engine.loaded.tokenizer)
    tokens = engine.encode_passage(prompt)
    per_row = row_bytes(engine.loaded, len(tokens.ids) + plan.tokens)
    seed, begun = passage_seed(plan.seed, passage.text_hash), time.perf_counter()
    samples: list[list[Sample]] = []
    for chunk in preset_chunks(len(plan.presets), plan.samples, per_row):
        presets = [plan.presets[i].preset for i in chunk]
        request = AuditionRequest(prompt, presets, samples=plan.samples, max_new_tokens=plan.tokens, seed=seed)
        tally.chunk_budget = sum(plan.row_budget(i) for i in chunk) * plan.samples
        result = engine.audition(request, on_token=tally.token, should_stop=should_stop)
        if result.cancelled:
            return None
        tally.chunk_done(result.tokens_generated())
        for offset, row in enumerate(result.samples):
            samples.append([dataclasses.replace(s, preset_index=chunk.start + offset) for s in row])
    return PassageOutcome(len(tokens.ids), tokens.dropped, samples, time.perf_counter() - begun)


class _Tally:
    """Tokens over the whole run: finished passages, the running audition, the budget still open."""

    def __init__(self, run: EvaluationRun, plan: RunPlan, todo: list[int], on_progress, start: float):
        self.on_progress, self.start = on_progress, start
        self.passages_total, self.passages_done = len(plan.passages), len(run.outcomes)
        self.finished = run.tokens_done()  # tokens of finished passages and chunks
        self.open = plan.passage_budget() * len(todo)  # upper bound still to write
        self.started_with = self.finished
        self.chunk_budget = 0

    def token(self, event: TokenEvent) -> None:
        if self.on_progress is None:
            return
        done = self.finished + event.done_tokens
        # The running chunk's share of `open` is counted by the event's own total.
        total = self.finished + event.total_tokens + self.open - self.chunk_budget
        elapsed = time.perf_counter() - self.start
        fresh = done - self.started_with
        left = elapsed / fresh * (total - done) if fresh > 0 else None
        self.on_progress(RunProgress(done, total, self.passages_done, self.passages_total, elapsed, left))

    def chunk_done(self, tokens: int) -> None:
        self.finished += tokens
        self.open -= self.chunk_budget
        self.chunk_budget = 0

    def passage_done(self, outcome: PassageOutcome) -> None:
        self.passages_done += 1
