"""A note on stderr when a command compiles kernels for this machine (first use), with the time.

Numba compiles each kernel for the argument types of its first call and stores the machine code
in its on-disk cache; a later run loads it. The first run of a command therefore spends
seconds (the sources) to minutes (the conservation kernels) compiling, which looked like a
hang. Numba announces every compilation that misses its cache as a "numba:compile" event
(cache loads raise none), so this listener sees exactly the compilations.
:func:`compile_notice` prints one line when the first emsource kernel starts compiling and one
with the total time when the command ends; a command whose kernels are all cached prints
nothing. ``emsource compile`` compiles the common signatures ahead.

Only where stderr is a terminal (common practice for progress notes): scripts, pipelines and
the test suite rely on a command that succeeds writing nothing to stderr, and on a failing
one writing exactly one line (its error).
"""

from __future__ import annotations

import contextlib
import sys
import time

from numba.core import event

__all__ = ["compile_notice", "CompileNotice"]

#: Module prefix of the kernels whose compilations are announced.
KERNEL_MODULES = "emsource.kernels"


class CompileNotice(event.Listener):
    """numba event listener: counts and times the top-level compilations of emsource kernels
    (nested ones, inlined point functions, are part of their kernel's time)."""

    def __init__(self, stream=None):
        self.stream = stream
        self.kernels = 0
        self.seconds = 0.0
        self._depth = 0
        self._started = None

    def _is_kernel(self, event):
        dispatcher = (event.data or {}).get("dispatcher")
        module = getattr(getattr(dispatcher, "py_func", None), "__module__", "") or ""
        return module.startswith(KERNEL_MODULES)

    def on_start(self, event):
        if not self._is_kernel(event):
            return
        if self._depth == 0:
            if self.kernels == 0:
                self._write("emsource: compiling kernels for this machine (first use; Numba "
                            "caches them for later runs) ...")
            self._started = time.perf_counter()
        self._depth += 1

    def on_end(self, event):
        if not self._is_kernel(event):
            return
        self._depth -= 1
        if self._depth == 0 and self._started is not None:
            self.kernels += 1
            self.seconds += time.perf_counter() - self._started
            self._started = None

    def summary(self) -> str:
        return (f"emsource: compiled {self.kernels} kernel specialisation"
                f"{'' if self.kernels == 1 else 's'} in {self.seconds:.1f} s")

    def _write(self, line):
        stream = self.stream or sys.stderr
        print(line, file=stream, flush=True)


@contextlib.contextmanager
def compile_notice(stream=None):
    """Within the block, announce compilations of emsource kernels on ``stream``, by default
    stderr if it is a terminal (else nothing is announced); on leaving the block (also by an
    exception), the total time, if anything compiled."""
    if stream is None:
        isatty = getattr(sys.stderr, "isatty", None)
        if isatty is None or not isatty():
            yield None
            return
        stream = sys.stderr
    listener = CompileNotice(stream)
    event.register("numba:compile", listener)
    try:
        yield listener
    finally:
        event.unregister("numba:compile", listener)
        if listener.kernels:
            listener._write(listener.summary())
