"""The ``emsource`` command line: one subcommand per module of :mod:`emsource.commands`.

Signals. Ctrl-C (SIGINT) exits with 130, SIGTERM and SIGHUP (sent by batch schedulers at the
wall-time limit and by a closing terminal) with 128 + the signal number (143, 129). All three
raise an exception in the running command, so its partial outputs are removed on the way out
(:func:`emsource.snapshot.atomic_output`); a repeated signal during that clean-up is ignored
(:mod:`emsource.interruption`).
SIGKILL cannot be caught: see :data:`emsource.commands.EXIT_SIGNAL_BASE` for what it may leave.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import signal
import sys

from . import __version__, commands, interruption

__all__ = ["main", "build_parser"]

EPILOG = ("Exit codes: 0 ok, 1 a check failed, 2 usage, 3 bad input, 4 output error, "
          "130 interrupted (Ctrl-C), 128 + N stopped by signal N (SIGTERM 143, SIGHUP 129).")


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        self.print_usage(sys.stderr)
        self.exit(commands.EXIT_USAGE, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="emsource",
        description="Electromagnetic stress-energy sources in 3+1 form: compute, check, post-process.",
        epilog=EPILOG,
    )
    parser.add_argument("--version", action="version", version=f"emsource {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", required=True,
                                       parser_class=_Parser)
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda m: m.name):
        if not info.name.startswith("_"):
            importlib.import_module(f"{commands.__name__}.{info.name}").register(subparsers)
    return parser


def _install_handlers(previous: dict):
    """Install the stop-request handlers, recording each replaced handler in ``previous`` as it
    goes: a signal may arrive between two installations, and what was installed must still be
    restored."""
    for signum in interruption.SIGNALS:
        try:
            previous[signum] = signal.signal(signum, interruption.handle)
        except (ValueError, OSError):  # not the main thread: leave the signals alone
            return


def main(argv=None) -> int:
    previous = {}
    try:
        try:
            # Inside the try: a SIGINT that arrives after the first handler is installed but
            # before the last one raises here, and must still end as "interrupted" (exit 130),
            # not as a process killed by the signal (seen under load as return code -2).
            _install_handlers(previous)
            # Imported after the handlers: it loads numba and NumPy (about a second), during
            # which a Ctrl-C must already end the command cleanly.
            from .commands._compile_notice import compile_notice

            parser = build_parser()
            args = parser.parse_args(argv)
            try:
                with compile_notice():  # one line on stderr when kernels compile (first use)
                    code = int(args.run(args))
            except Exception:
                # A stop request raised inside a library's callback may come out as the
                # library's own error (h5py turns it into a TypeError inside a type-conversion
                # callback, seen in CI): with a request pending, it is the stop.
                interruption.check()
                raise
            interruption.check()  # a request no checkpoint saw: the outputs are complete
            return code
        except KeyboardInterrupt:
            print("emsource: interrupted; partial outputs removed", file=sys.stderr)
            return commands.EXIT_INTERRUPTED
        except interruption.Terminated as stop:
            name = signal.Signals(stop.signum).name
            print(f"emsource: stopped by {name}; partial outputs removed", file=sys.stderr)
            return commands.EXIT_SIGNAL_BASE + stop.signum
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)
        interruption.reset()


if __name__ == "__main__":
    sys.exit(main())
