"""The evaluation screen on the tiny model: a small sweep draws one point per value and a line,
clicking a point shows its samples, a derived preset is saved, the report is written."""

import base64
import io
from html.parser import HTMLParser

import pytest
from matplotlib import image as mpimg
from PySide6.QtCore import QPointF, Qt
from PySide6.QtGui import QAction

from samplewright.core.library.library import PresetLibrary
from samplewright.qt.evaluation_view import EvaluationView


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.text, self.images = [], []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images.append(dict(attrs)["src"])

    def handle_data(self, data):
        self.text.append(data)


class Answers:
    """The dialogs' answers, given by the test; an unexpected error fails it."""

    def __init__(self):
        self.texts, self.long_texts, self.paths, self.save_paths, self.errors = [], [], [], [], []

    def ask_text(self, title, label, text=""):
        return self.texts.pop(0)

    def ask_long_text(self, title, label):
        return self.long_texts.pop(0)

    def ask_open_paths(self, title, file_filter):
        return self.paths.pop(0)

    def ask_open_path(self, title, file_filter):
        return self.paths.pop(0)

    def ask_save_path(self, title, file_filter, suggested=""):
        return self.save_paths.pop(0)

    def confirm(self, title, question):
        return True

    def show_error(self, message):
        self.errors.append(message)


@pytest.fixture
def view(qtbot, tiny_model, tmp_path):
    answers = Answers()
    screen = EvaluationView(tmp_path / "library", lambda: tiny_model, prompts=answers)
    qtbot.addWidget(screen)
    screen.resize(1400, 900)
    screen.show()
    screen.answers = answers
    yield screen
    screen.shutdown()


def _click_point(qtbot, view, index):
    """A real mouse click on the map at preset ``index``'s point."""
    spot = next(p for p in view.map.points.points() if p.data() == index)
    widget = view.map.plot_widget
    scene = widget.getPlotItem().vb.mapViewToScene(QPointF(spot.pos()))
    qtbot.mouseClick(widget.viewport(), Qt.LeftButton, pos=widget.mapFromScene(scene))


def test_sweep_draws_points_and_line_and_clicks_show_samples(qtbot, view, tmp_path):
    view.sets_panel.check("service-notices")
    view.base.setCurrentIndex(view.base.findText("Greedy baseline"))
    view.fields[0].setCurrentText("temperature")
    view.specs[0].setText("0.5:1.5:0.5")
    view.samples.setValue(2)
    view.tokens.setValue(24)  # enough words for every sample to have a diversity value
    items_before = (view.map.points, view.map.errors, view.map.front_line)
    view.start_sweep()
    qtbot.waitUntil(lambda: not view.running, timeout=60000)
    assert not view.answers.errors
    assert view.run.finished and view.run.path.is_file()
    # One point per value, one line through them, the front marked; items built once, updated in place.
    assert view.map.point_count() == 3
    assert view.map.visible_line_count() == 1
    assert view.map.front_count() >= 1
    assert (view.map.points, view.map.errors, view.map.front_line) == items_before
    assert view.table.rowCount() == 3
    # Hover text names the preset and its numbers.
    assert "temperature=1" in view.map.describe_point(1) and "coherence" in view.map.describe_point(1)
    # Clicking a point shows that preset's samples; clicking another puts them side by side.
    qtbot.wait(50)
    _click_point(qtbot, view, 0)
    qtbot.waitUntil(lambda: view.selected == 0, timeout=3000)
    first = view.run.outcomes[0].samples[0][0].text.strip()
    assert first[:8] in view.samples_view.toPlainText()
    _click_point(qtbot, view, 2)
    qtbot.waitUntil(lambda: view.selected == 2, timeout=3000)
    assert view.samples_view.shown == (2, 0)
    # Save the derived preset into the library in one action.
    view.save_selected_preset()
    names = [r.name for r in PresetLibrary(tmp_path / "library").records()]
    assert "Greedy baseline · temperature=1.5" in names
    # The report from the window.
    out = tmp_path / "report.html"
    view.answers.save_paths.append(str(out))
    view.write_report()
    collected = _Collect()
    collected.feed(out.read_text(encoding="utf-8"))
    text = "".join(collected.text)
    assert all(entry.preset.name in text for entry in view.run.plan.presets)
    assert collected.images
    for src in collected.images:
        assert src.startswith("data:image/png;base64,")
        assert mpimg.imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png").shape[0] > 100


def test_axes_switch_and_reopen_saved_run(qtbot, view, tmp_path):
    view.sets_panel.check("customer-replies")
    view.tick_presets(["Greedy baseline", "Typical — steady"])
    view.samples.setValue(2)
    view.tokens.setValue(24)
    view.start_evaluation()
    qtbot.waitUntil(lambda: not view.running, timeout=60000)
    assert view.map.point_count() == 2 and view.map.visible_line_count() == 0
    view.map.set_axes("self_bleu", "degenerate_share")
    assert view.map.plot_widget.getPlotItem().getAxis("bottom").labelText == "self-BLEU"
    path = view.run.path
    other = EvaluationView(tmp_path / "library", lambda: None, prompts=Answers())
    qtbot.addWidget(other)
    try:
        other.show_run_file(path)
        assert other.map.point_count() == 2 and other.table.rowCount() == 2
        assert "finished" in other.status.text()
    finally:
        other.shutdown()


