"""Command-line subcommands for the preset library and settings files.

``export`` writes library presets to a settings file, ``import`` previews (and
with ``--yes`` writes) a settings file or a single preset file into the
library, ``library`` lists the library's presets and the files it skipped.
Each handler returns an exit status; errors are raised as
SamplewrightError/PresetError for the main CLI to print as one line. All the
work is done in ``samplewright.core``.

Extending: a new way out or in adds its options in ``register`` and calls the
helpers here (:func:`open_library`, :func:`open_for_preview`,
:func:`refuse_existing`) so every command opens folders and guards files alike.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from . import cli_engines
from .core.errors import SamplewrightError
from .core.library.importing import IMPORT_CHOICES, apply_import, preview_import
from .core.library.library import PresetLibrary
from .core.library.settings_file import SettingsDocument, export_settings, read_importable
from .core.library.user_state import library_in_use


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``export``, ``import`` and ``library`` subcommands (each sets ``handler``)."""
    export = subparsers.add_parser("export", help="write library presets to a settings file")
    export.add_argument("names", nargs="*", metavar="PRESET", help="preset names or ids (default: all)")
    export.add_argument("--out", metavar="FILE", required=True, help="the settings file to write")
    export.add_argument("--model", metavar="NAME", help="the model the presets were tuned on")
    cli_engines.add_export_options(export)
    export.add_argument("--force", action="store_true", help="replace FILE if it exists already")
    _add_library_options(export)
    export.set_defaults(handler=run_export)

    imp = subparsers.add_parser(
        "import", help="preview, then bring a settings file's presets (or a single preset file) into the library"
    )
    imp.add_argument("file", metavar="FILE", help="the settings file or single preset file to read")
    imp.add_argument("--yes", action="store_true", help="write the import (without it, only the preview)")
    imp.add_argument(
        "--on-conflict",
        choices=IMPORT_CHOICES,
        metavar="CHOICE",
        help="for a name already in the library with other parameters: keep_both (import as a "
        "copy), take_theirs or skip (keep the library's), overwrite (the file's wins)",
    )
    _add_library_options(imp)
    imp.set_defaults(handler=run_import)

    lib = subparsers.add_parser("library", help="list the library's presets and the files it skipped")
    _add_library_options(lib)
    lib.set_defaults(handler=run_library)
    cli_engines.register(subparsers)


def _add_library_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--library",
        metavar="DIR",
        help="the library folder (default: the one last chosen in the window, else your own)",
    )
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of text")


def open_library(args: argparse.Namespace, seed: bool = True) -> PresetLibrary:
    """The library of ``--library`` (default: the one in use), for a command that may write."""
    return PresetLibrary(args.library or library_in_use(), seed=seed)


def open_for_preview(args: argparse.Namespace) -> PresetLibrary | None:
    """The library of ``--library`` opened without writing anything (no starter presets, no new
    folder); None when the folder does not exist yet (a preview then compares with nothing)."""
    folder = Path(args.library or library_in_use()).expanduser()
    return PresetLibrary(folder, seed=False, create=False) if folder.is_dir() else None


def refuse_existing(path: str | Path, force: bool) -> None:
    """Refuse to replace an existing file unless ``--force`` was given.

    Raises:
        SamplewrightError: naming the file and the option.
    """
    if Path(path).exists() and not force:
        raise SamplewrightError(f"{path} exists already; add --force to replace it. No file was written.")


def _print_json(obj) -> None:
    print(json.dumps(obj, ensure_ascii=False, indent=2))


def run_export(args: argparse.Namespace) -> int:
    """Export the named presets (or all) from the library to ``--out``."""
    library = open_library(args)
    records = [library.find(name) for name in args.names] if args.names else library.records()
    if not records:
        raise SamplewrightError(f"The library {library.folder} has no presets to export.")
    if args.to != "samplewright" or args.verify:
        return cli_engines.run_engine_export(args, [r.preset for r in records])
    refuse_existing(args.out, args.force)
    document = export_settings([r.preset for r in records], args.out, model=args.model)
    names = [p.name for p in document.presets]
    if args.json:
        _print_json({"file": str(args.out), "presets": names, "model": document.model})
    else:
        print(f"Wrote {len(names)} preset(s) to {args.out}: {', '.join(names)}")
    return 0


def run_import(args: argparse.Namespace) -> int:
    """Print what importing ``file`` would do (writing nothing at all); with ``--yes``, do it."""
    foreign = cli_engines.foreign_preview(args.file)  # a transformers, vLLM or request file
    document = SettingsDocument((foreign.preset,)) if foreign else read_importable(args.file)
    library = open_library(args, seed=False) if args.yes else open_for_preview(args)
    folder = library.folder if library is not None else Path(args.library or library_in_use()).expanduser()
    plan = preview_import(document, library)
    if args.yes and plan.conflicts and not args.on_conflict:
        names = ", ".join(f"'{item.name}'" for item in plan.conflicts)
        raise SamplewrightError(
            f"{names} already in the library with other parameters; add --on-conflict "
            f"{'|'.join(IMPORT_CHOICES)}. Nothing was imported."
        )
    written = apply_import(plan, library, args.on_conflict) if library is not None and args.yes else ()
    if args.json:
        _print_json(
            {
                "file": str(args.file),
                "library": str(folder),
                "applied": bool(args.yes),
                **({"foreign": foreign.to_json()} if foreign else {}),
                **plan.to_json(),
                "written": [{"name": r.name, "id": r.id, "revision": r.revision} for r in written],
            }
        )
        return 0
    for line in foreign.lines() if foreign else ():
        print(line)
    print(f"Importing {args.file} into {folder}:" + ("" if library else " (the folder does not exist yet)"))
    for line in plan.lines():
        print("  " + line)
    if args.yes:
        print(f"Wrote {len(written)} preset(s).")
    else:
        print("Nothing was written; add --yes to import.")
    return 0


def run_library(args: argparse.Namespace) -> int:
    """List the library's presets and skipped files."""
    library = open_library(args)
    records, skipped = library.records(), library.skipped
    if args.json:
        _print_json(
            {
                "library": str(library.folder),
                "presets": [
                    {
                        "id": r.id,
                        "name": r.name,
                        "revision": r.revision,
                        "modified_at": r.modified_at,
                        "modified_by": r.modified_by,
                        "summary": r.preset.describe(),
                    }
                    for r in records
                ],
                "skipped": [{"file": s.name, "reason": s.reason} for s in skipped],
            }
        )
        return 0
    print(f"{library.folder}: {len(records)} preset(s)")
    for r in records:
        print(f"  {r.name}  [rev {r.revision}, {r.modified_by} {r.modified_at}]  {r.preset.describe()}")
    for s in skipped:
        print(f"  skipped {s.name}: {s.reason}")
    return 0
