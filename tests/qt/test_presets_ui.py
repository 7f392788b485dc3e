"""Preset editing, undoable library changes, export and import from the window."""

from __future__ import annotations

import json

import pytest
from PySide6.QtCore import Qt

from samplewright.core.engines.fidelity import DIFFERS, EXACT, EXACT_EXCEPT_TIES, THRESHOLD
from samplewright.core.errors import LibraryError
from samplewright.core.library.settings_file import check_file, read_settings
from samplewright.core.presets import FIELDS, Preset, PresetError, validate_field
from samplewright.qt.prompts import ExportChoice


def highlight_first(window):
    record = window.library.records()[0]
    window.library_list.select(record.id)
    assert window.editor.original == record.preset
    return record


def retype(qtbot, line_edit, text):
    line_edit.selectAll()
    qtbot.keyClick(line_edit, Qt.Key_Delete)
    qtbot.keyClicks(line_edit, text)


@pytest.mark.parametrize(
    "field, typed, value",
    [("temperature", "7", 7.0), ("top_p", "0", 0.0), ("top_k", "2.5", 2.5), ("min_p", "abc", None)],
)
def test_invalid_value_shows_reason_and_is_not_saved(window, qtbot, field, typed, value):
    record = highlight_first(window)
    editor = window.editor
    retype(qtbot, editor.inputs[field], typed)
    label = editor.error_labels[field]
    assert not label.isHidden()
    if value is not None:
        # The reason shown is the core validator's own message (field, value and allowed range).
        with pytest.raises(PresetError) as expected:
            validate_field(field, value)
        assert label.text() == str(expected.value)
    else:
        assert field in label.text() and FIELDS[field].allowed in label.text()
    assert not editor.save_button.isEnabled()
    window.menu_actions["save"].trigger()
    assert window.library.get(record.id) == record


def test_valid_edit_is_saved_to_the_library(window, qtbot):
    record = highlight_first(window)
    editor = window.editor
    retype(qtbot, editor.inputs["temperature"], "0.35")
    assert editor.error_labels["temperature"].isHidden()
    assert editor.save_button.isEnabled()
    qtbot.mouseClick(editor.save_button, Qt.LeftButton)
    saved = window.library.get(record.id)
    assert saved.preset.temperature == 0.35
    assert saved.revision == record.revision + 1


def test_stage_order_can_be_reordered_and_saved(window, qtbot):
    record = highlight_first(window)
    editor = window.editor
    order = list(editor.stage_order())
    assert tuple(order) == record.preset.order
    editor.move_stage(order[-1], -1)
    expected = order[:-2] + [order[-1], order[-2]]
    assert list(editor.stage_order()) == expected
    editor.save()
    assert list(window.library.get(record.id).preset.order) == expected


def test_every_parameter_shows_its_explanation(window):
    for field, widget in window.editor.inputs.items():
        if field in FIELDS:
            assert FIELDS[field].help in widget.toolTip()


def test_undo_restores_a_deleted_preset(window):
    record = highlight_first(window)
    window.menu_actions["delete"].trigger()
    assert record.name not in [r.name for r in window.library.records()]
    assert record.name not in [
        window.library_list.tree.topLevelItem(i).text(0) for i in range(window.library_list.tree.topLevelItemCount())
    ]
    window.undo_action.trigger()
    names = [r.name for r in window.library.records()]
    assert record.name in names
    restored = window.library.find(record.name)
    assert restored.preset.parameters() == record.preset.parameters()
    window.redo_action.trigger()
    assert record.name not in [r.name for r in window.library.records()]


def test_new_duplicate_rename_are_undoable(window):
    before = sorted(r.name for r in window.library.records())
    window.menu_actions["new"].trigger()
    assert "New preset" in [r.name for r in window.library.records()]
    window.menu_actions["duplicate"].trigger()
    copy_id = window.library_list.current_id()
    assert window.library.get(copy_id).name == "New preset (copy)"
    window.prompts.ask_text = lambda *args: "Harbour test"
    window.menu_actions["rename"].trigger()
    assert window.library.get(copy_id).name == "Harbour test"
    for _ in range(3):
        window.undo_action.trigger()
    assert sorted(r.name for r in window.library.records()) == before


