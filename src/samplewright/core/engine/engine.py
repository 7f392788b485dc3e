"""The engine: auditions and the step view on a loaded model.

The passage is encoded once and run through the model once; its key/value
cache (and the next-token logits after it) are kept for the next call with
the same passage. The rows of an audition share that one copy of the
passage's keys and values where the model family allows it
(:mod:`samplewright.core.engine.shared_attention`), else each row gets its
own copy. The batched
generation itself lives in :mod:`samplewright.core.engine.batch`; every preset's
meaning is :func:`samplewright.core.sampling.chain.shape`'s (the batch runs the
same stages, on the live tokens only once truncation leaves few:
:mod:`samplewright.core.sampling.compact`).

Passage window: the engine keeps the last ``passage_limit`` tokens of a
passage, ``min(max_passage_tokens, context_length - room)`` where ``room`` is
512 tokens (the longest sample a preset may ask for), or half the context for
models with a short one. ``max_passage_tokens`` (default 1024, about 750
words) bounds the passage's forward pass and, for models without the shared
passage cache, the per-row copies of its key/value cache.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Sequence
from typing import Any

import torch

from ..errors import PassageError, RequestError
from ..framing import CONTINUATION, Framing, passage_cut
from ..limits import MAX_NEW_TOKENS
from ..presets import Preset
from ..results import AuditionRequest, AuditionResult, StepView, TokenEvent
from ..sampling import inspection
from . import batch
from .backend import PassageState, PassageTokens, TransformersBackend
from .model import LoadedModel
from .token_text import Vocabulary, vocabulary_of

__all__ = ["Engine", "PassageLength", "PassageState", "PassageTokens", "passage_limit"]

#: Tokens of context kept free for the sample (the largest max_new_tokens).
GENERATION_ROOM = MAX_NEW_TOKENS
#: Default upper bound of the passage window (memory: one cache copy per row).
MAX_PASSAGE_TOKENS = 1024


@dataclasses.dataclass(frozen=True)
class PassageLength:
    """A passage's prompt as counted for the passage editor.

    Attributes:
        tokens: the prompt's tokens (kept ids, dropped count, window, cut offset in the prompt).
        framed: whether an instruction and chat template surround the passage.
        passage_cut: character offset in the passage where the kept part starts
            (None when no character of the passage itself is left out).
    """

    tokens: PassageTokens
    framed: bool
    passage_cut: int | None


def passage_limit(context_length: int, max_passage_tokens: int = MAX_PASSAGE_TOKENS) -> int:
    """The passage window for a model with ``context_length`` positions."""
    room = min(GENERATION_ROOM, context_length // 2)
    return max(1, min(max_passage_tokens, context_length - room))


class Engine:
    """Generates auditions and step views with one loaded model.

    Not thread-safe: use one engine from one thread at a time.
    """

    def __init__(
        self,
        loaded: LoadedModel,
        max_passage_tokens: int = MAX_PASSAGE_TOKENS,
        shared_cache: bool = True,
        lean_step: bool = True,
        packed_weights: bool | None = None,
    ):
        self.loaded = loaded
        #: What the audition batch calls (``shared_cache=False`` forces a passage copy per row;
        #: ``lean_step=False`` runs every decoding step through transformers' modules;
        #: ``packed_weights=True`` trades weight memory for speed, see lean_decode).
        self.backend = TransformersBackend(loaded, shared=shared_cache, lean=lean_step, packed_weights=packed_weights)
        self.passage_limit = passage_limit(loaded.context_length, max_passage_tokens)
        self._state: PassageState | None = None
        self._vocabulary: Vocabulary | None = None

    # -- passages -----------------------------------------------------------

    def encode_passage(self, text: str) -> PassageTokens:
        """Tokenise a passage, keeping its last part when it is too long.

        Args:
            text: the draft passage.

        Returns:
            The kept token ids and how many were dropped from the start.

        Raises:
            PassageError: the passage is empty or only white space.
        """
        if not isinstance(text, str) or not text.strip():
            raise PassageError("The passage is empty: write or paste a draft for the model to continue.")
        tokenizer = self.loaded.tokenizer
        try:
            encoded = tokenizer(text, add_special_tokens=False, return_offsets_mapping=True)
            offsets = encoded["offset_mapping"]
        except (NotImplementedError, KeyError, ValueError):
            encoded, offsets = tokenizer(text, add_special_tokens=False), None
        plain = list(encoded["input_ids"])
        if not plain:
            raise PassageError("The passage has no tokens the model can read: write some ordinary text.")
        prefix = _special_prefix(list(tokenizer(text)["input_ids"]), plain)
        dropped = max(0, len(plain) - (self.passage_limit - len(prefix)))
        cut_at = int(offsets[dropped][0]) if dropped and offsets else None
        return PassageTokens(prefix + plain[dropped:], dropped, self.passage_limit, cut_at)

    def measure_passage(self, text: str, framing: Framing | None = None) -> PassageLength:
        """How long the prompt of ``text`` is, as the audition would build it with ``framing``.

        Returns:
            The prompt's kept and dropped tokens, and where in ``text`` itself the kept part
            starts when the cut reaches into the passage (an instruction is cut first).

        Raises:
            PassageError: the passage is empty, or an instruction framing the model cannot use.
        """
        if not isinstance(text, str) or not text.strip():
            raise PassageError("The passage is empty: write or paste a draft for the model to continue.")
        framing = framing or Framing()
        prompt = framing.prompt(text, self.loaded.tokenizer)
        tokens = self.encode_passage(prompt)
        return PassageLength(tokens, framing.kind != CONTINUATION, passage_cut(prompt, text, tokens.cut_at))

    def passage_state(self, ids: Sequence[int]) -> PassageState:
        """The forward pass of ``ids``, computed once and reused while the passage stays the same."""
        key = tuple(int(i) for i in ids)
        if self._state is None or self._state.ids != key:
            self._state = None  # free the old cache before building the new one
            with torch.inference_mode():
                self._state = self.backend.encode(key)
        return self._state

    # -- model calls used by the batch --------------------------------------

    def forward(self, input_ids: torch.Tensor, cache) -> tuple[torch.Tensor, Any]:
        """Run the model on ``input_ids`` (rows × new tokens) after a plain ``cache``.

        Returns:
            The next-token logits of each row (rows × vocab, float32) and the
            grown cache.
        """
        return self.backend.forward(input_ids, cache)

    @staticmethod
    def copy_cache(state: PassageState, rows: int):
        """A fresh plain cache holding the passage once per row (the state's stays untouched)."""
        return TransformersBackend.copy_cache(state, rows)

    def token_text(self, token_id: int) -> str:
        """The text piece of one token."""
        return self.backend.token_text(token_id)

    @property
    def vocabulary(self) -> Vocabulary:
        """The bytes of every token of the model (read from the tokenizer once)."""
        if self._vocabulary is None:
            self._vocabulary = vocabulary_of(self.loaded.tokenizer, self.loaded.vocab_size)
        return self._vocabulary

    def token_label(self, token_id: int) -> str:
        """A token's own text, bytes that form no whole character written ``<0xC5>`` (never "�")."""
        return self.vocabulary.label(int(token_id))

    def decode(self, ids: Sequence[int]) -> str:
        """The text of a token sequence, decoded as a whole."""
        return self.backend.decode(ids)

    # -- the two jobs ---------------------------------------------------------

    def audition(
        self,
        request: AuditionRequest,
        on_token: Callable[[TokenEvent], None] | None = None,
        should_stop: Callable[[], bool] | None = None,
    ) -> AuditionResult:
        """Generate ``request.samples`` samples of every preset, all in one batch.

        Args:
            request: passage, presets, samples per preset, token budget and seed.
            on_token: called for every generated token and every ending.
            should_stop: checked before every step; True cancels the run.

        Returns:
            The samples, with ``cancelled`` set when ``should_stop`` ended the run.

        Raises:
            PassageError: the passage is empty, or an instruction framing for a model without a chat template.
            RequestError: no presets, fewer than one sample or token, or a negative seed.
        """
        started = time.perf_counter()
        batch.check_request(request)
        passage = self.encode_passage(request.framing.prompt(request.passage, self.loaded.tokenizer))
        with torch.inference_mode():
            state = self.passage_state(passage.ids)
            return batch.run_audition(self.backend, passage, state, request, on_token, should_stop, started)

    def step(
        self,
        passage: str,
        presets: list[Preset],
        sample_ids: Sequence[int] = (),
        top: int = 20,
        drawn_id: int | None = None,
        framing: Framing | None = None,
    ) -> StepView:
        """The next-token distribution after the passage (and ``sample_ids``), raw and per preset.

        Args:
            passage: the draft passage.
            presets: the presets to compare.
            sample_ids: the first tokens of a sample, continuing the passage.
            top: how many tokens (by raw probability) to list.
            drawn_id: the token the inspected sample drew here, passed through.
            framing: how the model is asked (the step follows the framed prompt, as the audition did);
                None is plain continuation.

        Returns:
            The step view.

        Raises:
            PassageError: the passage is empty, or an instruction framing the model cannot use.
            RequestError: a sample id is outside the vocabulary or the text exceeds the context.
        """
        tokens = self.encode_passage((framing or Framing()).prompt(passage, self.loaded.tokenizer))
        sample_ids = [int(i) for i in sample_ids]
        if any(not 0 <= i < self.loaded.vocab_size for i in sample_ids):
            raise RequestError(f"Sample token ids must lie in 0..{self.loaded.vocab_size - 1}.")
        history = tokens.ids + sample_ids
        if len(history) > self.loaded.context_length:
            raise RequestError(
                f"The passage and the text after it come to {len(history)} tokens, more than "
                f"the model's context of {self.loaded.context_length}: shorten one of them."
            )
        with torch.inference_mode():
            logits = self._next_logits(tokens.ids, sample_ids)
            return inspection.step_view(
                logits,
                presets,
                self.token_label,
                history=history,
                generated=sample_ids,
                top=top,
                drawn_id=drawn_id,
                context_tokens=len(history),
            )

    def _next_logits(self, passage_ids: list[int], sample_ids: list[int]) -> torch.Tensor:
        state = self.passage_state(passage_ids)
        if not sample_ids:
            return state.logits
        logits, _ = self.forward(torch.tensor([sample_ids], dtype=torch.long), self.copy_cache(state, 1))
        return logits[0]


def _special_prefix(full: list[int], plain: list[int]) -> list[int]:
    """Special tokens the tokenizer puts before the text (e.g. BOS); trailing
    ones (an EOS) are left out, since the model continues the passage."""
    for head in range(min(4, len(full) - len(plain)) + 1):
        if full[head : head + len(plain)] == plain:
            return full[:head]
    return []
