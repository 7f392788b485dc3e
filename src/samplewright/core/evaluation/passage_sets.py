"""Passage sets: named groups of passages for one kind of writing.

A set is a folder ``<library>/passages/<set name>/`` of UTF-8 ``.txt``/``.md``
files (the passage's name is the file name without extension) and an optional
``framing.json`` (see :mod:`.framing`). Writes hold the library's lock and
replace files atomically (:mod:`samplewright.core.library.storage`); a deleted
set moves to ``<library>/.trash/passages/``. A file that is not UTF-8 or is
empty is listed in ``skipped`` with its reason and left untouched.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import os
import re
from collections.abc import Iterator
from importlib import resources
from pathlib import Path

from ..errors import LibraryError, PassageError
from ..framing import Framing
from ..library.storage import (
    BadContent,
    atomic_write,
    current_user,
    dump_json,
    explain_os_error,
    hold_lock,
    parse_json,
    read_limited,
)

SETS_DIR = "passages"
TRASH_DIR = Path(".trash") / "passages"
FRAMING_FILE = "framing.json"
SUFFIXES = (".txt", ".md")
MAX_PASSAGE_BYTES = 1_000_000
LOCK_TIMEOUT = 5.0
_BAD_NAME = re.compile(r"[\\/:*?\"<>|\x00-\x1f]")


@dataclasses.dataclass(frozen=True)
class Passage:
    """One passage of a set."""

    name: str
    text: str

    @property
    def text_hash(self) -> str:
        """SHA-256 of the passage's UTF-8 text, in hex: identifies the passage in run files."""
        return text_hash(self.text)


@dataclasses.dataclass(frozen=True)
class SkippedPassage:
    """A file of a set that is not a usable passage (left as it is)."""

    name: str
    reason: str


@dataclasses.dataclass(frozen=True)
class PassageSet:
    """A named group of passages with its framing; ``folder`` is None for a bundled demo set."""

    name: str
    passages: tuple[Passage, ...]
    skipped: tuple[SkippedPassage, ...] = ()
    framing: Framing = Framing()
    folder: Path | None = None


def text_hash(text: str) -> str:
    """SHA-256 hex digest of ``text`` encoded as UTF-8."""
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()


def clean_text(text: str) -> str:
    """Windows line ends become plain ones; trailing white space goes (the model would start oddly)."""
    return text.replace("\r\n", "\n").rstrip()


def _decode_passage(data: bytes) -> str:
    try:
        text = clean_text(data.decode("utf-8-sig"))
    except UnicodeDecodeError as error:
        raise BadContent(f"not UTF-8 text (bad byte at position {error.start})") from None
    if not text.strip():
        raise BadContent("empty")
    return text


def read_set(folder: str | os.PathLike, name: str | None = None) -> PassageSet:
    """Read a folder of ``.txt``/``.md`` passages (sorted by file name) and its framing.

    Raises:
        PassageError: the folder is missing or unreadable, or its framing file is broken.
    """
    folder = Path(folder).expanduser()
    if not folder.is_dir():
        raise PassageError(f"The passage folder {folder} does not exist: check the name or path.")
    passages, skipped = [], []
    try:
        entries = sorted(p for p in folder.iterdir() if p.suffix.lower() in SUFFIXES and p.is_file())
    except OSError as exc:
        raise PassageError(f"Could not read the passage folder {folder} ({exc.strerror or exc}).") from None
    for path in entries:
        try:
            passages.append(Passage(path.stem, _decode_passage(read_limited(path, MAX_PASSAGE_BYTES))))
        except BadContent as exc:
            skipped.append(SkippedPassage(path.name, str(exc)))
        except OSError as exc:
            skipped.append(SkippedPassage(path.name, f"unreadable ({exc.strerror or exc})"))
    return PassageSet(name or folder.name, tuple(passages), tuple(skipped), _read_framing(folder), folder)


