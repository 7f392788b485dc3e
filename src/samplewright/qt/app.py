"""Start the desktop window: ``python -m samplewright`` with no arguments."""

from __future__ import annotations

import sys
from collections.abc import Sequence

from PySide6.QtCore import Qt
from PySide6.QtGui import QGuiApplication
from PySide6.QtWidgets import QApplication, QMessageBox

from ..core.errors import SamplewrightError
from . import first_start

DESKTOP_ID = "org.samplewright.Samplewright"


def make_app(argv: Sequence[str] | None = None) -> QApplication:
    """The QApplication, created once, readable on high-DPI screens."""
    app = QApplication.instance()
    if app is None:
        # Fractional scale factors (e.g. 150 %) are kept instead of rounded, so text stays sharp and sized right.
        QGuiApplication.setHighDpiScaleFactorRoundingPolicy(Qt.HighDpiScaleFactorRoundingPolicy.PassThrough)
        app = QApplication(list(argv or sys.argv[:1]))
        app.setApplicationName("Samplewright")
        app.setOrganizationName("Samplewright")
        app.setDesktopFileName(DESKTOP_ID)  # the desktop entry installer/install.sh puts in the menu
    return app


def main(argv: Sequence[str] | None = None) -> int:
    """Open the window and run until it is closed; returns the exit status."""
    app = make_app(argv)
    from .main_window import MainWindow

    first_start.offer_cache_folder()
    try:
        window = MainWindow()
    except SamplewrightError as error:
        QMessageBox.critical(None, "Samplewright cannot start", str(error))
        return 1
    window.show()
    progress = first_start.watch_first_conversion(window)  # noqa: F841 (kept alive while it shows)
    return app.exec()
