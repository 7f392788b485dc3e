"""Evaluation runs on the tiny model: coherence against a plain forward pass, coupling, resume,
run files, passage sets and staleness."""

import dataclasses
import math

import pytest
import torch

from samplewright.core.engine.engine import Engine
from samplewright.core.errors import PassageError
from samplewright.core.evaluation import passage_sets as ps
from samplewright.core.evaluation.measures import sample_values
from samplewright.core.evaluation.plan import PassageEntry, PresetEntry, RunPlan, passage_seed
from samplewright.core.evaluation.run_file import changes_since, load_run
from samplewright.core.evaluation.runner import new_run, preset_chunks, run_evaluation
from samplewright.core.framing import Framing
from samplewright.core.library.library import PresetLibrary
from samplewright.core.presets import Preset

SHORT = [
    PassageEntry("notices", "quay", "Please arrive at the quay ten minutes before"),
    PassageEntry("notices", "winter", "Season tickets remain valid during the"),
]


@pytest.fixture(scope="module")
def engine(tiny_model):
    return Engine(tiny_model)


def _plan(presets, samples=3, tokens=8, seed=11, passages=SHORT):
    return RunPlan(tuple(PresetEntry(p) for p in presets), tuple(passages), samples, tokens, seed)


def test_coherence_and_raw_p_equal_a_plain_forward_pass(engine, tiny_model):
    # Coherence (Su & Collier 2023) = mean log-probability of the sample's tokens under the unshaped
    # model at temperature 1. Reference: one plain forward pass of passage + sample through the
    # transformers model and torch.log_softmax, no engine code. A shaped preset (T = 0.6, top-k 4)
    # shows that raw_p is the unshaped probability, not the preset's.
    run = run_evaluation(engine, new_run(engine, _plan([Preset("shaped", temperature=0.6, top_k=4)], 2, 10)))
    tokenizer = tiny_model.tokenizer
    checked = 0
    for j, passage in enumerate(SHORT):
        prompt = tokenizer(passage.text, add_special_tokens=False)["input_ids"]
        for sample in run.outcomes[j].samples[0]:
            if not sample.tokens:
                continue
            ids = torch.tensor([prompt + sample.token_ids])
            with torch.no_grad():
                logits = tiny_model.model(input_ids=ids).logits[0].double()
            logp = torch.log_softmax(logits, dim=-1)
            positions = range(len(prompt) - 1, len(prompt) - 1 + len(sample.tokens))
            expected = [float(logp[pos, tok]) for pos, tok in zip(positions, sample.token_ids, strict=True)]
            for step, value in zip(sample.tokens, expected, strict=True):
                assert math.log(step.raw_p) == pytest.approx(value, abs=1e-5)
            assert sample_values(sample)["coherence"] == pytest.approx(sum(expected) / len(expected), abs=1e-5)
            checked += 1
    assert checked >= 2


def test_identical_presets_give_identical_samples(engine):
    # Common practice (common random numbers): the same preset twice in one run draws the same tokens.
    run = run_evaluation(engine, new_run(engine, _plan([Preset("A", temperature=1.1), Preset("B", temperature=1.1)])))
    for outcome in run.outcomes.values():
        assert [s.token_ids for s in outcome.samples[0]] == [s.token_ids for s in outcome.samples[1]]
    # And the same inputs give the same run again.
    again = run_evaluation(engine, new_run(engine, run.plan))
    assert [s.token_ids for s in again.outcomes[1].samples[0]] == [s.token_ids for s in run.outcomes[1].samples[0]]


def test_passage_seed_keys_the_stream_by_passage():
    # Different passages get different streams; the same passage the same one.
    a, b = passage_seed(3, SHORT[0].text_hash), passage_seed(3, SHORT[1].text_hash)
    assert a != b and a == passage_seed(3, SHORT[0].text_hash) and 0 <= a < 2**63


