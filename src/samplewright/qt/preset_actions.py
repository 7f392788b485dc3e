"""The window's preset behaviour: add, duplicate, rename, delete (undoable),
save edits (with the library's conflict check, and a copy as a file when the
library cannot be written), never drop unsaved edits unasked, export and import."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QMessageBox

from ..core.errors import SamplewrightError
from ..core.library.importing import apply_import, preview_import
from ..core.library.library import SaveConflict
from ..core.library.records import PresetRecord
from ..core.library.settings_file import export_preset_file, export_settings, read_importable
from ..core.presets import Preset
from .dialogs import ImportPreviewDialog, ask_conflict_choice

SETTINGS_FILTER = "Samplewright settings (*.json);;All files (*)"
PRESET_FILTER = "Preset file (*.json);;All files (*)"


class PresetActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`.

    The editor keeps the library record it was loaded from (``_edited_record``),
    so a save always states the revision the edits started from: a colleague's
    save in between is then a conflict to settle, never silently overwritten.
    Unsaved edits are never dropped without asking (:meth:`settle_draft`).
    """

    _edited_record: PresetRecord | None = None
    _saving = False  # our own save is under way: its change events are expected
    _asking = False  # a question about unsaved edits is open

    def _current_record(self):
        record_id = self.library_list.current_id()
        if record_id is None:
            self.statusBar().showMessage("Highlight a preset in the list first.", 5000)
            return None
        try:
            return self.library.get(record_id)
        except SamplewrightError as error:
            self.show_error(str(error))
            return None

    def _record_or_none(self, record_id: str | None) -> PresetRecord | None:
        return next((r for r in self.library.records() if r.id == record_id), None) if record_id else None

    def _load_into_editor(self, record: PresetRecord | None) -> None:
        self._edited_record = record
        self.editor.set_preset(record.preset if record else None)

    def _on_current_preset_changed(self, record_id: str | None) -> None:
        if self._saving or self._asking:
            return
        loaded = self._edited_record
        record = self._record_or_none(record_id)
        if loaded is not None and record_id == loaded.id:
            self._follow_library(loaded, record)
            return
        if loaded is not None and self.editor.is_dirty():
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
            record = self._record_or_none(record_id)
        self._load_into_editor(record)

    def _follow_library(self, loaded: PresetRecord, record: PresetRecord | None) -> None:
        """The edited preset's record may have changed in the library (a rename, a colleague's save)."""
        if record is None or record == loaded:
            return
        if not self.editor.is_dirty():
            self._load_into_editor(record)
            return
        who = record.modified_by or "someone"
        self.editor.set_notice(
            f"'{record.name}' was saved by {who} (revision {record.revision}) while you were "
            "editing it. Saving your edits will ask which version to keep."
        )

    def _on_reverted(self) -> None:
        """After Revert, show the library's newest revision (a colleague may have saved meanwhile)."""
        loaded = self._edited_record
        latest = self._record_or_none(loaded.id) if loaded else None
        if latest is not None and latest != loaded:
            self._load_into_editor(latest)

    def settle_draft(self) -> bool:
        """Ask what to do with unsaved edits before they would be lost.

        Returns:
            True when it is fine to go on (nothing unsaved, saved, or discarded),
            False when the user cancelled or the save did not happen.
        """
        loaded = self._edited_record
        if loaded is None or not self.editor.is_dirty():
            return True
        problem = self.editor.draft_problem()
        self._asking = True
        try:
            answer = self.ask_unsaved(loaded.name, problem)
        finally:
            self._asking = False
        if answer == "discard":
            self._load_into_editor(self._record_or_none(loaded.id) or loaded)
            return True
        if answer != "save" or problem is not None:
            return False
        done, saved = self._store_draft(self.editor.edited())
        if done:
            same = saved if saved is not None and saved.id == loaded.id else self._record_or_none(loaded.id)
            self._load_into_editor(same)
        return done

    def draft_of(self, record_id: str) -> tuple[Preset | None, str | None]:
        """The editor's unsaved edits of a preset, for trying them before saving.

        Returns:
            (draft, problem): the edited preset when the editor holds valid unsaved
            edits of ``record_id`` (else None), and why edits of it cannot be used
            (an invalid field), else None.
        """
        loaded = self._edited_record
        if loaded is None or loaded.id != record_id or not self.editor.is_dirty():
            return None, None
        problem = self.editor.draft_problem()
        return (None, problem) if problem is not None else (self.editor.edited(), None)

    def ask_unsaved(self, name: str, problem: str | None) -> str:
        """Ask about unsaved edits: "save", "discard" or "cancel" (tests replace this).

        Args:
            name: the edited preset's name.
            problem: why the edits cannot be saved as they are, or None.
        """
        box = QMessageBox(
            QMessageBox.Question, "Unsaved changes", f"'{name}' has changes that are not saved.", parent=self
        )
        if problem is None:
            box.setInformativeText("Save them to the library, discard them, or cancel and keep editing.")
            box.setStandardButtons(QMessageBox.Save | QMessageBox.Discard | QMessageBox.Cancel)
            box.setDefaultButton(QMessageBox.Save)
        else:
            box.setInformativeText(
                f"They cannot be saved as they are: {problem}\n\nDiscard them, or cancel and correct the field."
            )
            box.setStandardButtons(QMessageBox.Discard | QMessageBox.Cancel)
            box.setDefaultButton(QMessageBox.Cancel)
        return {QMessageBox.Save: "save", QMessageBox.Discard: "discard"}.get(box.exec(), "cancel")

    def new_preset(self) -> None:
        """Add a preset with neutral settings, named so it is unique."""
        if not self.settle_draft():
            return
        taken = {r.name for r in self.library.records()}
        name = next(
            n for n in (f"New preset {i}" if i > 1 else "New preset" for i in range(1, 10_000)) if n not in taken
        )
        self.library_list.push_add(Preset(name, description="Neutral settings: the model as it is."))

    def duplicate_preset(self) -> None:
        """Add a copy of the highlighted preset."""
        record = self.settle_draft() and self._current_record()
        if record:
            name = self.library.unused_name(record.name, "copy")
            self.library_list.push_add(record.preset.replace(name=name))

    def rename_preset(self) -> None:
        """Ask for a new name for the highlighted preset."""
        record = self.settle_draft() and self._current_record()
        if not record:
            return
        name = self.ask_text("Rename preset", "New name:", record.name)
        if name is None or name.strip() == record.name:
            return
        try:
            record.preset.replace(name=name)
        except ValueError as error:
            self.show_error("That name cannot be used", str(error))
            return
        self.library_list.push_rename(record.id, name.strip())

    def delete_preset(self) -> None:
        """Move the highlighted preset to the trash (Ctrl+Z brings it back)."""
        record = self.settle_draft() and self._current_record()
        if record:
            self.library_list.push_delete(record.id)
            self.statusBar().showMessage(f"Deleted '{record.name}'. Undo with Ctrl+Z.", 6000)

    def save_edited_preset(self, preset: Preset) -> None:
        """Save the editor's preset as the next revision of the record it was loaded from."""
        if self._edited_record is None:
            return
        done, saved = self._store_draft(preset)
        if not done:
            return
        self._load_into_editor(saved)
        if saved is None:
            self.statusBar().showMessage("Kept the library's version: the preset stays deleted.", 8000)
            return
        self.library_list.select(saved.id)
        self.statusBar().showMessage(f"Saved '{saved.name}' (revision {saved.revision}).", 5000)

    def _store_draft(self, preset: Preset) -> tuple[bool, PresetRecord | None]:
        """Write the edited ``preset`` over the loaded record.

        Returns:
            (done, record): done is False when nothing was written and the edits
            must stay in the editor; record is what the library now holds for
            them (None when the user took a colleague's deletion).
        """
        loaded = self._edited_record
        self._saving = True
        try:
            return True, self.library.save(loaded.edited(preset))
        except SaveConflict as conflict:
            return self._settle_conflict(conflict)
        except SamplewrightError as error:
            self._save_failed(loaded.name, str(error))
            return False, None
        finally:
            self._saving = False

    def _settle_conflict(self, conflict: SaveConflict) -> tuple[bool, PresetRecord | None]:
        choice = ask_conflict_choice(self, str(conflict))
        if choice is None:
            return False, None
        try:
            return True, self.library.resolve_conflict(conflict, choice)
        except SamplewrightError as error:
            self._save_failed(conflict.mine.name, str(error))
            return False, None

    def _save_failed(self, name: str, message: str) -> None:
        self.last_error = message
        text = (
            f"{message}\n\nYour edits to '{name}' are still in the editor. You can save a copy as a "
            f"file now and bring it into the library later with File ▸ {self.actions['import'].text()}"
        )
        if self.offer_copy("The preset was not saved", text):
            self.save_copy_as_file()

    def offer_copy(self, title: str, text: str) -> bool:
        """Show why a save failed; True when the user wants to save a copy as a file (tests replace this)."""
        box = QMessageBox(QMessageBox.Warning, title, text, parent=self)
        copy = box.addButton("Save a copy as file…", QMessageBox.AcceptRole)
        box.addButton("Not now", QMessageBox.RejectRole)
        box.setDefaultButton(copy)
        box.exec()
        return box.clickedButton() is copy

    def save_copy_as_file(self) -> None:
        """Write the preset being edited, edits included, to a preset file of the user's choosing."""
        if self._edited_record is None:
            self.statusBar().showMessage("Choose a preset to edit first.", 5000)
            return
        problem = self.editor.draft_problem()
        if problem is not None:
            self.show_error(
                "The copy was not written", f"{problem}. Correct the field first; a copy must be a valid preset."
            )
            return
        preset = self.editor.edited()
        path = self.ask_save_path("Save a copy of the preset as a file", PRESET_FILTER, f"{preset.name}.json")
        if not path:
            return
        try:
            export_preset_file(preset, path)
        except SamplewrightError as error:
            self.show_error("The copy was not written", str(error))
            return
        self.statusBar().showMessage(f"Saved a copy of '{preset.name}' to {path}. Your edits are still open.", 10000)

    def export_chosen(self) -> None:
        """Write the ticked presets (or the highlighted one) to a settings file."""
        ids = self.library_list.chosen or ([self.library_list.current_id()] if self.library_list.current_id() else [])
        if not ids:
            self.show_error("Nothing to export", "Tick the presets to export in the list, then try again.")
            return
        presets = [self.library.get(i).preset for i in ids]
        path = self.ask_save_path("Export presets", SETTINGS_FILTER, "presets.json")
        if not path:
            return
        try:
            export_settings(presets, path, model=self.model_info.name if self.model_info else None)
        except SamplewrightError as error:
            self.show_error("The settings file was not written", str(error))
            return
        self.statusBar().showMessage(f"Exported {len(presets)} preset(s) to {path}.", 8000)

    def import_settings(self, path: str | None = None) -> None:
        """Read a settings file (or a preset file saved as a copy), show what importing would do,
        and import on confirmation."""
        path = path or self.ask_open_path("Import a settings file", SETTINGS_FILTER)
        if not path:
            return
        try:
            plan = preview_import(read_importable(path), self.library)
        except SamplewrightError as error:
            self.show_error("The settings file cannot be imported", str(error))
            return
        choices = self.confirm_import(plan, Path(path).name)
        if choices is None:
            return
        try:
            with self.library_list.batched():
                written = apply_import(plan, self.library, choices)
        except SamplewrightError as error:
            self.show_error("The import did not finish", str(error))
            return
        self.statusBar().showMessage(f"Imported {len(written)} preset(s) from {Path(path).name}.", 8000)

    def confirm_import(self, plan, source: str) -> dict | None:
        """Show the import preview; the chosen conflict actions, or None when cancelled."""
        dialog = ImportPreviewDialog(plan, source, self)
        return dialog.choices() if dialog.exec() else None
