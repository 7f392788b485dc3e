"""The window's audition behaviour: start, stop and regenerate runs, and
inspect a step of a sample.

Requests go to the engine thread with a serial; answers whose serial is not
the newest are dropped. Step views are "latest wins": while one is being
computed, only the newest click waits for its turn.
"""

from __future__ import annotations

import random

from PySide6.QtGui import QGuiApplication

from ..core.engine.session import SampleRef
from ..core.results import AuditionRequest
from .audition_view import DRAFT_MARK
from .workers import StepQuery


class AuditionActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`."""

    def _init_audition_state(self) -> None:
        self._run_serial: int | None = None  # engine serial of the running audition
        self._run_session: int | None = None  # the session's serial for it
        self._last_request: AuditionRequest | None = None
        self._column_ids: list[str] = []
        self._column_drafts: list[bool] = []  # written with the editor's unsaved draft
        self._inspected: tuple[int, int, int] | None = None  # column, row, step
        self._step_serial: int | None = None
        self._step_waiting: StepQuery | None = None
        self._update_buttons()

    def _connect_audition(self) -> None:
        worker = self.engine.worker
        worker.tokens_ready.connect(self._on_tokens)
        worker.audition_ready.connect(self._on_audition_ready)
        worker.step_ready.connect(self._on_step_ready)
        self.session.progress.connect(self._on_progress)
        self.grid.token_clicked.connect(self.inspect)
        self.grid.regenerate_requested.connect(self.regenerate_column)
        self.inspector.step_chosen.connect(self._on_step_chosen)
        self.library_list.chosen_changed.connect(lambda ids: self._update_buttons())

    # -- running -----------------------------------------------------------------------------
    def running(self) -> bool:
        """Whether an audition is being generated."""
        return self._run_serial is not None

    def generate_all(self) -> None:
        """Write samples for every ticked preset."""
        problem = self._why_not_generate()
        if problem:
            self.show_error("Cannot generate yet", problem)
            return
        if self.new_seed_box.isChecked():
            self.seed_spin.setValue(random.randrange(2**31))
        records = [self.library.get(i) for i in self.library_list.chosen]
        presets, self._column_drafts, notes = self._audition_presets(records)
        request = AuditionRequest(
            self.passage.text(),
            presets,
            samples=self.samples_spin.value(),
            max_new_tokens=self.tokens_spin.value(),
            seed=self.seed_spin.value(),
        )
        self._column_ids = [r.id for r in records]
        self._last_request = request
        self._clear_inspection()
        self._start(request, None, notes)

    def regenerate_column(self, column: int) -> None:
        """Write one preset's samples again with the last run's passage, seed and sizes."""
        if self._last_request is None or self.running() or column >= len(self._column_ids):
            return
        record = self._record_or_none(self._column_ids[column])  # picks up a saved edit, or the draft
        if record is not None:
            (preset,), (self._column_drafts[column],), notes = self._audition_presets([record])
        else:
            preset, notes = self.session.presets[column], []
        last = self._last_request
        request = AuditionRequest(
            last.passage, [preset], samples=last.samples, max_new_tokens=last.max_new_tokens, seed=last.seed
        )
        if self._inspected and self._inspected[0] == column:
            self._clear_inspection()
        self._start(request, [column], notes)

    def _audition_presets(self, records) -> tuple[list, list[bool], list[str]]:
        """Each record's preset, or the editor's valid unsaved draft of it, so a value can be tried
        before it is saved; returns the presets, which are drafts, and notes for the status bar."""
        presets, drafts, notes = [], [], []
        for record in records:
            draft, problem = self.draft_of(record.id)
            presets.append(draft or record.preset)
            drafts.append(draft is not None)
            if draft is not None:
                notes.append(f"'{draft.name}' uses your unsaved edits.")
            elif problem is not None:
                notes.append(f"'{record.name}' uses its saved version: an edit is not valid ({problem}).")
        return presets, drafts, notes

    def _column_name(self, column: int) -> str:
        """A column's preset name as the step view shows it, marked when it was an unsaved draft."""
        name = self.session.presets[column].name
        drafted = column < len(self._column_drafts) and self._column_drafts[column]
        return f"{name} {DRAFT_MARK}" if drafted else name

    def regenerate_current(self) -> None:
        """New samples for the preset whose sample is being inspected (else the first column, said so)."""
        column = self._inspected[0] if self._inspected else 0
        self.regenerate_column(column)
        if not self._inspected and self.running() and self.session.presets:
            self.statusBar().showMessage(
                f"Writing new samples for '{self._column_name(column)}', the first column. To choose another "
                "preset, click a token in its samples first, or use the ↻ button above its column."
            )

    def _start(self, request: AuditionRequest, columns, notes: list[str]) -> None:
        if self.running():
            self.engine.cancel(self._run_serial)
        self._run_session = self.session.begin(request, columns)
        for column in columns or range(len(request.presets)):
            self.grid.mark_draft(column, self._column_drafts[column])
        self._run_serial = self.engine.run_audition(request)
        self.progress.setRange(0, 1)
        self.progress.setValue(0)
        self.statusBar().showMessage(" ".join(["Generating…"] + notes))
        self._update_buttons()

    def stop_generation(self) -> None:
        """Ask the running audition to stop after its current token; samples so far stay."""
        if self.running():
            self.engine.cancel(self._run_serial)
            self.statusBar().showMessage("Stopping…")

    def _why_not_generate(self) -> str | None:
        if self.model_info is None:
            return "The model is still loading (see the status bar). Try again when it is ready."
        if not self.passage.text().strip():
            return "The passage is empty. Type or paste a draft passage, or open one with Ctrl+O."
        if not self.library_list.chosen:
            return "No preset is ticked. Tick up to six presets in the list on the left."
        return None

    def _update_buttons(self) -> None:
        running = self.running()
        ready = self.model_info is not None and bool(self.library_list.chosen)
        self.generate_button.setEnabled(ready and not running)
        self.actions["generate"].setEnabled(ready and not running)
        self.stop_button.setEnabled(running)
        self.actions["stop"].setEnabled(running)
        self.actions["regenerate"].setEnabled(self._last_request is not None and not running)
        for header in self.grid.headers:
            header.regenerate.setEnabled(not running)

    # -- answers from the engine thread ------------------------------------------------------
    def _on_tokens(self, serial: int, events) -> None:
        if serial == self._run_serial:
            self.session.add_events(self._run_session, events)

    def _on_progress(self, done: int, total: int) -> None:
        self.progress.setRange(0, max(1, total))
        self.progress.setValue(done)

    def _on_audition_ready(self, serial: int, result, metrics) -> None:
        if serial != self._run_serial:
            return
        self._run_serial = None
        self.session.finish(self._run_session, result, metrics)
        if result.cancelled:
            self.statusBar().showMessage("Stopped; the samples so far are kept.", 6000)
        else:
            self.statusBar().showMessage(f"Wrote {result.tokens_generated()} tokens in {result.seconds:.1f} s.", 6000)
        self.progress.setValue(self.progress.maximum() if not result.cancelled else self.progress.value())
        self._update_buttons()
        if self._inspected:
            self.inspect(*self._inspected)

    def _audition_failed(self, serial: int, kind: str, message: str) -> None:
        if kind == "audition" and serial == self._run_serial:
            self._run_serial = None
            self.session.fail(self._run_session, message)
            self._update_buttons()
            self.statusBar().showMessage("The run stopped.", 6000)
            if message:
                self.show_error("Generation stopped", message)
        elif kind == "step" and serial == self._step_serial:
            self._step_serial = None
            if message:
                self.statusBar().showMessage(f"Could not show that step: {message}", 8000)
            self._send_waiting_step()

    # -- inspecting a step -------------------------------------------------------------------
    def inspect(self, column: int, row: int, step: int) -> None:
        """Make ``step`` of sample ``row`` of preset ``column`` the current step."""
        sample = self.session.sample(SampleRef(column, row))
        if sample is None or not sample.tokens:
            return
        step = max(0, min(step, len(sample.tokens) - 1))
        self._inspected = (column, row, step)
        self.grid.mark(column, row, step)
        self.inspector.set_sample(column, self._column_name(column), row, len(sample.tokens), step)
        query = StepQuery(
            self.session.passage,
            list(self.session.presets),
            tuple(sample.token_ids[:step]),
            sample.tokens[step].token_id,
            top=self.inspector.plot.top_n,
        )
        self._step_waiting = query
        if self._step_serial is None:
            self._send_waiting_step()

    def _on_step_chosen(self, step: int) -> None:
        if self._inspected:
            self.inspect(self._inspected[0], self._inspected[1], step)

    def _send_waiting_step(self) -> None:
        if self._step_waiting is not None:
            self._step_serial = self.engine.compute_step(self._step_waiting)
            self._step_waiting = None

    def _on_step_ready(self, serial: int, view) -> None:
        if serial != self._step_serial:
            return
        self._step_serial = None
        if self._step_waiting is None:
            names = [self._column_name(c) for c in range(len(self.session.presets))]
            self.inspector.plot.show_step(view, names, self._drawn_text())
        self._send_waiting_step()

    def _drawn_text(self) -> str | None:
        if not self._inspected:
            return None
        sample = self.session.sample(SampleRef(self._inspected[0], self._inspected[1]))
        step = self._inspected[2]
        return sample.tokens[step].text if sample and step < len(sample.tokens) else None

    def _clear_inspection(self) -> None:
        self._inspected = None
        self._step_waiting = None
        if self._step_serial is not None:
            self.engine.cancel(self._step_serial)  # skipped if still queued; a late answer is dropped
        self._step_serial = None
        self.grid.unmark()
        self.inspector.set_sample(None, None, None)
        self.inspector.plot.show_step(None, [])

    def clear_audition(self) -> None:
        """Forget every sample, the last request and the inspected step (e.g. after a model switch)."""
        if self.running():
            self.engine.cancel(self._run_serial)
            self._run_serial = None
        self.session.clear()
        self._last_request = None
        self._column_ids, self._column_drafts = [], []
        self._clear_inspection()
        self.grid.clear()
        self.progress.setRange(0, 1)
        self.progress.setValue(0)
        self._update_buttons()

    def copy_current_sample(self) -> None:
        """Copy the inspected sample's text to the clipboard."""
        if not self._inspected:
            self.statusBar().showMessage("Click a token of a sample first, then copy.", 5000)
            return
        sample = self.session.sample(SampleRef(self._inspected[0], self._inspected[1]))
        text = sample.text or "".join(t.text for t in sample.tokens)
        QGuiApplication.clipboard().setText(text)
        self.statusBar().showMessage("Sample text copied.", 4000)
