"""Per-user state kept out of the shared library: favourites, last library, view settings.

It lives in the user's own config folder (``$SAMPLEWRIGHT_CONFIG_DIR`` or
platformdirs' user config folder) as ``state.json``. Favourites are preset ids,
so they survive renames and work in any library.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import platformdirs

from ..errors import LibraryError
from .storage import BadContent, atomic_write, dump_json, explain_os_error, parse_json, read_limited

STATE_FILE = "state.json"


def default_config_dir() -> Path:
    """The user's config folder: ``$SAMPLEWRIGHT_CONFIG_DIR``, else platformdirs' for "samplewright"."""
    override = os.environ.get("SAMPLEWRIGHT_CONFIG_DIR")
    if override:
        return Path(override).expanduser()
    return Path(platformdirs.user_config_dir("samplewright", appauthor=False))


class UserState:
    """Favourites, the last library folder and free-form view settings of one user.

    Args:
        folder: where ``state.json`` lives (default :func:`default_config_dir`).

    A missing or unreadable state file starts an empty state (``problem`` says
    why it was unreadable); nothing is written until :meth:`save`.
    """

    def __init__(self, folder: str | os.PathLike | None = None):
        self.path = Path(folder if folder is not None else default_config_dir()) / STATE_FILE
        self.favourites: set[str] = set()
        self.last_library: Path | None = None
        self.view: dict[str, Any] = {}
        self.problem: str | None = None
        try:
            self._load(parse_json(read_limited(self.path, 1_000_000)))
        except FileNotFoundError:
            pass
        except (OSError, BadContent, TypeError, ValueError) as exc:
            self.problem = f"{self.path} could not be read ({exc}); starting with an empty state"

    def _load(self, data: Any) -> None:
        if not isinstance(data, dict):
            raise ValueError("not a JSON object")
        self.favourites = {str(i) for i in data.get("favourites", []) if isinstance(i, str)}
        last = data.get("last_library")
        self.last_library = Path(last) if isinstance(last, str) and last else None
        view = data.get("view", {})
        self.view = dict(view) if isinstance(view, dict) else {}

    def is_favourite(self, record_id: str) -> bool:
        """Whether the preset with ``record_id`` is one of this user's favourites."""
        return record_id in self.favourites

    def set_favourite(self, record_id: str, on: bool = True) -> None:
        """Mark or unmark a preset as a favourite (call :meth:`save` to keep it)."""
        if on:
            self.favourites.add(record_id)
        else:
            self.favourites.discard(record_id)

    def save(self) -> None:
        """Write the state to its file atomically (creating the config folder).

        Raises:
            LibraryError: when the config folder cannot be written.
        """
        data = {
            "favourites": sorted(self.favourites),
            "view": self.view,
            "last_library": str(self.last_library) if self.last_library else None,
        }
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write(self.path, dump_json(data))
        except OSError as exc:
            raise explain_os_error(
                exc, self.path.parent, "save your settings", "Your favourites were not saved"
            ) from exc
        except (TypeError, ValueError) as exc:  # a view value that is not plain JSON
            raise LibraryError(f"Could not save your settings: a view setting is not plain data ({exc}).") from exc


def library_in_use() -> Path:
    """The library folder the user last chose in the window, else their own.

    ``$SAMPLEWRIGHT_LIBRARY_DIR`` wins over the remembered choice, so tests
    and scripts can pin the folder.
    """
    from .library import default_library_dir

    if os.environ.get("SAMPLEWRIGHT_LIBRARY_DIR"):
        return default_library_dir()
    chosen = UserState().last_library
    return chosen if chosen is not None else default_library_dir()
