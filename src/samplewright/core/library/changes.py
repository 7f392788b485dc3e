"""One change to the library folder made of several file steps, undone whole on failure.

A save writes the replaced revision into the history, then the new current
file, then trims the history; an import writes several presets. If a step
fails (a full disk, an unplugged drive), the steps already taken are undone in
reverse order, so the library is left as it was. Deletions wait until every
other step has succeeded (:meth:`FileChanges.remove_later`): the order is
always "write new files, make them visible with the final rename, delete old
ones last".

Every step goes through the primitives of storage.py (``make_folder``,
``atomic_write``, ``move``), looked up on that module at call time so that a
test can make the k-th of them fail.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Iterator
from pathlib import Path

from . import storage


class FileChanges:
    """The steps taken so far in one change; :func:`changing` undoes them on failure.

    Args:
        library: the library folder; no step writes outside it (storage.refuse_link).
    """

    def __init__(self, library: Path):
        self.library = Path(library)
        self._undo: list[Callable[[], None]] = []
        self._later: list[Path] = []

    def make_folder(self, path: Path) -> None:
        """Create ``path`` (inside the library) unless it is a folder already."""
        storage.refuse_link(self.library, path)
        if path.is_dir():
            return
        storage.make_folder(path)
        self._undo.append(lambda: os.rmdir(path))

    def write_new(self, path: Path, data: bytes) -> None:
        """Write a file that is not there yet."""
        storage.refuse_link(self.library, path)
        storage.atomic_write(path, data)
        self._undo.append(lambda: os.unlink(path))

    def replace(self, path: Path, data: bytes) -> None:
        """Replace an existing file's content (atomically); undone by putting the old file back.

        The old file is kept as a hard link (no space needed, so the undo works on a full
        disk); where links are not supported, its bytes are kept in memory instead.
        """
        storage.refuse_link(self.library, path)
        backup = path.with_name(f".{path.name}.{os.getpid()}.undo{storage.TEMP_SUFFIX}")
        try:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(backup)
            os.link(path, backup)
        except OSError:
            old = path.read_bytes()
            storage.atomic_write(path, data)
            self._undo.append(lambda: storage.atomic_write(path, old))
            return
        self._later.append(backup)
        try:
            storage.atomic_write(path, data)
        except BaseException:
            os.unlink(backup)
            raise
        self._undo.append(lambda: os.replace(backup, path))

    def move(self, source: Path, target: Path) -> None:
        """Move a file to a place where nothing is (both inside the library)."""
        storage.refuse_link(self.library, source)
        storage.refuse_link(self.library, target)
        if target.exists():
            raise FileExistsError(17, "File exists", str(target))
        storage.move(source, target)
        self._undo.append(lambda: storage.move(target, source))

    def remove_later(self, path: Path) -> None:
        """Delete ``path`` once every other step has succeeded (a failure then is harmless)."""
        storage.refuse_link(self.library, path)
        self._later.append(path)

    def undo(self) -> None:
        """Undo the steps taken, newest first, as far as the folder allows."""
        for step in reversed(self._undo):
            with contextlib.suppress(OSError):
                step()
        # A replaced file's backup went back into place with its undo step.
        self._undo.clear()
        self._later.clear()

    def finish(self) -> None:
        """Carry out the deletions left for last."""
        for path in self._later:
            with contextlib.suppress(OSError):
                os.unlink(path)
        self._later.clear()
        self._undo.clear()


@contextlib.contextmanager
def changing(library: Path) -> Iterator[FileChanges]:
    """A :class:`FileChanges` for a ``with`` block: finished when the block ends normally,
    undone when it raises (the exception goes on)."""
    changes = FileChanges(library)
    try:
        yield changes
    except BaseException:
        changes.undo()
        raise
    changes.finish()
