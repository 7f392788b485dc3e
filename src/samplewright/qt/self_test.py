"""``samplewright --self-test``: the window opens offscreen, waits for the model, renders, exits.

For installers and their checks (installer/smoke.sh): it uses a temporary settings folder and
preset library, so the user's own are never read or changed; the model cache is the real one,
so a first run also converts the model (with the progress dialog a first start shows).
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

#: Longest wait for the model (seconds): a first start converts it, on a slow machine for minutes.
TIMEOUT_S = 600


def run(timeout_s: float = TIMEOUT_S) -> int:
    """Open the window offscreen, wait for the model, render the window; 0 when all went well."""
    os.environ["QT_QPA_PLATFORM"] = "offscreen"
    from PySide6.QtCore import QTimer

    from . import first_start
    from .about_dialog import AboutDialog, notices_path
    from .app import make_app
    from .main_window import MainWindow

    app = make_app([])
    started = time.monotonic()
    problems: list[str] = []
    with tempfile.TemporaryDirectory(prefix="samplewright-self-test-") as scratch:
        window = MainWindow(config_dir=Path(scratch) / "config", library_dir=Path(scratch) / "library")
        window.prompts.show_error = lambda message, detail=None: problems.append(detail or message)  # type: ignore[method-assign]
        dialog = first_start.watch_first_conversion(window)
        window.show()

        def check() -> None:
            if window.model_info is not None or problems or time.monotonic() - started > timeout_s:
                app.quit()

        poll = QTimer()
        poll.timeout.connect(check)
        poll.start(100)
        app.exec()
        poll.stop()
        image = window.grab().toImage()
        ready = window.model_info is not None
        AboutDialog(window, notices_path()).deleteLater()  # built as Help ▸ About builds it
        window.close()
    seconds = time.monotonic() - started
    if not ready or problems or image.isNull():
        reason = problems[0] if problems else f"the model was not ready after {seconds:.0f} s"
        print(f"self-test failed: {reason}", file=sys.stderr)
        return 1
    shown = "shown" if dialog is not None else "not needed"
    print(
        f"self-test passed: window {image.width()}x{image.height()} rendered, "
        f"{window.model_info.name} ready after {seconds:.1f} s, conversion dialog {shown}; "
        f"licence notices: {notices_path() or 'not in a bundle'}"
    )
    return 0