def test_cancelled_run_resumed_equals_uncancelled_run(engine, tmp_path):
    # Common practice: a resumed computation must give what an uninterrupted one gives.
    plan = _plan([Preset("A", temperature=0.9), Preset("B", top_p=0.8)], samples=2, tokens=6)
    whole = run_evaluation(engine, new_run(engine, plan))
    path = tmp_path / "run.json"
    finished = []
    run = new_run(engine, plan)
    run_evaluation(engine, run, path=path, on_passage=finished.append, should_stop=lambda: bool(finished))
    assert run.cancelled and list(run.outcomes) == [0]
    resumed = load_run(path)
    assert list(resumed.outcomes) == [0]
    run_evaluation(engine, resumed, path=path)
    reloaded = load_run(path)
    assert reloaded.finished and not reloaded.cancelled
    for j in range(2):
        for i in range(2):
            assert [s.token_ids for s in reloaded.outcomes[j].samples[i]] == [
                s.token_ids for s in whole.outcomes[j].samples[i]
            ]
            assert [s.text for s in reloaded.outcomes[j].samples[i]] == [s.text for s in whole.outcomes[j].samples[i]]
    assert reloaded.preset_summary(1).pooled == whole.preset_summary(1).pooled


def test_progress_reaches_the_total(engine):
    seen = []
    run_evaluation(engine, new_run(engine, _plan([Preset("A")], 2, 5)), on_progress=seen.append)
    assert seen[-1].done_tokens == seen[-1].total_tokens
    assert all(b.done_tokens >= a.done_tokens for a, b in zip(seen, seen[1:], strict=False))


def test_preset_chunks_respect_the_cap():
    assert preset_chunks(5, 4, per_row=100, cap=1000) == [range(0, 2), range(2, 4), range(4, 5)]
    assert preset_chunks(3, 64, per_row=10**9, cap=1) == [range(0, 1), range(1, 2), range(2, 3)]


def test_run_file_keeps_everything_and_marks_changes(engine, tmp_path):
    library = PresetLibrary(tmp_path / "lib", create=True, seed=False)
    record = library.add(Preset("Replies", temperature=0.8))
    sets = ps.PassageSets(library.folder)
    sets.create("replies")
    sets.add_passage("replies", "lost", "Thank you for your message about the rucksack")
    plan = RunPlan(
        (PresetEntry(record.preset, record.id, record.revision),),
        tuple(PassageEntry("replies", p.name, p.text) for p in sets.get("replies").passages),
        2,
        5,
        0,
    )
    path = tmp_path / "lib" / "runs" / "r.json"
    run = run_evaluation(engine, new_run(engine, plan), path=path)
    loaded = load_run(path)
    assert loaded.plan == run.plan and loaded.model == run.model
    assert loaded.model["precision"] == engine.loaded.precision  # which precision ran is kept with the run
    assert loaded.outcomes[0].samples == run.outcomes[0].samples
    assert changes_since(loaded, library.folder) == []
    library.save(dataclasses.replace(record, preset=record.preset.replace(temperature=0.5)), record.revision)
    sets.add_passage("replies", "lost", "Thank you for your letter about the bicycle")
    notes = changes_since(loaded, library.folder)
    assert any("Replies" in n and "changed" in n for n in notes)
    assert any("replies/lost" in n and "edited" in n for n in notes)


def test_passage_set_skips_unusable_files_with_reason(tmp_path):
    folder = tmp_path / "set"
    folder.mkdir()
    (folder / "good.txt").write_text("The morning ferry leaves at seven", encoding="utf-8")
    (folder / "notes.md").write_text("# Notice\r\nThe quay is closed  \n\n", encoding="utf-8")
    (folder / "latin1.txt").write_bytes("caf\xe9 au quai".encode("latin-1"))
    (folder / "empty.txt").write_text("   \n", encoding="utf-8")
    (folder / "ignored.json").write_text("{}", encoding="utf-8")
    found = ps.read_set(folder)
    assert [p.name for p in found.passages] == ["good", "notes"]
    assert found.passages[1].text == "# Notice\nThe quay is closed"
    reasons = {s.name: s.reason for s in found.skipped}
    assert "not UTF-8" in reasons["latin1.txt"] and reasons["empty.txt"] == "empty"
    assert (folder / "latin1.txt").read_bytes() == "caf\xe9 au quai".encode("latin-1")  # left untouched


