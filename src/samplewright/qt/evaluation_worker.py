"""The evaluation's thread: runs and sweeps are generated here, never on the window's thread.

:class:`EvaluationWorker` lives in its own ``QThread`` with its own
:class:`~samplewright.core.engine.engine.Engine` over the window's loaded
model (the engine's passage cache is per engine). It emits plain data: the
progress, the run after each finished passage (the run object is only read
by the window after that signal), and the end.
"""

from __future__ import annotations

import sys
import time
import traceback
import weakref

from PySide6.QtCore import QObject, QThread, Signal, Slot

from ..core.errors import SamplewrightError
from .workers import user_message

#: Progress reaches the window at most this often (seconds).
PROGRESS_SECONDS = 0.1

_THREADS: weakref.WeakSet[QThread] = weakref.WeakSet()


def running_evaluation_threads() -> list[QThread]:
    """Evaluation threads still running (tests check none is left)."""
    return [t for t in list(_THREADS) if t.isRunning()]


class EvaluationWorker(QObject):
    """Generates one run at a time; ``stop()`` may be called from any thread."""

    progress = Signal(object)  # RunProgress
    passage_done = Signal(int, object)  # passage index, the run
    finished = Signal(object)  # the run (cancelled or complete)
    failed = Signal(str)  # a message for the user

    def __init__(self) -> None:
        super().__init__()
        self._stop = False
        self._engines: dict[int, object] = {}

    def stop(self) -> None:
        """Ask the running run to stop after the current token (finished passages stay)."""
        self._stop = True

    def _engine(self, loaded):
        from ..core.engine.engine import Engine

        key = id(loaded)
        if key not in self._engines:
            self._engines = {key: Engine(loaded)}
        return self._engines[key]

    @Slot(object, object, object)
    def run(self, loaded, run, path) -> None:
        """Generate ``run`` on ``loaded`` (a LoadedModel), saving to ``path`` after each passage."""
        from ..core.evaluation.runner import run_evaluation

        self._stop = False
        last = [0.0]

        def on_progress(p) -> None:
            now = time.monotonic()
            if now - last[0] >= PROGRESS_SECONDS or p.done_tokens == p.total_tokens:
                last[0] = now
                self.progress.emit(p)

        try:
            run_evaluation(
                self._engine(loaded),
                run,
                path=path,
                on_progress=on_progress,
                on_passage=lambda j: self.passage_done.emit(j, run),
                should_stop=lambda: self._stop,
            )
        except Exception as error:  # the window shows a message, never a traceback
            if not isinstance(error, SamplewrightError):
                traceback.print_exc(file=sys.stderr)
            self.failed.emit(user_message(error))
            return
        self.finished.emit(run)


class EvaluationThread(QObject):
    """Owns the worker's thread and hands it runs through a queued signal."""

    _start = Signal(object, object, object)

    def __init__(self, parent: QObject | None = None):
        super().__init__(parent)
        self.worker = EvaluationWorker()
        self.thread = QThread()
        self.thread.setObjectName("samplewright-evaluation")
        self.worker.moveToThread(self.thread)
        self._start.connect(self.worker.run)
        _THREADS.add(self.thread)
        self.thread.start()

    def start(self, loaded, run, path) -> None:
        """Queue ``run`` for generation."""
        self._start.emit(loaded, run, path)

    def stop(self) -> None:
        """Cancel the running run (finished passages stay)."""
        self.worker.stop()

    def shutdown(self, timeout_ms: int = 10000) -> None:
        """Cancel and end the thread (on close)."""
        self.worker.stop()
        self.thread.quit()
        self.thread.wait(timeout_ms)
