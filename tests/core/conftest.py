"""Fixtures shared by the library tests: private per-user folders, a team folder and its library."""

import pytest

from samplewright.core.library.library import PresetLibrary


@pytest.fixture
def private_dirs(tmp_path, monkeypatch):
    """Per-user configuration and personal library folders inside the test's own tmp_path."""
    monkeypatch.setenv("SAMPLEWRIGHT_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("SAMPLEWRIGHT_LIBRARY_DIR", str(tmp_path / "personal"))


@pytest.fixture
def folder(tmp_path, private_dirs):
    """An empty team folder."""
    path = tmp_path / "team"
    path.mkdir()
    return path


@pytest.fixture
def lib(folder):
    """The team folder's library as user ingrid, without starter presets."""
    return PresetLibrary(folder, user="ingrid", seed=False, lock_timeout=1.0)
