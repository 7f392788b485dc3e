"""A minimal observer: models emit plain-Python events, views subscribe.

No Qt here, so the core can be used and tested headless; the window connects
its own slots as ordinary callbacks.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any


class Emitter:
    """A list of callbacks called in connection order by :meth:`emit`."""

    def __init__(self) -> None:
        self._callbacks: list[Callable[..., Any]] = []

    def connect(self, callback: Callable[..., Any]) -> None:
        """Call ``callback(*args)`` on every later :meth:`emit`; connecting twice calls it twice."""
        self._callbacks.append(callback)

    def disconnect(self, callback: Callable[..., Any]) -> None:
        """Stop calling ``callback``.

        Raises:
            ValueError: when ``callback`` is not connected.
        """
        self._callbacks.remove(callback)

    def emit(self, *args: Any) -> None:
        """Call every connected callback with ``args``."""
        # Iterate over a copy: a callback may disconnect itself.
        for callback in list(self._callbacks):
            callback(*args)

    def __len__(self) -> int:
        return len(self._callbacks)