def test_search_and_tag_filter_hide_other_presets(window):
    tree = window.library_list.tree
    records = window.library.records()
    tagged = [r for r in records if r.preset.tags]
    assert tagged, "the starter presets carry tags"
    tag = tagged[0].preset.tags[0]
    window.library_list.tag_filter.setCurrentText(tag)
    visible = [
        tree.topLevelItem(i).text(0) for i in range(tree.topLevelItemCount()) if not tree.topLevelItem(i).isHidden()
    ]
    assert sorted(visible) == sorted(r.name for r in records if tag in r.preset.tags)
    window.library_list.tag_filter.setCurrentIndex(0)
    window.library_list.search.setText(records[0].name)
    visible = [
        tree.topLevelItem(i).text(0) for i in range(tree.topLevelItemCount()) if not tree.topLevelItem(i).isHidden()
    ]
    assert records[0].name in visible and len(visible) < len(records)


def test_favourite_is_kept_in_the_user_state(window, tmp_path):
    record = highlight_first(window)
    window.menu_actions["favourite"].trigger()
    state = json.loads((tmp_path / "config" / "state.json").read_text())
    assert record.id in state["favourites"]
    window.library_list.favourites_only.setChecked(True)
    tree = window.library_list.tree
    visible = [
        tree.topLevelItem(i).text(0) for i in range(tree.topLevelItemCount()) if not tree.topLevelItem(i).isHidden()
    ]
    assert visible == [record.name]


def test_export_writes_a_file_the_core_check_accepts(window, tmp_path):
    records = window.library.records()[:2]
    window.library_list.set_chosen([r.id for r in records])
    target = tmp_path / "shared" / "harbour-presets.json"
    target.parent.mkdir()
    window.prompts.ask_save_path = lambda *args: str(target)
    window.prompts.choose_export_target = lambda presets, add_closest: ExportChoice("samplewright")
    window.menu_actions["export"].trigger()
    assert window.errors == []
    verdict = check_file(target)
    assert all(r.name in verdict for r in records)
    assert [p for p in read_settings(target).presets] == [r.preset for r in records]


def test_import_of_a_broken_file_shows_the_reason(window, tmp_path):
    broken = tmp_path / "broken.json"
    broken.write_text('{"format": "samplewright-settings", "format_version": 1, "presets": [', encoding="utf-8")
    with pytest.raises(LibraryError) as expected:
        read_settings(broken)
    count = len(window.library.records())
    window.prompts.ask_open_path = lambda *args: str(broken)
    window.menu_actions["import"].trigger()
    assert window.errors == [str(expected.value)]
    assert len(window.library.records()) == count


def test_import_previews_then_adds_presets(window, tmp_path):
    from samplewright.core.library.settings_file import export_settings
    from samplewright.core.presets import Preset

    source = tmp_path / "from-a-colleague.json"
    export_settings([Preset("Quay notice", temperature=0.6, top_p=0.9)], source)
    seen = []
    window.prompts.confirm_import = lambda plan, name: seen.append([i.action for i in plan.items]) or {}
    window.presets.import_settings(str(source))
    assert seen == [["add"]]
    assert window.library.find("Quay notice").preset.top_p == 0.9


def test_import_conflict_choice_from_the_preview(window, qtbot, tmp_path):
    from samplewright.core.library.importing import preview_import
    from samplewright.core.library.settings_file import export_settings
    from samplewright.qt.dialogs import ImportPreviewDialog

    record = window.library.records()[0]
    changed = record.preset.replace(temperature=0.05 if record.preset.temperature != 0.05 else 0.06)
    source = tmp_path / "changed.json"
    export_settings([changed], source)
    plan = preview_import(read_settings(source), window.library)
    dialog = ImportPreviewDialog(plan, source.name, window)
    qtbot.addWidget(dialog)
    assert [i.action for i in plan.items] == ["conflict"]
    combo = dialog.combos[record.name]
    combo.setCurrentIndex(combo.findData("overwrite"))
    window.prompts.confirm_import = lambda plan, name: dialog.choices()
    window.presets.import_settings(str(source))
    assert window.library.get(record.id).preset.temperature == changed.temperature