def _read_framing(folder: Path) -> Framing:
    path = folder / FRAMING_FILE
    if not path.exists():
        return Framing()
    try:
        return Framing.from_dict(parse_json(read_limited(path, 64_000)))
    except (BadContent, OSError) as exc:
        raise PassageError(f"The framing file {path} is not usable ({exc}): fix or delete it.") from None


def demo_sets() -> list[PassageSet]:
    """The bundled demo sets (``resources/passage_sets/<set>/``), sorted by name."""
    root = resources.files("samplewright") / "resources" / "passage_sets"
    found = []
    for entry in sorted(root.iterdir(), key=lambda e: e.name):
        if entry.is_dir():
            files = sorted((f for f in entry.iterdir() if f.name.endswith(SUFFIXES)), key=lambda f: f.name)
            passages = tuple(Passage(f.name.rsplit(".", 1)[0], clean_text(f.read_text("utf-8"))) for f in files)
            framing = entry / FRAMING_FILE
            frame = Framing.from_dict(json.loads(framing.read_text("utf-8"))) if framing.is_file() else Framing()
            found.append(PassageSet(entry.name, passages, (), frame, None))
    return found


def check_set_name(name: str) -> str:
    """The set name stripped; PassageError when it cannot be a folder name."""
    name = name.strip() if isinstance(name, str) else ""
    if not name or name.startswith(".") or _BAD_NAME.search(name) or len(name) > 80:
        raise PassageError(
            f"{name!r} cannot name a passage set: use up to 80 characters, "
            'no leading dot and none of \\ / : * ? " < > |'
        )
    return name


