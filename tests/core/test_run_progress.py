"""The evaluation run's progress line: tokens, passage, pace and time left, written as the terminal's
bar writes time (tqdm's ``format_interval``)."""

from samplewright.core.evaluation.runner import RunProgress


def test_progress_line_on_hand_worked_numbers():
    # 120 tokens in 12 s is 10 tokens/s; 36 s left reads "00:36" as tqdm's bar writes it (tqdm, format_interval).
    progress = RunProgress(120, 480, 1, 3, 12.0, 36.0)
    assert progress.describe() == "120 of 480 tokens · passage 2 of 3 · 10.0 tokens/s · 00:36 left"
    # An hour and more reads hours:minutes:seconds: 3700 s = 1 h 1 min 40 s.
    assert RunProgress(1, 2, 0, 1, 1.0, 3700.0).time_left() == "1:01:40"


def test_no_time_left_before_a_pace_is_known():
    progress = RunProgress(0, 480, 0, 3, 0.0, None)
    assert progress.time_left() == "" and progress.describe() == "0 of 480 tokens · passage 1 of 3"
    # The last passage stays "passage 3 of 3" once all are done.
    assert "passage 3 of 3" in RunProgress(480, 480, 3, 3, 40.0, 0.0).describe()
