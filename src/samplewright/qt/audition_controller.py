"""Running auditions: start, stop and regenerate runs, and inspect a step of a sample.

What belongs to the audition (its columns, which were unsaved drafts, the last
run's settings, the inspected step, the run's serial) lives in the core
:class:`~samplewright.core.engine.session.AuditionSession`; this controller
turns clicks into engine requests and engine answers into session calls.
A run's serial is the engine's request serial, handed to the session, so one
number names the run. Answers for another serial are dropped. Step views are
"latest wins": while one is being computed, only the newest click waits. While
the user edits a preset that has a column in the view, the inspected step is
computed again with the typed values (debounced), so a change is seen at once.
"""

from __future__ import annotations

import contextlib
import dataclasses
import random
from collections.abc import Callable, Sequence

from PySide6.QtCore import QObject, QTimer, Signal
from PySide6.QtGui import QGuiApplication
from PySide6.QtWidgets import QStatusBar

from ..core.engine.audition_file import AuditionFileError, audition_dict, load_audition, runs_folder, save_audition
from ..core.engine.session import AuditionSession, SampleRef
from ..core.engine.staleness import staleness
from ..core.library.draft import Draft
from ..core.library.records import PresetRecord
from ..core.limits import MAX_PRESETS
from ..core.presets import Preset, now_iso
from ..core.results import AuditionRequest
from .audition_controls import QtAuditionControls
from .audition_view import DRAFT_MARK, QtAuditionGrid
from .library_folder import LibraryInUse
from .library_panel import QtLibraryList
from .passage_panel import QtPassagePanel
from .prompts import QtPrompts
from .step_inspector import QtStepInspector
from .workers import EngineThread, StepQuery

#: How long typing must pause before the inspected step is computed again with the typed values.
LIVE_EDIT_MS = 250
#: Beside a preset's name in the step view while it shows the editor's typed values.
EDITING_MARK = "(as typed)"
AUDITION_FILTER = "Samplewright audition (*.json);;All files (*)"