def test_delete_key_acts_only_in_the_preset_list(window, qtbot):
    count = len(window.library.records())
    window.activateWindow()
    slider = window.inspector.slider
    slider.setEnabled(True)
    slider.setFocus()
    qtbot.keyClick(slider, Qt.Key_Delete)
    assert len(window.library.records()) == count
    window.library_list.tree.setFocus()
    qtbot.keyClick(window.library_list.tree, Qt.Key_Delete)
    assert len(window.library.records()) == count - 1


@pytest.mark.parametrize(
    "field, text",
    [
        ("top_k", "1,000"),
        ("max_new_tokens", "1_000"),
        ("temperature", "1,000.5"),
        ("temperature", "1.000,5"),
        ("top_p", "0,5,1"),
    ],
)
def test_editor_rejects_numbers_with_separators(field, text):
    from samplewright.qt.preset_editor import parse_field

    # Python's float() reads "1_000" as 1000 and a naive comma swap reads "1,000" as 1: both must be refused.
    with pytest.raises(PresetError, match="separators"):
        parse_field(field, text)


def test_editor_reads_a_decimal_comma_in_fractional_fields_only():
    from samplewright.qt.preset_editor import parse_field

    assert parse_field("temperature", "0,7") == pytest.approx(0.7)
    assert parse_field("top_p", " 0,95 ") == pytest.approx(0.95)
    assert parse_field("top_k", "40") == 40 and isinstance(parse_field("top_k", "40"), int)
    with pytest.raises(PresetError, match="whole numbers"):
        parse_field("no_repeat_ngram_size", "3,0")


def test_editor_offers_every_core_field_and_knows_whole_numbers(window):
    from samplewright.qt.preset_editor import NUMBER_FIELDS, WHOLE_NUMBERS

    # Every field is typed into, except the order, which is the chain's block order.
    assert set(FIELDS) - {"order"} <= set(window.editor.inputs)
    assert set(window.editor.stage_order()) == set(FIELDS["order"].default)
    for field in NUMBER_FIELDS:
        # The core's own check decides which fields take fractions: 0.5 is refused exactly by whole-number ones.
        try:
            validate_field(field, 0.5)
            takes_fractions = True
        except PresetError:
            takes_fractions = False
        assert (field in WHOLE_NUMBERS) == (not takes_fractions), field


def test_export_for_transformers_writes_a_folder_generation_config_reads(window, tmp_path):
    # transformers' GenerationConfig.from_pretrained is the reader the export must satisfy.
    from transformers import GenerationConfig

    record = next(r for r in window.library.records() if r.preset.top_p is not None)
    window.library_list.set_chosen([record.id])
    seen = []
    window.prompts.choose_export_target = lambda presets, add_closest: (
        seen.append(presets) or ExportChoice("transformers")
    )
    window.prompts.ask_folder = lambda *args: str(tmp_path / "for-transformers")
    window.menu_actions["export"].trigger()
    assert window.errors == [] and seen == [[record.preset]]
    written = [p.parent for p in (tmp_path / "for-transformers").rglob("generation_config.json")]
    assert len(written) == 1
    assert GenerationConfig.from_pretrained(written[0]).top_p == record.preset.top_p


