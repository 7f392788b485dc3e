"""Token bytes, labels and a sample's text: characters spread over several byte-level
tokens appear whole in the text and as ``<0xC5>`` in a token's label, never as "�"."""

from __future__ import annotations

import pytest
from tokenizers import pre_tokenizers

from samplewright.core.engine import token_text
from samplewright.core.engine.token_text import byte_alphabet, readable, sample_text, vocabulary_of

# Accented (Czech, Faroese/Danish), CJK and emoji passages of the ferry scenario.
TEXTS = [
    "Dvořák sails at nine.",
    "Ærø ferry — café on deck",
    "渡し船は七時に出ます。",
    "Ferry ⛴ delayed 🌊🚢 sorry!",
]


def test_byte_alphabet_is_the_byte_level_pretokenizers():
    # Reference: the tokenizers library's ByteLevel pre-tokenizer (GPT-2's bytes_to_unicode scheme).
    assert set(byte_alphabet()) == set(pre_tokenizers.ByteLevel.alphabet())
    assert sorted(byte_alphabet().values()) == list(range(256))
    level = pre_tokenizers.ByteLevel(add_prefix_space=False, use_regex=False)
    for text in TEXTS:
        ((encoded, _),) = level.pre_tokenize_str(text)
        assert bytes(byte_alphabet()[ch] for ch in encoded) == text.encode("utf-8")


def test_stray_bytes_are_written_as_byte_tags():
    # UTF-8 (RFC 3629): "ř" is C5 99, "🚢" is F0 9F 9A A2; a lone lead byte is no character.
    assert readable("ř".encode()) == "ř"
    assert readable(b"\xc5") == "<0xC5>"
    assert readable(b"\x99\xc3\xa1k") == "<0x99>ák"
    assert readable("🚢".encode()[:2]) == "<0xF0><0x9F>"


def test_a_character_split_over_tokens_lies_in_both_ranges():
    pieces = [b"Dvo", b"\xc5", b"\x99", b"\xc3\xa1k"]
    shown = sample_text(pieces)
    assert shown.text == "Dvořák"
    assert shown.spans == ((0, 3), (3, 4), (3, 4), (4, 6))
    assert [shown.token_at(p) for p in range(6)] == [0, 0, 0, 1, 3, 3]
    cut_short = sample_text([b"a", b"\xc5"])  # a sample that stopped inside a character
    assert cut_short.text == "a<0xC5>" and cut_short.spans == ((0, 1), (1, 7))
    assert sample_text([]).spans == () and sample_text([]).token_at(0) is None


def _ids(tokenizer, text):
    return tokenizer(text, add_special_tokens=False)["input_ids"]


@pytest.mark.parametrize("text", TEXTS)
def test_sample_text_matches_the_tokenizers_own_decoding(tiny_model, text):
    tokenizer = tiny_model.tokenizer
    vocabulary = vocabulary_of(tokenizer, tiny_model.vocab_size)
    ids = _ids(tokenizer, text)
    shown = vocabulary.sample_text(ids)
    # Reference: transformers' decode of the whole sequence.
    assert shown.text == tokenizer.decode(ids) == text
    for token_id, (start, end) in zip(ids, shown.spans, strict=True):
        alone = tokenizer.decode([token_id])
        if "\ufffd" not in alone:  # a token of whole characters covers exactly its own text
            assert shown.text[start:end] == alone
        else:  # part of a character: its range is that character, its label its bytes
            assert 0 < end - start <= 2 and "<0x" in vocabulary.label(token_id)
        assert "\ufffd" not in vocabulary.label(token_id)


def test_the_tiny_tokenizer_really_splits_accented_and_cjk_characters(tiny_model):
    # Trained on English only, its vocabulary holds single bytes for ř, so the test above is not vacuous.
    tokenizer = tiny_model.tokenizer
    vocabulary = vocabulary_of(tokenizer)
    for text in ("ř", "渡", "🚢"):
        ids = _ids(tokenizer, text)
        assert len(ids) == len(text.encode("utf-8"))
        assert [vocabulary.label(i) for i in ids] == [f"<0x{b:02X}>" for b in text.encode("utf-8")]


def test_special_tokens_stand_for_their_own_text_and_unknown_ids_for_nothing(tiny_model):
    tokenizer = tiny_model.tokenizer
    vocabulary = vocabulary_of(tokenizer, len(tokenizer) + 3)
    assert vocabulary.label(tokenizer.eos_token_id) == "<eos>"
    assert len(vocabulary.pieces) == len(tokenizer) + 3 and vocabulary.bytes_of(len(tokenizer) + 1) == b""
    assert vocabulary.bytes_of(-1) == b""


def test_sentencepiece_style_pieces_are_read_through_byte_tokens():
    class Pieces:  # the shape of a SentencePiece vocabulary with byte fall-back tokens
        tokens = ["<0xC5>", "<0x99>", "\u2581Dvo", "ák"]
        added_tokens_decoder: dict = {}

        def __len__(self):
            return len(self.tokens)

        def convert_ids_to_tokens(self, ids):
            return [self.tokens[i] for i in ids]

    vocabulary = vocabulary_of(Pieces())
    assert vocabulary.sample_text([2, 0, 1, 3]).text == " Dvořák"
    assert token_text.Vocabulary(vocabulary.pieces).label(0) == "<0xC5>"


def test_the_step_view_labels_tokens_by_their_bytes(tiny_model):
    from samplewright.core.engine.engine import Engine

    engine = Engine(tiny_model)
    after = _ids(tiny_model.tokenizer, " Dvo") + _ids(tiny_model.tokenizer, "ř")[:1]  # stop inside "ř"
    view = engine.step("Ferry to Skerry Point with", [], sample_ids=after, top=len(tiny_model.tokenizer))
    assert not any("\ufffd" in text for text in view.top_texts)
    assert {f"<0x{b:02X}>" for b in range(0x80, 0x100)} <= set(view.top_texts)  # every single-byte token


@pytest.mark.parametrize("text", TEXTS)
def test_text_built_token_by_token_equals_the_whole_decoding(tiny_model, text):
    tokenizer = tiny_model.tokenizer
    vocabulary = vocabulary_of(tokenizer)
    ids = _ids(tokenizer, text)
    growing = token_text.GrowingText()
    for count, token_id in enumerate(ids, start=1):
        changed = growing.append(vocabulary.bytes_of(token_id))
        whole = vocabulary.sample_text(ids[:count])
        assert growing.snapshot() == whole  # as if the tokens so far were decoded at once
        assert growing.text[:changed] == whole.text[:changed]
    assert growing.text == tokenizer.decode(ids)


def test_bytes_that_never_form_a_character_stop_being_decoded_again():
    growing = token_text.GrowingText()
    for piece in [b"\xc5"] * 10 + [b"ok"]:
        growing.append(piece)
    assert growing.text == "<0xC5>" * 10 + "ok"
    assert growing.snapshot() == sample_text([b"\xc5"] * 10 + [b"ok"])
