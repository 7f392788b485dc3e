"""Stress the shared library: N processes x M mixed operations on one folder, then a check from
the folder alone.

Each worker process opens its own PresetLibrary on the folder and, at random (a fixed seed per
worker), creates presets, edits them from the revision it loaded (often stale, so conflicts
come up, settled with each choice in turn), deletes them, restores deleted revisions and now
and then re-reads the folder. Every write the library reports as done is logged. Afterwards
only the folder is read: every reported save must be there or accounted for (a later revision
of the same preset, in its history or the trash, or the copy a restore made), no file may be
corrupt, names must be unique, and nothing may be on disk that no worker was told it wrote.

Prints: attempted, succeeded, conflicts, refused (a taken name, a colleague restored it
first: correct answers), lost, corrupt, unreported writes, names unique, latency median and
maximum. Exit status 1 when lost, corrupt or unreported writes are not all 0 or names repeat.
Figures on a loaded machine are noisy; the CPU model is printed with them.

Usage: python tools/stress.py [--processes 8] [--operations 200] [--folder DIR] [--seed 0]
"""

from __future__ import annotations

import argparse
import hashlib
import json
import multiprocessing
import os
import platform
import random
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from samplewright import Preset  # noqa: E402
from samplewright.core.errors import LibraryError  # noqa: E402
from samplewright.core.library.library import PresetLibrary, SaveConflict  # noqa: E402
from samplewright.core.library.records import decode_record  # noqa: E402

NAMES = [f"{place} {kind}" for place in ("Pier", "Harbour", "Ramp", "Quay") for kind in ("notice", "reply", "update")]
OPERATIONS = (("create", 2), ("edit", 5), ("delete", 2), ("restore", 2), ("rescan", 1))


def digest(preset: Preset) -> str:
    """A fingerprint of a preset's settings, the same in every process."""
    return hashlib.sha256(json.dumps(preset.to_dict(), sort_keys=True).encode()).hexdigest()[:16]


def random_preset(rng: random.Random, name: str) -> Preset:
    return Preset(
        name=name,
        temperature=round(rng.uniform(0, 2), 3),
        top_k=rng.choice([0, 20, 40]),
        top_p=round(rng.uniform(0.5, 1), 3),
        notes=f"written by the stress run {rng.random():.6f}",
    )


class Worker:
    """One process's share of the run; ``log`` gets one JSON line per reported outcome."""

    def __init__(self, folder: Path, index: int, seed: int, log):
        self.rng = random.Random(seed * 1000 + index)
        self.lib = PresetLibrary(folder, user=f"worker{index}", lock_timeout=120, seed=False)
        self.log = log

    def note(self, **entry) -> None:
        self.log.write(json.dumps(entry) + "\n")

    def wrote(self, op: str, record, **more) -> None:
        self.note(op=op, id=record.id, revision=record.revision, digest=digest(record.preset), **more)

    def run(self, operations: int) -> None:
        kinds = [k for k, weight in OPERATIONS for _ in range(weight)]
        for _ in range(operations):
            kind = self.rng.choice(kinds)
            start = time.perf_counter()
            outcome = "ok"
            try:
                getattr(self, kind)()
            except SaveConflict:
                outcome = "conflict"
            except LibraryError as exc:
                outcome = "refused: " + str(exc)[:200]
            self.note(op="timing", kind=kind, seconds=time.perf_counter() - start, outcome=outcome)

    def create(self) -> None:
        self.wrote("create", self.lib.add(random_preset(self.rng, self.rng.choice(NAMES))))

    def edit(self) -> None:
        records = self.lib.records()
        if not records:
            return self.create()
        record = self.rng.choice(records)  # as this process loaded it: maybe stale
        edited = record.edited(record.preset.replace(temperature=round(self.rng.uniform(0, 2), 3)))
        try:
            self.wrote("edit", self.lib.save(edited))
        except SaveConflict as conflict:
            self.note(op="conflict")
            self.settle(conflict)

    def settle(self, conflict: SaveConflict) -> None:
        choice = self.rng.choice(["keep_both", "take_theirs", "overwrite"])
        try:
            result = self.lib.resolve_conflict(conflict, choice)
        except SaveConflict:
            self.note(op="conflict")
            self.lib.resolve_conflict(conflict, "take_theirs")  # writes nothing
            return
        if choice != "take_theirs" and result is not None:
            self.wrote(choice, result)

    def delete(self) -> None:
        records = self.lib.records()
        if records:
            self.lib.delete(self.rng.choice(records).id)

    def restore(self) -> None:
        trashed = self.lib.trash()
        if not trashed:
            return
        chosen = self.rng.choice(trashed)
        restored = self.lib.restore(chosen.id, chosen.revision)
        if restored.id == chosen.id:
            self.note(op="restore", id=chosen.id, revision=chosen.revision)
        else:  # came back as a copy: the trashed revision lives on in it
            self.wrote("restore_copy", restored, source=[chosen.id, chosen.revision])

    def rescan(self) -> None:
        self.lib.rescan()


def work(folder: str, index: int, seed: int, operations: int, log_path: str) -> None:
    """The body of one worker process."""
    with open(log_path, "w", encoding="utf-8", buffering=1) as log:
        Worker(Path(folder), index, seed, log).run(operations)


