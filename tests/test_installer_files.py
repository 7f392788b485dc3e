"""The installer's files exist and name the package's version (the build itself: installer/smoke.sh).

pyproject.toml is the one place the version is written; the desktop entry (a key of our own, as
the Desktop Entry Specification allows for ``X-`` keys) and the AppStream metainfo (its newest
``<release>``, per the AppStream specification) must name the same one, and the PyInstaller spec
takes it from the package metadata. The validators themselves (desktop-file-validate,
appstreamcli) run in installer/smoke.sh, where they are installed.
"""

from __future__ import annotations

import configparser
import re
import sys
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "installer"))

import bundle_filters  # noqa: E402
import bundle_info  # noqa: E402


def pyproject_version() -> str:
    """The version in pyproject.toml's [project] table, read as text (tomllib is Python 3.11+)."""
    text = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    project = text.split("[project]", 1)[1].split("\n[", 1)[0]
    match = re.search(r'^version\s*=\s*"([^"]+)"', project, re.M)
    assert match, "pyproject.toml has no [project] version"
    return match.group(1)


def test_installer_files_exist():
    for path in (bundle_info.SPEC_FILE, bundle_info.DESKTOP_FILE, bundle_info.METAINFO_FILE, bundle_info.ICON_FILE):
        assert path.is_file(), path
    for script in ("install.sh", "uninstall.sh", "smoke.sh", "build.py", "launch.py"):
        assert (bundle_info.HERE / script).is_file(), script


def test_desktop_entry_and_metainfo_name_the_package_version():
    version = pyproject_version()
    assert bundle_info.desktop_version() == version
    assert bundle_info.metainfo_version() == version
    assert bundle_info.checked_version() == version  # the installed metadata agrees too


def test_spec_takes_its_version_from_the_package():
    assert bundle_info.spec_version_source()


def test_ids_agree_between_desktop_entry_icon_and_metainfo():
    # AppStream specification: <launchable type="desktop-id"> names the desktop file; common
    # practice: the icon theme name is the same reverse-DNS id.
    entry = configparser.ConfigParser(interpolation=None)
    entry.optionxform = str  # type: ignore[assignment,method-assign]
    entry.read(bundle_info.DESKTOP_FILE, encoding="utf-8")
    desktop = entry["Desktop Entry"]
    assert desktop["Type"] == "Application"
    assert desktop["Icon"] == bundle_info.APP_ID == bundle_info.ICON_FILE.stem
    assert desktop["Exec"].split()[0] == bundle_info.BUNDLE_NAME  # install.sh puts the full path here
    root = ElementTree.parse(bundle_info.METAINFO_FILE).getroot()
    assert root.findtext("id") == bundle_info.APP_ID
    assert root.findtext("launchable") == bundle_info.DESKTOP_FILE.name
    assert root.findtext("project_license") == "Apache-2.0"


def test_icon_is_a_square_svg():
    svg = ElementTree.parse(bundle_info.ICON_FILE).getroot()
    assert svg.tag == "{http://www.w3.org/2000/svg}svg"
    assert svg.attrib["width"] == svg.attrib["height"]


@pytest.mark.parametrize(
    ("name", "bundled"),
    [
        ("transformers.models.llama.modeling_llama", True),
        ("transformers.models.auto.modeling_auto", True),
        ("transformers.generation.utils", True),
        ("transformers.models.bert.modeling_bert", False),
        ("transformers.pipelines.text_generation", False),
    ],
)
def test_only_the_default_model_family_is_bundled(name, bundled):
    assert bundle_filters.wanted_transformers_module(name) is bundled


def test_unneeded_files_are_left_out_and_needed_ones_kept():
    assert bundle_filters.is_unneeded("torch/include/ATen/ATen.h")
    assert bundle_filters.is_unneeded("PySide6/Qt/plugins/platforms/libqvnc.so")
    assert not bundle_filters.is_unneeded("PySide6/Qt/plugins/platforms/libqxcb.so")
    assert not bundle_filters.is_unneeded("PySide6/Qt/plugins/platforms/libqoffscreen.so")
    assert not bundle_filters.is_unneeded("torch/lib/libtorch_cpu.so")
    assert bundle_filters.is_unneeded("torch/bin/test_jit")
    assert not bundle_filters.is_unneeded("torch/bin/torch_shm_manager")  # torch/__init__.py requires it
