"""Editing presets: add, duplicate, rename, delete (undoable), save edits (with the
library's conflict check, and a copy as a file when the library cannot be
written), never drop unsaved edits unasked, export and import.

The edits live in the core :class:`~samplewright.core.library.draft.Draft`;
the editor widget shows the draft's record and reports what is typed into it.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QObject
from PySide6.QtWidgets import QStatusBar

from ..core.engines.exporting import destination_kind, write_for_target
from ..core.errors import SamplewrightError
from ..core.library.draft import Draft
from ..core.library.importing import apply_import, preview_import
from ..core.library.library import SaveConflict
from ..core.library.records import PresetRecord
from ..core.library.settings_file import export_preset_file, read_importable
from ..core.presets import Preset
from .export_check import ExportChecker
from .export_dialog import TARGET_LABELS
from .library_folder import LibraryInUse
from .library_panel import QtLibraryList
from .preset_editor import QtPresetEditor
from .prompts import QtPrompts

# The audition's column limit (the stage registry work moves UI limits into the core).
MAX_AUDITION_PRESETS = 6

SETTINGS_FILTER = "Samplewright settings (*.json);;All files (*)"
PRESET_FILTER = "Preset file (*.json);;All files (*)"
#: The File menu's import entry (a failed save points the user to it).
IMPORT_TEXT = "Import settings file…"


class PresetController(QObject):
    """Keeps the editor, the draft and the library in step.

    Args:
        draft: the core draft the editor shows.
        in_use: which library the window shows.
        editor, library_list: the widgets it drives.
        prompts, status: where problems, questions and notes are shown.
        model_name: the loaded model's name, or None (written into exported settings files).
    """

    def __init__(
        self,
        draft: Draft,
        in_use: LibraryInUse,
        editor: QtPresetEditor,
        library_list: QtLibraryList,
        prompts: QtPrompts,
        status: QStatusBar,
        model_name: Callable[[], str | None],
        parent: QObject | None = None,
        checker: ExportChecker | None = None,
    ):
        super().__init__(parent)
        #: Runs the after-export transformers check (None: the check is not offered).
        self.checker = checker
        self.draft, self.in_use, self.editor, self.library_list = draft, in_use, editor, library_list
        self.prompts, self.status, self.model_name = prompts, status, model_name
        draft.loaded.connect(lambda record: editor.set_preset(record.preset if record else None))
        draft.loaded.connect(lambda record: editor.show_stage_kept(None))
        editor.validity_changed.connect(lambda valid: self._take_edits())
        editor.save_requested.connect(self.save_edited_preset)
        editor.revert_button.clicked.connect(self._on_reverted)  # runs after the editor's own revert
        library_list.current_changed.connect(self._on_current_preset_changed)

    @property
    def library(self):
        """The library in use."""
        return self.in_use.library

    def _take_edits(self) -> None:
        problem = self.editor.draft_problem()
        self.draft.update(None if problem is not None else self.editor.edited(), problem)

    def show_step_figures(self, view, record_ids: list, where: str) -> None:
        """Show in the editor's blocks what each stage keeps at the inspected step, when the edited
        preset is one of the audition's columns (``view`` is the step view, None when none is shown)."""
        loaded = self.draft.record
        column = record_ids.index(loaded.id) if loaded is not None and loaded.id in record_ids else None
        if view is None or column is None or column >= len(view.presets):
            note = "" if view is None else "This preset is not in the audition: tick it and generate to see figures."
            self.editor.show_stage_kept(None, note)
            return
        self.editor.show_stage_kept(view.presets[column].stages, f"{where}, as written in that column:")

    def current_record(self) -> PresetRecord | None:
        """The highlighted preset's record (None, said in the status bar, when none is highlighted)."""
        record_id = self.library_list.current_id()
        if record_id is None:
            self.status.showMessage("Highlight a preset in the list first.", 5000)
            return None
        try:
            return self.library.get(record_id)
        except SamplewrightError as error:
            self.prompts.show_error(str(error))
            return None

    # -- following the list and the library ------------------------------------------------
    def _on_current_preset_changed(self, record_id: str | None) -> None:
        draft = self.draft
        if draft.busy:
            return
        loaded = draft.record
        record = self.in_use.record(record_id)
        if loaded is not None and record_id == loaded.id:
            self._follow_library(record)
            return
        if loaded is not None and draft.dirty:
            if self.library_list.refreshing:
                # The list moved by itself: the edited preset left the library. Keep the edits.
                self.editor.set_notice(
                    f"'{loaded.name}' is no longer in the library (deleted by someone "
                    "else?). Your edits are kept here: save them to put it back, or "
                    "save a copy as a file (Ctrl+Shift+S)."
                )
                return
            if not self.settle_draft():
                self.library_list.select(loaded.id, quiet=True)
                return
            record = self.in_use.record(record_id)
        draft.load(record)

    def _follow_library(self, record: PresetRecord | None) -> None:
        """The edited preset's record may have changed in the library (a rename, a colleague's save)."""
        follow = self.draft.library_moved(record)
        if follow == "reload":
            self.draft.load(record)
        elif follow == "keep_edits" and record is not None:
            who = record.modified_by or "someone"
            self.editor.set_notice(
                f"'{record.name}' was saved by {who} (revision {record.revision}) while you were "
                "editing it. Saving your edits will ask which version to keep."
            )

    def _on_reverted(self) -> None:
        """After Revert, show the library's newest revision (a colleague may have saved meanwhile)."""
        loaded = self.draft.record
        latest = self.in_use.record(loaded.id) if loaded else None
        if latest is not None and latest != loaded:
            self.draft.load(latest)

    def settle_draft(self) -> bool:
        """Ask what to do with unsaved edits before they would be lost.

        Returns:
            True when it is fine to go on (nothing unsaved, saved, or discarded),
            False when the user cancelled or the save did not happen.
        """
        draft = self.draft
        loaded = draft.record
        if loaded is None or not draft.dirty:
            return True
        problem = draft.problem
        with draft.asking_now():
            answer = self.prompts.ask_unsaved(loaded.name, problem)
        if answer == "discard":
            draft.load(self.in_use.record(loaded.id) or loaded)
            return True
        if answer != "save" or problem is not None or draft.edits is None:
            return False
        done, saved = self._store_draft(draft.edits)
        if done:
            same = saved if saved is not None and saved.id == loaded.id else self.in_use.record(loaded.id)
            draft.load(same)
        return done

    # -- changes -----------------------------------------------------------------------------
    def new_preset(self) -> None:
        """Add a preset with neutral settings, named so it is unique."""
        if not self.settle_draft():
            return
        taken = {r.name for r in self.library.records()}
        name = next(
            n for n in (f"New preset {i}" if i > 1 else "New preset" for i in range(1, 10_000)) if n not in taken
        )
        # No description: one saying "neutral" would be wrong as soon as a value changes.
        self.library_list.push_add(Preset(name))

    def duplicate_preset(self) -> None:
        """Add a copy of the highlighted preset."""
        record = self.settle_draft() and self.current_record()
        if record:
            name = self.library.unused_name(record.name, "copy")
            self.library_list.push_add(record.preset.replace(name=name))

    def rename_preset(self) -> None:
        """Ask for a new name for the highlighted preset."""
        record = self.settle_draft() and self.current_record()
        if not record:
            return
        name = self.prompts.ask_text("Rename preset", "New name:", record.name)
        if name is None or name.strip() == record.name:
            return
        try:
            record.preset.replace(name=name)
        except ValueError as error:
            self.prompts.show_error("That name cannot be used", str(error))
            return
        self.library_list.push_rename(record.id, name.strip())

    def delete_preset(self) -> None:
        """Move the highlighted preset to the trash (Ctrl+Z brings it back)."""
        record = self.settle_draft() and self.current_record()
        if record:
            self.library_list.push_delete(record.id)
            self.status.showMessage(f"Deleted '{record.name}'. Undo with Ctrl+Z.", 6000)

    # -- saving ------------------------------------------------------------------------------
    def save_edited_preset(self, preset: Preset) -> None:
        """Save the editor's preset as the next revision of the record it was loaded from."""
        if self.draft.record is None:
            return
        done, saved = self._store_draft(preset)
        if not done:
            return
        self.draft.load(saved)
        if saved is None:
            self.status.showMessage("Kept the library's version: the preset stays deleted.", 8000)
            return
        self.library_list.select(saved.id)
        self.status.showMessage(f"Saved '{saved.name}' (revision {saved.revision}).", 5000)

    def _store_draft(self, preset: Preset) -> tuple[bool, PresetRecord | None]:
        """Write the edited ``preset`` over the loaded record.

        Returns:
            (done, record): done is False when nothing was written and the edits
            must stay in the editor; record is what the library now holds for
            them (None when the user took a colleague's deletion).
        """
        loaded = self.draft.record
        if loaded is None:
            return False, None
        with self.draft.saving_now():
            try:
                return True, self.library.save(loaded.edited(preset))
            except SaveConflict as conflict:
                return self._settle_conflict(conflict)
            except SamplewrightError as error:
                self.report_save_failure(loaded.name, str(error))
                return False, None

    def _settle_conflict(self, conflict: SaveConflict) -> tuple[bool, PresetRecord | None]:
        choice = self.prompts.ask_conflict_choice(str(conflict))
        if choice is None:
            return False, None
        try:
            return True, self.library.resolve_conflict(conflict, choice)
        except SamplewrightError as error:
            self.report_save_failure(conflict.mine.name, str(error))
            return False, None

    def report_save_failure(self, name: str, message: str) -> None:
        """Say why the edits of ``name`` were not saved, and offer to write them to a file."""
        self.prompts.last_error = message
        text = (
            f"{message}\n\nYour edits to '{name}' are still in the editor. You can save a copy as a "
            f"file now and bring it into the library later with File ▸ {IMPORT_TEXT}"
        )
        if self.prompts.offer_copy("The preset was not saved", text):
            self.save_copy_as_file()

    def save_copy_as_file(self) -> None:
        """Write the preset being edited, edits included, to a preset file of the user's choosing."""
        draft = self.draft
        if draft.record is None:
            self.status.showMessage("Choose a preset to edit first.", 5000)
            return
        if draft.problem is not None or draft.edits is None:
            self.prompts.show_error(
                "The copy was not written", f"{draft.problem}. Correct the field first; a copy must be a valid preset."
            )
            return
        preset = draft.edits
        path = self.prompts.ask_save_path("Save a copy of the preset as a file", PRESET_FILTER, f"{preset.name}.json")
        if not path:
            return
        try:
            export_preset_file(preset, path)
        except SamplewrightError as error:
            self.prompts.show_error("The copy was not written", str(error))
            return
        self.status.showMessage(f"Saved a copy of '{preset.name}' to {path}. Your edits are still open.", 10000)

    # -- settings files ----------------------------------------------------------------------
    def export_chosen(self) -> None:
        """Write the ticked presets (or the highlighted one) for the target the user picks in the
        export dialog, after it has shown whether that target writes the same way."""
        current = self.library_list.current_id()
        ids = self.library_list.chosen or ([current] if current else [])
        if not ids:
            self.prompts.show_error("Nothing to export", "Tick the presets to export in the list, then try again.")
            return
        presets = [self.library.get(i).preset for i in ids]
        choice = self.prompts.choose_export_target(presets, self.add_for_audition)
        if choice is None:
            return
        target = choice.target
        if destination_kind(target, len(presets)) == "folder":
            path = self.prompts.ask_folder(
                f"Export {len(presets)} preset(s) for {TARGET_LABELS[target]}: choose a folder"
            )
        else:
            path = self.prompts.ask_save_path("Export presets", SETTINGS_FILTER, "presets.json")
        if not path:
            return
        try:
            message, files = write_for_target(presets, target, path, model=self.model_name())
        except SamplewrightError as error:
            self.prompts.show_error("The export was not written", str(error))
            return
        self.status.showMessage(message, 8000)
        if choice.check and target == "transformers" and self.checker is not None:
            self.checker.start(presets, files)

    def add_for_audition(self, preset: Preset) -> None:
        """Add ``preset`` (an engine's closest expressible variant) to the library under a free
        name and tick it for the next audition when there is room."""
        if any(record.name.casefold() == preset.name.casefold() for record in self.library.records()):
            preset = preset.replace(name=self.library.unused_name(preset.name, "copy"))
        new_id = self.library_list.push_add(preset)
        if new_id and len(self.library_list.chosen) < MAX_AUDITION_PRESETS:
            self.library_list.set_chosen([*self.library_list.chosen, new_id])
        self.status.showMessage(f"Added “{preset.name}” to the library and ticked it for the next audition.", 8000)

    def import_settings(self, path: str | None = None) -> None:
        """Read a settings file (or a preset file saved as a copy), show what importing would do,
        and import on confirmation."""
        path = path or self.prompts.ask_open_path("Import a settings file", SETTINGS_FILTER)
        if not path:
            return
        try:
            plan = preview_import(read_importable(path), self.library)
        except SamplewrightError as error:
            self.prompts.show_error("The settings file cannot be imported", str(error))
            return
        choices = self.prompts.confirm_import(plan, Path(path).name)
        if choices is None:
            return
        try:
            with self.library_list.batched():
                written = apply_import(plan, self.library, choices)
        except SamplewrightError as error:
            self.prompts.show_error("The import did not finish", str(error))
            return
        self.status.showMessage(f"Imported {len(written)} preset(s) from {Path(path).name}.", 8000)