def read_folder(folder: Path) -> tuple[dict[tuple[str, int], set[str]], int, list[str]]:
    """Every revision on disk, by (id, revision) -> digests; the corrupt file count; current names."""
    found: dict[tuple[str, int], set[str]] = {}
    corrupt, names = 0, []
    paths = [*folder.glob("*.json"), *folder.glob(".history/*/*.json"), *folder.glob(".trash/*.json")]
    for path in paths:
        try:
            record = decode_record(path.read_bytes())
        except Exception:  # anything unreadable counts as corrupt
            corrupt += 1
            continue
        found.setdefault((record.id, record.revision), set()).add(digest(record.preset))
        if path.parent == folder:
            names.append(record.name)
    corrupt += len([p for p in folder.rglob("*.json") if p not in set(paths) and not p.name.startswith(".")])
    return found, corrupt, names


def check(folder: Path, logs: list[Path]) -> dict[str, object]:
    """Compare what the workers were told with what the folder holds."""
    entries = [json.loads(line) for log in logs for line in log.read_text("utf-8").splitlines()]
    reported = [e for e in entries if "digest" in e]
    on_disk, corrupt, names = read_folder(folder)
    latest: dict[str, int] = {}
    for record_id, revision in on_disk:
        latest[record_id] = max(latest.get(record_id, 0), revision)
    copies = {tuple(e["source"]): (e["id"], e["revision"]) for e in reported if e["op"] == "restore_copy"}

    def accounted(key: tuple[str, int], fingerprint: str | None, depth: int = 0) -> bool:
        if key in on_disk:  # there, with the settings the worker was told it saved
            return fingerprint is None or fingerprint in on_disk[key]
        if key in copies and depth < 50:  # restored as a copy: the copy carries it on
            return accounted(copies[key], None, depth + 1)
        return latest.get(key[0], 0) > key[1]  # a later revision (the history keeps the last 20)

    missing = [e for e in reported if not accounted((e["id"], e["revision"]), e["digest"])]
    for entry in missing[:10]:
        print(f"lost: {entry}", file=sys.stderr)
    lost = len(missing)
    told = {(e["id"], e["revision"]) for e in reported}
    unreported = len([key for key in on_disk if key not in told])
    timings = [e for e in entries if e["op"] == "timing"]
    return {
        "attempted": len(timings),
        "succeeded": len([t for t in timings if t["outcome"] == "ok"]),
        "conflicts": len([e for e in entries if e["op"] == "conflict"]),
        "refused": len([t for t in timings if t["outcome"].startswith("refused")]),
        "refused, by reason": refusal_reasons(timings),
        "lost": lost,
        "corrupt": corrupt,
        "unreported writes": unreported,
        "names unique": len(names) == len(set(names)),
        "latency": [t["seconds"] for t in timings],  # type: ignore[dict-item]
    }


REASONS = {
    "name taken": "is already in the library",
    "restored by someone first": "restored by someone else first",
    "no longer in the trash": "any more (someone restored or removed it)",
    "library busy": "is busy",
}


def refusal_reasons(timings: list[dict]) -> str:
    """How many refusals of each kind (all but "other" are correct answers to a race)."""
    counts = dict.fromkeys([*REASONS, "other"], 0)
    for timing in timings:
        if timing["outcome"].startswith("refused"):
            kind = next((k for k, words in REASONS.items() if words in timing["outcome"]), "other")
            counts[kind] += 1
    return ", ".join(f"{kind} {n}" for kind, n in counts.items())


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--processes", type=int, default=8)
    parser.add_argument("--operations", type=int, default=200, help="operations per process")
    parser.add_argument("--folder", help="the library folder to use (default: a new temporary one)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--keep", metavar="DIR", help="keep the folder and the workers' logs in DIR (must not exist)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="samplewright-stress-") as temp_dir:
        temp = args.keep or temp_dir
        Path(temp).mkdir(parents=True, exist_ok=bool(not args.keep))
        folder = Path(args.folder) if args.folder else Path(temp) / "library"
        folder.mkdir(parents=True, exist_ok=True)
        seed_log = Path(temp) / "seed.jsonl"
        with open(seed_log, "w", encoding="utf-8") as log:
            seeder = PresetLibrary(folder, user="seeder", seed=False)
            for name in NAMES[:6]:
                record = seeder.add(Preset(name=name))
                log.write(json.dumps({"op": "create", "id": record.id, "revision": 1, "digest": digest(record.preset)}))
                log.write("\n")
        logs = [Path(temp) / f"worker{i}.jsonl" for i in range(args.processes)]
        context = multiprocessing.get_context("spawn")
        started = time.perf_counter()
        workers = [
            context.Process(target=work, args=(str(folder), i, args.seed, args.operations, str(logs[i])))
            for i in range(args.processes)
        ]
        for process in workers:
            process.start()
        for process in workers:
            process.join()
        wall = time.perf_counter() - started
        failed = [p.exitcode for p in workers if p.exitcode != 0]
        figures = check(folder, [seed_log, *logs])
    latency = sorted(figures.pop("latency"))  # type: ignore[arg-type]
    print(f"cpu: {cpu_model()} ({os.cpu_count()} cores; figures are noisy on a loaded machine)")
    print(f"processes: {args.processes} x {args.operations} operations, wall time {wall:.1f} s")
    for key, value in figures.items():
        print(f"{key}: {value}")
    print(f"latency median: {statistics.median(latency) * 1000:.1f} ms, max: {max(latency) * 1000:.1f} ms")
    if failed:
        print(f"worker processes that crashed: {len(failed)} (exit codes {failed})")
    bad = figures["lost"] or figures["corrupt"] or figures["unreported writes"] or not figures["names unique"]
    return 1 if bad or failed else 0


if __name__ == "__main__":
    sys.exit(main())
