"""How the assistant is asked: plain continuation, or an instruction in the
model's own chat template (transformers' ``apply_chat_template``)."""

from __future__ import annotations

import dataclasses
from typing import Any

from .errors import PassageError

CONTINUATION = "continuation"
INSTRUCTION = "instruction"
#: Where the passage goes in an instruction.
PLACEHOLDER = "{passage}"
MAX_FRAMING_TEXT = 4000


@dataclasses.dataclass(frozen=True)
class Framing:
    """Plain continuation (the default) or an instruction with an optional system message.

    ``instruction`` holds :data:`PLACEHOLDER` where the passage is inserted; without it
    the passage follows the instruction after a blank line.
    """

    kind: str = CONTINUATION
    system: str = ""
    instruction: str = ""

    def __post_init__(self) -> None:
        if self.kind not in (CONTINUATION, INSTRUCTION):
            raise PassageError(f"framing must be '{CONTINUATION}' or '{INSTRUCTION}', got {self.kind!r}")
        if self.kind == INSTRUCTION and not self.instruction.strip():
            raise PassageError("an instruction framing needs an instruction, e.g. 'Write a reply to this letter'")
        if max(len(self.system), len(self.instruction)) > MAX_FRAMING_TEXT:
            raise PassageError(f"a framing's texts are limited to {MAX_FRAMING_TEXT} characters")

    @classmethod
    def from_dict(cls, data: Any) -> Framing:
        """The framing of its JSON form; unknown keys or types raise PassageError."""
        if not isinstance(data, dict) or set(data) - {"kind", "system", "instruction"}:
            raise PassageError("a framing is an object with 'kind', 'system' and 'instruction'")
        if not all(isinstance(v, str) for v in data.values()):
            raise PassageError("a framing's 'kind', 'system' and 'instruction' are text")
        return cls(**data)

    def to_dict(self) -> dict[str, str]:
        """Plain JSON form."""
        return dataclasses.asdict(self)

    def describe(self) -> str:
        """One line for the user."""
        if self.kind == CONTINUATION:
            return "plain continuation of the passage"
        return f"instruction in the model's chat template: {self.instruction[:80]!r}"

    def prompt(self, passage: str, tokenizer: Any) -> str:
        """The text the model continues for ``passage``.

        Raises:
            PassageError: an instruction framing for a model whose tokenizer has no chat template.
        """
        if self.kind == CONTINUATION:
            return passage
        if not getattr(tokenizer, "chat_template", None):
            raise PassageError(
                "This model has no chat template, so it can only continue passages: "
                "set the passage set's framing to plain continuation."
            )
        if PLACEHOLDER in self.instruction:
            content = self.instruction.replace(PLACEHOLDER, passage)
        else:
            content = f"{self.instruction}\n\n{passage}"
        messages = [{"role": "system", "content": self.system}] if self.system.strip() else []
        messages.append({"role": "user", "content": content})
        return str(tokenizer.apply_chat_template(messages, tokenize=False, add_generation_prompt=True))


def passage_cut(prompt: str, passage: str, cut_at: int | None) -> int | None:
    """Where in ``passage`` the kept part of ``prompt`` starts, given the prompt's cut offset.

    The passage sits verbatim in its prompt, so the prompt's cut maps onto it by the
    passage's offset. Returns None when nothing of the passage itself is cut (the cut
    falls in the instruction or template before it, or there is no cut).
    """
    if cut_at is None:
        return None
    start = prompt.find(passage)
    if start < 0:
        return None
    inside = cut_at - start
    return min(inside, len(passage)) if inside > 0 else None


def supports_instructions(tokenizer: Any) -> bool:
    """True when the tokenizer carries a chat template (instruction framing is possible)."""
    return bool(getattr(tokenizer, "chat_template", None))
