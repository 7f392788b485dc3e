"""Careful file handling for a folder several people write to.

- :func:`atomic_write` replaces a file so that readers, and a write killed at
  any point, see either the old or the new content, whole: the new bytes go to
  a temporary file in the same folder, are flushed and fsync'ed, then
  ``os.replace`` swaps them in (atomic on POSIX and Windows within one file
  system) and the folder is fsync'ed so the rename itself survives a crash.
- :func:`hold_lock` takes the folder's lock (the filelock package) with a
  timeout and leaves a note saying who holds it, so a busy library can name
  the person to wait for.
- :func:`explain_os_error` turns an ``OSError`` into a :class:`LibraryError`
  whose message says what happened and what to do.
- :func:`parse_json` reads untrusted JSON strictly (no NaN, no duplicate keys, at most
  :data:`MAX_DEPTH` levels deep, only valid Unicode).
- :func:`make_folder`, :func:`atomic_write` and :func:`move` are the only ways the
  library changes files (changes.py undoes them when a later step fails);
  :func:`refuse_link` keeps every write inside the library folder.
- :func:`remove_leftovers` deletes what killed saves leave behind.

Nothing here imports Qt or torch.
"""

from __future__ import annotations

import contextlib
import errno
import getpass
import json
import os
import socket
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import filelock

from ..errors import LibraryError
from ..presets import now_iso
from ..text_rules import shown, surrogate_problem

LOCK_NAME = ".samplewright.lock"
OWNER_NOTE_NAME = ".samplewright.lock.owner"
TEMP_SUFFIX = ".partial"
#: No file of ours nests deeper than 4 levels; deeper documents are refused before they are
#: checked (jsonschema's messages recurse and would fail on ~1,000 levels).
MAX_DEPTH = 16
#: A temporary file this old was left by a killed save (a save takes well under a second).
LEFTOVER_AGE_S = 300.0

# Read once: os.umask can only be read by setting it.
_UMASK = os.umask(0o022)
os.umask(_UMASK)


class BadContent(ValueError):
    """A file's bytes are not what was expected; the message is the short reason."""


def current_user() -> str:
    """The login name of the person running Samplewright, or ``"unknown"``."""
    try:
        return getpass.getuser() or "unknown"
    except (OSError, KeyError, ImportError):
        return "unknown"


def read_limited(path: Path, limit: int) -> bytes:
    """Read at most ``limit`` bytes of a file.

    Raises:
        BadContent: when the file is larger than ``limit``.
        OSError: when the file cannot be read.
    """
    with open(path, "rb") as handle:
        data = handle.read(limit + 1)
    if len(data) > limit:
        raise BadContent(f"larger than {_size_words(limit)}")
    return data


def _size_words(limit: int) -> str:
    return f"{limit / 1_000_000:g} MB" if limit >= 1_000_000 else f"{limit / 1000:g} kB"


def _reject_constant(name: str) -> Any:
    raise BadContent(f"{name} is not a number JSON allows")


def _bounded_int(text: str) -> int:
    # No field needs more digits; a huge integer would only overflow float conversions later.
    if len(text.lstrip("-")) > 30:
        raise BadContent(f"the number {text[:20]}... is too large")
    return int(text)


def _unique_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise BadContent(f"the key {shown(key, 60)} appears twice in one object")
        out[key] = value
    return out


def parse_json(data: bytes) -> Any:
    """Decode UTF-8 JSON strictly: no NaN/Infinity, no repeated keys, no 31-digit integers.

    Raises:
        BadContent: with a short reason (not UTF-8, where the JSON breaks, ...).
    """
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise BadContent("not UTF-8 text") from None
    try:
        value = json.loads(
            text, parse_constant=_reject_constant, parse_int=_bounded_int, object_pairs_hook=_unique_keys
        )
    except json.JSONDecodeError as exc:
        raise BadContent(f"not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})") from None
    except RecursionError:
        raise BadContent("not usable JSON (nested too deeply)") from None
    except ValueError as exc:  # our own checks above, or an integer with too many digits
        raise BadContent(f"not usable JSON ({str(exc)[:120]})") from None
    problem = structure_problem(value)
    if problem:
        raise BadContent(problem)
    return value


def _place(path: tuple[str | int, ...]) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else part)
    return out or "the top level"