def test_the_after_export_check_reports_each_folders_verdict(window, qtbot, tmp_path):
    # The check runs each written folder through transformers' own generate() processors
    # (GenerationConfig.from_pretrained, then the model's logits processors) on the tiny model and
    # compares them with samplewright's chain. Temperature then top-p is defined the same way in both
    # (Ackley, Hinton & Sejnowski 1985; Holtzman et al. 2020, eq. 2) and transformers applies them in
    # that order (its TemperatureLogitsWarper and TopPLogitsWarper), so that verdict is not "differs";
    # transformers has no frequency penalty (its GenerationConfig has no such field), so the export
    # drops it and the other preset's sampled tokens, which repeat, make the distributions differ.
    kept = Preset("check kept", temperature=0.7, top_p=0.9)
    dropped = Preset("check dropped", temperature=0.9, frequency_penalty=0.6)
    ids = [window.library_list.push_add(preset) for preset in (kept, dropped)]
    window.library_list.set_chosen(ids)
    window.prompts.choose_export_target = lambda presets, add_closest: ExportChoice("transformers", check=True)
    window.prompts.ask_folder = lambda *args: str(tmp_path / "checked")
    shown = []
    window.prompts.show_info = lambda title, text: shown.append(text)
    with qtbot.waitSignal(window.export_check.finished, timeout=120000) as blocker:
        window.menu_actions["export"].trigger()
    results = {result.preset: result for result in blocker.args[0]}
    assert window.errors == [] and all(r.problem is None for r in results.values()), results
    folders = {p.parent for p in (tmp_path / "checked").rglob("generation_config.json")}
    assert {r.folder for r in results.values()} == folders and len(folders) == 2
    same, other = results[kept.name], results[dropped.name]
    assert same.verdict in (EXACT, EXACT_EXCEPT_TIES) and (same.verdict != EXACT or same.max_tv < THRESHOLD)
    assert other.verdict == DIFFERS and other.max_tv > THRESHOLD
    message = window.statusBar().currentMessage()
    assert f"{kept.name}: {same.verdict}" in message and f"{dropped.name}: differs" in message
    assert kept.name in shown[0] and dropped.name in shown[0]


def test_the_after_export_check_waits_for_the_audition_on_the_engine_thread(window, qtbot, tmp_path, monkeypatch):
    # The check runs the model; queued on the engine thread it can never run while an audition uses
    # the same model and cores (Qt: queued slots of one thread run one after the other).
    from PySide6.QtCore import QThread

    from samplewright.core.engines import folder_check

    where, ended, real = [], [], folder_check.check_folder
    # Direct connection: recorded on the engine thread the moment the audition's result is sent.
    window.engine.worker.audition_ready.connect(lambda *args: ended.append(True), Qt.DirectConnection)

    def recording(*args):
        where.append((QThread.currentThread() is window.engine.thread, bool(ended)))
        return real(*args)

    monkeypatch.setattr(folder_check, "check_folder", recording)
    record = window.library.records()[0]
    window.library_list.set_chosen([record.id])
    window.prompts.choose_export_target = lambda presets, add_closest: ExportChoice("transformers", check=True)
    window.prompts.ask_folder = lambda *args: str(tmp_path / "queued")
    window.prompts.show_info = lambda title, text: None
    window.controls.samples_spin.setValue(2)
    window.controls.tokens_spin.setValue(24)
    qtbot.mouseClick(window.controls.generate_button, Qt.LeftButton)
    assert window.audition.running()
    with qtbot.waitSignal(window.export_check.finished, timeout=120000):
        window.menu_actions["export"].trigger()
    assert where == [(True, True)]  # on the engine thread, after the audition had ended


def test_the_after_export_check_needs_a_passage(window, tmp_path):
    # Without a passage there is nothing to run the model on: the files are written, the user is told why
    # no check ran (common practice: say what and why and what to do).
    record = window.library.records()[0]
    window.library_list.set_chosen([record.id])
    window.passage.set_text("")
    window.prompts.choose_export_target = lambda presets, add_closest: ExportChoice("transformers", check=True)
    window.prompts.ask_folder = lambda *args: str(tmp_path / "unchecked")
    window.menu_actions["export"].trigger()
    assert list((tmp_path / "unchecked").rglob("generation_config.json"))
    assert len(window.errors) == 1 and "passage is empty" in window.errors[0]
    assert not window.export_check.running()


def test_a_closest_variant_is_added_under_a_free_name_and_ticked(window):
    record = window.library.records()[0]
    window.library_list.set_chosen([])
    window.presets.add_for_audition(record.preset)
    names = [r.name for r in window.library.records()]
    assert names.count(record.name) == 1 and len(names) == len(set(names))
    added = [r for r in window.library.records() if r.id in window.library_list.chosen]
    assert len(added) == 1 and added[0].name != record.name and added[0].preset.top_p == record.preset.top_p
