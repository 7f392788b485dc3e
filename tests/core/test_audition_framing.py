"""The audition's framing: an instruction in the model's own chat template is what the engine
encodes, the step view follows it, the audition file keeps it, and the CLI asks for it by option."""

from __future__ import annotations

import copy
import json

import pytest
import torch

from samplewright.cli import main
from samplewright.core.engine.audition_file import load_audition, save_audition
from samplewright.core.engine.engine import Engine
from samplewright.core.engine.model import model_from_parts
from samplewright.core.engine.session import AuditionSession
from samplewright.core.errors import PassageError
from samplewright.core.framing import INSTRUCTION, Framing
from samplewright.core.presets import Preset
from samplewright.core.results import AuditionRequest

# A minimal chat template of our own (the tiny test model has none), as in the evaluation tests.
CHAT_TEMPLATE = (
    "{% for m in messages %}<|{{ m['role'] }}|>{{ m['content'] }}\n{% endfor %}"
    "{% if add_generation_prompt %}<|assistant|>{% endif %}"
)
SYSTEM = "You answer for the ferry office."
LETTER = "Dear office, is the 7:40 sailing to Skerry Point running on Sunday?"
FRAMING = Framing(INSTRUCTION, SYSTEM, "Write a reply to this letter:\n{passage}")
MESSAGES = [
    {"role": "system", "content": SYSTEM},
    {"role": "user", "content": f"Write a reply to this letter:\n{LETTER}"},
]


@pytest.fixture(scope="module")
def chat_model(tiny_model):
    tokenizer = copy.deepcopy(tiny_model.tokenizer)
    tokenizer.chat_template = CHAT_TEMPLATE
    return model_from_parts(tiny_model.model, tokenizer, "tiny chat model")


def test_a_framed_audition_encodes_the_chat_template_output(chat_model):
    # Reference: transformers' PreTrainedTokenizerBase.apply_chat_template (tokenize=True) gives the
    # ids of the rendered conversation; the audition's passage ids must be exactly those.
    expected = chat_model.tokenizer.apply_chat_template(MESSAGES, tokenize=True, add_generation_prompt=True)
    if not isinstance(expected, list):  # newer transformers return a BatchEncoding
        expected = expected["input_ids"]
    request = AuditionRequest(LETTER, [Preset("Plain")], samples=1, max_new_tokens=2, seed=3, framing=FRAMING)
    result = Engine(chat_model).audition(request)
    assert result.passage_ids == [int(i) for i in expected]
    plain = Engine(chat_model).audition(AuditionRequest(LETTER, [Preset("Plain")], samples=1, max_new_tokens=2))
    assert plain.passage_ids != result.passage_ids  # continuation stays the passage alone


def test_the_step_view_follows_the_framed_prompt(chat_model):
    # Reference: a plain forward pass of the framed prompt (torch, no engine code): the step view's
    # raw probabilities are the softmax of the model's last logits there.
    ids = chat_model.tokenizer(FRAMING.prompt(LETTER, chat_model.tokenizer), add_special_tokens=False)["input_ids"]
    view = Engine(chat_model).step(LETTER, [Preset("Plain")], top=3, framing=FRAMING)
    with torch.no_grad():
        probs = torch.softmax(chat_model.model(input_ids=torch.tensor([ids])).logits[0, -1].double(), dim=-1)
    top = view.presets[0].top[0]
    assert top.raw_p == pytest.approx(float(probs[top.id]), abs=1e-5)
    assert top.id == int(torch.argmax(probs))


def test_a_model_without_a_chat_template_refuses_an_instruction(tiny_model):
    request = AuditionRequest(LETTER, [Preset("Plain")], samples=1, max_new_tokens=2, framing=FRAMING)
    with pytest.raises(PassageError, match="no chat template"):
        Engine(tiny_model).audition(request)


def test_the_audition_file_keeps_the_framing(chat_model, tmp_path):
    session = AuditionSession()
    request = AuditionRequest(LETTER, [Preset("Plain")], samples=1, max_new_tokens=2, framing=FRAMING)
    serial = session.begin(request, record_ids=[None], drafts=[False])
    assert session.finish(serial, Engine(chat_model).audition(request), [None])
    saved = load_audition(save_audition(session, tmp_path / "framed.json"))
    assert saved.request.framing == FRAMING and saved.request.passage == LETTER
    assert json.loads((tmp_path / "framed.json").read_text("utf-8"))["framing"]["kind"] == INSTRUCTION
    again = AuditionSession()
    again.restore(saved)
    assert again.regenerate_request(0, Preset("Other")).framing == FRAMING


