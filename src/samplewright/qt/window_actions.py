"""The window's commands and menus, in one place.

Each command is one :class:`Command` row in :func:`window_commands` (its key,
text, what it calls, shortcut and tip), and :data:`MENUS` says which menu shows
it. A new screen gets a menu entry by adding one row there (calling the
screen's own ``open``) and its key under a menu in :data:`MENUS`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import TYPE_CHECKING

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import QMainWindow, QMenu

from ..core.engine.model import DEFAULT_NAME
from . import help_dialogs
from .preset_controller import IMPORT_TEXT
from .step_inspector import help_text as step_view_help

if TYPE_CHECKING:
    from .main_window import MainWindow

Shortcut = QKeySequence.StandardKey | str | None


@dataclasses.dataclass(frozen=True)
class Command:
    """One command of the window: a menu entry, a shortcut, maybe a button."""

    key: str
    text: str
    slot: Callable[[], object]
    shortcut: Shortcut = None
    tip: str = ""


def window_commands(w: MainWindow) -> list[Command]:
    """Every command of the window, bound to the part that carries it out."""
    models, presets, library, folders, audition = w.models, w.presets, w.library_tools, w.folders, w.audition
    return [
        Command(
            "open",
            "Open passage…",
            models.open_passage_dialog,
            QKeySequence.StandardKey.Open,
            "Open a .txt or .md passage",
        ),
        Command(
            "import",
            IMPORT_TEXT,
            presets.import_settings,
            "Ctrl+I",
            "Bring presets from a settings file, or a preset saved as a copy",
        ),
        Command(
            "export",
            "Export chosen presets…",
            presets.export_chosen,
            "Ctrl+E",
            "Write the ticked presets to a settings file to share",
        ),
        Command(
            "library_folder",
            "Use library folder…",
            folders.choose_library_folder,
            "Ctrl+Shift+O",
            "Show the presets in another folder, for example your team's shared folder",
        ),
        Command(
            "own_library",
            "Back to my own library",
            folders.use_own_library,
            None,
            "Show the presets in your own library folder again",
        ),
        Command(
            "save_audition",
            "Save audition…",
            audition.save_audition,
            "Ctrl+Shift+A",
            "Keep the samples on screen in a file, to open again later",
        ),
        Command("open_audition", "Open audition…", audition.open_audition, None, "Show a saved audition again"),
        Command("quit", "Quit", w.close, QKeySequence.StandardKey.Quit),
        Command(
            "copy",
            "Copy sample text",
            audition.copy_current_sample,
            "Ctrl+Shift+C",
            "Copy the text of the sample being inspected",
        ),
        Command(
            "new", "New preset", presets.new_preset, QKeySequence.StandardKey.New, "Add a preset with neutral settings"
        ),
        Command("duplicate", "Duplicate preset", presets.duplicate_preset, "Ctrl+D", "Copy the highlighted preset"),
        Command("rename", "Rename preset…", presets.rename_preset, "F2", "Give the highlighted preset a new name"),
        Command(
            "delete",
            "Delete preset",
            presets.delete_preset,
            QKeySequence.StandardKey.Delete,
            "Move the highlighted preset to the library's trash (undo with Ctrl+Z)",
        ),
        Command(
            "favourite",
            "Favourite ★",
            w.library_list.toggle_favourite,
            "Ctrl+B",
            "Mark or unmark the highlighted preset as a favourite",
        ),
        Command(
            "save", "Save preset", w.editor.save, QKeySequence.StandardKey.Save, "Save the edited preset to the library"
        ),
        Command(
            "save_copy",
            "Save a copy as file…",
            presets.save_copy_as_file,
            QKeySequence.StandardKey.SaveAs,
            "Write the edited preset, unsaved edits included, to a file of your choice",
        ),
        Command(
            "history",
            "History…",
            library.show_history,
            "Ctrl+H",
            "Earlier revisions of the highlighted preset, what changed, and a way back",
        ),
        Command(
            "compare",
            "Compare with…",
            library.compare_presets,
            "Ctrl+Shift+D",
            "Show the highlighted preset and another one side by side, field by field",
        ),
        Command(
            "trash",
            "Deleted presets…",
            library.show_trash,
            "Ctrl+Shift+T",
            "List the presets deleted from this library and restore one",
        ),
        Command("rescan", "Reload library", library.rescan_library, "F5", "Pick up presets others changed"),
        Command(
            "generate", "Generate all", audition.generate_all, "Ctrl+Return", "Write samples for every ticked preset"
        ),
        Command(
            "regenerate",
            "New samples for this preset",
            audition.regenerate_current,
            "Ctrl+R",
            "Write new samples for the inspected preset; the other columns stay",
        ),
        Command("stop", "Stop", audition.stop_generation, "Esc", "Stop the run; samples so far are kept"),
        Command("prev_step", "Previous step", lambda: w.inspector.move(-1), "Alt+Left"),
        Command("next_step", "Next step", lambda: w.inspector.move(+1), "Alt+Right"),
        Command(
            "model_folder", "Open model folder…", models.choose_model_folder, None, "Load a transformers model folder"
        ),
        Command("model_gguf", "Open GGUF file…", models.choose_model_file, None, "Load a .gguf model file"),
        Command(
            "model_default",
            "Use the default model",
            lambda: models.load_model(None),
            None,
            f"Load the default model, {DEFAULT_NAME}",
        ),
        Command("guide", "User guide", lambda: help_dialogs.show_guide(w), "F1", "The README's sections, in a window"),
        Command("shortcuts", "Keyboard shortcuts", lambda: help_dialogs.show_shortcuts(shortcut_rows(w), w)),
        Command("legend", "Reading the next-token view", lambda: show_legend(w), None),
        Command("about", "About Samplewright", lambda: help_dialogs.show_about(w)),
        Command(
            "open_evaluation",
            "Evaluation runs…",
            lambda: w.evaluation.open(),
            None,
            "Run presets over passage sets, sweep a field, and compare them on the quality–diversity map",
        ),
    ]


def shortcut_rows(w: MainWindow) -> list[tuple[str, str, str]]:
    """Every window command that has a shortcut: (keys, command, what it does)."""
    rows = [
        (action.shortcut().toString(), action.text(), action.statusTip())
        for action in w.menu_actions.values()
        if not action.shortcut().isEmpty()
    ]
    rows += [(w.undo_action.shortcut().toString(), "Undo", "Undo the last library change")]
    rows += [("Alt+Up / Alt+Down", "Move a stage", "In the editor's chain, move the focused stage earlier or later")]
    return rows


#: Which commands each menu lists, in order (None: a separator). "recent_folders", "undo" and
#: "redo" are the window's own submenu and undo actions.
MENUS: dict[str, list[str | None]] = {
    "&File": [
        "open",
        "import",
        "export",
        None,
        "save_audition",
        "open_audition",
        None,
        "library_folder",
        "recent_folders",
        "own_library",
        None,
        "quit",
    ],
    "&Edit": ["undo", "redo", None, "copy"],
    "&Presets": [
        "new",
        "duplicate",
        "rename",
        "delete",
        "favourite",
        None,
        "save",
        "save_copy",
        None,
        "history",
        "compare",
        "trash",
        None,
        "rescan",
    ],
    "&Audition": ["generate", "regenerate", "stop", None, "prev_step", "next_step", None, "open_evaluation"],
    "&Model": ["model_folder", "model_gguf", "model_default"],
    "&Help": ["guide", "shortcuts", "legend", None, "about"],
}


def make_action(window: QMainWindow, command: Command) -> QAction:
    """A window-wide action for ``command``, its shortcut named in its tooltip."""
    action = QAction(command.text, window)
    tip = command.tip or command.text
    if command.shortcut is not None:
        action.setShortcut(QKeySequence(command.shortcut))
        tip = f"{tip} ({action.shortcut().toString()})"
    action.setObjectName(command.key)
    action.setToolTip(tip)
    action.setStatusTip(command.tip or command.text)
    slot = command.slot
    action.triggered.connect(lambda _=False: slot())
    window.addAction(action)
    return action


def build_menus(window: QMainWindow, entries: dict[str, QAction | QMenu]) -> None:
    """Fill the menu bar from :data:`MENUS` with ``entries`` (actions and submenus by key)."""
    bar = window.menuBar()
    for title, keys in MENUS.items():
        menu = bar.addMenu(title)
        for key in keys:
            entry = entries[key] if key is not None else None
            if entry is None:
                menu.addSeparator()
            elif isinstance(entry, QMenu):
                menu.addMenu(entry)
            else:
                menu.addAction(entry)


def place_actions(w: MainWindow) -> None:
    """Put the preset commands under the list (buttons and right-click menu) and the run's on its buttons."""
    actions = w.menu_actions
    # Delete only acts in the preset list, never on text being edited elsewhere in the window.
    actions["delete"].setShortcutContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
    w.removeAction(actions["delete"])
    w.library_list.tree.addAction(actions["delete"])
    w.passage.set_open_action(actions["open"])
    w.controls.generate_button.setToolTip(actions["generate"].toolTip())
    w.controls.stop_button.setToolTip(actions["stop"].toolTip())
    for key in ("new", "duplicate", "rename", "delete"):
        w.library_list.add_button(actions[key]).setText(actions[key].text().split()[0])
    w.library_list.set_context_actions(
        [actions[k] if k else None for k in ("history", "compare", None, "duplicate", "rename", "delete", "favourite")]
    )


def follow_audition(actions: dict[str, QAction], can_generate: bool, running: bool, can_regenerate: bool) -> None:
    """Enable the run's commands as the audition allows."""
    actions["generate"].setEnabled(can_generate)
    actions["stop"].setEnabled(running)
    actions["regenerate"].setEnabled(can_regenerate)


def show_legend(w: MainWindow) -> None:
    """Explain the next-token view: its curves, lanes, marks and colours."""
    w.prompts.show_info("Reading the next-token view", step_view_help())
