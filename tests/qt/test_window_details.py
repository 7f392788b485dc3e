"""Passage length and cut, model switching, copying, the entry point and the caution."""

from __future__ import annotations

import os
import subprocess
import sys

from PySide6.QtGui import QGuiApplication
from test_workflow import generate, inspect_a_token, tick, untick_all

from samplewright.core.errors import ModelError
from samplewright.core.library.settings_file import check_file, export_settings
from samplewright.core.presets import Preset


def test_long_passage_shows_where_it_is_cut(window, qtbot, tiny_loaded):
    text = " ".join(["The morning ferry to the island leaves the harbour at seven."] * 80)
    window.passage.set_text(text)
    limit = window.engine.worker._engine.passage_limit
    # Count with the tokenizer itself (the tiny tokenizer adds no special tokens).
    total = len(tiny_loaded.tokenizer(text, add_special_tokens=False)["input_ids"])
    assert total > limit
    qtbot.waitUntil(lambda: "left out" in window.passage.info.text(), timeout=10000)
    info = window.passage.info.text()
    assert f"{total:,} tokens" in info
    assert f"first {total - limit:,}" in info
    shaded = window.passage.editor.extraSelections()
    assert len(shaded) == 1 and shaded[0].cursor.selectionStart() == 0
    assert shaded[0].cursor.selectionEnd() > 0


def test_short_passage_shows_its_token_count(window, qtbot, tiny_loaded):
    text = "Tickets are sold at the pier office"
    window.passage.set_text(text)
    total = len(tiny_loaded.tokenizer(text, add_special_tokens=False)["input_ids"])
    qtbot.waitUntil(lambda: window.passage.info.text().startswith(f"{total} tokens"), timeout=10000)
    assert window.passage.editor.extraSelections() == []


def test_a_failed_model_switch_keeps_the_loaded_model(qtbot, tiny_loaded, tmp_path):
    from samplewright.qt.main_window import MainWindow

    def loader(source, progress):
        progress("Looking for the model", 0.0)
        if source is not None:
            raise ModelError(f"There is no model at {source}: choose a folder with config.json or a .gguf file.")
        return tiny_loaded

    win = MainWindow(model_loader=loader, library_dir=tmp_path / "lib", config_dir=tmp_path / "cfg")
    qtbot.addWidget(win)
    qtbot.waitUntil(lambda: win.model_info is not None, timeout=20000)
    assert "tiny test model" in win.model_label.text()
    assert f"{tiny_loaded.n_parameters:,} parameters" in win.model_label.text()  # under a million: in full
    errors = []
    win.prompts.show_error = lambda title, detail=None: errors.append(detail)
    win.prompts.ask_folder = lambda title: str(tmp_path / "missing-model")
    win.menu_actions["model_folder"].trigger()
    qtbot.waitUntil(lambda: bool(errors), timeout=10000)
    assert "missing-model" in errors[0]
    assert "tiny test model" in win.model_label.text()
    assert win.controls.generate_button.isEnabled()
    win.close()


def test_copy_puts_the_inspected_sample_on_the_clipboard(window, qtbot):
    _, _, sample = inspect_a_token(window, qtbot, tokens=5)
    window.menu_actions["copy"].trigger()
    assert QGuiApplication.clipboard().text() == sample.text


def test_rename_shows_in_the_editor(window):
    record = window.library.records()[0]
    window.library_list.select(record.id)
    window.prompts.ask_text = lambda *args: "Pier notice"
    window.menu_actions["rename"].trigger()
    assert window.editor.inputs["name"].text() == "Pier notice"
    window.undo_action.trigger()
    assert window.editor.inputs["name"].text() == record.name


def test_caution_is_visible(window):
    assert window.caution.isVisible()
    assert "review" in window.caution.text()


