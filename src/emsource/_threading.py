"""Calls of parallel kernels from several Python threads at once.

The kernels release the GIL, so an application may call them from several threads. Numba runs
their parallel loops on one of three threading layers: "tbb" and "omp" accept concurrent
launches, "workqueue" (the fallback where neither TBB nor an OpenMP runtime is found) does
not: it aborts the whole process (measured: exit code 134). Numba's documentation,
"The Threading Layers", lists which layer is thread-safe. On a thread-safe layer this module
costs one attribute test per call; on "workqueue" it serialises the kernel calls with a lock,
so concurrent calls are correct, one after another.
"""

from __future__ import annotations

import contextlib
import threading

__all__ = ["kernel_call", "THREAD_SAFE_LAYERS"]

#: Numba threading layers that accept parallel launches from several threads at once.
THREAD_SAFE_LAYERS = ("tbb", "omp")

_NO_GUARD = contextlib.nullcontext()
_LOCK = threading.RLock()  # re-entrant: an error path may launch a search inside a guarded call


class _State:
    thread_safe = False  # unknown until a parallel kernel has run in this process


def _layer_is_thread_safe() -> bool:
    import numba

    try:
        layer = numba.threading_layer()
    except ValueError:  # no parallel kernel has run yet: the layer is not chosen
        return False
    _State.thread_safe = layer in THREAD_SAFE_LAYERS
    return _State.thread_safe


def kernel_call():
    """A context manager to wrap every call of a parallel kernel in.

    Does nothing once the threading layer is known to be thread-safe; otherwise holds a
    process-wide lock for the duration of the call (also for the very first call, before Numba
    has chosen its layer).
    """
    if _State.thread_safe or _layer_is_thread_safe():
        return _NO_GUARD
    return _LOCK
