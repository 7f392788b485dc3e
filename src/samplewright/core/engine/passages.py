"""Draft passages: reading the user's files and the bundled demo passages.

The demo passages (``samplewright/resources/passages/*.txt``) are invented
drafts of a small harbour-town ferry company's communications team. Each
stops mid-sentence so there is something natural to continue.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from ..errors import PassageError


def _clean(text: str) -> str:
    # Windows line ends become plain ones; a file's final line break (or
    # trailing spaces) would make the model start on an unusual token.
    return text.replace("\r\n", "\n").rstrip()


def read_passage(path) -> str:
    """Read a draft passage from a UTF-8 text file.

    A byte-order mark, Windows line ends and trailing white space are removed.

    Args:
        path: the file to read.

    Returns:
        The passage text.

    Raises:
        PassageError: the file is missing, unreadable, empty or not UTF-8 text.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise PassageError(f"The passage file {path} does not exist: check the name or choose another file.") from None
    except OSError as error:
        raise PassageError(f"Could not read the passage file {path} ({error.strerror or error}).") from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise PassageError(
            f"The passage file {path} is not UTF-8 text (bad byte at position {error.start}): "
            "save it as UTF-8 and open it again."
        ) from None
    text = _clean(text)
    if not text.strip():
        raise PassageError(f"The passage file {path} is empty: write or paste a draft to continue.")
    return text


def example_title(name: str) -> str:
    """The title of a demo passage from its file name: ``cancelled-crossing-reply`` → "Cancelled crossing reply"."""
    words = name.replace("_", "-").split("-")
    return " ".join(w for w in words if w).capitalize()


def demo_passages() -> dict[str, str]:
    """The bundled demo passages by name (file name without ``.txt``), sorted by name."""
    folder = resources.files("samplewright") / "resources" / "passages"
    files = sorted((f for f in folder.iterdir() if f.name.endswith(".txt")), key=lambda f: f.name)
    return {f.name[:-4]: _clean(f.read_text(encoding="utf-8")) for f in files}


def require_text(text: str) -> str:
    """``text`` when it holds something to continue; checked before a model is loaded.

    Raises:
        PassageError: the passage is empty or only white space.
    """
    if not text.strip():
        raise PassageError("The passage is empty: write or paste a draft for the model to continue.")
    return text
