"""Regression tests for the library defects found under concurrency, faults and hostile files
(issue 8): each test names its defect and failed before the fix.

Where two colleagues are involved, two PresetLibrary objects on one folder stand for their two
programs (each reads only what the folder tells it); test_library_processes.py has the real
separate processes.
"""

import errno
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from samplewright import Preset, PresetError
from samplewright.core.errors import LibraryError
from samplewright.core.library.importing import ImportStopped, apply_import, preview_import
from samplewright.core.library.library import HISTORY_LIMIT, PresetLibrary, SaveConflict
from samplewright.core.library.settings_file import (
    MAX_BYTES,
    check_file,
    export_settings,
    parse_settings,
    read_importable,
    read_settings,
)

pytestmark = pytest.mark.usefixtures("private_dirs")

PIER = Preset(name="Pier notice", description="Closures at the north pier", temperature=0.7, top_p=0.9)


def snapshot(folder: Path) -> dict[str, bytes | None]:
    """Every file and folder below ``folder`` (folders as None), without the lock's own files."""
    return {
        str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else None)
        for p in sorted(folder.rglob("*"))
        if not p.name.startswith(".samplewright.lock")
    }


def settings_bytes(*presets: dict) -> bytes:
    return json.dumps(
        {
            "format": "samplewright-settings",
            "format_version": 1,
            "exported_by": "tomas",
            "exported_at": "2025-05-02T09:14:00+00:00",
            "tool_version": "0.1.0",
            "presets": list(presets),
        }
    ).encode()


def cli(*argv: str, env_dir: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ, SAMPLEWRIGHT_CONFIG_DIR=str(env_dir / "config"))
    env["SAMPLEWRIGHT_LIBRARY_DIR"] = str(env_dir / "personal")
    return subprocess.run([sys.executable, "-m", "samplewright.cli", *argv], capture_output=True, env=env, timeout=120)


# -- 1. a second delete must not destroy the first trashed revision -------------------------------


def test_a_second_delete_keeps_the_first_trashed_revision(lib, folder):
    ana = lib
    record = ana.add(PIER)
    ben = PresetLibrary(folder, user="ben", seed=False)
    ana.delete(record.id)
    with pytest.raises(SaveConflict) as conflict:
        ben.save(ben.get(record.id).edited(PIER.replace(temperature=0.2)))
    assert conflict.value.theirs is None
    saved = ben.resolve_conflict(conflict.value, "overwrite")
    ben.delete(saved.id)
    trashed = ana.trash()
    assert sorted(r.preset.temperature for r in trashed if r.id == record.id) == [0.2, 0.7]
    assert len({r.revision for r in trashed}) == 2  # a saved-again preset never reuses a revision
    # Each revision can be brought back on its own: the first one under its id, the second as a copy.
    first = ana.restore(record.id, revision=record.revision)
    assert first.preset.temperature == 0.7 and first.id == record.id
    second = ana.restore(record.id, revision=saved.revision)
    assert second.preset.temperature == 0.2 and second.name == "Pier notice (restored)"
    assert ana.trash() == []


def test_a_revision_number_is_never_given_twice(lib, folder):
    # Found by tools/stress.py: a revision restored as a copy left the trash, and a colleague's
    # stale save over the deletion took its revision number again.
    record = lib.add(PIER)
    stale = PresetLibrary(folder, user="ben", seed=False)
    second = lib.save(record.edited(PIER.replace(top_k=3)))
    lib.delete(second.id)
    lib.add(PIER.replace(temperature=0.3))  # the name is taken: a restore comes back as a copy
    assert lib.restore(second.id).name == "Pier notice (restored)"
    with pytest.raises(SaveConflict) as conflict:
        stale.save(stale.get(record.id).edited(PIER.replace(name="Pier notice (ben)", top_k=9)))
    assert stale.resolve_conflict(conflict.value, "overwrite").revision == 3
    assert [(r.revision, r.preset.top_k) for r in lib.history(record.id)] == [(2, 3), (1, 0)]


# -- 2. a refused save must leave every file as it was ---------------------------------------------


