"""Reading passage files and the bundled demo passages."""

from __future__ import annotations

import pytest

from samplewright.core.engine.passages import demo_passages, read_passage
from samplewright.core.errors import PassageError


def test_reads_utf8_and_strips_bom_and_trailing_break(tmp_path):
    path = tmp_path / "draft.txt"
    path.write_bytes("\ufeffDear Mrs Ålund,\r\nthe crossing\r\n".encode("utf-8"))
    assert read_passage(path) == "Dear Mrs Ålund,\nthe crossing"


def test_non_utf8_file_is_reported_by_name(tmp_path):
    path = tmp_path / "latin1-notice.txt"
    path.write_bytes("Café on the quay".encode("latin-1"))
    with pytest.raises(PassageError, match="latin1-notice.txt.*not UTF-8"):
        read_passage(path)


def test_missing_file(tmp_path):
    with pytest.raises(PassageError, match="does not exist"):
        read_passage(tmp_path / "gone.txt")


def test_empty_file(tmp_path):
    path = tmp_path / "blank.txt"
    path.write_text("  \n\n")
    with pytest.raises(PassageError, match="empty"):
        read_passage(path)


def test_folder_instead_of_file(tmp_path):
    with pytest.raises(PassageError, match="Could not read"):
        read_passage(tmp_path)


def test_demo_passages():
    passages = demo_passages()
    assert len(passages) == 3
    for name, text in passages.items():
        assert 80 <= len(text.split()) <= 200, name
        assert text == text.strip()
