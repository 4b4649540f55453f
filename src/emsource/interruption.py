"""Stop requests from signals: SIGINT, SIGTERM and SIGHUP end a command cleanly.

:mod:`emsource.cli` installs :func:`handle` for the three signals. The handler records the
signal and raises at once (``KeyboardInterrupt`` for SIGINT, :class:`Terminated` otherwise), so
that partial outputs are removed on the way out. Python may swallow an exception raised in a
signal handler when the handler happens to run inside a finaliser or a weak-reference callback;
the recorded request is therefore checked again by :func:`check` at safe points (every slab,
and just before an output is renamed into place), so a stop request is never lost.

This module imports nothing heavy: the command line installs the handlers before NumPy, h5py
and the kernels are loaded.
"""

from __future__ import annotations

import signal

__all__ = ["Terminated", "SIGNALS", "handle", "check", "pending", "reset"]

SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)
_pending = None


class Terminated(BaseException):
    """SIGTERM or SIGHUP arrived: unwinds like KeyboardInterrupt (partial outputs removed)."""

    def __init__(self, signum):
        super().__init__(signum)
        self.signum = signum


def _exception(signum):
    return KeyboardInterrupt() if signum == signal.SIGINT else Terminated(signum)


def _in_finaliser(frame) -> bool:
    """Whether the interrupted Python frame is a finaliser or a weak-reference callback, where
    Python would print and swallow an exception instead of propagating it."""
    if frame is None:
        return False
    code = frame.f_code
    return code.co_name == "__del__" or code.co_filename.endswith(("weakref.py", "_weakrefset.py"))


def handle(signum, frame):
    """Signal handler: record the request, ignore repeats during the clean-up, raise (unless
    the interrupted frame would swallow the exception: then :func:`check` raises it)."""
    global _pending
    if _pending is None:
        _pending = signum
    for other in SIGNALS:
        signal.signal(other, signal.SIG_IGN)
    if not _in_finaliser(frame):
        raise _exception(_pending)


def pending():
    """The signal number of a recorded stop request, or None."""
    return _pending


def check():
    """Raise the recorded stop request, if any (a no-op otherwise)."""
    if _pending is not None:
        raise _exception(_pending)


def reset():
    """Forget a recorded request (the command line does this when it returns)."""
    global _pending
    _pending = None
