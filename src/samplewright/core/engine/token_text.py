"""Each token's bytes, readable token labels, and where each token of a sample
falls in the sample's text.

Byte-level BPE tokenizers (GPT-2's scheme, Radford et al. 2019, "Language
Models are Unsupervised Multitask Learners"; the default model's and the test
model's) split text into UTF-8 bytes, so one character such as "ř" (two bytes)
can be spread over two tokens. Decoding one token alone then gives "�". Here a
sample's text is decoded from the bytes of all its tokens at once, and each
token gets the character range its bytes fall in; a character shared by two
tokens lies in both ranges. Bytes that form no whole character (a token holding
half of one) are written ``<0xC5>``, never "�".

No torch and no Qt here; :func:`vocabulary_of` reads a transformers tokenizer.
"""

from __future__ import annotations

import bisect
import dataclasses
import functools
import re
from collections.abc import Sequence

_BYTE_TAG = re.compile(r"^<0x([0-9A-Fa-f]{2})>$")
_SENTENCEPIECE_SPACE = "\u2581"


@functools.cache
def byte_alphabet() -> dict[str, int]:
    """GPT-2's byte-level alphabet: the printable character standing for each byte, mapped to the byte.

    Printable Latin-1 bytes stand for themselves; the other 68 bytes get the
    characters from U+0100 on, in byte order (the published ``bytes_to_unicode``
    of GPT-2's encoder).
    """
    printable = [*range(ord("!"), ord("~") + 1), *range(ord("¡"), ord("¬") + 1), *range(ord("®"), ord("ÿ") + 1)]
    chars = {b: chr(b) for b in printable}
    extra = 0
    for b in range(256):
        if b not in chars:
            chars[b] = chr(256 + extra)
            extra += 1
    return {c: b for b, c in chars.items()}


def readable(data: bytes) -> str:
    """``data`` decoded as UTF-8, each byte that is part of no whole character written ``<0xC5>``."""
    text = data.decode("utf-8", errors="surrogateescape")
    return "".join(_unit(ch) for ch in text)


def _unit(ch: str) -> str:
    code = ord(ch)
    return f"<0x{code - 0xDC00:02X}>" if 0xDC80 <= code <= 0xDCFF else ch


@dataclasses.dataclass(frozen=True)
class SampleText:
    """A sample's text and the character range of each of its tokens.

    Attributes:
        text: the whole sample's text, decoded at once (stray bytes as ``<0xC5>``).
        spans: per token, ``(start, end)`` character offsets into ``text``; a
            character spread over two tokens lies in both tokens' ranges.
    """

    text: str
    spans: tuple[tuple[int, int], ...]

    def token_at(self, position: int) -> int | None:
        """The first token whose range holds character ``position`` (the last token past the end)."""
        if not self.spans:
            return None
        starts = [s for s, _ in self.spans]
        index = max(0, bisect.bisect_right(starts, position) - 1)
        # Step back over tokens that share this character (a token starting inside it ends past it).
        while index > 0 and self.spans[index - 1][1] > position:
            index -= 1
        return index


def sample_text(pieces: Sequence[bytes]) -> SampleText:
    """The text of tokens with these bytes, decoded as a whole, and each token's character range."""
    data = b"".join(pieces)
    decoded = data.decode("utf-8", errors="surrogateescape")
    units: list[str] = []
    unit_start = []  # per byte: character offset where the unit holding that byte starts
    unit_end = []  # per byte: character offset where it ends
    offset = 0
    for ch in decoded:
        shown = _unit(ch)
        size = 1 if shown != ch else len(ch.encode("utf-8"))
        unit_start += [offset] * size
        unit_end += [offset + len(shown)] * size
        units.append(shown)
        offset += len(shown)
    spans = []
    position = 0
    for piece in pieces:
        first, last = position, position + len(piece)
        if first == last:
            start = unit_start[first] if first < len(unit_start) else offset
            spans.append((start, start))
        else:
            spans.append((unit_start[first], unit_end[last - 1]))
        position = last
    return SampleText("".join(units), tuple(spans))


