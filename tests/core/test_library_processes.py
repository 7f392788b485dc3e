"""The library shared between processes: simultaneous saves, saves killed mid-write,
edits seen by rescan, and a held lock named in the timeout message."""

import json
import os
import random
import signal
import subprocess
import sys
import textwrap

import pytest

from samplewright import Preset
from samplewright.core.errors import LibraryError
from samplewright.core.library.library import PresetLibrary
from samplewright.core.library.records import decode_record

BASE = Preset(name="Pier notice", notes="n" * 4000, temperature=0.5)

SAVER = textwrap.dedent("""
    import json, sys
    from samplewright.core.library.library import PresetLibrary, SaveConflict
    folder, record_id, who, temperature = sys.argv[1:5]
    lib = PresetLibrary(folder, user=who, seed=False, lock_timeout=20)
    record = lib.get(record_id)
    print("ready", flush=True)
    sys.stdin.readline()
    try:
        saved = lib.save(record.edited(record.preset.replace(temperature=float(temperature))))
        print(json.dumps({"who": who, "saved": saved.revision}), flush=True)
    except SaveConflict as conflict:
        copy = lib.resolve_conflict(conflict, "keep_both")
        print(json.dumps({"who": who, "conflict": conflict.theirs.modified_by, "copy": copy.name}), flush=True)
""")


