"""The preset being edited: which library record it started from, the edits typed
since, and whether a save (or a question about the edits) is under way.

The editor widget reports what is typed with :meth:`Draft.update`; everything
that decides what happens to the edits reads this model, never the widget, so
the rules can be tested without Qt. The record is kept as it was loaded, so a
save always states the revision the edits started from: a colleague's save in
between is then a conflict to settle, never silently overwritten.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from typing import Literal

from ..events import Emitter
from ..presets import Preset
from .records import PresetRecord

#: What a newer library record of the edited preset means for the draft (see :meth:`Draft.library_moved`).
Follow = Literal["same", "reload", "keep_edits"]


class Draft:
    """The record being edited and the unsaved edits of it.

    Events:
        loaded(record or None): another record (or none) is now being edited; the edits are gone.
        edited(preset or None): what is typed changed (None: a value is not valid).
    """

    def __init__(self) -> None:
        self.record: PresetRecord | None = None
        self.edits: Preset | None = None  # the typed values, when every field is valid
        self.problem: str | None = None  # why the typed values are not a valid preset, else None
        self.saving = False  # our own save is under way: its change events are expected
        self.asking = False  # a question about the edits is open
        self.loaded = Emitter()
        self.edited = Emitter()

    def load(self, record: PresetRecord | None) -> None:
        """Edit ``record`` (None: nothing) from its saved values."""
        self.record = record
        self.edits = record.preset if record is not None else None
        self.problem = None
        self.loaded.emit(record)

    def update(self, edits: Preset | None, problem: str | None = None) -> None:
        """Take what is typed now: the edited preset, or None with the reason it is not valid."""
        self.edits, self.problem = (None, problem or "a field is not valid") if edits is None else (edits, None)
        self.edited.emit(self.edits)

    @property
    def dirty(self) -> bool:
        """Whether the typed values differ from the record's (an invalid value always does)."""
        if self.record is None:
            return False
        return self.problem is not None or self.edits != self.record.preset

    @property
    def busy(self) -> bool:
        """Whether a save or a question about the edits is under way (library events are then ours)."""
        return self.saving or self.asking

    def is_editing(self, record_id: str | None) -> bool:
        """Whether the draft was loaded from the record ``record_id``."""
        return self.record is not None and record_id is not None and self.record.id == record_id

    def usable_edits(self, record_id: str) -> tuple[Preset | None, str | None]:
        """The unsaved edits of ``record_id``, for trying them before saving.

        Returns:
            (edits, problem): the edited preset when the draft holds valid unsaved edits
            of ``record_id`` (else None), and why its edits cannot be used, else None.
        """
        if not self.is_editing(record_id) or not self.dirty:
            return None, None
        return (None, self.problem) if self.problem is not None else (self.edits, None)

    def library_moved(self, latest: PresetRecord | None) -> Follow:
        """What a library record of the edited preset means for the draft.

        Returns:
            "same" when nothing changed (or the preset is gone: the edits stay),
            "reload" when the draft has no edits and should show ``latest``,
            "keep_edits" when ``latest`` is newer than the edits' start and the edits stay.
        """
        if latest is None or latest == self.record:
            return "same"
        return "keep_edits" if self.dirty else "reload"

    def saving_now(self) -> contextlib.AbstractContextManager[None]:
        """Mark a save as under way while inside."""
        return self._marked("saving")

    def asking_now(self) -> contextlib.AbstractContextManager[None]:
        """Mark a question about the edits as open while inside."""
        return self._marked("asking")

    @contextlib.contextmanager
    def _marked(self, flag: str) -> Iterator[None]:
        setattr(self, flag, True)
        try:
            yield
        finally:
            setattr(self, flag, False)
