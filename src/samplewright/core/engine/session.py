"""The audition on screen: samples collected token by token as a run reports them.

An :class:`AuditionSession` is the model the window's audition view shows.
Each run gets a serial number from :meth:`AuditionSession.begin`; events and
results that carry an older serial are ignored, so a cancelled or superseded
run can never write into the newer one's samples. No Qt and no torch here.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

from ..events import Emitter
from ..presets import Preset
from ..results import AuditionRequest, AuditionResult, Sample, TokenEvent


@dataclasses.dataclass(frozen=True)
class SampleRef:
    """Which sample: column (preset) and row (sample index)."""

    column: int
    row: int


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
        self.metrics: list[dict[str, Any] | None] = []
        self.passage = ""
        self.passage_ids: list[int] = []
        self.passage_dropped = 0
        self.columns: list[int] = []  # session column of each preset in the running request
        self.done_tokens = 0
        self.total_tokens = 0
        self.started, self.token_added, self.sample_finished = Emitter(), Emitter(), Emitter()
        self.progress, self.finished, self.failed = Emitter(), Emitter(), Emitter()

    def begin(self, request: AuditionRequest, columns: Sequence[int] | None = None) -> int:
        """Start collecting a new run and return its serial.

        Args:
            request: what the run will generate.
            columns: for regenerating some presets only, the session column of
                each preset in ``request``; ``None`` starts afresh with
                ``request.presets`` as the columns.

        Raises:
            ValueError: when ``columns`` does not match the request or the session.
        """
        if columns is None:
            self.presets = list(request.presets)
            self.samples = [[] for _ in request.presets]
            self.metrics = [None for _ in request.presets]
            columns = list(range(len(request.presets)))
        elif len(columns) != len(request.presets) or not all(0 <= c < len(self.presets) for c in columns):
            raise ValueError("each regenerated preset needs an existing column")
        self.serial += 1
        self.running = True
        self.passage = request.passage
        self.columns = list(columns)
        for column, preset in zip(self.columns, request.presets, strict=False):
            self.presets[column] = preset
            self.samples[column] = [Sample(column, row) for row in range(request.samples)]
            self.metrics[column] = None
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

    def finish(self, serial: int, result: AuditionResult, metrics: Sequence[dict | None]) -> bool:
        """Take the run's final samples and metrics; False for a stale serial."""
        if serial != self.serial:
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
        if serial != self.serial:
            return False
        self.running = False
        self.failed.emit(serial, message)
        return True

    def abandon(self) -> None:
        """Stop listening to the running run (its later events become stale)."""
        if self.running:
            self.serial += 1
            self.running = False

    def clear(self) -> None:
        """Forget every column and sample (e.g. after the model changed); a
        running run becomes stale first."""
        self.abandon()
        self.presets, self.samples, self.metrics = [], [], []
        self.columns, self.passage_ids = [], []
        self.passage, self.passage_dropped = "", 0
        self.done_tokens = self.total_tokens = 0

    def sample(self, ref: SampleRef) -> Sample | None:
        """The sample at ``ref``, or None when there is no such sample."""
        if 0 <= ref.column < len(self.samples) and 0 <= ref.row < len(self.samples[ref.column]):
            return self.samples[ref.column][ref.row]
        return None

    def sample_count(self) -> int:
        """The most samples any column holds (rows of the audition grid)."""
        return max((len(column) for column in self.samples), default=0)
