"""The main window's way in to the evaluation screen.

:class:`EvaluationOpener` opens the evaluation window on the main window's
library folder and loaded model, raises it when it is open already, opens a new
one when the library folder changed, and closes it with the main window. Its
menu entry is the ``open_evaluation`` row in ``window_actions.py``.
"""

from __future__ import annotations

from typing import Any

import shiboken6
from PySide6.QtWidgets import QApplication, QMainWindow

from .evaluation_view import EvaluationWindow


class EvaluationOpener:
    """Opens and keeps the one evaluation window of ``window`` (which has ``library.folder``
    and ``engine.worker.loaded_model``)."""

    def __init__(self, window: QMainWindow):
        self.window: Any = window
        self._shown: EvaluationWindow | None = None
        window.destroyed.connect(lambda *_: self.close())
        app = QApplication.instance()
        if app is not None:
            app.aboutToQuit.connect(self.close)

    def current(self) -> EvaluationWindow | None:
        """The evaluation window, if one is open."""
        return self._shown

    def open(self) -> None:
        """Show the evaluation window for the library in use (a new one after a folder change)."""
        folder = self.window.library.folder
        if self._shown is None or self._shown.view.library_dir != folder:
            self.close()
            self._shown = EvaluationWindow(folder, lambda: self.window.engine.worker.loaded_model)
        self._shown.show()
        self._shown.raise_()
        self._shown.activateWindow()

    def close(self) -> None:
        """Close the evaluation window, if one is open (at exit Qt may have deleted it already)."""
        shown, self._shown = self._shown, None
        if shown is not None and shiboken6.isValid(shown):
            shown.close()
