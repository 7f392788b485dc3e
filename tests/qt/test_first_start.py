"""First start: an unwritable model cache, the conversion progress dialog, and Help ▸ About."""

from __future__ import annotations

import sys

from PySide6.QtCore import QObject, Signal

from samplewright.core.engine import model as model_files
from samplewright.core.version import VERSION
from samplewright.qt import about_dialog, first_start


def _unwritable(tmp_path):
    """A cache folder below a regular file: mkdir fails even for root (POSIX ENOTDIR, common practice)."""
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    return blocker / "cache"


def test_cache_problem_names_the_folder(tmp_path):
    assert first_start.cache_problem(tmp_path / "fine") is None
    problem = first_start.cache_problem(_unwritable(tmp_path))
    assert problem is not None and "a-file" in problem


def test_chosen_folder_is_used_now_and_at_the_next_start(tmp_path, monkeypatch):
    monkeypatch.setenv(model_files.CACHE_ENV, str(_unwritable(tmp_path)))
    chosen = tmp_path / "chosen"
    chosen.mkdir()
    problem = first_start.offer_cache_folder(
        config_dir=tmp_path / "config", ask_folder=lambda: str(chosen), wants_folder=lambda reason: True
    )
    assert problem is not None
    assert model_files.cache_root() == chosen / "models"
    monkeypatch.delenv(model_files.CACHE_ENV)
    first_start.use_chosen_cache_folder(tmp_path / "config")
    assert model_files.cache_root() == chosen / "models"


def test_continue_without_leaves_the_cache_alone(tmp_path, monkeypatch):
    unwritable = _unwritable(tmp_path)
    monkeypatch.setenv(model_files.CACHE_ENV, str(unwritable))
    asked = []
    first_start.offer_cache_folder(
        config_dir=tmp_path / "config",
        ask_folder=lambda: None,
        wants_folder=lambda reason: asked.append(reason) or False,
    )
    assert asked and "a-file" in asked[0]
    assert model_files.cache_root() == unwritable / "models"


def test_writable_cache_asks_nothing(tmp_path, monkeypatch):
    monkeypatch.setenv(model_files.CACHE_ENV, str(tmp_path / "cache"))

    def never(reason):
        raise AssertionError("asked although the cache is writable")

    assert first_start.offer_cache_folder(config_dir=tmp_path / "config", wants_folder=never) is None


def test_conversion_pending_until_a_converted_copy_exists(tmp_path, monkeypatch):
    monkeypatch.setenv(model_files.CACHE_ENV, str(tmp_path / "cache"))
    assert first_start.conversion_pending(None)
    folder = model_files.cache_root() / model_files.cache_key(model_files.default_model_path())
    folder.mkdir(parents=True)
    (folder / "config.json").write_text("{}")
    assert not first_start.conversion_pending(None)
    assert not first_start.conversion_pending("/some/model/folder")  # only the default model is converted here


class _Worker(QObject):
    """Stands in for the engine worker: the same three signals."""

    load_progress = Signal(int, str, object)
    model_ready = Signal(int, object)
    failed = Signal(int, str, str)


def test_progress_dialog_follows_the_load_and_closes(qtbot):
    worker = _Worker()
    dialog = first_start.ConversionProgress(worker)
    qtbot.addWidget(dialog)
    dialog.show()
    worker.load_progress.emit(1, "Reading and dequantizing the model", 0.4)
    assert "Reading and dequantizing" in dialog.labelText() and "s so far" in dialog.labelText()
    assert dialog.value() == 40
    worker.model_ready.emit(1, object())
    assert not dialog.isVisible()


def test_about_names_version_model_and_notices(qtbot, tmp_path, monkeypatch):
    assert about_dialog.notices_path() is None  # not a bundle
    text = about_dialog.about_html(None)
    assert VERSION in text and "SmolLM2-135M-Instruct" in text and "Apache License 2.0" in text
    notices = tmp_path / about_dialog.NOTICES_NAME
    notices.write_text("notices")
    monkeypatch.setattr(sys, "_MEIPASS", str(tmp_path), raising=False)
    assert about_dialog.notices_path() == notices
    dialog = about_dialog.AboutDialog(None, notices)
    qtbot.addWidget(dialog)
    assert str(notices) in dialog.text.text() and dialog.open_button is not None