def structure_problem(value: Any) -> str | None:
    """Why a parsed JSON value is unusable, or None: nested deeper than :data:`MAX_DEPTH`, or
    text (a key or a value) that is not valid Unicode, named by its place (``presets[0].name``)."""
    stack: list[tuple[Any, int, tuple[str | int, ...]]] = [(value, 1, ())]
    while stack:
        item, depth, path = stack.pop()
        if isinstance(item, (dict, list)) and depth > MAX_DEPTH:
            return f"nested more than {MAX_DEPTH} levels deep (at {shown(_place(path), 60)})"
        if isinstance(item, dict):
            for key, inner in item.items():
                problem = surrogate_problem(key)
                if problem:
                    return f"a key at {shown(_place(path), 60)} is refused: {problem}"
                stack.append((inner, depth + 1, (*path, key)))
        elif isinstance(item, list):
            stack.extend((inner, depth + 1, (*path, index)) for index, inner in enumerate(item))
        elif isinstance(item, str):
            problem = surrogate_problem(item)
            if problem:
                return f"the text at {shown(_place(path), 60)} is refused: {problem}"
    return None


def dump_json(obj: Any, compact: bool = False) -> bytes:
    """Human-readable, diff-friendly JSON bytes: sorted keys, indent 2, final newline
    (``compact``: no indentation or spaces, for a file that must stay small)."""
    layout: dict[str, Any] = {"separators": (",", ":")} if compact else {"indent": 2}
    text = json.dumps(obj, sort_keys=True, ensure_ascii=False, **layout) + "\n"
    try:
        return text.encode("utf-8")
    except UnicodeEncodeError:  # a lone surrogate: only an escaped form is valid UTF-8
        return (json.dumps(obj, sort_keys=True, ensure_ascii=True, **layout) + "\n").encode("ascii")


def fsync_folder(folder: Path) -> None:
    """Make a rename in ``folder`` durable, where the platform allows it (not on Windows)."""
    if os.name == "nt":
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:  # some file systems refuse fsync on a folder; the rename still happened
        pass
    finally:
        os.close(fd)


