"""The engine's thread: model loading, auditions and step views run here.

:class:`EngineWorker` lives in its own ``QThread`` and never touches a widget:
it receives requests through queued signals, calls the core, and emits plain
data tagged with the request's serial number. Requests are handled one at a
time in arrival order, so the model is never used by two threads at once.
Cancelling sets a number the running job compares with its own serial before
every token.
"""

from __future__ import annotations

import dataclasses
import os
import sys
import threading
import time
import traceback
import weakref
from collections.abc import Callable
from typing import Any

from PySide6.QtCore import QObject, QThread, Signal, Slot

from ..core.errors import SamplewrightError
from ..core.framing import supports_instructions

#: Token events are sent to the window in batches at most this often (seconds).
BATCH_SECONDS = 0.02

_THREADS: weakref.WeakSet[QThread] = weakref.WeakSet()


def running_threads() -> list[QThread]:
    """Engine threads started by this module that are still running (tests check this is empty)."""
    return [thread for thread in list(_THREADS) if thread.isRunning()]


@dataclasses.dataclass(frozen=True)
class ModelInfo:
    """What the window shows about the loaded model."""

    name: str
    source: str
    n_parameters: int
    context_length: int
    vocab_size: int
    description: str
    vocabulary: Any = None  # core Vocabulary: each token's bytes, for showing text and labels
    chat_template: bool = False  # the tokenizer has one, so the audition can be framed as an instruction


@dataclasses.dataclass(frozen=True)
class StepQuery:
    """Arguments of ``Engine.step`` for one click on a token."""

    passage: str
    presets: list
    sample_ids: tuple
    drawn_id: int | None
    top: int = 20
    framing: Any = None  # the audition's Framing (None: plain continuation)


class Cancelled(Exception):
    """Raised inside a job whose serial was cancelled."""


def user_message(error: BaseException) -> str:
    """A message fit for a message box: the error's own text for ours, a plain summary otherwise."""
    if isinstance(error, SamplewrightError):
        return str(error)
    return (
        f"Something unexpected went wrong ({type(error).__name__}: {error}). "
        "Try again; if it keeps happening, restart Samplewright and report the steps that led here."
    )


#: How much lower than the window's thread the engine thread runs (Linux niceness steps).
ENGINE_NICENESS = 5


def share_cores_with_the_window() -> int:
    """Let the calling (engine) thread's torch work use every core, at a lower
    scheduling priority than the window's thread; returns the thread count.

    torch's thread count is set per calling thread, and the worker threads it
    starts inherit this thread's priority. With every core taken, a window at
    the same priority waited its turn behind torch's busy threads; a few steps
    of niceness let the event loop run the moment it has work, while the
    engine still gets every core the window leaves idle.
    """
    import torch

    threads = max(1, os.cpu_count() or 1)
    torch.set_num_threads(threads)
    if hasattr(os, "setpriority") and sys.platform.startswith("linux"):
        me = threading.get_native_id()
        try:
            target = min(19, os.getpriority(os.PRIO_PROCESS, os.getpid()) + ENGINE_NICENESS)
            if os.getpriority(os.PRIO_PROCESS, me) < target:
                os.setpriority(os.PRIO_PROCESS, me, target)
        except OSError:
            pass  # a priority we may not change only costs responsiveness
    return threads


