"""Build the bundle and its archive: ``make installer`` runs ``python installer/build.py``.

Steps: check the versions agree, render the PNG icons from the SVG, run PyInstaller on
samplewright.spec (one folder, THIRD-PARTY-NOTICES inside), lay out the archive's folder with
install.sh and uninstall.sh, pack ``dist/samplewright-<version>-<platform>.tar.gz`` and print the
sizes. PyInstaller builds only for the system it runs on.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tarfile
import time
from pathlib import Path

import bundle_info

BUILD = bundle_info.ROOT / "build" / "installer"
DIST = bundle_info.ROOT / "dist"
SCRIPTS = ("install.sh", "uninstall.sh")


def render_icons(out: Path) -> list[Path]:
    """PNG copies of the SVG icon at every size in ``ICON_SIZES`` (Qt's SVG renderer, offscreen)."""
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6.QtCore import Qt
    from PySide6.QtGui import QGuiApplication, QImage, QPainter
    from PySide6.QtSvg import QSvgRenderer

    app = QGuiApplication.instance() or QGuiApplication([])
    renderer = QSvgRenderer(str(bundle_info.ICON_FILE))
    if not renderer.isValid():
        raise SystemExit(f"{bundle_info.ICON_FILE} is not a valid SVG file")
    written = []
    for size in bundle_info.ICON_SIZES:
        image = QImage(size, size, QImage.Format.Format_ARGB32)
        image.fill(Qt.GlobalColor.transparent)
        painter = QPainter(image)
        renderer.render(painter)
        painter.end()
        path = out / f"{size}x{size}" / f"{bundle_info.APP_ID}.png"
        path.parent.mkdir(parents=True, exist_ok=True)
        if not image.save(str(path)):
            raise SystemExit(f"could not write {path}")
        written.append(path)
    del app
    return written


def run_pyinstaller() -> Path:
    """Run PyInstaller on the spec; returns the one-folder bundle."""
    command = [sys.executable, "-m", "PyInstaller", "--noconfirm", "--log-level=WARN"]
    command += ["--distpath", str(BUILD / "dist"), "--workpath", str(BUILD / "work"), str(bundle_info.SPEC_FILE)]
    subprocess.run(command, check=True, cwd=bundle_info.ROOT)
    return BUILD / "dist" / bundle_info.BUNDLE_NAME


def lay_out(bundle: Path, version: str) -> Path:
    """The archive's top folder: bundle, scripts, desktop entry, metainfo, icons, notices."""
    top = BUILD / bundle_info.archive_stem(version)
    shutil.rmtree(top, ignore_errors=True)
    share = top / "share"
    shutil.copytree(bundle, top / bundle_info.BUNDLE_NAME, symlinks=True)
    for script in SCRIPTS:
        shutil.copy2(bundle_info.HERE / script, top / script)
        os.chmod(top / script, 0o755)
    (share / "applications").mkdir(parents=True)
    shutil.copy2(bundle_info.DESKTOP_FILE, share / "applications")
    (share / "metainfo").mkdir()
    shutil.copy2(bundle_info.METAINFO_FILE, share / "metainfo")
    icons = share / "icons" / "hicolor"
    (icons / "scalable" / "apps").mkdir(parents=True)
    shutil.copy2(bundle_info.ICON_FILE, icons / "scalable" / "apps")
    for png in render_icons(BUILD / "icons"):
        target = icons / png.parent.name / "apps"
        target.mkdir(parents=True, exist_ok=True)
        shutil.copy2(png, target)
    notices = top / bundle_info.BUNDLE_NAME / "_internal" / bundle_info.NOTICES_NAME
    shutil.copy2(notices, top / bundle_info.NOTICES_NAME)
    return top


def folder_size(folder: Path) -> int:
    """Bytes in the files under ``folder`` (symbolic links not followed)."""
    return sum(p.lstat().st_size for p in folder.rglob("*") if p.is_file() and not p.is_symlink())


def pack(top: Path) -> Path:
    """``dist/<top>.tar.gz`` holding ``top`` as its one folder."""
    DIST.mkdir(exist_ok=True)
    archive = DIST / f"{top.name}.tar.gz"
    with tarfile.open(archive, "w:gz", compresslevel=6) as tar:
        tar.add(top, arcname=top.name)
    return archive


def main() -> int:
    """Build everything and print what was made."""
    started = time.monotonic()
    version = bundle_info.checked_version()
    bundle = run_pyinstaller()
    top = lay_out(bundle, version)
    archive = pack(top)
    mb = 1024 * 1024
    print(f"bundle: {bundle} ({folder_size(bundle) / mb:,.0f} MiB unpacked)")
    print(f"archive: {archive} ({archive.stat().st_size / mb:,.0f} MiB)")
    print(f"built in {time.monotonic() - started:,.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