@pytest.fixture(scope="module")
def chat_folder(chat_model, tmp_path_factory):
    folder = tmp_path_factory.mktemp("tiny-chat-model")
    chat_model.model.save_pretrained(folder)
    chat_model.tokenizer.save_pretrained(folder)
    return folder


@pytest.fixture
def plain_preset(tmp_path, monkeypatch):
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "personal"))
    path = tmp_path / "plain.json"
    path.write_text(json.dumps(Preset("Plain").to_dict()), encoding="utf-8")
    return path


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_audition_with_an_instruction(capsys, chat_folder, plain_preset):
    code, out, err = run(capsys, "audition", "--text", LETTER, "--model", chat_folder, "--preset", plain_preset,
                         "--instruction", "Write a reply to this letter:\n{passage}", "--system", SYSTEM,
                         "--samples", 1, "--tokens", 2, "--json")  # fmt: skip
    assert code == 0, err
    data = json.loads(out)
    # Reference: transformers' apply_chat_template, tokenised as the engine reads a prompt.
    expected = chat_folder_ids(chat_folder)
    assert data["passage_tokens"] == len(expected) and data["framing"] == FRAMING.to_dict()


def chat_folder_ids(folder) -> list[int]:
    from transformers import AutoTokenizer

    tokenizer = AutoTokenizer.from_pretrained(folder)
    ids = tokenizer.apply_chat_template(MESSAGES, tokenize=True, add_generation_prompt=True)
    return list(ids if isinstance(ids, list) else ids["input_ids"])


def test_cli_refuses_an_instruction_for_a_model_without_a_template(capsys, tiny_model_folder, plain_preset):
    code, _, err = run(capsys, "audition", "--text", LETTER, "--model", tiny_model_folder, "--preset", plain_preset,
                       "--instruction", "Reply", "--samples", 1, "--tokens", 2)  # fmt: skip
    assert code == 2 and "chat template" in err and len(err.strip().splitlines()) == 1


def test_cli_system_message_needs_an_instruction(capsys, plain_preset):
    code, _, err = run(capsys, "audition", "--text", LETTER, "--system", SYSTEM)
    assert code == 2 and "--system needs --instruction" in err


def test_the_passage_count_includes_the_instruction_the_audition_sends(chat_model):
    # Reference: the audition's own passage ids (checked above against apply_chat_template): the
    # editor's count must be the length of what the model will read, instruction and template included.
    engine = Engine(chat_model)
    counted = engine.measure_passage(LETTER, FRAMING)
    request = AuditionRequest(LETTER, [Preset("Plain")], samples=1, max_new_tokens=1, seed=3, framing=FRAMING)
    assert counted.framed and len(counted.tokens.ids) == len(engine.audition(request).passage_ids)
    plain = engine.measure_passage(LETTER)
    assert not plain.framed and len(plain.tokens.ids) < len(counted.tokens.ids)


def test_a_long_framed_passage_shades_only_the_passage_part_left_out(chat_model):
    # The engine keeps the prompt's last tokens (its passage window, 128 for the tiny model). The
    # shaded part of the passage is what the kept prompt no longer holds: the kept prompt text
    # starts with the passage's text from the cut on.
    letter = " ".join(f"Crossing number {i} leaves on time." for i in range(60))
    engine = Engine(chat_model)
    counted = engine.measure_passage(letter, FRAMING)
    prompt = FRAMING.prompt(letter, chat_model.tokenizer)
    assert counted.tokens.dropped > 0 and counted.passage_cut is not None
    assert prompt[counted.tokens.cut_at :].startswith(letter[counted.passage_cut :])
    # A cut that stays inside the instruction leaves the passage whole.
    short = "Is the 7:40 running?"
    long_instruction = Framing(INSTRUCTION, "", " ".join(["Please be kind."] * 80) + " {passage}")
    inside = engine.measure_passage(short, long_instruction)
    assert inside.tokens.dropped > 0 and inside.passage_cut is None
    assert FRAMING.prompt(short, chat_model.tokenizer) != short  # the framing did surround it


def test_passage_cut_maps_the_prompt_offset_onto_the_passage():
    from samplewright.core.framing import passage_cut

    prompt = "<|user|>Reply: Dear office, the ferry.\n<|assistant|>"
    passage = "Dear office, the ferry."
    start = prompt.index(passage)
    assert passage_cut(prompt, passage, None) is None
    assert passage_cut(prompt, passage, 3) is None  # inside the template
    assert passage_cut(prompt, passage, start + 5) == 5
    assert passage_cut(prompt, passage, len(prompt)) == len(passage)
