"""The window's preset behaviour: add, duplicate, rename, delete (undoable),
save edits (with the library's conflict check), export and import."""
from __future__ import annotations

from pathlib import Path
from typing import Optional

from ..core.errors import SamplewrightError
from ..core.importing import apply_import, preview_import
from ..core.library import SaveConflict
from ..core.presets import Preset
from ..core.settings_file import export_settings, read_settings
from .dialogs import ImportPreviewDialog, ask_conflict_choice

SETTINGS_FILTER = "Samplewright settings (*.json);;All files (*)"


class PresetActions:
    """Mixed into :class:`~samplewright.qt.main_window.MainWindow`."""

    _edited_id: Optional[str] = None
    _saving = False       # our own save is under way: its change events are expected

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

    def _on_current_preset_changed(self, record_id: Optional[str]) -> None:
        try:
            record = self.library.get(record_id) if record_id else None
        except SamplewrightError:
            record = None
        preset = record.preset if record else None
        if preset == self.editor.original or self._saving:
            return
        if self.editor.is_dirty() and record is not None and self._edited_id == record_id:
            self.statusBar().showMessage(f"'{record.name}' changed in the library while you were editing it; "
                                         "saving will ask what to keep.", 8000)
            return
        self._edited_id = record_id
        self.editor.set_preset(preset)

    def new_preset(self) -> None:
        """Add a preset with neutral settings, named so it is unique."""
        taken = {r.name for r in self.library.records()}
        name = next(n for n in (f"New preset {i}" if i > 1 else "New preset" for i in range(1, 10_000))
                    if n not in taken)
        self.library_list.push_add(Preset(name, description="Neutral settings: the model as it is."))

    def duplicate_preset(self) -> None:
        """Add a copy of the highlighted preset."""
        record = self._current_record()
        if record:
            name = self.library.unused_name(record.name, "copy")
            self.library_list.push_add(record.preset.replace(name=name))

    def rename_preset(self) -> None:
        """Ask for a new name for the highlighted preset."""
        record = self._current_record()
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
        record = self._current_record()
        if record:
            self.library_list.push_delete(record.id)
            self.statusBar().showMessage(f"Deleted '{record.name}'. Undo with Ctrl+Z.", 6000)

    def rescan_library(self) -> None:
        """Re-read the library folder to pick up colleagues' changes."""
        try:
            report = self.library.rescan()
        except SamplewrightError as error:
            self.show_error("The library could not be read", str(error))
            return
        self.statusBar().showMessage(f"Library reloaded: {len(report.added)} new, {len(report.changed)} changed, "
                                     f"{len(report.removed)} removed.", 6000)

    def save_edited_preset(self, preset: Preset) -> None:
        """Save the editor's preset as the next revision of its library record."""
        record = self._current_record()
        if record is None:
            return
        self._saving = True
        try:
            saved = self.library.save(record.edited(preset))
        except SaveConflict as conflict:
            saved = self._settle_conflict(conflict)
        except SamplewrightError as error:
            self.show_error("The preset was not saved", str(error))
            return
        finally:
            self._saving = False
        if saved is not None:
            self.library_list.select(saved.id)
            self.editor.set_preset(saved.preset)
            self.statusBar().showMessage(f"Saved '{saved.name}' (revision {saved.revision}).", 5000)

    def _settle_conflict(self, conflict: SaveConflict):
        choice = ask_conflict_choice(self, str(conflict))
        if choice is None:
            return None
        try:
            return self.library.resolve_conflict(conflict, choice)
        except SamplewrightError as error:
            self.show_error("The preset was not saved", str(error))
            return None

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

    def import_settings(self, path: Optional[str] = None) -> None:
        """Read a settings file, show what importing would do, and import on confirmation."""
        path = path or self.ask_open_path("Import a settings file", SETTINGS_FILTER)
        if not path:
            return
        try:
            plan = preview_import(read_settings(path), self.library)
        except SamplewrightError as error:
            self.show_error("The settings file cannot be imported", str(error))
            return
        choices = self.confirm_import(plan, Path(path).name)
        if choices is None:
            return
        try:
            written = apply_import(plan, self.library, choices)
        except SamplewrightError as error:
            self.show_error("The import did not finish", str(error))
            return
        self.statusBar().showMessage(f"Imported {len(written)} preset(s) from {Path(path).name}.", 8000)

    def confirm_import(self, plan, source: str) -> Optional[dict]:
        """Show the import preview; the chosen conflict actions, or None when cancelled."""
        dialog = ImportPreviewDialog(plan, source, self)
        return dialog.choices() if dialog.exec() else None
