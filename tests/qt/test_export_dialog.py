"""The export dialog, constructed directly: targets listed, verdicts shown before
anything is written, the closest variant offered to the audition."""

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog

from samplewright import Preset
from samplewright.qt.export_dialog import ExportDialog

PRESETS = [
    Preset(name="Pier notice", temperature=0.4, top_k=30, repetition_penalty=1.1),
    Preset(name="Crew newsletter", temperature=1.1, frequency_penalty=0.5),
]


def cell(dialog, row, column):
    item = dialog.table.item(row, column)
    return item.text() if item else ""


def test_targets_are_listed_and_the_settings_file_is_exact(qtbot, tmp_path):
    dialog = ExportDialog(PRESETS)
    qtbot.addWidget(dialog)
    assert [dialog.targets.item(i).data(Qt.ItemDataRole.UserRole) for i in range(dialog.targets.count())] == [
        "samplewright", "transformers", "vllm", "openai-request"
    ]  # fmt: skip
    assert dialog.target() == "samplewright" and cell(dialog, 0, 1) == "exact"
    assert list(tmp_path.iterdir()) == []


def test_choosing_transformers_shows_each_verdict_and_offers_the_closest_variant(qtbot):
    # transformers has no frequency penalty (its _get_logits_processor builds none), so the
    # newsletter preset differs and its closest variant drops the penalty.
    dialog = ExportDialog(PRESETS)
    qtbot.addWidget(dialog)
    dialog.targets.setCurrentRow(1)
    qtbot.waitUntil(lambda: len(dialog.reports) == 2, timeout=30000)
    assert cell(dialog, 0, 1) in ("exact", "exact except ties")
    assert cell(dialog, 1, 1) == "differs" and "frequency" in cell(dialog, 1, 3)
    assert float(cell(dialog, 1, 2)) > 0
    dialog.table.setCurrentCell(1, 0)
    assert "closest expressible" in dialog.details.toPlainText()
    with qtbot.waitSignal(dialog.closest_requested) as blocker:
        dialog.add_closest.click()
    variant = blocker.args[0]
    assert variant.frequency_penalty == 0.0 and variant.temperature == 1.1
    dialog.check_after.setChecked(True)
    assert dialog.check_requested()
    dialog.reject()
    assert dialog.result() == QDialog.DialogCode.Rejected


def test_switching_target_while_measuring_ignores_the_old_results(qtbot):
    dialog = ExportDialog(PRESETS)
    qtbot.addWidget(dialog)
    dialog.targets.setCurrentRow(1)
    dialog.targets.setCurrentRow(2)
    qtbot.waitUntil(lambda: len(dialog.reports) == 2, timeout=30000)
    assert all(report.target == "vllm" for report in dialog.reports.values())
    assert cell(dialog, 1, 1) == "exact"  # vLLM has the frequency penalty
    assert not dialog.check_after.isEnabled()
    dialog.accept()
    assert not dialog.measuring()


def test_the_chosen_target_is_written_only_by_the_caller(qtbot, tmp_path):
    from transformers import GenerationConfig

    from samplewright.core.engines.exporting import destination_kind, write_for_target

    dialog = ExportDialog(PRESETS[:1])
    qtbot.addWidget(dialog)
    dialog.targets.setCurrentRow(1)
    qtbot.waitUntil(lambda: len(dialog.reports) == 1, timeout=30000)
    dialog.accept()
    assert list(tmp_path.iterdir()) == []
    assert destination_kind(dialog.target(), 1) == "folder"
    message, (written,) = write_for_target(PRESETS[:1], dialog.target(), tmp_path / "pier")
    assert "for transformers" in message and written == tmp_path / "pier" / "generation_config.json"
    assert GenerationConfig.from_pretrained(tmp_path / "pier").top_k == 30
