"""What the audition batch needs from a model, and the transformers backend.

The batch (:mod:`samplewright.core.engine.batch`) sees a model only through
:class:`ModelBackend`: encode a passage once, start a cache for many rows
continuing it, run all rows one step, and turn token ids into text. Another
backend (a GPU server, for instance) implements the same few calls.

:class:`TransformersBackend` runs a transformers causal language model on
whatever device its weights are on (CPU here; a CUDA device when the model
was moved there: nothing below assumes CPU). For supported model families
the rows share one copy of the passage's keys and values
(:mod:`samplewright.core.engine.shared_attention`); for any other model each
row gets its own copy of the passage cache, as transformers' generate() does.
"""

from __future__ import annotations

import copy
import dataclasses
from collections.abc import Sequence
from typing import Any, Protocol

import torch

from . import lean_decode, shared_attention


@dataclasses.dataclass(frozen=True)
class PassageTokens:
    """A passage as the model sees it."""

    ids: list[int]  # the kept token ids (special prefix tokens included)
    dropped: int  # tokens cut from the start to fit the passage window
    limit: int  # the passage window in tokens
    cut_at: int | None  # character offset where the kept part starts, when tokens were dropped


@dataclasses.dataclass(frozen=True)
class PassageState:
    """The passage's forward pass: kept for reuse, never modified."""

    ids: tuple[int, ...]
    cache: Any  # the model's key/value cache for one row
    logits: torch.Tensor  # (vocab,) float32 next-token logits after the passage, on the CPU


class RowsCache(Protocol):
    """The key/value cache of the rows still generating."""

    def batch_select_indices(self, indices: torch.Tensor) -> None:
        """Keep only the rows at ``indices``, in that order."""


class ModelBackend(Protocol):
    """The narrow view of a model the audition batch uses."""

    eos_ids: frozenset[int]
    context_length: int

    def encode(self, ids: Sequence[int]) -> PassageState:
        """Run the passage ``ids`` through the model once (one row)."""
        ...

    def start_rows(self, state: PassageState, rows: int, capacity: int) -> RowsCache:
        """A cache for ``rows`` rows continuing the passage, with room for ``capacity`` tokens each."""
        ...

    def step(self, ids: torch.Tensor, cache: RowsCache) -> torch.Tensor:
        """Feed one token per row (``ids``: (rows,) long); the next-token logits (rows × vocab, float32, CPU)."""
        ...

    def token_text(self, token_id: int) -> str:
        """The text piece of one token."""
        ...

    def decode(self, ids: Sequence[int]) -> str:
        """The text of a token sequence, decoded as a whole."""
        ...


class TransformersBackend:
    """:class:`ModelBackend` for a loaded transformers model.

    Args:
        loaded: the model (a :class:`~samplewright.core.engine.model.LoadedModel`).
        shared: use the shared passage cache where the model supports it
            (False forces a copy of the passage cache per row).
        lean: run decoding steps on the shared cache with the lean step
            (:mod:`samplewright.core.engine.lean_decode`) where it supports the
            model (False: always transformers' modules).
        packed_weights: let the lean step keep packed copies of the weights (faster, about
            twice the weight memory); None packs when the copies fit the lean step's budget.
    """

    def __init__(self, loaded, shared: bool = True, lean: bool = True, packed_weights: bool | None = None):
        self.loaded = loaded
        self.model = loaded.model
        self.eos_ids: frozenset[int] = loaded.eos_ids
        self.context_length: int = loaded.context_length
        self.shared = bool(shared) and shared_attention.install(self.model)
        #: The lean decoding step, or None (then :attr:`lean_note` says why).
        self.lean: lean_decode.LeanDecoder | None = None
        self.lean_note = "switched off" if not lean else "needs the shared passage cache"
        if lean and self.shared:
            self.lean_note = lean_decode.unsupported_reason(self.model) or ""
            self.lean = None if self.lean_note else lean_decode.shared_decoder(self.model, packed_weights)
        self.device = next(self.model.parameters()).device
        # Tokens decoded one at a time are few and repeat often: remember them.
        self._texts: dict[int, str] = {}

    def forward(self, input_ids: torch.Tensor, cache) -> tuple[torch.Tensor, Any]:
        """The plain path: run ``input_ids`` (rows × new tokens) after ``cache`` (None: from the start).

        Returns:
            The next-token logits of each row (rows × vocab, float32, CPU) and the grown cache.
        """
        out = self.model(input_ids=input_ids.to(self.device), cache=cache, use_cache=True, logits_to_keep=1)
        return out.logits[:, -1, :].to("cpu", torch.float32), out.cache

    def encode(self, ids: Sequence[int]) -> PassageState:
        """Run the passage through the model once (see :class:`ModelBackend`)."""
        key = tuple(int(i) for i in ids)
        logits, cache = self.forward(torch.tensor([key], dtype=torch.long), None)
        return PassageState(key, cache, logits[0])

    def start_rows(self, state: PassageState, rows: int, capacity: int) -> RowsCache:
        """The shared passage cache, or a per-row copy of the passage cache for other models."""
        if self.shared:
            return shared_attention.SharedPassageCache(state.cache, rows, capacity)
        return self.copy_cache(state, rows)

    @staticmethod
    def copy_cache(state: PassageState, rows: int):
        """A fresh plain cache holding the passage once per row (the state's stays untouched)."""
        cache = copy.deepcopy(state.cache)
        if rows != 1:
            cache.batch_repeat_interleave(rows)
        return cache

    def step(self, ids: torch.Tensor, cache: RowsCache) -> torch.Tensor:
        """Run every row one token further (see :class:`ModelBackend`)."""
        if self.lean is not None and isinstance(cache, shared_attention.SharedPassageCache):
            return self.lean.step(ids, cache)
        extra = {shared_attention.SHARED_KWARG: cache} if isinstance(cache, shared_attention.SharedPassageCache) else {}
        out = self.model(
            input_ids=ids.unsqueeze(-1).to(self.device), cache=cache, use_cache=True, logits_to_keep=1, **extra
        )
        return out.logits[:, -1, :].to("cpu", torch.float32)

    def token_text(self, token_id: int) -> str:
        """The text piece of one token."""
        token_id = int(token_id)
        text = self._texts.get(token_id)
        if text is None:
            text = self._texts[token_id] = self.loaded.tokenizer.decode([token_id])
        return text

    def decode(self, ids: Sequence[int]) -> str:
        """The text of a token sequence, decoded as a whole."""
        return self.loaded.tokenizer.decode([int(i) for i in ids])
