"""The one place that owns Numba's compilation options.

Every kernel in this package is decorated with :func:`grid_kernel` (a parallel loop over the
grid), :func:`search_kernel` (a serial loop, for the error path) or :func:`point_function`
(scalar code inlined into those loops). Nothing else in the
package calls ``numba.njit`` directly.

Why these options:

- ``cache=True``: compiled machine code is stored on disk beside the source, so only the very
  first call of each signature compiles; later processes (tests, benchmarks) load it.
- ``FASTMATH_FLAGS`` is an explicit set *without* ``nnan`` and ``ninf``. With those two, LLVM
  may assume that no value is NaN or Inf and compiles ``np.isfinite`` to "true", which would
  silently delete the point checks that the kernels fold into their pass. Even without them,
  Numba's own ``math.isfinite`` (``x - x`` tested for NaN) is folded away by "reassoc":
  use :func:`emsource.kernels.point_checks.is_finite` instead.
- ``error_model="numpy"``: division by zero gives inf/nan like NumPy instead of raising,
  so the loop body has no Python-exception branch and can vectorise.
- Thread count is Numba's own (``NUMBA_NUM_THREADS``, ``numba.set_num_threads``).
"""

from __future__ import annotations

import numba

__all__ = ["FASTMATH_FLAGS", "grid_kernel", "point_function", "search_kernel"]

#: LLVM fast-math flags: contraction (FMA), reciprocal, reassociation, no signed zeros,
#: approximate functions. Deliberately no "nnan"/"ninf" (see module docstring).
FASTMATH_FLAGS = {"contract", "arcp", "reassoc", "nsz", "afn"}


def grid_kernel(function):
    """Compile ``function`` as a parallel, disk-cached grid kernel (lazily, per signature)."""
    return numba.njit(
        cache=True,
        parallel=True,
        nogil=True,
        fastmath=set(FASTMATH_FLAGS),
        error_model="numpy",
    )(function)


def search_kernel(function):
    """Compile ``function`` as a serial, disk-cached kernel (searches on the error path)."""
    return numba.njit(
        cache=True,
        nogil=True,
        fastmath=set(FASTMATH_FLAGS),
        error_model="numpy",
    )(function)


def point_function(function):
    """Compile ``function`` as scalar code that is always inlined into the calling kernel."""
    return numba.njit(
        cache=True,
        inline="always",
        fastmath=set(FASTMATH_FLAGS),
        error_model="numpy",
    )(function)
