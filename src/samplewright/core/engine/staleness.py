"""Whether an audition on screen still belongs to what the window shows.

Samples belong to the passage they continue, the library folder their presets
came from, and each column's preset as it was when they were written. When
the user opens another passage, switches folder, deletes or changes a preset,
the samples stay on screen but must say what they belong to:
:func:`staleness` compares what the session recorded with what is current and
gives one plain reason per change. A column written with unsaved edits is
"saved" once the library holds exactly those values (its draft mark goes).

No Qt and no torch here.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from pathlib import Path

from ..library.records import PresetRecord
from ..presets import Preset


@dataclasses.dataclass(frozen=True)
class Staleness:
    """What changed since the audition was written.

    Attributes:
        audition: why the whole audition is out of date (passage or folder), or None.
        columns: per column, why that column's preset no longer matches, or None.
        saved_drafts: per column, True when it was written with unsaved edits that are now saved.
    """

    audition: str | None
    columns: tuple[str | None, ...]
    saved_drafts: tuple[bool, ...]

    @property
    def any(self) -> bool:
        """Whether anything on screen is out of date."""
        return self.audition is not None or any(c is not None for c in self.columns)


def column_change(shown: Preset, was_draft: bool, current: PresetRecord | None) -> tuple[str | None, bool]:
    """Why one column no longer matches its library preset, and whether its draft was since saved.

    Args:
        shown: the preset the column was written with.
        was_draft: whether those were unsaved edits.
        current: the library's record of that preset now (None: it is gone).
    """
    if current is None:
        return f"'{shown.name}' was deleted from the library since", False
    same = current.preset.parameters() == shown.parameters()
    if was_draft:
        return None, same  # the user's own try-out: out of date only by the user's choice
    if same:
        return None, False  # a rename or a new description changes no sample
    return f"'{current.name}' was changed since (now revision {current.revision})", False


def staleness(
    presets: Sequence[Preset],
    record_ids: Sequence[str | None],
    drafts: Sequence[bool],
    lookup: Callable[[str], PresetRecord | None],
    written: tuple[str, Path | None],
    now: tuple[str, Path | None],
) -> Staleness:
    """Compare an audition with the window's current passage, folder and presets.

    Args:
        presets, record_ids, drafts: each column's preset, library record id (None: not from the
            library) and whether it was written with unsaved edits.
        lookup: the current library's record of an id, or None.
        written: the passage and library folder the audition was written with.
        now: the passage and library folder the window shows now.
    """
    (old_text, old_folder), (text, folder) = written, now
    if old_folder is not None and folder is not None and Path(old_folder) != Path(folder):
        return Staleness(
            f"These samples come from presets of another library folder ({old_folder}).",
            tuple(None for _ in presets),
            tuple(False for _ in presets),
        )
    audition = None
    if old_text.strip() != text.strip():
        audition = "The passage changed since these samples were written: they continue the earlier passage."
    reasons, saved = [], []
    for preset, record_id, draft in zip(presets, record_ids, drafts, strict=True):
        reason, now_saved = column_change(preset, draft, lookup(record_id)) if record_id else (None, False)
        reasons.append(reason)
        saved.append(now_saved)
    return Staleness(audition, tuple(reasons), tuple(saved))
