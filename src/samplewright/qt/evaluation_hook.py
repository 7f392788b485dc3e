"""The main window's way in to the evaluation screen: one menu action.

:func:`add_evaluation_action` puts "Evaluation runs…" into the window's Audition
menu (or a menu of its own when there is none). The action opens the
evaluation window on the main window's library folder and loaded model, and
raises it when it is open already; it closes with the main window.
"""

from __future__ import annotations

from typing import Any

from PySide6.QtGui import QAction
from PySide6.QtWidgets import QApplication, QMainWindow, QMenu

from .evaluation_view import EvaluationWindow

MENU_TITLE = "&Audition"
ACTION_TEXT = "Evaluation runs…"


def add_evaluation_action(window: QMainWindow) -> QAction:
    """Add the action to ``window`` (which has ``library.folder`` and ``engine.worker.loaded_model``)."""
    action = QAction(ACTION_TEXT, window)
    action.setStatusTip("Run presets over passage sets, sweep a field, and compare them on the quality–diversity map")
    action.setObjectName("open_evaluation")
    state: dict[str, Any] = {"window": None}

    def loaded_model():
        return window.engine.worker.loaded_model  # type: ignore[attr-defined]

    def open_window() -> None:
        folder = window.library.folder  # type: ignore[attr-defined]
        current = state["window"]
        if current is None or current.view.library_dir != folder:
            if current is not None:
                current.close()
            current = EvaluationWindow(folder, loaded_model)
            state["window"] = current
        current.show()
        current.raise_()
        current.activateWindow()

    def close_window(*_args) -> None:
        if state["window"] is not None:
            state["window"].close()
            state["window"] = None

    action.triggered.connect(lambda _=False: open_window())
    window.destroyed.connect(close_window)
    app = QApplication.instance()
    if app is not None:
        app.aboutToQuit.connect(close_window)
    window.evaluation_window = lambda: state["window"]  # type: ignore[attr-defined]
    _menu(window).addAction(action)
    return action


def _menu(window: QMainWindow) -> QMenu:
    for entry in window.menuBar().actions():
        if entry.menu() is not None and entry.text() == MENU_TITLE:
            return entry.menu()
    return window.menuBar().addMenu("E&valuate")
