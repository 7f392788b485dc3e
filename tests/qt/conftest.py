"""Qt test fixtures: offscreen platform, private folders, a tiny model, and a
guard that fails any test leaving an engine thread running."""
from __future__ import annotations

import os
import time

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("HF_HUB_OFFLINE", "1")

import pytest

CORPUS = [
    "The morning ferry to the island leaves the harbour at seven.",
    "Passengers should arrive at the quay ten minutes before sailing.",
    "The evening crossing is cancelled when the wind is too strong.",
    "Tickets are sold at the pier office and on board the boat.",
    "We are sorry for the delay and thank you for your patience.",
]


def build_tiny_model():
    """A two-layer random-weight Llama model with a byte-level BPE tokenizer trained on a few lines."""
    import torch
    from tokenizers import Tokenizer, decoders, models, pre_tokenizers, trainers
    from transformers import LlamaConfig, LlamaForCausalLM, PreTrainedTokenizerFast

    from samplewright.core.model import model_from_parts

    bpe = Tokenizer(models.BPE())
    bpe.pre_tokenizer = pre_tokenizers.ByteLevel(add_prefix_space=False)
    bpe.decoder = decoders.ByteLevel()
    trainer = trainers.BpeTrainer(vocab_size=400, special_tokens=["<eos>"],
                                  initial_alphabet=pre_tokenizers.ByteLevel.alphabet())
    bpe.train_from_iterator(CORPUS * 4, trainer)
    tokenizer = PreTrainedTokenizerFast(tokenizer_object=bpe, eos_token="<eos>")
    torch.manual_seed(0)
    config = LlamaConfig(vocab_size=bpe.get_vocab_size(), hidden_size=32, intermediate_size=64,
                         num_hidden_layers=2, num_attention_heads=4, num_key_value_heads=4,
                         max_position_embeddings=1024, eos_token_id=tokenizer.eos_token_id,
                         bos_token_id=None, pad_token_id=None)
    return model_from_parts(LlamaForCausalLM(config), tokenizer, "tiny test model")


@pytest.fixture(scope="session")
def tiny_loaded():
    """The tiny model, built once per test session."""
    return build_tiny_model()


@pytest.fixture
def tiny_loader(tiny_loaded):
    """A model loader for the window that hands out the tiny model and reports progress like the real one."""
    def load(source, progress):
        progress("Building the tiny model", 0.5)
        return tiny_loaded
    return load


@pytest.fixture(autouse=True)
def private_folders(tmp_path, monkeypatch):
    """Keep every test's settings and library out of the user's real folders."""
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "library"))


@pytest.fixture(autouse=True)
def no_engine_thread_left():
    """Fail a test that leaves an engine QThread running (set up first, so it checks last)."""
    yield
    from samplewright.qt.workers import running_threads

    deadline = time.monotonic() + 5
    while running_threads() and time.monotonic() < deadline:
        time.sleep(0.05)
    left = running_threads()
    assert not left, f"{len(left)} engine thread(s) still running after the test"


@pytest.fixture
def window(qtbot, tiny_loader, tmp_path):
    """The main window on the tiny model, with the model loaded."""
    from samplewright.qt.main_window import MainWindow

    win = MainWindow(model_loader=tiny_loader, library_dir=tmp_path / "library", config_dir=tmp_path / "config")
    qtbot.addWidget(win)
    win.resize(1400, 900)
    win.show()
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    errors: list[str] = []

    def capture(message, detail=None):
        errors.append(detail if detail is not None else message)
        win.last_error = errors[-1]
    win.show_error = capture
    win.errors = errors
    yield win
    win.close()