def test_passage_sets_in_the_library(tmp_path):
    sets = ps.PassageSets(tmp_path)
    assert sets.add_demo_sets() == [s.name for s in ps.demo_sets()]
    assert all(len(s.passages) >= 3 for s in sets.sets()) and len(sets.names()) >= 3
    sets.create("letters", Framing("instruction", "You answer for the ferry office.", "Reply to: {passage}"))
    assert sets.get("letters").framing.kind == "instruction"
    source = tmp_path / "draft.md"
    source.write_text("Dear passengers, the slipway", encoding="utf-8")
    sets.add_file("letters", source)
    sets.rename("letters", "replies to letters")
    assert [p.name for p in sets.get("replies to letters").passages] == ["draft"]
    trashed = sets.delete("replies to letters")
    assert "replies to letters" not in sets.names() and (trashed / "draft.md").exists()
    with pytest.raises(PassageError, match="cannot name"):
        sets.create("../escape")
    assert ps.resolve_set("customer-replies", tmp_path).folder == tmp_path / "passages" / "customer-replies"
    with pytest.raises(PassageError, match="sets you can name"):
        ps.resolve_set("no such set", tmp_path)


def test_instruction_framing_needs_a_chat_template(tiny_model):
    framing = Framing("instruction", "", "Write a reply to this letter: {passage}")
    with pytest.raises(PassageError, match="no chat template"):
        framing.prompt("Dear office", tiny_model.tokenizer)
    assert Framing().prompt("Dear office", tiny_model.tokenizer) == "Dear office"


@pytest.mark.model
def test_temperature_sweep_trades_coherence_for_diversity(default_model):
    # Fact of the trade (common practice, no source): raising the temperature from 0.3 to 1.5 makes
    # samples more varied and less probable under the model. The ends are compared, not every step.
    from samplewright.core.evaluation.plan import Sweep, passages_of
    from samplewright.core.evaluation.sweep import derived_presets, parse_vary

    engine = Engine(default_model)
    base = Preset("Notices")
    axes = (parse_vary("temperature=0.3,1.5"),)
    plan = RunPlan(
        tuple(PresetEntry(p) for p in derived_presets(base, axes)),
        passages_of([s for s in ps.demo_sets() if s.name == "service-notices"]),
        4,
        24,
        0,
        Sweep(base, axes),
    )
    run = run_evaluation(engine, new_run(engine, plan))
    cold, hot = run.preset_summary(0).pooled, run.preset_summary(1).pooled
    assert hot["diversity"].value > cold["diversity"].value
    assert hot["coherence"].value < cold["coherence"].value
    assert hot["self_bleu"].value < cold["self_bleu"].value


CHAT_TEMPLATE = (
    "{% for m in messages %}<|{{ m['role'] }}|>{{ m['content'] }}\n{% endfor %}"
    "{% if add_generation_prompt %}<|assistant|>{% endif %}"
)


def test_instruction_framing_uses_the_chat_template_for_samples_and_coherence(tiny_model):
    # Reference: transformers' apply_chat_template renders the same messages to the same text, and the
    # first token's raw probability is the model's at the end of that framed prompt.
    import copy

    from samplewright.core.engine.model import model_from_parts

    tokenizer = copy.deepcopy(tiny_model.tokenizer)
    tokenizer.chat_template = CHAT_TEMPLATE
    chat = model_from_parts(tiny_model.model, tokenizer, "tiny chat model")
    framing = Framing("instruction", "You answer for the ferry office.", "Reply to: {passage}")
    messages = [
        {"role": "system", "content": "You answer for the ferry office."},
        {"role": "user", "content": "Reply to: Dear office"},
    ]
    expected = tokenizer.apply_chat_template(messages, tokenize=False, add_generation_prompt=True)
    assert framing.prompt("Dear office", tokenizer) == expected
    engine = Engine(chat)
    plan = RunPlan((PresetEntry(Preset("A")),), (PassageEntry("s", "p", "Dear office", framing),), 1, 3, 0)
    run = run_evaluation(engine, new_run(engine, plan))
    prompt = tokenizer(expected, add_special_tokens=False)["input_ids"]
    assert run.outcomes[0].prompt_tokens == len(prompt)
    first = run.outcomes[0].samples[0][0].tokens[0]
    with torch.no_grad():
        logp = torch.log_softmax(chat.model(input_ids=torch.tensor([prompt])).logits[0, -1].double(), dim=-1)
    assert math.log(first.raw_p) == pytest.approx(float(logp[first.token_id]), abs=1e-5)
