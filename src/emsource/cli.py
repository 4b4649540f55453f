"""The ``emsource`` command line: one subcommand per module of :mod:`emsource.commands`."""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys

from . import __version__, commands

__all__ = ["main", "build_parser"]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="emsource",
        description="Electromagnetic stress-energy sources in 3+1 form: compute, check, post-process.",
        epilog="Exit codes: 0 ok, 1 a check failed, 2 usage, 3 bad input, 4 output error, 130 interrupted.",
    )
    parser.add_argument("--version", action="version", version=f"emsource {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda m: m.name):
        if not info.name.startswith("_"):
            importlib.import_module(f"{commands.__name__}.{info.name}").register(subparsers)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.run(args))
    except KeyboardInterrupt:
        print("emsource: interrupted", file=sys.stderr)
        return commands.EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