def atomic_write(path: Path, data: bytes) -> None:
    """Replace ``path`` with ``data`` so that it is always either old or new, whole.

    Raises:
        OSError: when the folder cannot be written (the old file is untouched).
    """
    path = Path(path)
    fd, temp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=TEMP_SUFFIX)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        _set_shared_mode(temp, path)
        os.replace(temp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(temp)
        raise
    fsync_folder(path.parent)


def _set_shared_mode(temp: str, target: Path) -> None:
    # mkstemp creates files only the owner may read; colleagues must read them too.
    try:
        mode = target.stat().st_mode & 0o777
    except OSError:
        mode = 0o666 & ~_UMASK
    with contextlib.suppress(OSError, NotImplementedError):
        os.chmod(temp, mode)


def make_folder(path: Path) -> None:
    """Create one folder (its parent must exist).

    Raises:
        OSError: when it cannot be created (FileExistsError when something is there).
    """
    os.mkdir(path)
    fsync_folder(Path(path).parent)


def refuse_link(library: Path, path: Path) -> None:
    """Refuse to write at ``path`` when it, or a folder between ``library`` and it, is a
    symbolic link: a write must never land outside the library folder.

    Raises:
        LibraryError: naming the link and where it points.
    """
    library, path = Path(library), Path(path)
    relative = path.relative_to(library)
    current = library
    for part in relative.parts:
        current = current / part
        if current.is_symlink():
            target = os.readlink(current)
            raise LibraryError(
                f"{current} is a symbolic link (to {shown(target, 120)}); Samplewright never writes "
                "through a link in the library folder. Nothing in the library was changed; replace "
                "the link with a real folder or file."
            )


def remove_leftovers(folders: list[Path], older_than: float = LEFTOVER_AGE_S) -> int:
    """Delete temporary files (``*.partial``) older than ``older_than`` seconds that killed saves
    left in ``folders``; call it holding the lock. Returns how many were removed."""
    import time

    removed, limit = 0, time.time() - older_than
    for folder in folders:
        with contextlib.suppress(OSError):
            for entry in os.scandir(folder):
                if entry.name.startswith(".") and entry.name.endswith(TEMP_SUFFIX):
                    with contextlib.suppress(OSError):
                        if entry.stat(follow_symlinks=False).st_mtime < limit:
                            os.unlink(entry.path)
                            removed += 1
    return removed


def move(source: Path, target: Path) -> None:
    """Atomically move a file within one library (same file system) and make it durable.

    Raises:
        OSError: when the move is refused; the file then stays where it was.
    """
    os.replace(source, target)
    fsync_folder(Path(target).parent)
    if Path(source).parent != Path(target).parent:
        fsync_folder(Path(source).parent)


def explain_os_error(
    exc: OSError, where: Path, action: str, outcome: str = "Nothing in the library was changed"
) -> LibraryError:
    """A :class:`LibraryError` for a failed file operation, saying what to do.

    Args:
        exc: the error raised by the operating system.
        where: the folder (or file) concerned, named in the message.
        action: what was being done, completing "Could not ...", e.g. "save 'Greedy baseline'".
        outcome: what the failure left as it was, said before the advice.
    """
    code = exc.errno
    if code in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        why, advice = f"the disk holding {where} is full", "free some space, or save a copy elsewhere"
    elif code == errno.EROFS:
        why, advice = f"{where} is on a read-only drive", "save a copy elsewhere"
    elif isinstance(exc, PermissionError) or code in (errno.EACCES, errno.EPERM):
        why = f"you do not have permission to write in {where}"
        advice = "ask the folder's owner for write access, or save a copy elsewhere"
    elif isinstance(exc, FileNotFoundError) or code == errno.ENOENT:
        why = f"{where} is not there (an unplugged drive or a moved folder?)"
        advice = "reconnect the drive or choose the library folder again"
    else:
        why, advice = f"{exc.strerror or exc} ({where})", "try again, or save a copy elsewhere"
    return LibraryError(f"Could not {action}: {why}. {outcome}; {advice}.")


def folder_missing_error(folder: Path) -> LibraryError:
    """The error for a library folder that does not exist (any more)."""
    return LibraryError(
        f"The library folder {folder} is not there (an unplugged drive or a moved folder?). "
        "Reconnect the drive or choose the library folder again; nothing was read or written."
    )


def _owner_note(user: str) -> dict[str, Any]:
    return {"user": user, "host": socket.gethostname(), "pid": os.getpid(), "since": now_iso()}


def describe_holder(folder: Path) -> str:
    """Who holds the lock of ``folder``, from its owner note, in words."""
    try:
        note = parse_json(read_limited(Path(folder) / OWNER_NOTE_NAME, 4096))
        return (
            f"{str(note['user'])[:60]} on {str(note['host'])[:60]} (process {int(note['pid'])}) "
            f"since {str(note['since'])[:32]}"
        )
    except (OSError, BadContent, KeyError, TypeError, ValueError):
        return f"another program (it holds {Path(folder) / LOCK_NAME})"


@contextlib.contextmanager
def hold_lock(folder: Path, timeout: float, user: str) -> Iterator[None]:
    """Hold the write lock of ``folder`` for the duration of a ``with`` block.

    Raises:
        LibraryError: when the folder is gone, cannot be written, or the lock
            is still held by someone else after ``timeout`` seconds (the
            message names them).
    """
    folder = Path(folder)
    # filelock would create a missing folder: that would hide an unplugged drive.
    if not folder.is_dir():
        raise folder_missing_error(folder)
    lock_path = folder / LOCK_NAME
    for path in (lock_path, folder / OWNER_NOTE_NAME):
        if path.is_symlink():
            raise LibraryError(
                f"Could not lock the library for writing: {path} is a symbolic link, which Samplewright "
                "does not follow. Nothing in the library was changed; delete that link (nothing "
                "needs it) and try again."
            )
    lock = filelock.FileLock(str(lock_path), timeout=timeout)
    try:
        lock.acquire()
    except filelock.Timeout:
        # With no owner note, a lock file that cannot be opened for writing looks like a busy lock.
        if not (folder / OWNER_NOTE_NAME).exists() and not os.access(folder, os.W_OK):
            denied = PermissionError(errno.EACCES, "Permission denied")
            raise explain_os_error(denied, folder, "lock the library for writing") from None
        raise LibraryError(
            f"The library {folder} is busy: {describe_holder(folder)} is saving to it. "
            f"Try again in a moment; your changes are still open."
        ) from None
    except OSError as exc:
        raise explain_os_error(exc, lock_path, "lock the library for writing") from exc
    try:
        atomic_write(folder / OWNER_NOTE_NAME, dump_json(_owner_note(user)))
    except OSError as exc:
        lock.release()
        raise explain_os_error(exc, folder, "lock the library for writing") from exc
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(folder / OWNER_NOTE_NAME)
        lock.release()


def read_document(path: Path, limit: int, kind: str, fmt: str, version: int, error: type[Exception]) -> dict:
    """Read a JSON file of ours that names its ``format`` and ``version`` (a run or audition file).

    Args:
        path: the file.
        limit: largest size read, in bytes.
        kind: what the user calls it, e.g. ``"run file"``.
        fmt, version: the ``format`` and ``version`` the file must carry.
        error: the exception raised, with one line saying what is wrong.
    """
    try:
        data = parse_json(read_limited(path, limit))
    except FileNotFoundError:
        raise error(f"The {kind} {path} does not exist: check the name.") from None
    except (OSError, BadContent) as exc:
        raise error(f"Could not read the {kind} {path}: {exc}.") from None
    if not isinstance(data, dict) or data.get("format") != fmt:
        raise error(f"{path} is not a Samplewright {kind}.")
    if data.get("version") != version:
        raise error(f"{path} is a {kind} of version {data.get('version')}; this program reads {version}.")
    return data
