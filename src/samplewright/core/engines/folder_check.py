"""The after-export check of a transformers folder, as plain data.

Each exported ``generation_config.json`` folder is run through transformers'
own generate() processors on a passage (:func:`.fidelity.verify_folder`) and
compared with samplewright's chain; :class:`FolderCheck` is one folder's
verdict, or why it could not be checked.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

from ..presets import Preset


@dataclasses.dataclass(frozen=True)
class FolderCheck:
    """One exported folder's check: the verdict and largest difference, or why it could not run."""

    preset: str
    folder: Path
    verdict: str | None = None
    max_tv: float | None = None
    problem: str | None = None

    def line(self) -> str:
        """One line for the user: ``name: verdict (largest difference 0.0012)``."""
        if self.problem is not None:
            return f"{self.preset}: not checked ({self.problem})"
        return f"{self.preset}: {self.verdict} (largest difference {self.max_tv:.3g})"


def check_folder(folder: Path, preset: Preset, loaded: Any, passage: str) -> FolderCheck:
    """Check one exported folder (runs the model: call it off the UI thread)."""
    from .fidelity import verify_folder

    try:
        measure = verify_folder(folder, preset, loaded, passage)
    except Exception as error:  # reported in the result; the other folders are still checked
        return FolderCheck(preset.name, folder, problem=str(error) or type(error).__name__)
    return FolderCheck(preset.name, folder, measure.verdict, measure.max_tv)
