"""The window's memory between sessions: layout, passage, audition settings and ticked presets,
kept in ``window.ini``. A damaged or hand-edited file never stops the window: each unreadable
value falls back to its default."""

from __future__ import annotations

import json
from typing import Any, cast

from PySide6.QtCore import QByteArray, QSettings
from PySide6.QtWidgets import QMainWindow, QSplitter

from ..core.errors import PassageError
from ..core.framing import Framing
from ..core.limits import DEFAULT_NEW_TOKENS, DEFAULT_SAMPLES, DEFAULT_SEED
from .audition_controls import QtAuditionControls
from .library_folder import LibraryInUse
from .library_panel import QtLibraryList
from .passage_panel import QtPassagePanel


class WindowState:
    """Keeps what the window shows in ``settings`` and brings it back.

    Args:
        settings: the window's settings file.
        window: the main window (its geometry).
        splitters: the window's splitters, by a name kept in the file.
        passage, controls, library_list: the widgets whose values are kept.
        in_use: the library whose presets were ticked.
    """

    def __init__(
        self,
        settings: QSettings,
        window: QMainWindow,
        splitters: dict[str, QSplitter],
        passage: QtPassagePanel,
        controls: QtAuditionControls,
        library_list: QtLibraryList,
        in_use: LibraryInUse,
    ):
        self.settings, self.window, self.splitters = settings, window, splitters
        self.passage, self.controls, self.library_list, self.in_use = passage, controls, library_list, in_use

    def restore_state(self) -> None:
        """Bring back the window layout, passage, selection and audition settings of last time.

        A damaged or hand-edited settings file never stops the window: each unreadable
        value falls back to its default.
        """
        s = self.settings
        geometry = s.value("window/geometry")
        if not (isinstance(geometry, QByteArray) and self.window.restoreGeometry(geometry)):
            self.window.resize(1400, 900)
        for name, splitter in self.splitters.items():
            state = s.value(f"splitters/{name}")
            if isinstance(state, QByteArray):
                splitter.restoreState(state)
        recent = _setting_json(s, "passage/recent", [])
        self.passage.set_recent([p for p in recent if isinstance(p, str)] if isinstance(recent, list) else [])
        text = _setting_str(s, "passage/text")
        if text:
            self.passage.set_text(text, _setting_str(s, "passage/source") or None)
        self.fill_example_passage()
        self._restore_framing(_setting_json(s, "passage/framing", None))
        for key, spin, default in (
            ("audition/samples", self.controls.samples_spin, DEFAULT_SAMPLES),
            ("audition/new_tokens", self.controls.tokens_spin, DEFAULT_NEW_TOKENS),
            ("audition/seed", self.controls.seed_spin, DEFAULT_SEED),
        ):
            spin.setValue(min(max(_setting_int(s, key, default), spin.minimum()), spin.maximum()))
        self.controls.new_seed_box.setChecked(s.value("audition/new_seed", "false") == "true")
        library = self.in_use.library
        chosen = _setting_json(s, "audition/chosen", None)
        if not isinstance(chosen, list):
            chosen = [r.id for r in library.records()[:2]]
        self.library_list.set_chosen([i for i in chosen if isinstance(i, str)])
        if self.library_list.current_id() is None and library.records():
            self.library_list.select(library.records()[0].id)

    def _restore_framing(self, data) -> None:
        """Show the framing kept last time; a damaged value leaves plain continuation."""
        if data is None:
            return
        try:
            self.passage.set_framing(Framing.from_dict(data))
        except PassageError:
            return

    def save_state(self) -> None:
        """Remember layout, passage, selection and audition settings for next time."""
        s = self.settings
        s.setValue("window/geometry", self.window.saveGeometry())
        for name, splitter in self.splitters.items():
            s.setValue(f"splitters/{name}", splitter.saveState())
        s.setValue("passage/text", self.passage.text()[:500_000])
        s.setValue("passage/source", self.passage.source or "")
        s.setValue("passage/recent", json.dumps(self.passage.recent))
        s.setValue("passage/framing", json.dumps(self.passage.framing().to_dict()))
        controls = self.controls
        s.setValue("audition/samples", controls.samples_spin.value())
        s.setValue("audition/new_tokens", controls.tokens_spin.value())
        s.setValue("audition/seed", controls.seed_spin.value())
        s.setValue("audition/new_seed", "true" if controls.new_seed_box.isChecked() else "false")
        s.setValue("audition/chosen", json.dumps(self.library_list.chosen))
        s.sync()

    def fill_example_passage(self) -> None:
        """Offer the example passages and put the first one in the editor."""
        try:
            from ..core.engine.passages import demo_passages, example_title

            examples = demo_passages()
        except ImportError:
            examples = {}
        titled = {example_title(name): text for name, text in examples.items()}
        self.passage.set_examples(titled, lambda title, text: self.passage.set_text(text))
        if examples and not self.passage.text().strip():
            self.passage.set_text(next(iter(examples.values())))


def _setting_str(settings: QSettings, key: str) -> str:
    """A text setting, or "" when missing or not text."""
    value = settings.value(key, "")
    return value if isinstance(value, str) else ""


def _setting_int(settings: QSettings, key: str, default: int) -> int:
    """A whole-number setting, or ``default`` when missing or unreadable."""
    try:
        return int(cast(Any, settings.value(key, default)))
    except (TypeError, ValueError):
        return default


def _setting_json(settings: QSettings, key: str, default):
    """A setting stored as JSON text, or ``default`` when missing or unreadable."""
    try:
        return json.loads(_setting_str(settings, key) or "null") if settings.contains(key) else default
    except ValueError:
        return default