class AuditionController(QObject):
    """Drives the audition grid, its controls and the step inspector from the session.

    Args:
        session: the core audition session the grid shows.
        engine: the engine thread that generates and computes step views.
        draft: the editor's draft (a column may be written with its unsaved edits).
        in_use: which library the window shows (it changes when the user picks another folder).
        prompts, status: where problems and notes are shown.
        controls, grid, inspector, library_list, passage: the widgets it reads and drives.

    Signals:
        state_changed(can_generate, running, can_regenerate): for the window's actions.
        step_shown(view or None, record_ids, where): a step view is shown (None: none), with each
            column's library record and which step it is, in words.
    """

    state_changed = Signal(bool, bool, bool)
    step_shown = Signal(object, list, str)

    def __init__(
        self,
        session: AuditionSession,
        engine: EngineThread,
        draft: Draft,
        in_use: LibraryInUse,
        prompts: QtPrompts,
        status: QStatusBar,
        controls: QtAuditionControls,
        grid: QtAuditionGrid,
        inspector: QtStepInspector,
        library_list: QtLibraryList,
        passage: QtPassagePanel,
        parent: QObject | None = None,
    ):
        super().__init__(parent)
        self.session, self.engine, self.draft, self.in_use = session, engine, draft, in_use
        self.prompts, self.status = prompts, status
        self.controls, self.grid, self.inspector, self.library_list = controls, grid, inspector, library_list
        self.passage = passage
        self.model_ready = False
        self.run_note = ""
        #: The loaded model's name, or None (the window sets it; written into saved auditions).
        self.model_name: Callable[[], str | None] = lambda: None
        self._step_serial: int | None = None
        self._step_waiting: StepQuery | None = None
        self._step_names: tuple[list[str], bool] = ([], False)  # names and "live" of the waiting query
        self._shown_names: tuple[list[str], bool] = ([], False)  # the same for the query being computed
        self._live_timer = QTimer(self)
        self._live_timer.setSingleShot(True)
        self._live_timer.setInterval(LIVE_EDIT_MS)
        self._live_timer.timeout.connect(self._refresh_inspected)
        draft.edited.connect(lambda edits: self._on_draft_edited())
        worker = engine.worker
        worker.model_ready.connect(self._on_model_ready)
        worker.tokens_ready.connect(self._on_tokens)
        worker.audition_ready.connect(self._on_audition_ready)
        worker.step_ready.connect(self._on_step_ready)
        worker.failed.connect(self._on_failed)
        session.progress.connect(controls.show_progress)
        grid.token_clicked.connect(self.inspect)
        grid.regenerate_requested.connect(self.regenerate_column)
        inspector.step_chosen.connect(self._on_step_chosen)
        controls.generate_button.clicked.connect(self.generate_all)
        controls.stop_button.clicked.connect(self.stop_generation)
        library_list.chosen_changed.connect(lambda ids: self.update_buttons())
        grid.generate_again_requested.connect(self.generate_all)
        passage.passage_settled.connect(lambda text: self.check_staleness())
        passage.framing_changed.connect(self.check_staleness)
        self.watched = in_use.library
        in_use.switched.connect(self._follow_library)
        self._follow_library(in_use.library)

    # -- running -----------------------------------------------------------------------------
    def running(self) -> bool:
        """Whether an audition is being generated."""
        return self.session.running

    def set_model_ready(self, ready: bool) -> None:
        """Say whether a model is loaded (Generate waits for one)."""
        self.model_ready = ready
        self.update_buttons()

    def generate_all(self) -> None:
        """Write samples for every ticked preset."""
        problem = self._why_not_generate()
        if problem:
            self.prompts.show_error("Cannot generate yet", problem)
            return
        controls = self.controls
        if controls.new_seed_box.isChecked():
            controls.seed_spin.setValue(random.randrange(2**31))
        records = [self.in_use.library.get(i) for i in self.library_list.chosen]
        presets, drafts, notes = self._audition_presets(records)
        request = AuditionRequest(
            self.passage.text(),
            presets,
            samples=controls.samples_spin.value(),
            max_new_tokens=controls.tokens_spin.value(),
            seed=controls.seed_spin.value(),
            framing=self.passage.framing(),
        )
        self.clear_inspection()
        self._start(request, None, [r.id for r in records], drafts, notes)

    def _follow_library(self, library) -> None:
        """Watch ``library`` (now in use) for changes that put the samples out of date."""
        for emitter in (self.watched.added, self.watched.changed, self.watched.removed):
            with contextlib.suppress(ValueError):  # not connected yet (the first library)
                emitter.disconnect(self._on_library_event)
        self.watched = library
        for emitter in (library.added, library.changed, library.removed):
            emitter.connect(self._on_library_event)
        self.check_staleness()

    def _on_library_event(self, record) -> None:
        self.check_staleness()

    def check_staleness(self) -> None:
        """Say which samples no longer belong to the passage, folder or presets on screen; a column
        written with unsaved edits loses its draft mark once they are saved."""
        session = self.session
        if session.request is None or session.running:
            self.grid.show_staleness(None, [])
            return
        library = self.in_use.library
        report = staleness(
            session.presets,
            session.record_ids,
            session.drafts,
            self.in_use.record,
            (session.request.passage, session.library_folder),
            (self.passage.text(), library.folder),
        )
        if report.audition is None and session.request.framing != self.passage.framing():
            message = "The way the model is asked changed since these samples were written."
            report = dataclasses.replace(report, audition=message)
        for column, saved in enumerate(report.saved_drafts):
            if saved:
                session.mark_saved(column)
                self.grid.mark_draft(column, False)
        self.grid.show_staleness(report.audition, list(report.columns))

    def regenerate_column(self, column: int) -> None:
        """Write one preset's samples again with the last run's passage, seed and sizes."""
        session = self.session
        if session.request is None or self.running() or column >= len(session.presets):
            return
        record_id = session.record_ids[column]
        record = self.in_use.record(record_id)  # picks up a saved edit, or the draft
        if record is not None:
            (preset,), drafts, notes = self._audition_presets([record])
        else:
            preset, drafts, notes = session.presets[column], [session.is_draft(column)], []
        same = preset.parameters() == session.presets[column].parameters()
        # The same preset on the same numbers would write the same text: give the column new numbers.
        seed = random.randrange(2**31) if same else None
        request = session.regenerate_request(column, preset, seed=seed)
        if request is None:
            return
        notes = notes + [
            f"New random numbers for this column (seed {request.seed}): its rows no longer share draws "
            "with the other columns."
            if same
            else "The same random numbers as the other columns, so each row shows what the change does."
        ]
        inspected = session.inspected
        if inspected and inspected.column == column:
            self.clear_inspection()
        self._start(request, [column], [record_id], drafts, notes)

    def _audition_presets(self, records: Sequence[PresetRecord]) -> tuple[list[Preset], list[bool], list[str]]:
        """Each record's preset, or the editor's valid unsaved draft of it, so a value can be tried
        before it is saved; returns the presets, which are drafts, and notes for the status bar."""
        presets, drafts, notes = [], [], []
        for record in records:
            edits, problem = self.draft.usable_edits(record.id)
            presets.append(edits or record.preset)
            drafts.append(edits is not None)
            if edits is not None:
                notes.append(f"'{edits.name}' uses your unsaved edits.")
            elif problem is not None:
                notes.append(f"'{record.name}' uses its saved version: an edit is not valid ({problem}).")
        return presets, drafts, notes

    def column_name(self, column: int) -> str:
        """A column's preset name as the step view shows it, marked when it was an unsaved draft."""
        name = self.session.presets[column].name
        return f"{name} {DRAFT_MARK}" if self.session.is_draft(column) else name

    def regenerate_current(self) -> None:
        """New samples for the preset whose sample is being inspected (else the first column, said so)."""
        inspected = self.session.inspected
        column = inspected.column if inspected else 0
        self.regenerate_column(column)
        if not inspected and self.running() and self.session.presets:
            self.status.showMessage(
                f"Writing new samples for '{self.column_name(column)}', the first column. To choose another "
                "preset, click a token in its samples first, or use the ↻ button above its column."
            )

    def _start(self, request: AuditionRequest, columns, record_ids, drafts, notes: list[str]) -> None:
        if self.running():
            self.engine.cancel(self.session.serial)
        serial = self.engine.run_audition(request)
        folder = self.in_use.library.folder
        self.session.begin(request, columns, serial=serial, record_ids=record_ids, drafts=drafts, library_folder=folder)
        for column in columns or range(len(request.presets)):
            self.grid.mark_draft(column, self.session.is_draft(column))
            self.show_column_note(column)
        self.grid.show_staleness(None, [])
        self.controls.show_progress(0, 0)
        self.run_note = notes[-1] if columns is not None and notes else ""  # what ↻ did with the random numbers
        self.status.showMessage(" ".join(["Generating…"] + notes))
        self.update_buttons()

    def show_column_note(self, column: int) -> None:
        """Say in the column which token limit applied and whether it has random numbers of its own."""
        limit = self.session.token_limit(column)
        if limit is None or column >= len(self.grid.headers):
            return
        tokens, which = limit
        set_by = "its own token limit" if which == "preset" else "the audition's New tokens"
        seed = self.session.seeds[column]
        numbers = f" · own seed {seed}" if self.session.own_numbers(column) else ""
        request, own = self.session.request, self.session.presets[column].max_new_tokens
        tip = (
            f"A sample ends at the smaller of the preset's own token limit ({own}) "
            f"and the audition's New tokens ({request.max_new_tokens if request else '–'}); here that was {tokens}. "
            f"Random numbers: seed {seed}"
            + (", not the run's: rows do not share draws with the other columns." if numbers else ", as every column.")
        )
        self.grid.headers[column].set_note(f"up to {tokens} tokens ({set_by}){numbers}", tip)

    def stop_generation(self) -> None:
        """Ask the running audition to stop after its current token; samples so far stay."""
        if self.running():
            self.engine.cancel(self.session.serial)
            self.status.showMessage("Stopping…")

    def _why_not_generate(self) -> str | None:
        if not self.model_ready:
            return "The model is still loading (see the status bar). Try again when it is ready."
        if not self.passage.text().strip():
            return "The passage is empty. Type or paste a draft passage, or open one with Ctrl+O."
        if problem := self.passage.framing_problem():
            return problem
        if not self.library_list.chosen:
            return f"No preset is ticked. Tick up to {MAX_PRESETS} presets in the list on the left."
        return None

    def update_buttons(self) -> None:
        """Enable Generate, Stop and ↻ as the run and the model allow; tell the window's actions."""
        running = self.running()
        ready = self.model_ready and bool(self.library_list.chosen)
        self.controls.generate_button.setEnabled(ready and not running)
        self.controls.stop_button.setEnabled(running)
        for header in self.grid.headers:
            header.regenerate.setEnabled(not running)
        self.state_changed.emit(ready and not running, running, self.session.request is not None and not running)

    # -- answers from the engine thread ------------------------------------------------------
    def _on_tokens(self, serial: int, events) -> None:
        self.session.add_events(serial, events)

    def _on_audition_ready(self, serial: int, result, metrics) -> None:
        if not self.session.finish(serial, result, metrics):
            return
        if result.cancelled:
            self.status.showMessage("Stopped; the samples so far are kept.", 6000)
        else:
            wrote = f"Wrote {result.tokens_generated()} tokens in {result.seconds:.1f} s."
            self.status.showMessage(f"{wrote} {self.run_note}".strip(), 8000)
        progress = self.controls.progress
        progress.setValue(progress.maximum() if not result.cancelled else progress.value())
        self.update_buttons()
        inspected = self.session.inspected
        if inspected:
            self.inspect(inspected.column, inspected.row, inspected.step)
        self.check_staleness()

    def _on_failed(self, serial: int, kind: str, message: str) -> None:
        if kind == "audition" and self.session.fail(serial, message):
            self.update_buttons()
            self.status.showMessage("The run stopped.", 6000)
            if message:
                self.prompts.show_error("Generation stopped", message)
        elif kind == "step" and serial == self._step_serial:
            self._step_serial = None
            if message:
                self.status.showMessage(f"Could not show that step: {message}", 8000)
            self._send_waiting_step()

    # -- inspecting a step -------------------------------------------------------------------
    def inspect(self, column: int, row: int, step: int) -> None:
        """Make ``step`` of sample ``row`` of preset ``column`` the current step."""
        ref = self.session.inspect(column, row, step)
        sample = self.session.sample(SampleRef(column, row))
        if ref is None or sample is None:
            return
        self.grid.mark(column, row, ref.step)
        self.inspector.set_sample(column, self.column_name(column), row, len(sample.tokens), ref.step)
        presets, names, live = self._step_presets()
        self._step_names = (names, live)
        self._step_waiting = StepQuery(
            self.session.passage,
            presets,
            tuple(sample.token_ids[: ref.step]),
            sample.tokens[ref.step].token_id,
            top=self.inspector.plot.top_n,
            framing=self.session.request.framing if self.session.request else None,
        )
        if self._step_serial is None:
            self._send_waiting_step()

    def _step_presets(self) -> tuple[list[Preset], list[str], bool]:
        """The presets the step view compares: each column's, or the editor's valid typed values
        for the preset being edited; their names; and whether typed values are among them."""
        presets, names, live = [], [], False
        record = self.draft.record
        for column, preset in enumerate(self.session.presets):
            edits = self.draft.edits if record is not None and self.session.record_ids[column] == record.id else None
            if edits is not None and edits != preset:
                presets.append(edits)
                names.append(f"{edits.name} {EDITING_MARK}")
                live = True
            else:
                presets.append(preset)
                names.append(self.column_name(column))
        return presets, names, live

    def _on_draft_edited(self) -> None:
        record = self.draft.record
        if self.session.inspected is not None and record is not None and record.id in self.session.record_ids:
            self._live_timer.start()  # restarted by every keystroke: computed once typing pauses

    def _refresh_inspected(self) -> None:
        inspected = self.session.inspected
        if inspected is not None:
            self.inspect(inspected.column, inspected.row, inspected.step)

    def _on_model_ready(self, serial: int, info) -> None:
        vocabulary = getattr(info, "vocabulary", None)
        self.grid.set_vocabulary(vocabulary)
        self.inspector.set_vocabulary(vocabulary)

    def _on_step_chosen(self, step: int) -> None:
        inspected = self.session.inspected
        if inspected:
            self.inspect(inspected.column, inspected.row, step)

    def _send_waiting_step(self) -> None:
        if self._step_waiting is not None:
            self._step_serial = self.engine.compute_step(self._step_waiting)
            self._shown_names = self._step_names
            self._step_waiting = None

    def _on_step_ready(self, serial: int, view) -> None:
        if serial != self._step_serial:
            return
        self._step_serial = None
        if self._step_waiting is None:
            names, live = self._shown_names
            drawn = self.inspector.label_of(view.drawn_id) if view.drawn_id is not None else None
            if self.inspector.vocabulary is None:
                drawn = self.session.inspected_text()
            self.inspector.show_step(view, names, drawn, live)
            ref = self.session.inspected
            where = (
                f"At step {ref.step + 1} of sample {ref.row + 1} of column {ref.column + 1} ('{names[ref.column]}')"
                if ref
                else ""
            )
            self.step_shown.emit(view, list(self.session.record_ids), where)
        self._send_waiting_step()

    def clear_inspection(self) -> None:
        """Inspect no step: unmark the token and empty the next-token view."""
        self.session.clear_inspection()
        self._step_waiting = None
        if self._step_serial is not None:
            self.engine.cancel(self._step_serial)  # skipped if still queued; a late answer is dropped
        self._step_serial = None
        self.grid.unmark()
        self._live_timer.stop()
        self.inspector.set_sample(None, None, None)
        self.inspector.show_step(None, [])
        self.step_shown.emit(None, [], "")

    def clear_audition(self) -> None:
        """Forget every sample, the last request and the inspected step (e.g. after a model switch)."""
        if self.running():
            self.engine.cancel(self.session.serial)
        self.session.clear()
        self.clear_inspection()
        self.grid.clear()
        self.controls.show_progress(0, 0)
        self.update_buttons()

    def forget_old_model_samples(self) -> None:
        """The model changed: clear the samples the old one wrote, and say why."""
        had_samples = self.session.request is not None
        self.clear_audition()
        if had_samples:
            self.status.showMessage(
                "The model changed, so the earlier samples were cleared: they were written by the old "
                "model. Press Generate all to write new ones.",
                10000,
            )

    # -- keeping an audition ------------------------------------------------------------------
    def save_audition(self) -> None:
        """Write the audition on screen to a run file (under the library's ``runs`` folder by default)."""
        model = self.model_name()
        suggested = runs_folder(self.in_use.library.folder) / f"audition-{now_iso()[:19].replace(':', '')}.json"
        try:
            audition_dict(self.session, model)  # says why there is nothing to save before a file is chosen
        except AuditionFileError as error:
            self.prompts.show_error("Nothing to save yet", str(error))
            return
        path = self.prompts.ask_save_path("Save the audition", AUDITION_FILTER, str(suggested))
        if not path:
            return
        try:
            vocabulary = self.grid.vocabulary
            save_audition(self.session, path, model, vocabulary.bytes_of if vocabulary is not None else None)
        except AuditionFileError as error:
            self.prompts.show_error("The audition was not saved", str(error))
            return
        self.status.showMessage(f"Saved the audition to {path}. Open it again with File ▸ Open audition.", 8000)

    def open_audition(self, path: str | None = None) -> None:
        """Show a saved audition again; it is checked against the passage, folder and presets on screen."""
        folder = runs_folder(self.in_use.library.folder)
        path = path or self.prompts.ask_open_path("Open a saved audition", AUDITION_FILTER, str(folder))
        if not path:
            return
        try:
            saved = load_audition(path)
        except AuditionFileError as error:
            self.prompts.show_error("The audition cannot be opened", str(error))
            return
        if self.running():
            self.engine.cancel(self.session.serial)
        self.clear_inspection()
        self.session.restore(saved)
        for column in range(len(self.session.presets)):
            self.grid.mark_draft(column, self.session.is_draft(column))
            self.show_column_note(column)
        self.update_buttons()
        self.check_staleness()
        model, now = saved.model, self.model_name()
        other = f" It was written by {model}; the loaded model is {now}." if model and now and model != now else ""
        self.status.showMessage(f"Opened the audition saved {saved.saved_at}.{other}", 10000)

    def copy_current_sample(self) -> None:
        """Copy the inspected sample's text to the clipboard."""
        sample = self.session.inspected_sample()
        if sample is None:
            self.status.showMessage("Click a token of a sample first, then copy.", 5000)
            return
        view = self.grid.view(*self.grid.current) if self.grid.current else None
        text = sample.text or (view.growing.text if view is not None else "")
        QGuiApplication.clipboard().setText(text)
        self.status.showMessage("Sample text copied.", 4000)