class EngineWorker(QObject):
    """Runs core calls for the window on its own thread.

    Args:
        model_loader: ``model_loader(source, progress) -> LoadedModel``.
        engine_factory: ``engine_factory(loaded) -> Engine``.
        metrics: ``metrics(samples) -> dict`` for one preset's samples.
    """

    load_progress = Signal(int, str, object)  # serial, message, fraction or None
    model_ready = Signal(int, object)  # serial, ModelInfo
    tokens_ready = Signal(int, object)  # serial, list[TokenEvent]
    audition_ready = Signal(int, object, object)  # serial, AuditionResult, list[metrics dict]
    step_ready = Signal(int, object)  # serial, StepView
    passage_counted = Signal(int, object)  # serial, PassageLength
    export_checked = Signal(int, object)  # serial, list[FolderCheck]
    failed = Signal(int, str, str)  # serial, job kind, message

    def __init__(self, model_loader: Callable, engine_factory: Callable, metrics: Callable):
        super().__init__()
        self._load = model_loader
        self._engine_factory = engine_factory
        self._metrics = metrics
        self._engine = None
        self.cancelled: set[int] = set()
        self.cancelled_through = 0
        #: torch threads the engine thread uses (set when a model loads).
        self.threads = 0

    @property
    def loaded_model(self):
        """The loaded model, or None before one is ready (the evaluation screen uses it)."""
        return self._engine.loaded if self._engine is not None else None

    def cancel(self, serial: int) -> None:
        """Stop the job with this serial (safe to call from any thread)."""
        self.cancelled.add(serial)

    def cancel_through(self, serial: int) -> None:
        """Stop every job whose serial is ``serial`` or lower (safe to call from any thread)."""
        self.cancelled_through = max(self.cancelled_through, serial)

    def is_cancelled(self, serial: int) -> bool:
        """Whether the job ``serial`` was asked to stop."""
        return serial <= self.cancelled_through or serial in self.cancelled

    def _check(self, serial: int) -> None:
        if self.is_cancelled(serial):
            raise Cancelled()

    def _guard(self, serial: int, kind: str, job: Callable[[], Any]) -> None:
        try:
            self._check(serial)  # a job cancelled while queued (e.g. on close) never starts
            job()
        except Cancelled:
            self.failed.emit(serial, kind, "")
        except Exception as error:  # the window shows a message, never a traceback
            if not isinstance(error, SamplewrightError):
                traceback.print_exc(file=sys.stderr)
            self.failed.emit(serial, kind, user_message(error))

    @Slot(int, object)
    def load_model(self, serial: int, source: str | None) -> None:
        """Load a model (``None`` = the default) and make it the engine's."""

        def progress(message: str, fraction: float | None = None) -> None:
            self._check(serial)
            self.load_progress.emit(serial, str(message), fraction)

        def job():
            self.threads = share_cores_with_the_window()
            loaded = self._load(source, progress)
            self._check(serial)
            self._engine = self._engine_factory(loaded)
            # Warm up now: the first metrics call imports sacrebleu, whose native modules
            # hold the interpreter lock while they load and would stall the window mid-audition.
            self._metrics([])
            self.model_ready.emit(
                serial,
                ModelInfo(
                    str(loaded.name),
                    str(loaded.source),
                    int(loaded.n_parameters),
                    int(loaded.context_length),
                    int(loaded.vocab_size),
                    str(loaded.describe()),
                    getattr(self._engine, "vocabulary", None),
                    supports_instructions(getattr(loaded, "tokenizer", None)),
                ),
            )

        self._guard(serial, "load", job)

    @Slot(int, object)
    def run_audition(self, serial: int, request) -> None:
        """Generate ``request``; token events go out in batches, then the result and metrics."""

        def job():
            engine = self._need_engine()
            batch: list = []
            last = [time.monotonic()]

            def on_token(event) -> None:
                batch.append(event)
                now = time.monotonic()
                if now - last[0] >= BATCH_SECONDS:
                    self.tokens_ready.emit(serial, list(batch))
                    batch.clear()
                    last[0] = now

            result = engine.audition(request, on_token=on_token, should_stop=lambda: self.is_cancelled(serial))
            if batch:
                self.tokens_ready.emit(serial, list(batch))
            metrics = [self._metrics(samples) for samples in result.samples]
            self.audition_ready.emit(serial, result, metrics)

        self._guard(serial, "audition", job)

    @Slot(int, object)
    def compute_step(self, serial: int, query: StepQuery) -> None:
        """The distribution at one step of one sample, for every auditioned preset."""

        def job():
            view = self._need_engine().step(
                query.passage,
                query.presets,
                sample_ids=query.sample_ids,
                top=query.top,
                drawn_id=query.drawn_id,
                framing=query.framing,
            )
            self.step_ready.emit(serial, view)

        self._guard(serial, "step", job)

    @Slot(int, str, object)
    def count_passage(self, serial: int, text: str, framing=None) -> None:
        """Tokenise the passage's prompt (framed as the audition would be) to report its length and cut."""

        def job():
            self.passage_counted.emit(serial, self._need_engine().measure_passage(text, framing))

        self._guard(serial, "count", job)

    @Slot(int, object, str)
    def check_export(self, serial: int, jobs, passage: str) -> None:
        """Run each exported folder of ``jobs`` ((folder, preset) pairs) through transformers on ``passage``."""
        from ..core.engines import folder_check

        def job():
            loaded = self._need_engine().loaded
            results = []
            for folder, preset in jobs:
                self._check(serial)
                results.append(folder_check.check_folder(folder, preset, loaded, passage))
            self.export_checked.emit(serial, results)

        self._guard(serial, "export check", job)

    def _need_engine(self):
        if self._engine is None:
            raise SamplewrightError(
                "No model is loaded yet. Wait for the model to finish loading, "
                "or choose one in the Model menu (Open model folder… or Open GGUF file…)."
            )
        return self._engine


