"""Errors meant for the user: each message says what went wrong and what to do.

The CLI prints them as one line; the window shows them in a message box.
``PresetError`` is also importable as ``samplewright.PresetError`` and from
``core/presets.py``.
"""


class SamplewrightError(Exception):
    """Base class of errors whose message is fit to show a user as it is."""


class ModelError(SamplewrightError):
    """The model is missing, unreadable or not a causal language model."""


class PassageError(SamplewrightError):
    """The passage is empty, unreadable or not UTF-8 text."""


class LibraryError(SamplewrightError):
    """The preset library or a settings file cannot be read or written."""


class RequestError(SamplewrightError, ValueError):
    """A request the engine cannot run: no presets, a negative seed, text longer than the context.

    Also a ``ValueError``, so callers that caught that before keep working.
    """


class PresetError(SamplewrightError, ValueError):
    """A preset field holds a value outside its allowed range, or an unknown key.

    ``field`` names the offending field (the user-facing name). Also a
    ``ValueError``, as it was before it joined the user-facing errors.
    """

    def __init__(self, field: str, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field