class FailingDisk:
    """The k-th flush of a file (os.fsync) or creation of a folder (os.mkdir) fails with ENOSPC,
    as on a full disk; counted over every module, since both use the os module itself."""

    def __init__(self, monkeypatch, k: int):
        self.k, self.calls = k, 0
        self.real_fsync, self.real_mkdir = os.fsync, os.mkdir
        monkeypatch.setattr(os, "fsync", self.fsync)
        monkeypatch.setattr(os, "mkdir", self.mkdir)

    def _count(self) -> None:
        self.calls += 1
        if self.calls == self.k:
            raise OSError(errno.ENOSPC, "No space left on device")

    def fsync(self, fd):
        self._count()
        return self.real_fsync(fd)

    def mkdir(self, path, mode=0o777, **kw):
        self._count()
        return self.real_mkdir(path, mode, **kw)


class FullDisk:
    """A disk with ``free`` bytes left: flushing (os.fsync) a larger file fails with ENOSPC."""

    def __init__(self, monkeypatch, free: int):
        self.free, self.real_fsync = free, os.fsync
        monkeypatch.setattr(os, "fsync", self.fsync)

    def fsync(self, fd):
        if os.fstat(fd).st_size > self.free:
            raise OSError(errno.ENOSPC, "No space left on device")
        return self.real_fsync(fd)


def preset_at(lib: PresetLibrary, revision: int):
    record = lib.add(PIER)
    for n in range(2, revision + 1):
        record = lib.save(record.edited(record.preset.replace(top_k=n)))
    return record


@pytest.mark.parametrize("revision", [1, HISTORY_LIMIT + 1])
def test_a_save_failing_at_any_step_leaves_the_library_as_it_was(lib, folder, tmp_path, monkeypatch, revision):
    # Defect 2: a refused save deleted history, or left a copy of the current revision or an empty
    # .history/<id>/ folder. Here each step in turn fails, on a fresh copy of the same library.
    record = preset_at(lib, revision)
    before = snapshot(folder)
    for k in range(1, 40):
        copy = tmp_path / f"copy{k}"
        shutil.copytree(folder, copy)
        again = PresetLibrary(copy, seed=False)
        with monkeypatch.context() as patch:
            disk = FailingDisk(patch, k)
            try:
                saved = again.save(again.get(record.id).edited(record.preset.replace(temperature=0.1)))
            except LibraryError as exc:
                assert "is full" in str(exc) and "Nothing in the library was changed" in str(exc)
                assert snapshot(copy) == before, f"failure at step {k} changed the library"
                continue
        if disk.calls < k:  # no step failed: the save went through, and every step was tried
            break
        # The failing step was one whose failure does no harm (a folder's fsync): the save stands.
        assert again.get(record.id) == saved
    assert k > 4 and saved.revision == revision + 1
    assert [r.revision for r in again.history(record.id)][:1] == [revision]
    assert len(again.history(record.id)) == min(revision, HISTORY_LIMIT)


@pytest.fixture
def small_disk(tmp_path):
    """A 200 kB tmpfs when running as root (the CI machine does), to fill for real; otherwise
    None, and the test uses the patched failure instead."""
    mount_point = tmp_path / "disk"
    mount_point.mkdir()
    if getattr(os, "geteuid", lambda: 1)() != 0 or not shutil.which("mount"):
        yield None
        return
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=200k", "tmpfs", str(mount_point)], check=False)
    if mounted.returncode != 0:
        yield None
        return
    try:
        yield mount_point
    finally:
        subprocess.run(["umount", "-l", str(mount_point)], check=False)


def fill(disk: Path, leave: int) -> None:
    """Fill the file system of ``disk`` up to ``leave`` free bytes."""
    fd = os.open(disk / "filler", os.O_WRONLY | os.O_CREAT)
    try:
        while True:
            os.write(fd, b"\0" * 4096)
    except OSError:
        pass
    finally:
        os.close(fd)
    os.truncate(disk / "filler", max(0, os.path.getsize(disk / "filler") - leave))