class GrowingText:
    """A sample's text built token by token as a run reports them, equal at every point to
    :func:`sample_text` of the tokens so far; only the unfinished end is decoded again.

    Attributes:
        text: the text so far.
        spans: each token's character range in ``text``.
    """

    #: A character is at most 4 bytes in UTF-8 (RFC 3629): bytes still open after this many never form one.
    MAX_OPEN_BYTES = 8

    def __init__(self) -> None:
        self.pieces: list[bytes] = []
        self.text = ""
        self.spans: list[tuple[int, int]] = []
        self._open = 0  # first token of the end that may still change

    def append(self, piece: bytes) -> int:
        """Add one token's bytes; returns the character offset from which ``text`` changed."""
        start = self.spans[self._open][0] if self._open < len(self.spans) else len(self.text)
        self.pieces.append(piece)
        tail = sample_text(self.pieces[self._open :])
        self.text = self.text[:start] + tail.text
        self.spans[self._open :] = [(a + start, b + start) for a, b in tail.spans]
        data = b"".join(self.pieces[self._open :])
        if len(data) > self.MAX_OPEN_BYTES or _whole(data):
            self._open = len(self.pieces)
        return start

    def snapshot(self) -> SampleText:
        """The text and ranges so far, as a :class:`SampleText`."""
        return SampleText(self.text, tuple(self.spans))


def _whole(data: bytes) -> bool:
    """Whether ``data`` ends on a character boundary (decodes as UTF-8 without error)."""
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


@dataclasses.dataclass(frozen=True)
class Vocabulary:
    """The bytes of every token id of a model (plain data, safe to hand to any thread).

    Attributes:
        pieces: ``pieces[id]``, the bytes the token stands for (empty for an id the tokenizer lacks).
    """

    pieces: tuple[bytes, ...]

    def bytes_of(self, token_id: int) -> bytes:
        """The bytes of one token (empty for an unknown id)."""
        return self.pieces[token_id] if 0 <= token_id < len(self.pieces) else b""

    def label(self, token_id: int) -> str:
        """A token's own text, with bytes that form no whole character as ``<0xC5>``."""
        return readable(self.bytes_of(token_id))

    def sample_text(self, ids: Sequence[int]) -> SampleText:
        """The text of these tokens decoded as a whole, and each token's character range."""
        return sample_text([self.bytes_of(int(i)) for i in ids])


def vocabulary_of(tokenizer, size: int | None = None) -> Vocabulary:
    """Read each token's bytes from a transformers tokenizer.

    Byte-level vocabularies (every token written in GPT-2's byte alphabet) are
    read back through that alphabet; SentencePiece ones through their
    ``<0xNN>`` byte tokens and "▁" for a space; any other kind through
    decoding each token alone. Added and special tokens stand for their own text.

    Args:
        tokenizer: a transformers tokenizer.
        size: how many ids to cover (the model's vocabulary can be larger than the tokenizer's).
    """
    count = max(len(tokenizer), size or 0)
    tokens = tokenizer.convert_ids_to_tokens(list(range(len(tokenizer))))
    added = {int(i): t.content for i, t in getattr(tokenizer, "added_tokens_decoder", {}).items()}
    alphabet = byte_alphabet()
    plain = [t for i, t in enumerate(tokens) if i not in added and t]
    byte_level = bool(plain) and all(ch in alphabet for t in plain for ch in t)
    sentencepiece = not byte_level and any(_SENTENCEPIECE_SPACE in t for t in plain)
    pieces = []
    for token_id in range(count):
        token = tokens[token_id] if token_id < len(tokens) else None
        if token_id in added:
            pieces.append(added[token_id].encode("utf-8"))
        elif token is None:
            pieces.append(b"")
        elif byte_level:
            pieces.append(bytes(alphabet[ch] for ch in token))
        elif (tag := _BYTE_TAG.match(token)) is not None:
            pieces.append(bytes([int(tag.group(1), 16)]))
        elif sentencepiece:
            pieces.append(token.replace(_SENTENCEPIECE_SPACE, " ").encode("utf-8"))
        else:
            pieces.append(tokenizer.decode([token_id]).encode("utf-8"))
    return Vocabulary(tuple(pieces))
