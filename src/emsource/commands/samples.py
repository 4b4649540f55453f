"""``emsource samples``: write the sample snapshots (exact data) into a directory."""

from __future__ import annotations

import os

from . import EXIT_OK
from ._snapshot_options import run_guarded, size_text

HELP = "write the sample snapshots: rotating magnetic dipole, foreign-layout copy, boosted charge"


def register(subparsers):
    parser = subparsers.add_parser(
        "samples", help=HELP, description=HELP + ". The files are generated from exact "
        "solutions; see emsource.sample_grids for the scenarios.",
        epilog="Exit codes: 0 done, 4 a file exists (use --force) or cannot be written.")
    parser.add_argument("--output-dir", default="sample_grids", help="directory (default sample_grids)")
    parser.add_argument("--force", action="store_true", help="replace existing files")
    parser.set_defaults(run=lambda args: run_guarded(_run, args))


def _run(args) -> int:
    from ..sample_grids import write_sample_grids

    paths = write_sample_grids(args.output_dir, force=args.force)
    print("emsource samples: wrote")
    for path in paths:
        print(f"  {path}  ({size_text(os.path.getsize(path))})")
    return EXIT_OK