def spawn(script, *args, **kwargs):
    return subprocess.Popen(
        [sys.executable, "-c", script, *map(str, args)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **kwargs,
    )


@pytest.mark.parametrize("round_", range(3))
def test_two_processes_saving_the_same_preset_one_wins_one_conflicts(tmp_path, round_):
    lib = PresetLibrary(tmp_path, seed=False)
    record = lib.add(BASE)
    workers = [spawn(SAVER, tmp_path, record.id, who, temp) for who, temp in (("ada", 0.2), ("bo", 1.4))]
    for worker in workers:
        assert worker.stdout.readline().strip() == "ready", worker.stderr.read()
    for worker in workers:  # release both at once
        worker.stdin.write("go\n")
        worker.stdin.flush()
    results = [json.loads(worker.communicate(timeout=60)[0]) for worker in workers]
    winners = [r for r in results if "saved" in r]
    losers = [r for r in results if "conflict" in r]
    assert len(winners) == 1 and len(losers) == 1
    assert winners[0]["saved"] == 2 and losers[0]["conflict"] == winners[0]["who"]
    # Nothing lost: the winner's version under the name, the loser's as a copy, the original in history.
    after = PresetLibrary(tmp_path, seed=False)
    temps = {r.name: r.preset.temperature for r in after.records()}
    want = {"ada": 0.2, "bo": 1.4}
    assert temps == {"Pier notice": want[winners[0]["who"]], "Pier notice (copy)": want[losers[0]["who"]]}
    assert [r.preset.temperature for r in after.history(record.id)] == [0.5]
    assert after.skipped == []


LOOP_SAVER = textwrap.dedent("""
    import sys
    from samplewright.core.library.library import PresetLibrary
    folder, record_id = sys.argv[1:3]
    lib = PresetLibrary(folder, seed=False)
    record = lib.get(record_id)
    print("ready", flush=True)
    while True:
        # Revision r always holds max_new_tokens = r and a note of r * 20 characters.
        n = record.revision + 1
        record = lib.save(record.edited(record.preset.replace(max_new_tokens=n, notes="x" * (20 * n))))
""")


def assert_whole(folder, record_id):
    """The preset's file is a complete, valid revision whose content belongs to that revision."""
    record = decode_record((folder / f"{record_id}.json").read_bytes(), f"{record_id}.json")
    if record.revision > 1:
        assert record.preset.max_new_tokens == record.revision
        assert record.preset.notes == "x" * (20 * record.revision)
    lib = PresetLibrary(folder, seed=False)
    assert lib.skipped == [] and [r.id for r in lib.records()] == [record_id]
    return record.revision


def test_a_save_killed_at_random_moments_leaves_a_whole_version(tmp_path):
    record = PresetLibrary(tmp_path, seed=False).add(BASE)
    rng = random.Random(4)  # fixed seed: the same kill delays on every run
    revisions = []
    for _ in range(12):
        worker = spawn(LOOP_SAVER, tmp_path, record.id)
        assert worker.stdout.readline().strip() == "ready", worker.stderr.read()
        try:
            worker.wait(timeout=rng.uniform(0.0, 0.15))
        except subprocess.TimeoutExpired:
            pass
        worker.send_signal(signal.SIGKILL)
        worker.communicate()
        revisions.append(assert_whole(tmp_path, record.id))
    assert revisions[-1] > 1  # the loop did save between the kills


STEP_SAVER = textwrap.dedent("""
    import os, sys, time
    from samplewright.core.library import storage
    from samplewright.core.library.library import PresetLibrary
    folder, record_id, step, nth = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
    calls = {"write": 0, "fsync": 0, "replace": 0}
    real = {"fsync": os.fsync, "replace": os.replace}

    def pause(name):
        calls[name] += 1
        if name == step and calls[name] == nth:
            print("at " + name, flush=True)
            time.sleep(60)  # killed here

    def fsync(fd):
        pause("fsync")
        return real["fsync"](fd)

    def replace(a, b):
        pause("replace")
        return real["replace"](a, b)

    storage.os.fsync, storage.os.replace = fsync, replace
    lib = PresetLibrary(folder, seed=False)
    record = lib.get(record_id)
    lib.save(record.edited(record.preset.replace(max_new_tokens=2, notes="x" * 40)))
    print("done", flush=True)
""")


# A save writes three files (lock owner note, history copy, preset), each as: temporary file,
# fsync it, os.replace, fsync the folder; before the history copy it creates .history and
# .history/<id> (one folder fsync each). So fsync #1-2 and replace #1 are the owner note, fsync
# #3-4 the new folders, fsync #5-6 and replace #2 the history copy, fsync #7-8 and replace #3
# the preset itself.
KILL_POINTS = [
    ("fsync", 2, 1),
    ("fsync", 3, 1),
    ("fsync", 5, 1),
    ("replace", 2, 1),
    ("fsync", 7, 1),
    ("replace", 3, 1),
    ("fsync", 8, 2),
]


@pytest.mark.parametrize("step, nth, revision", KILL_POINTS)
def test_a_save_killed_between_its_steps_leaves_the_old_or_new_version(tmp_path, step, nth, revision):
    record = PresetLibrary(tmp_path, seed=False).add(BASE)
    worker = spawn(STEP_SAVER, tmp_path, record.id, step, nth)
    line = worker.stdout.readline().strip()
    worker.send_signal(signal.SIGKILL)
    worker.communicate()
    assert line == f"at {step}"
    assert assert_whole(tmp_path, record.id) == revision
    # The next save by someone else goes through: the dead writer's lock was released with it.
    lib = PresetLibrary(tmp_path, seed=False, lock_timeout=5)
    current = lib.get(record.id)
    assert lib.save(current.edited(current.preset.replace(top_k=3))).revision == current.revision + 1


EDITOR = textwrap.dedent("""
    import sys
    from samplewright import Preset
    from samplewright.core.library.library import PresetLibrary
    lib = PresetLibrary(sys.argv[1], user="bo", seed=False)
    changed = lib.find("Pier notice")
    lib.save(changed.edited(changed.preset.replace(top_k=12)))
    lib.delete(lib.find("Old timetable").id)
    print(lib.add(Preset(name="Winter crossings")).id, flush=True)
""")


def test_rescan_reports_what_another_process_added_changed_and_removed(tmp_path):
    lib = PresetLibrary(tmp_path, seed=False)
    kept, gone = lib.add(BASE), lib.add(Preset(name="Old timetable"))
    events = []
    lib.removed.connect(lambda r: events.append(("removed", r.name)))
    lib.added.connect(lambda r: events.append(("added", r.name)))
    out, err = spawn(EDITOR, tmp_path).communicate(timeout=60)
    assert err == ""
    report = lib.rescan()
    assert report.added == (out.strip(),) and report.changed == (kept.id,) and report.removed == (gone.id,)
    assert lib.get(kept.id).preset.top_k == 12 and lib.get(kept.id).modified_by == "bo"
    assert sorted(events) == [("added", "Winter crossings"), ("removed", "Old timetable")]


HOLDER = textwrap.dedent("""
    import sys
    from samplewright.core.library.storage import hold_lock
    with hold_lock(sys.argv[1], timeout=5, user="harbourmaster"):
        print("held", flush=True)
        sys.stdin.readline()
""")


def test_a_held_lock_times_out_with_a_message_naming_the_holder(tmp_path):
    lib = PresetLibrary(tmp_path, seed=False, lock_timeout=0.3)
    record = lib.add(BASE)
    holder = spawn(HOLDER, tmp_path)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(LibraryError) as err:
            lib.save(record.edited(record.preset.replace(top_k=4)))
        message = str(err.value)
        assert "busy" in message and "harbourmaster" in message
        assert f"process {holder.pid}" in message and os.uname().nodename in message
    finally:
        holder.communicate("done\n", timeout=30)
    assert lib.get(record.id) == record
    assert lib.save(record.edited(record.preset.replace(top_k=4))).revision == 2


BARE_HOLDER = textwrap.dedent("""
    import sys, filelock
    with filelock.FileLock(sys.argv[1] + "/.samplewright.lock"):
        print("held", flush=True)
        sys.stdin.readline()
""")


def test_an_unwritable_folder_is_reported_as_such_not_as_busy(tmp_path, monkeypatch):
    # As root the folder stays writable, so os.access is made to answer as for a read-only share,
    # and a bare lock holder (no owner note) stands for the lock file that cannot be opened.
    from samplewright.core.library import storage

    lib = PresetLibrary(tmp_path, seed=False, lock_timeout=0.3)
    record = lib.add(BASE)
    holder = spawn(BARE_HOLDER, tmp_path)
    try:
        assert holder.stdout.readline().strip() == "held"
        monkeypatch.setattr(storage.os, "access", lambda path, mode: False)
        with pytest.raises(LibraryError, match="permission to write") as err:
            lib.save(record.edited(record.preset.replace(top_k=4)))
        assert "busy" not in str(err.value)
    finally:
        holder.communicate("done\n", timeout=30)


RESTORER = textwrap.dedent("""
    import json, sys
    from samplewright.core.errors import LibraryError
    from samplewright.core.library.library import PresetLibrary
    lib = PresetLibrary(sys.argv[1], user=sys.argv[2], seed=False, lock_timeout=20)
    chosen = lib.trash()[0]  # as the trash window listed it
    print("ready", flush=True)
    sys.stdin.readline()
    try:
        print(json.dumps({"restored": lib.restore(chosen.id, chosen.revision).name}), flush=True)
    except LibraryError as exc:
        print(json.dumps({"refused": str(exc)}), flush=True)
""")


def test_two_processes_restoring_one_preset_the_second_is_told_plainly(tmp_path):
    # Issue 8, defect 3: the loser wrote a "(restored)" copy, then said the folder was not there.
    lib = PresetLibrary(tmp_path, seed=False)
    record = lib.add(BASE)
    lib.delete(record.id)
    workers = [spawn(RESTORER, tmp_path, who) for who in ("ana", "ben")]
    for worker in workers:
        assert worker.stdout.readline().strip() == "ready", worker.stderr.read()
    for worker in workers:
        worker.stdin.write("go\n")
        worker.stdin.flush()
    outcomes = sorted((json.loads(w.communicate(timeout=60)[0]) for w in workers), key=lambda o: "refused" in o)
    assert outcomes[0] == {"restored": "Pier notice"}
    assert "restored by someone else first" in outcomes[1]["refused"] and "not there" not in outcomes[1]["refused"]
    assert [r.name for r in PresetLibrary(tmp_path, seed=False).records()] == ["Pier notice"]