def test_cancel_then_resume_finishes_the_run(qtbot, view):
    view.sets_panel.check("newsletter")
    view.tick_presets(["Greedy baseline"])
    view.samples.setValue(2)
    view.tokens.setValue(40)
    view.thread.worker.passage_done.connect(lambda *_: view.cancel())
    view.start_evaluation()
    qtbot.waitUntil(lambda: not view.running, timeout=60000)
    assert view.run.cancelled and 1 <= len(view.run.outcomes) < 3
    assert view.buttons["resume"].isEnabled()
    view.thread.worker.passage_done.disconnect()
    view.thread.worker.passage_done.connect(view._on_passage_done)
    view.resume()
    qtbot.waitUntil(lambda: not view.running, timeout=60000)
    assert view.run.finished and not view.run.cancelled


def test_passage_set_panel_create_paste_skip(qtbot, view, tmp_path):
    panel = view.sets_panel
    view.answers.texts += ["letters", "lost bag"]
    view.answers.long_texts.append("Dear Mr Okafor, we found your rucksack")
    panel.create_set()
    assert panel.current_set().name == "letters"
    panel.paste_passage()
    bad = tmp_path / "bad.txt"
    bad.write_bytes(b"\xff\xfe bad")
    view.answers.paths.append([str(bad)])
    panel.add_files()
    assert view.answers.errors and "not UTF-8" in view.answers.errors[-1]
    assert [p.name for p in panel.current_set().passages] == ["lost bag"]
    assert "rucksack" in panel.preview.toPlainText()
    # A file put there by hand that is not UTF-8 is listed as skipped with its reason.
    (tmp_path / "library" / "passages" / "letters" / "old.txt").write_bytes(b"caf\xe9")
    panel.reload(select="letters")
    assert any("skipped" in panel.passages.item(r).text() for r in range(panel.passages.count()))
    # The framing is stored with the set and shown.
    view.answers.texts += ["Write a reply to this letter: {passage}", "You answer for the ferry office."]
    panel.edit_framing()
    assert panel.current_set().framing.kind == "instruction"
    assert "Write a reply" in panel.framing.text()


def test_main_window_menu_opens_the_evaluation_window(qtbot, window):
    action = next(a for a in window.findChildren(QAction) if a.objectName() == "open_evaluation")
    action.trigger()
    opened = window.evaluation_window()
    qtbot.waitUntil(lambda: opened.isVisible(), timeout=3000)
    assert opened.view.library_dir == window.library.folder
    assert opened.view.loaded_model() is not None  # the main window's model
    opened.close()


def test_closing_after_qt_deleted_the_evaluation_window_is_quiet(qtbot, window):
    # At exit Qt deletes top-level windows in its own order; the main window's "destroyed" then
    # asks the opener to close a window whose C++ object is gone (shiboken6.isValid tells).
    import shiboken6

    window.evaluation.open()
    opened = window.evaluation_window()
    opened.view.shutdown()
    shiboken6.delete(opened)
    window.evaluation.close()  # raised "Internal C++ object already deleted" before
    assert window.evaluation_window() is None


def test_progress_shows_time_left_while_running(qtbot, view):
    view.sets_panel.check("newsletter")
    view.tick_presets(["Greedy baseline"])
    view.samples.setValue(2)
    view.tokens.setValue(12)
    seen = []
    view.thread.worker.progress.connect(lambda progress: seen.append((view.status.text(), view.progress.format())))
    view.start_evaluation()
    qtbot.waitUntil(lambda: not view.running, timeout=60000)
    assert view.run.finished and seen
    status, bar = seen[-1]
    assert status.endswith(" left") and " of " in status and "tokens/s" in status
    assert bar.startswith("%p% · ") and bar.endswith(" left")
    assert view.progress.format() == "%p%"  # the finished bar no longer promises time


def test_point_names_stay_inside_the_map_and_apart():
    # Plot-labelling practice (common practice): a name near the right edge is written to the left
    # of its point, and of two close points the lower one's name goes below it so the two names
    # do not print over each other.
    from samplewright.qt.quality_map import _label_anchors

    labels = [("Greedy", 0.81, -1.35), ("Typical", 0.968, -2.242), ("Lively", 0.992, -2.307), ("Warm", 0.996, -2.665)]
    anchors = _label_anchors(labels)
    assert anchors[0] == (0.0, 1.0)  # left half: name to the right, above
    assert anchors[1] == (1.0, 1.0)  # right half: to the left, above
    assert anchors[2] == (1.0, 0.0)  # close under "Typical": below
    assert anchors[3] == (1.0, 1.0)  # far enough below the others
    assert _label_anchors([]) == []
    assert _label_anchors([("one", 1.0, 1.0)]) == [(0.0, 1.0)]


def test_the_measures_table_gets_the_full_width(qtbot, view):
    # Every measure column must be readable at the default 1400-pixel window (common practice:
    # a table of numbers is not squeezed into a side column).
    view.resize(1400, 860)
    view.show()
    qtbot.waitExposed(view)
    assert view.table.width() > 0.7 * view.width()