class EngineThread(QObject):
    """Owns the worker's thread and sends it requests as queued signals.

    Args:
        worker: the worker to move onto the new thread.
        parent: the Qt parent (the window).
    """

    _load = Signal(int, object)
    _audition = Signal(int, object)
    _step = Signal(int, object)
    _count = Signal(int, str, object)
    _export_check = Signal(int, object, str)

    def __init__(self, worker: EngineWorker, parent: QObject | None = None):
        super().__init__(parent)
        self.worker = worker
        self.serial = 0
        self.thread = QThread()
        self.thread.setObjectName("samplewright-engine")
        worker.moveToThread(self.thread)
        self._load.connect(worker.load_model)
        self._audition.connect(worker.run_audition)
        self._step.connect(worker.compute_step)
        self._count.connect(worker.count_passage)
        self._export_check.connect(worker.check_export)
        _THREADS.add(self.thread)
        self.thread.start()

    def next_serial(self) -> int:
        """A new request serial, larger than every earlier one."""
        self.serial += 1
        return self.serial

    def load_model(self, source: str | None) -> int:
        """Queue a model load; returns its serial."""
        serial = self.next_serial()
        self._load.emit(serial, source)
        return serial

    def run_audition(self, request) -> int:
        """Queue an audition; returns its serial."""
        serial = self.next_serial()
        self._audition.emit(serial, request)
        return serial

    def compute_step(self, query: StepQuery) -> int:
        """Queue a step view; returns its serial."""
        serial = self.next_serial()
        self._step.emit(serial, query)
        return serial

    def count_passage(self, text: str, framing=None) -> int:
        """Queue a token count of ``text`` framed by ``framing`` (None: plain); returns its serial."""
        serial = self.next_serial()
        self._count.emit(serial, text, framing)
        return serial

    def check_export(self, jobs, passage: str) -> int:
        """Queue the after-export check of ``jobs`` ((folder, preset) pairs); returns its serial."""
        serial = self.next_serial()
        self._export_check.emit(serial, list(jobs), passage)
        return serial

    def cancel(self, serial: int) -> None:
        """Cancel the request ``serial``."""
        self.worker.cancel(serial)

    def shutdown(self) -> None:
        """Cancel everything, stop the thread and wait for it.

        A generation stops within one token; a model load stops at its next
        progress report, so closing during a first-run conversion can take a moment.
        """
        self.worker.cancel_through(self.serial)
        self.thread.quit()
        self.thread.wait()