def test_main_module_hands_arguments_to_the_command_line(tmp_path):
    path = tmp_path / "shared.json"
    export_settings([Preset("Quay notice", top_p=0.9)], path)
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    done = subprocess.run(
        [sys.executable, "-m", "samplewright", "check", str(path)], capture_output=True, text=True, env=env, timeout=120
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == check_file(path)


def menu_paths(window):
    """Every "Menu ▸ Entry" path of the menu bar, as the user reads it (no & markers)."""
    paths = set()
    for menu_action in window.menuBar().actions():
        title = menu_action.text().replace("&", "")
        for action in menu_action.menu().actions():
            if action.text():
                paths.add(f"{title} ▸ {action.text()}")
    return paths


def test_messages_name_menu_entries_that_exist(window):
    from samplewright.core.errors import SamplewrightError
    from samplewright.qt.workers import EngineWorker

    window.prompts.offer_copy = lambda title, text: window.offered.append(text) or False
    window.presets.report_save_failure("Quay notice", "The folder is read-only.")
    paths = menu_paths(window)
    assert any(path in window.offered[-1] for path in paths), window.offered[-1]
    try:
        EngineWorker(None, None, None)._need_engine()
    except SamplewrightError as error:
        message = str(error)
    model_entries = [p.split(" ▸ ")[1] for p in paths if p.startswith("Model ▸ ")]
    assert "Model menu" in message and sum(entry in message for entry in model_entries) == 2


def test_new_samples_without_an_inspected_token_names_the_preset(window, qtbot):
    untick_all(window)
    tick(window, 2)
    generate(window, qtbot, samples=1, tokens=3)
    window.audition.clear_inspection()
    window.menu_actions["regenerate"].trigger()
    assert window.session.presets[0].name in window.statusBar().currentMessage()
    assert "first column" in window.statusBar().currentMessage()
    qtbot.waitUntil(lambda: not window.audition.running(), timeout=30000)


def test_controls_have_accessible_names(window):
    assert window.library_list.favourites_only.accessibleName() == "Favourites only"
    assert window.model_progress.accessibleName()
    from samplewright.core.engine.model import DEFAULT_NAME

    assert DEFAULT_NAME in window.menu_actions["model_default"].toolTip()


def test_cut_shading_counts_emoji_as_qt_does(window, qtbot):
    # Each ⛴ (U+26F4) is one UTF-16 unit and each 🚢 (U+1F6A2) two (Unicode: characters beyond U+FFFF
    # take a surrogate pair), so a Python index used as a Qt position would stop short of the cut.
    text = " ".join(["🚢 The morning ferry ⛴ leaves the harbour at seven 🚢."] * 60)
    window.passage.set_text(text)
    qtbot.waitUntil(lambda: "left out" in window.passage.info.text(), timeout=10000)
    counted = window.engine.worker._engine.encode_passage(text)
    assert counted.cut_at and "🚢" in text[: counted.cut_at]
    (shade,) = window.passage.editor.extraSelections()
    assert shade.cursor.selectedText() == text[: counted.cut_at]


def test_token_count_without_a_model_says_when_it_appears(make_window, qtbot):
    win = make_window()
    win.passage.set_text("Dear passengers, from Monday")
    qtbot.waitUntil(lambda: "counting" not in win.passage.info.text(), timeout=5000)
    assert "once the model has loaded" in win.passage.info.text()
    win.close()


def test_failed_token_count_is_reported(window, qtbot):
    window.engine.worker._engine = None  # the next count fails inside the worker
    window.passage.set_text("Dear passengers, from Monday the quay is closed")
    qtbot.waitUntil(lambda: "could not be counted" in window.passage.info.text(), timeout=5000)


def test_damaged_settings_file_falls_back_to_defaults(make_window, tmp_path):
    from samplewright.qt.main_window import SETTINGS_FILE

    config = tmp_path / "cfg"
    config.mkdir()
    (config / SETTINGS_FILE).write_text(
        "[window]\ngeometry=not-a-geometry\n[splitters]\nmain=@Variant(garbage\n"
        "[passage]\nrecent={broken json\ntext=Dear passengers\nsource=missing/letter.txt\n"
        "[audition]\nsamples=four\nnew_tokens=99999999999999999999\nseed=1,2\nchosen=[unclosed\n",
        encoding="utf-8",
    )
    win = make_window(config_dir=config)
    assert win.controls.samples_spin.value() == 4 and win.controls.seed_spin.value() == 1234
    assert win.controls.tokens_spin.value() == win.controls.tokens_spin.maximum()
    assert win.passage.text() == "Dear passengers"
    assert len(win.library_list.chosen) == 2
    win.close()


def test_passage_file_name_is_shown_after_restart(make_window, tmp_path):
    path = tmp_path / "timetable.txt"
    path.write_text("From Monday the first sailing leaves at six.\n", encoding="utf-8")
    make = make_window
    first = make()
    first.models.open_passage(str(path))
    first.close()
    second = make()
    assert second.passage.source == str(path)
    assert "timetable.txt" in second.passage.title.text()
    second.close()