class PassageSets:
    """The passage sets of one library folder: list, create, rename, delete, add passages.

    Args:
        library_dir: the library folder (it must exist).
        user: the name left in the lock note (default: the login name).
    """

    def __init__(self, library_dir: str | os.PathLike, user: str | None = None, lock_timeout: float = LOCK_TIMEOUT):
        self.library_dir = Path(library_dir).expanduser()
        self.root = self.library_dir / SETS_DIR
        self.user = user or current_user()
        self.lock_timeout = lock_timeout

    def names(self) -> list[str]:
        """The names of the sets in the library, sorted."""
        if not self.root.is_dir():
            return []
        return sorted(p.name for p in self.root.iterdir() if p.is_dir() and not p.name.startswith("."))

    def sets(self) -> list[PassageSet]:
        """Every set in the library, read now."""
        return [self.get(name) for name in self.names()]

    def get(self, name: str) -> PassageSet:
        """One set by name. Raises PassageError naming the sets there are."""
        folder = self.root / name
        if not folder.is_dir():
            known = ", ".join(self.names()) or "none yet"
            raise PassageError(f"There is no passage set {name!r} in {self.library_dir} (sets: {known}).")
        return read_set(folder, name)

    @contextlib.contextmanager
    def _writing(self, action: str) -> Iterator[None]:
        with hold_lock(self.library_dir, self.lock_timeout, self.user):
            try:
                yield
            except OSError as exc:
                raise explain_os_error(exc, self.library_dir, action) from exc

    def create(self, name: str, framing: Framing | None = None) -> PassageSet:
        """Create an empty set; LibraryError when the name is taken."""
        name = check_set_name(name)
        with self._writing(f"create the passage set {name!r}"):
            folder = self.root / name
            if folder.exists():
                raise LibraryError(f"A passage set named {name!r} exists already: choose another name.")
            folder.mkdir(parents=True)
            if framing is not None and framing != Framing():
                atomic_write(folder / FRAMING_FILE, dump_json(framing.to_dict()))
        return self.get(name)

    def set_framing(self, name: str, framing: Framing) -> None:
        """Store the set's framing."""
        with self._writing(f"save the framing of {name!r}"):
            atomic_write(self._folder(name) / FRAMING_FILE, dump_json(framing.to_dict()))

    def rename(self, old: str, new: str) -> PassageSet:
        """Rename a set; LibraryError when the new name is taken."""
        new = check_set_name(new)
        with self._writing(f"rename the passage set {old!r}"):
            source, target = self._folder(old), self.root / new
            if target.exists():
                raise LibraryError(f"A passage set named {new!r} exists already: choose another name.")
            os.replace(source, target)
        return self.get(new)

    def delete(self, name: str) -> Path:
        """Move a set to the library's trash; returns where it went."""
        with self._writing(f"delete the passage set {name!r}"):
            source = self._folder(name)
            trash = self.library_dir / TRASH_DIR
            trash.mkdir(parents=True, exist_ok=True)
            target, n = trash / name, 1
            while target.exists():
                n += 1
                target = trash / f"{name} ({n})"
            os.replace(source, target)
        return target

    def add_passage(self, name: str, passage_name: str, text: str) -> Passage:
        """Write one passage (pasted text) into a set as ``<passage_name>.txt``; replaces a same-named one."""
        passage_name = check_set_name(passage_name)
        text = clean_text(text)
        if not text.strip():
            raise PassageError("The passage is empty: paste some text first.")
        with self._writing(f"add the passage {passage_name!r} to {name!r}"):
            atomic_write(self._folder(name) / f"{passage_name}.txt", (text + "\n").encode("utf-8"))
        return Passage(passage_name, text)

    def add_file(self, name: str, path: str | os.PathLike) -> Passage:
        """Copy a UTF-8 ``.txt``/``.md`` file into a set. Raises PassageError for an unusable file."""
        path = Path(path)
        if path.suffix.lower() not in SUFFIXES:
            raise PassageError(f"{path.name} is not a .txt or .md file: save the passage as text first.")
        try:
            text = _decode_passage(read_limited(path, MAX_PASSAGE_BYTES))
        except BadContent as exc:
            raise PassageError(f"{path.name} cannot be a passage: {exc}.") from None
        except OSError as exc:
            raise PassageError(f"Could not read {path} ({exc.strerror or exc}).") from None
        with self._writing(f"add {path.name} to {name!r}"):
            atomic_write(self._folder(name) / path.name, (text + "\n").encode("utf-8"))
        return Passage(path.stem, text)

    def add_demo_sets(self) -> list[str]:
        """Copy the bundled demo sets that the library does not hold yet; returns their names."""
        added = []
        for demo in demo_sets():
            if demo.name in self.names():
                continue
            self.create(demo.name, demo.framing)
            for passage in demo.passages:
                self.add_passage(demo.name, passage.name, passage.text)
            added.append(demo.name)
        return added

    def _folder(self, name: str) -> Path:
        folder = self.root / name
        if not folder.is_dir():
            raise PassageError(f"There is no passage set {name!r} in {self.library_dir}.")
        return folder


def resolve_set(spec: str, library_dir: str | os.PathLike | None) -> PassageSet:
    """The set ``--passages spec`` names: a set of the library, a bundled demo set, or a folder.

    A folder given by path has plain-continuation framing unless it holds a ``framing.json``.

    Raises:
        PassageError: nothing answers to ``spec`` (the message lists the sets there are), or
            the set holds no usable passage (the message lists the skipped files and why).
    """
    found: PassageSet | None = None
    if library_dir is not None and spec in PassageSets(library_dir).names():
        found = PassageSets(library_dir).get(spec)
    elif Path(spec).expanduser().is_dir():
        found = read_set(spec)
    else:
        found = next((s for s in demo_sets() if s.name == spec), None)
    if found is None:
        known = (PassageSets(library_dir).names() if library_dir is not None else []) + [s.name for s in demo_sets()]
        raise PassageError(
            f"{spec!r} is neither a passage set nor a folder; sets you can name: {', '.join(sorted(set(known)))}."
        )
    if not found.passages:
        why = "; ".join(f"{s.name}: {s.reason}" for s in found.skipped) or "no .txt or .md files"
        raise PassageError(f"The passage set {found.name!r} has no usable passage ({why}).")
    return found