def test_a_save_refused_by_a_full_disk_keeps_the_history(small_disk, monkeypatch):
    # Defect 2: at 21 revisions a refused save lost the oldest kept revision (the trim ran first).
    if small_disk is not None:
        lib = PresetLibrary(small_disk / "lib", user="ingrid", create=True, seed=False)
    else:
        lib = PresetLibrary(Path(os.environ["SAMPLEWRIGHT_LIBRARY_DIR"]).parent / "lib", create=True, seed=False)
    record = preset_at(lib, HISTORY_LIMIT + 1)
    big = record.edited(record.preset.replace(notes="tide " * 1500))  # about 8 kB more than before
    before = snapshot(lib.folder)
    if small_disk is not None:
        fill(small_disk, leave=8192)  # the lock's note and the history copy fit; the new file does not
    else:
        FullDisk(monkeypatch, free=8192)
    with pytest.raises(LibraryError, match="is full.*Nothing in the library was changed"):
        lib.save(big)
    monkeypatch.undo()
    assert snapshot(lib.folder) == before
    assert len(lib.history(record.id)) == HISTORY_LIMIT


# -- 3. two colleagues restoring the same preset ---------------------------------------------------


def test_the_second_restore_of_one_preset_is_told_a_colleague_was_first(lib, folder):
    record = lib.add(PIER)
    lib.delete(record.id)
    ana, ben = PresetLibrary(folder, user="ana", seed=False), PresetLibrary(folder, user="ben", seed=False)
    chosen = ben.trash()[0]  # Ben's trash window lists it
    ana.restore(chosen.id)
    before = snapshot(folder)
    with pytest.raises(LibraryError, match="restored by someone else first: it is back in the library"):
        ben.restore(chosen.id)
    assert snapshot(folder) == before
    assert [r.name for r in PresetLibrary(folder, seed=False).records()] == ["Pier notice"]


# -- 4. deeply nested JSON -----------------------------------------------------------------------


def nested_tags(depth: int) -> bytes:
    tags = "[" * depth + "]" * depth
    return settings_bytes().replace(b'"presets": []', b'"presets": [{"name": "Deep", "tags": ' + tags.encode() + b"}]")


@pytest.mark.parametrize("depth", [40, 985, 5000])
def test_deeply_nested_json_is_refused_in_one_line(tmp_path, depth):
    data = nested_tags(depth)
    with pytest.raises(LibraryError, match="nested") as err:
        parse_settings(data, "deep.json")
    assert "\n" not in str(err.value) and len(str(err.value)) < 300
    path = tmp_path / "deep.json"
    path.write_bytes(data)
    for reader in (check_file, read_importable):
        with pytest.raises(LibraryError, match="nested"):
            reader(path)


def test_check_and_import_refuse_nesting_with_exit_2(tmp_path):
    path = tmp_path / "deep.json"
    path.write_bytes(nested_tags(985))
    for argv in (["check", str(path)], ["import", str(path), "--library", str(tmp_path / "team"), "--yes"]):
        done = cli(*argv, env_dir=tmp_path)
        assert done.returncode == 2, done.stderr
        assert b"Traceback" not in done.stderr and b"nested" in done.stderr


# -- 5. lone surrogates --------------------------------------------------------------------------


def test_a_lone_surrogate_is_refused_by_field_before_anything_is_written(tmp_path):
    path = tmp_path / "odd.json"
    path.write_bytes(settings_bytes({"name": "Pier"}, {"name": "Ramp"}).replace(b'"Ramp"', b'"Ramp \\ud800"'))
    with pytest.raises(LibraryError, match=r"presets\[1\]\.name.*not valid Unicode"):
        read_settings(path)
    with pytest.raises(PresetError, match="name: it is not valid Unicode"):
        Preset(name="Ramp \ud800")
    team = tmp_path / "team"
    team.mkdir()
    for argv in (["check", str(path)], ["import", str(path), "--library", str(team), "--yes"]):
        done = cli(*argv, env_dir=tmp_path)
        assert done.returncode == 2 and b"Traceback" not in done.stderr, done.stderr
        assert b"not valid Unicode" in done.stderr
    assert list(team.iterdir()) == []


