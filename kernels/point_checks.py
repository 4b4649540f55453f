"""Scalar validity tests that survive the package's fast-math flags."""

from __future__ import annotations

import math

from ._compile import point_function

__all__ = ["is_finite", "is_nan"]


@point_function
def is_finite(x):
    """True for finite ``x``, False for NaN and +-Inf, also under fast-math.

    Numba's ``math.isfinite`` / ``np.isfinite`` compute ``x - x`` and test it for NaN; with the
    "reassoc" flag LLVM folds ``x - x`` to 0 and the test becomes "always true" (measured here:
    NaN in E went undetected). A comparison with infinity cannot be folded unless "nnan" or
    "ninf" is set, which ``_compile.FASTMATH_FLAGS`` never does. Use this in every kernel.
    """
    return abs(x) < math.inf


@point_function
def is_nan(x):
    """True for NaN only, also under fast-math (a comparison, as in :func:`is_finite`: NaN is
    the one value not ordered against infinity)."""
    return not (abs(x) <= math.inf)
