"""Options and error handling shared by the snapshot commands (not a command itself)."""

from __future__ import annotations

import argparse
import math
import sys

from .. import interruption
from . import EXIT_BAD_INPUT, EXIT_OUTPUT_ERROR

MIB = 2**20
#: Largest accepted --memory-limit: 1 EiB, far above any machine, well inside int range.
MAX_MEMORY_LIMIT_MIB = float(2**40)


def positive_number(text: str, what: str, unit: str = "") -> float:
    """An option's value as a positive, finite float, else an argparse usage error naming ``what``."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number{unit}, found {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"{what} must be a positive, finite number{unit}, "
                                         f"found {text!r}")
    return value


def tolerance(text: str) -> float:
    """``--tolerance``: a positive, finite number (NaN would make every comparison fail)."""
    return positive_number(text, "tolerance")


def whole_number_at_least(minimum: int, what: str, even: bool = False):
    """An argparse type: an integer >= ``minimum`` (and even, if asked), else a usage error
    naming ``what``."""
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a whole number, found {text!r}") from None
        if value < minimum or (even and value % 2):
            kind = "an even whole number" if even else "a whole number"
            raise argparse.ArgumentTypeError(f"{what} must be {kind} of at least {minimum}, "
                                             f"found {text!r}")
        return value
    return parse


def memory_limit(text: str) -> int:
    """``--memory-limit`` in MiB (a positive number) -> bytes."""
    value = positive_number(text, "memory limit", " of MiB")
    if value > MAX_MEMORY_LIMIT_MIB:
        raise argparse.ArgumentTypeError(f"memory limit must be at most {MAX_MEMORY_LIMIT_MIB:g} "
                                         f"MiB (1 EiB), found {text!r}")
    return int(value * MIB)


def add_input_options(parser):
    parser.add_argument("snapshot", help="HDF5 snapshot file (native layout, or any with --mapping)")
    parser.add_argument("--mapping", metavar="TOML",
                        help="layout mapping file for a snapshot in another code's layout")
    parser.add_argument("--memory-limit", metavar="MIB", type=memory_limit, default=512 * MIB,
                        help="bound on working memory in MiB (default 512); slabs are sized to fit")
    parser.add_argument("--levels", metavar="I", type=int, nargs="+",
                        help="indices of the time levels to process (default: all)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar and no summary")


def show_progress(args) -> bool:
    return not args.quiet and sys.stderr.isatty()


def fail(code: int, message: str) -> int:
    """Report an error and return ``code``; a pending stop request outranks it (raised instead:
    the error may be what a library made of the stop, see :func:`emsource.cli.main`)."""
    interruption.check()
    print(f"emsource: error: {message}", file=sys.stderr)
    return code


def run_guarded(function, args) -> int:
    """Run ``function(args)`` and turn the package's errors into messages and exit codes."""
    from ..snapshot import OutputError, SnapshotError

    try:
        return function(args)
    except SnapshotError as error:
        return fail(EXIT_BAD_INPUT, str(error))
    except OutputError as error:
        return fail(EXIT_OUTPUT_ERROR, str(error))
    except ValueError as error:  # e.g. a memory limit too small for one plane
        return fail(EXIT_BAD_INPUT, str(error))


def check_new_output(path, force, inputs=()) -> None:
    """Fail before any work if an output is an input, exists (without --force) or cannot be
    created (:func:`emsource.snapshot.check_output`)."""
    from ..snapshot import check_output

    check_output(path, force=force, inputs=inputs)


def size_text(nbytes: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB"):
        if nbytes < 1024 or unit == "GiB":
            return f"{nbytes:.3g} {unit}" if unit != "B" else f"{int(nbytes)} B"
        nbytes /= 1024
    return f"{nbytes:.3g} GiB"
