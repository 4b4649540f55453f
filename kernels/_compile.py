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

The disk cache and inlined point functions. Numba keys a cached kernel on the source of the
file that defines it; a kernel inlines point functions from other files of this folder
(``metric.py``, ``electromagnetic.py``, ...), and an edit there would leave the kernel's cache
entry looking valid: a stale kernel would run (seen during development, and it would happen
to a user who upgrades the package over an old cache). :func:`install_tree_stamp` therefore
adds a hash of every ``*.py`` file of this folder to the stamp of each kernel's cache entry,
so that any change here recompiles every kernel once.
"""

from __future__ import annotations

import hashlib
import os

import numba

__all__ = ["FASTMATH_FLAGS", "grid_kernel", "point_function", "search_kernel", "tree_stamp",
           "install_tree_stamp", "KERNEL_DIRECTORY"]

#: The folder of the kernels (installed as ``emsource.kernels``).
KERNEL_DIRECTORY = os.path.dirname(os.path.abspath(__file__))


def tree_stamp(directory: str = KERNEL_DIRECTORY) -> str:
    """SHA-256 over the names and contents of every ``*.py`` file in ``directory``."""
    digest = hashlib.sha256()
    for name in sorted(os.listdir(directory)):
        if name.endswith(".py"):
            digest.update(name.encode())
            with open(os.path.join(directory, name), "rb") as source:
                digest.update(source.read())
    return digest.hexdigest()


def install_tree_stamp() -> None:
    """Make Numba's cache stamp of every kernel in this folder include :func:`tree_stamp`.

    Each of Numba's cache locator classes gets a subclass that serves only files of this
    folder and returns (Numba's own stamp, the tree stamp); the subclasses are tried first.
    A cache entry whose stamp differs is recompiled and overwritten by Numba itself.
    """
    from numba.core import caching

    # The class is public from Numba 0.68 on, private before.
    impl = getattr(caching, "CacheImpl", None) or getattr(caching, "_CacheImpl")
    if getattr(impl, "_emsource_tree_stamp", None) is not None:
        return
    stamp = tree_stamp()
    stamped = []
    for base in impl._locator_classes:
        class TreeStampedLocator(base):
            @classmethod
            def from_function(cls, py_func, py_file):
                if os.path.dirname(os.path.abspath(py_file)) != KERNEL_DIRECTORY:
                    return None
                return super().from_function(py_func, py_file)

            def get_source_stamp(self):
                return (super().get_source_stamp(), stamp)

        TreeStampedLocator.__name__ = TreeStampedLocator.__qualname__ = f"TreeStamped{base.__name__}"
        stamped.append(TreeStampedLocator)
    impl._locator_classes = stamped + list(impl._locator_classes)
    impl._emsource_tree_stamp = stamp


install_tree_stamp()

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
