"""The audition on screen: samples collected token by token as a run reports them.

An :class:`AuditionSession` is the model the window's audition view shows.
Each run has one serial number, given to :meth:`AuditionSession.begin` (the
window passes the engine's request serial, so one number names the run
everywhere) or chosen by it; events and results that carry another serial are
ignored, so a cancelled or superseded run can never write into the newer one's
samples. The session also keeps what the audition needs between runs: the
settings of the last full run (for regenerating one column), the library record
and whether it was an unsaved draft for each column, and the inspected step.
No Qt and no torch here.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..events import Emitter
from ..presets import Preset
from ..results import AuditionRequest, AuditionResult, Sample, TokenEvent

if TYPE_CHECKING:
    from ..sampling.metrics import PresetMetrics


@dataclasses.dataclass(frozen=True)
class SampleRef:
    """Which sample: column (preset) and row (sample index)."""

    column: int
    row: int


@dataclasses.dataclass(frozen=True)
class StepRef:
    """Which step of which sample is inspected: column (preset), row (sample index) and step."""

    column: int
    row: int
    step: int


class AuditionSession:
    """The presets being compared and what each has written so far.

    Events:
        started(serial): a run began; ``columns`` says which columns it fills.
        token_added(column, row, step, token): a token arrived (``token`` is a TokenStep).
        sample_finished(column, row, stop_reason): a sample ended.
        progress(done, total): tokens written so far and the run's upper bound.
        finished(serial, cancelled): the run ended; samples and metrics are final.
        failed(serial, message): the run stopped with an error meant for the user.
    """

    def __init__(self) -> None:
        self.serial = 0
        self.running = False
        self.presets: list[Preset] = []
        self.samples: list[list[Sample]] = []
        self.metrics: list[PresetMetrics | None] = []
        self.passage = ""
        self.passage_ids: list[int] = []
        self.passage_dropped = 0
        self.columns: list[int] = []  # session column of each preset in the running request
        self.record_ids: list[str | None] = []  # the library record each column was written from
        self.drafts: list[bool] = []  # whether each column was written with unsaved edits of its preset
        self.request: AuditionRequest | None = None  # the last full run: passage, sizes and seed
        self.inspected: StepRef | None = None
        self.seeds: list[int] = []  # the seed each column was written with
        self.library_folder: Path | None = None  # the library the last full run's presets came from
        self.done_tokens = 0
        self.total_tokens = 0
        self.started, self.token_added, self.sample_finished = Emitter(), Emitter(), Emitter()
        self.progress, self.finished, self.failed = Emitter(), Emitter(), Emitter()

    def begin(
        self,
        request: AuditionRequest,
        columns: Sequence[int] | None = None,
        *,
        serial: int | None = None,
        record_ids: Sequence[str | None] | None = None,
        drafts: Sequence[bool] | None = None,
        library_folder: Path | None = None,
    ) -> int:
        """Start collecting a new run and return its serial.

        Args:
            request: what the run will generate.
            columns: for regenerating some presets only, the session column of
                each preset in ``request``; ``None`` starts afresh with
                ``request.presets`` as the columns (and keeps ``request`` as the
                last full run).
            serial: the run's serial (e.g. the engine's request serial); it must be
                larger than every earlier one. ``None``: the next number.
            record_ids: the library record of each preset in ``request`` (default: none).
            drafts: whether each preset in ``request`` is an unsaved draft (default: no).
            library_folder: for a full run, the library folder its presets came from.

        Raises:
            ValueError: when ``columns``, ``record_ids`` or ``drafts`` do not match the
                request or the session, or ``serial`` is not larger than the last one.
        """
        count = len(request.presets)
        ids = list(record_ids) if record_ids is not None else [None] * count
        marks = list(drafts) if drafts is not None else [False] * count
        if len(ids) != count or len(marks) != count:
            raise ValueError("record_ids and drafts need one entry per preset")
        if serial is not None and serial <= self.serial:
            raise ValueError(f"run serial {serial} is not larger than the last one ({self.serial})")
        if columns is None:
            self.presets = list(request.presets)
            self.samples = [[] for _ in request.presets]
            self.metrics = [None for _ in request.presets]
            self.record_ids, self.drafts = [None] * count, [False] * count
            self.request, self.inspected = request, None
            self.seeds = [request.seed] * count
            self.library_folder = library_folder
            columns = list(range(count))
        elif len(columns) != count or not all(0 <= c < len(self.presets) for c in columns):
            raise ValueError("each regenerated preset needs an existing column")
        self.serial = self.serial + 1 if serial is None else serial
        self.running = True
        self.passage = request.passage
        self.columns = list(columns)
        for local, (column, preset) in enumerate(zip(self.columns, request.presets, strict=True)):
            self.presets[column] = preset
            self.samples[column] = [Sample(column, row) for row in range(request.samples)]
            self.metrics[column] = None
            self.record_ids[column], self.drafts[column] = ids[local], marks[local]
            self.seeds[column] = request.seed
        if self.inspected is not None and self.inspected.column in self.columns:
            self.inspected = None
        self.done_tokens, self.total_tokens = 0, 0
        self.started.emit(self.serial)
        return self.serial

    def add_events(self, serial: int, events: Sequence[TokenEvent]) -> bool:
        """Record the run's token events; returns False (and changes nothing) for a stale serial."""
        if serial != self.serial or not self.running:
            return False
        for event in events:
            column = self.columns[event.preset_index]
            sample = self.samples[column][event.sample_index]
            if event.token is not None:
                sample.tokens.append(event.token)
                self.token_added.emit(column, event.sample_index, event.step, event.token)
            if event.stop_reason is not None:
                sample.stop_reason = event.stop_reason
                self.sample_finished.emit(column, event.sample_index, event.stop_reason)
            self.done_tokens, self.total_tokens = event.done_tokens, event.total_tokens
        if events:
            self.progress.emit(self.done_tokens, self.total_tokens)
        return True

    def finish(self, serial: int, result: AuditionResult, metrics: Sequence[PresetMetrics | None]) -> bool:
        """Take the run's final samples and metrics; False for a stale serial."""
        if serial != self.serial or not self.running:
            return False
        for local, column in enumerate(self.columns):
            final = result.samples[local]
            for sample in final:
                sample.preset_index = column
            self.samples[column] = list(final)
            self.metrics[column] = metrics[local] if local < len(metrics) else None
        self.passage_ids = list(result.passage_ids)
        self.passage_dropped = result.passage_dropped
        self.running = False
        self.finished.emit(serial, result.cancelled)
        return True

    def fail(self, serial: int, message: str) -> bool:
        """End the run with an error; False for a stale serial."""
        if serial != self.serial or not self.running:
            return False
        self.running = False
        self.failed.emit(serial, message)
        return True

    def abandon(self) -> None:
        """Stop listening to the running run (its later events become stale)."""
        self.running = False

    def clear(self) -> None:
        """Forget every column and sample (e.g. after the model changed); a
        running run becomes stale first."""
        self.abandon()
        self.presets, self.samples, self.metrics = [], [], []
        self.columns, self.passage_ids = [], []
        self.record_ids, self.drafts = [], []
        self.passage, self.passage_dropped = "", 0
        self.done_tokens = self.total_tokens = 0
        self.request, self.inspected = None, None
        self.seeds, self.library_folder = [], None

    def restore(self, saved: Any) -> int:
        """Show a saved audition (an :class:`~.audition_file.SavedAudition`) as the last full run:
        announced as a run that started and finished at once, so views fill as after a run."""
        self.abandon()
        request = saved.request
        count = len(request.presets)
        self.presets, self.request, self.inspected = list(request.presets), request, None
        self.samples = [list(column) for column in saved.samples]
        self.metrics = list(saved.metrics)
        self.record_ids, self.drafts, self.seeds = list(saved.record_ids), list(saved.drafts), list(saved.seeds)
        self.library_folder = saved.library_folder
        self.passage, self.passage_ids, self.passage_dropped = (
            request.passage,
            list(saved.passage_ids),
            saved.passage_dropped,
        )
        self.columns = list(range(count))
        self.serial += 1
        self.running = True
        self.started.emit(self.serial)
        self.running = False
        self.finished.emit(self.serial, False)
        return self.serial

    def sample(self, ref: SampleRef) -> Sample | None:
        """The sample at ``ref``, or None when there is no such sample."""
        if 0 <= ref.column < len(self.samples) and 0 <= ref.row < len(self.samples[ref.column]):
            return self.samples[ref.column][ref.row]
        return None

    def sample_count(self) -> int:
        """The most samples any column holds (rows of the audition grid)."""
        return max((len(column) for column in self.samples), default=0)

    # -- between runs ------------------------------------------------------------------
    def regenerate_request(self, column: int, preset: Preset, seed: int | None = None) -> AuditionRequest | None:
        """A request for ``preset`` alone with the last full run's passage and sizes, and its seed
        unless ``seed`` is given; None when there was no full run or ``column`` is not one of its columns."""
        last = self.request
        if last is None or not 0 <= column < len(self.presets):
            return None
        return AuditionRequest(
            last.passage,
            [preset],
            samples=last.samples,
            max_new_tokens=last.max_new_tokens,
            seed=last.seed if seed is None else seed,
            framing=last.framing,
        )

    def token_limit(self, column: int) -> tuple[int, str] | None:
        """The token limit that applied to ``column`` and which setting set it: "preset" (the preset's
        own token limit) or "audition" (the run's New tokens); the smaller one wins. None without a run."""
        last = self.request
        if last is None or not 0 <= column < len(self.presets):
            return None
        own = self.presets[column].max_new_tokens
        return (own, "preset") if own < last.max_new_tokens else (last.max_new_tokens, "audition")

    def own_numbers(self, column: int) -> bool:
        """Whether ``column`` was written with other random numbers than the last full run's."""
        last = self.request
        return last is not None and 0 <= column < len(self.seeds) and self.seeds[column] != last.seed

    def mark_saved(self, column: int) -> None:
        """The unsaved edits ``column`` was written with are saved now: it is no longer a draft."""
        if 0 <= column < len(self.drafts):
            self.drafts[column] = False

    def is_draft(self, column: int) -> bool:
        """Whether ``column`` was written with unsaved edits of its preset."""
        return 0 <= column < len(self.drafts) and self.drafts[column]

    # -- the inspected step --------------------------------------------------------------
    def inspect(self, column: int, row: int, step: int) -> StepRef | None:
        """Make ``step`` of sample ``row`` of ``column`` the inspected step (clamped to the
        sample's tokens) and return it; None, changing nothing, when that sample has no tokens."""
        sample = self.sample(SampleRef(column, row))
        if sample is None or not sample.tokens:
            return None
        self.inspected = StepRef(column, row, max(0, min(step, len(sample.tokens) - 1)))
        return self.inspected

    def clear_inspection(self) -> None:
        """Inspect no step."""
        self.inspected = None

    def inspected_sample(self) -> Sample | None:
        """The sample whose step is inspected, or None."""
        ref = self.inspected
        return self.sample(SampleRef(ref.column, ref.row)) if ref is not None else None

    def inspected_text(self) -> str | None:
        """The text of the inspected step's drawn token, or None."""
        sample, ref = self.inspected_sample(), self.inspected
        if sample is None or ref is None or ref.step >= len(sample.tokens):
            return None
        return sample.tokens[ref.step].text