# -- 6. and 7. keep_both picks its name from the folder as it is -----------------------------------


def test_a_valid_file_imports_whole_with_keep_both(lib):
    lib.add(Preset(name="Greedy baseline", temperature=0.0))
    document = parse_settings(
        settings_bytes({"name": "Greedy baseline", "temperature": 0.7}, {"name": "Greedy baseline (copy)"})
    )
    plan = preview_import(document, lib)
    assert [i.action for i in plan.items] == ["conflict", "add"]
    written = apply_import(plan, lib, "keep_both")
    assert sorted(r.name for r in written) == ["Greedy baseline (copy 2)", "Greedy baseline (copy)"]
    assert {r.name: r.preset.temperature for r in written}["Greedy baseline (copy 2)"] == 0.7


def test_keep_both_takes_the_next_free_name_on_disk(lib, folder):
    record = lib.add(PIER)
    colleague = PresetLibrary(folder, user="tomas", seed=False)
    colleague.save(colleague.get(record.id).edited(PIER.replace(top_k=5)))
    colleague.add(PIER.replace(name="Pier notice (copy)"))  # not yet seen by lib
    with pytest.raises(SaveConflict) as conflict:
        lib.save(record.edited(PIER.replace(top_k=9)))
    copy = lib.resolve_conflict(conflict.value, "keep_both")
    assert copy.name == "Pier notice (copy 2)" and copy.preset.top_k == 9


# -- 8. and 9. links in the folder ---------------------------------------------------------------


def test_a_symlink_loop_is_skipped_with_its_reason(folder):
    os.symlink("loop.json", folder / "loop.json")
    lib = PresetLibrary(folder, seed=False)
    assert [s.name for s in lib.skipped] == ["loop.json"]
    assert "cannot be read" in lib.skipped[0].reason
    lib.add(PIER)  # and the library still writes


@pytest.mark.parametrize("hidden", [".trash", ".history"])
def test_hidden_folders_that_are_links_are_never_written_through(lib, folder, tmp_path, hidden):
    record = preset_at(lib, 2)
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    if (folder / hidden).exists():
        for path in sorted((folder / hidden).rglob("*"), reverse=True):
            path.rmdir() if path.is_dir() else path.unlink()
        (folder / hidden).rmdir()
    os.symlink(outside, folder / hidden)
    before = snapshot(folder)
    with pytest.raises(LibraryError, match=f"{hidden}.* is a symbolic link"):
        if hidden == ".trash":
            lib.delete(record.id)
        else:
            lib.save(record.edited(record.preset.replace(top_k=40)))
    assert list(outside.rglob("*")) == [] and snapshot(folder) == before


# -- 10. smaller -----------------------------------------------------------------------------------


def test_a_gone_folder_is_named_by_restore_history_and_trash(lib, folder):
    record = lib.add(PIER)
    lib.delete(record.id)
    for path in sorted(folder.rglob("*"), reverse=True):
        path.rmdir() if path.is_dir() else path.unlink()
    folder.rmdir()
    for call in (lambda: lib.restore(record.id), lambda: lib.history(record.id), lib.trash):
        with pytest.raises(LibraryError, match="is not there"):
            call()


def test_a_lock_that_is_a_link_is_named(lib, folder, tmp_path):
    os.symlink(folder / ".samplewright.lock", folder / ".samplewright.lock")
    with pytest.raises(LibraryError, match=r"\.samplewright\.lock is a symbolic link"):
        lib.add(PIER)


def test_a_million_character_value_is_cut_in_the_message(tmp_path):
    path = tmp_path / "huge.json"
    path.write_text(json.dumps({"name": "Pier", "temperature": "9" * 1_000_000, "top_k": "x" * 1_000_000}))
    with pytest.raises(PresetError) as err:
        check_file(path)
    message = str(err.value)
    assert len(message) < 600 and "temperature" in message and "top_k" in message and "…" in message


def test_leftovers_of_killed_saves_are_removed_under_the_lock(lib, folder):
    record = preset_at(lib, 2)
    lib.delete(record.id)
    old = [folder / ".a.json.x1.partial", folder / ".trash" / ".b.json.x2.partial"]
    old.append(folder / ".history" / record.id / ".1.json.x3.partial")
    fresh = folder / ".c.json.x4.partial"  # possibly a colleague's save in progress: left alone
    for path in [*old, fresh]:
        path.write_bytes(b"half")
    ten_minutes_ago = time.time() - 600
    for path in old:
        os.utime(path, (ten_minutes_ago, ten_minutes_ago))
    PresetLibrary(folder, seed=False).add(PIER.replace(name="Ramp notice"))
    assert [p.exists() for p in old] == [False, False, False] and fresh.exists()


@pytest.mark.parametrize(
    "name", ["Pier \x1b[2Jnotice", "Pier\x9bnotice", "Pier \u202enotice", "Pier\u200bnotice", "Pier\u2028notice"]
)
def test_names_with_control_or_invisible_characters_are_refused(name):
    with pytest.raises(PresetError, match="^name: it holds a (control|bidirectional)"):
        Preset(name=name)
    with pytest.raises(PresetError, match="^tags: "):
        Preset(name="Pier", tags=(name,))
    assert Preset(name="Pier", notes=name).notes == name  # notes may hold anything valid


@pytest.mark.parametrize("stamp", ["2025-05-02", "2025-W18-5", "2025-05-02T09:14", "20250502T091400Z"])
def test_timestamps_must_be_rfc_3339_date_times(stamp):
    # RFC 3339 (Klyne and Newman, 2002), section 5.6: full-date "T" full-time with an offset.
    with pytest.raises(PresetError, match="RFC 3339"):
        Preset(name="Pier", created=stamp)
    assert Preset(name="Pier", created="2025-05-02T09:14:00Z").created == "2025-05-02T09:14:00Z"


@pytest.mark.parametrize("written_out", [False, True])
def test_a_file_that_can_be_read_can_be_exported_again(tmp_path, written_out):
    # Files just under 5 MB, written compactly. written_out=False: each preset gives only its name
    # and notes (the export adds every other field); True: every field is given (the export's
    # indentation alone makes it larger than 5 MB).
    notes = "n" * 9_000
    fields = (lambda i: Preset(name=f"Pier {i}", notes=notes).to_dict()) if written_out else None
    one = len(json.dumps(fields(0) if fields else {"name": "Pier 0", "notes": notes}, separators=(",", ":")))
    count = (MAX_BYTES - 1_000) // (one + 1)
    items = (fields(i) if fields else {"name": f"Pier {i}", "notes": notes} for i in range(count))
    data = settings_bytes(*items).replace(b", ", b",").replace(b": ", b":")
    assert MAX_BYTES - 12_000 < len(data) <= MAX_BYTES
    try:
        document = parse_settings(data)
    except LibraryError as exc:
        assert not written_out and "split the file" in str(exc)  # refused on reading, saying why
        return
    out = tmp_path / "again.json"
    export_settings(document.presets, out)
    assert out.stat().st_size <= MAX_BYTES and read_settings(out).presets == document.presets


def test_an_import_over_a_colleagues_newer_save_is_refused_whole(lib, folder):
    # Defect 6: the plan is checked whole against the folder as it is, before the first write.
    record = lib.add(PIER)
    document = parse_settings(
        settings_bytes(
            {"name": "Ramp notice"}, {"name": "Pier notice", "temperature": 0.7, "top_p": 0.9, "notes": "updated"}
        )
    )
    plan = preview_import(document, lib)
    assert [i.action for i in plan.items] == ["add", "update"]
    colleague = PresetLibrary(folder, user="tomas", seed=False)
    colleague.save(colleague.get(record.id).edited(PIER.replace(top_k=4)))
    before = snapshot(folder)
    with pytest.raises(ImportStopped, match="tomas changed 'Pier notice'.*since the preview.*Nothing was imported"):
        apply_import(plan, lib, "overwrite")
    assert snapshot(folder) == before
