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
- Vector width is LLVM's choice for the host (256-bit on the Intel CPUs with 512-bit vectors
  this was first measured on, where LLVM prefers 256; 512-bit on an AMD Zen 4, LLVM target
  ``znver4``); a kernel whose loops measured faster with 512-bit vectors asks for them in its
  parallel loop's body with :func:`prefer_512_bit_vectors` (per loop body, not per process).

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
import threading

import numba
import numpy as np
from numba.core import types
from numba.extending import intrinsic, overload

__all__ = ["FASTMATH_FLAGS", "grid_kernel", "point_function", "search_kernel", "tree_stamp",
           "install_tree_stamp", "KERNEL_DIRECTORY", "call_sharing_layouts", "shared_dispatcher",
           "specialisations", "prefer_512_bit_vectors", "PREFERRED_WIDTH_ATTRIBUTE"]

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


def _grid_options():
    return dict(cache=True, parallel=True, nogil=True, fastmath=set(FASTMATH_FLAGS),
                error_model="numpy")


def grid_kernel(function):
    """Compile ``function`` as a parallel, disk-cached grid kernel (lazily, per signature)."""
    return numba.njit(**_grid_options())(function)


#: The LLVM function attribute that sets a function's vector width
#: (:func:`prefer_512_bit_vectors`).
PREFERRED_WIDTH_ATTRIBUTE = "prefer-vector-width"


def prefer_512_bit_vectors():
    """Compile the function that calls this (a kernel's ``prange`` body: Numba compiles it as a
    function of its own) for 512-bit vectors. No run-time effect; a no-op in plain Python (the
    operation counter of ``benchmarks/constraint_flops.py`` runs kernels uncompiled).

    LLVM's x86 back end takes the vector width of its loop vectoriser per function, from the
    function attribute ``"prefer-vector-width"``; without one, a CPU with 512-bit registers gets
    256-bit code (LLVM's tuning for these CPUs, where 512-bit instructions may lower the clock).
    Numba sets that width once per process, for every kernel, through ``NUMBA_CPU_FEATURES``.
    This call writes the attribute on the one function whose lowering it is part of (it is
    inlined there), so that a kernel measured faster with wide vectors gets them and the others
    keep the default. On a CPU without 512-bit vectors the preference is a cap that the
    hardware does not reach and LLVM keeps its widest legal width (LLVM's X86Subtarget, from
    memory; ``tests/test_vector_width.py`` checks it on the machine it runs on). llvmlite
    accepts only a fixed list of attribute keywords, so the string attribute enters its
    attribute set through ``set.add``; the same test reads it back from the compiled IR.
    """


_WIDTH_512 = f'"{PREFERRED_WIDTH_ATTRIBUTE}"="512"'


@intrinsic
def _mark_512_bit_vectors(typingctx):
    def codegen(context, builder, signature, arguments):
        set.add(builder.function.attributes, _WIDTH_512)
        return context.get_dummy_value()

    return types.none(), codegen


@overload(prefer_512_bit_vectors, inline="always")
def _prefer_512_bit_vectors_compiled():
    # Inlined into the caller's Numba IR, so that the intrinsic is lowered into the caller.
    def implementation():
        _mark_512_bit_vectors()

    return implementation


# ------------------------------------------------------------------ one specialisation per layout
#
# Numba compiles a kernel once per tuple of argument types, and an array's type holds its layout:
# "C" or "F" when NumPy calls it C- or Fortran-contiguous, else "A" (any strides), and whether it
# is read-only. A kernel called with caller data in many layouts (transposed snapshot views, ghost
# zones sliced off, one field stored differently from the others, a read-only memory map)
# therefore compiled once per mix, about a minute each for the conservation kernels.
# call_sharing_layouts types the caller's inputs of one call alike: all read-only "C" when every
# one is C-contiguous, else all read-only "A". It compiles that signature into a dispatcher of its
# own, built with an explicit signature list (Numba then disables compilation at call time), and
# calls it: Numba converts a C or writable array to the declared read-only "A" type without
# compiling (a safe conversion; the unboxed array structure is the same for every layout, so the
# call costs what an exact match costs, measured in benchmarks/bench_shared_layouts.py). Arrays
# the kernel writes keep their exact types, so a C-ordered work or output array keeps its
# vectorised stores.

_SHARED_LOCK = threading.Lock()
#: (kernel's Python function, layout, argument key) -> a dispatcher compiled for one signature.
_SHARED = {}
#: (kernel's Python function, signature) -> that dispatcher (keys that differ only in ways Numba
#: does not type, such as a Python int against a NumPy int64, share it).
_SHARED_BY_SIGNATURE = {}


def _argument_key(arguments, inputs):
    """What Numba's type of each argument depends on, the layout of ``inputs`` left out (one
    loop, plain attributes: about 0.3 us per argument, measured)."""
    key = []
    for position, value in enumerate(arguments):
        if type(value) is np.ndarray:
            flags = value.flags
            if position in inputs:
                key.append((value.dtype, value.ndim, flags.aligned))
            else:
                key.append((value.dtype, value.ndim, flags.c_contiguous, flags.f_contiguous,
                            flags.writeable, flags.aligned))
        else:
            key.append(type(value))
    return tuple(key)


def _shared_signature(arguments, inputs, layout):
    signature = []
    for position, value in enumerate(arguments):
        kind = numba.typeof(value)
        if position in inputs:
            kind = types.Array(kind.dtype, kind.ndim, layout, readonly=True, aligned=kind.aligned)
        signature.append(kind)
    return tuple(signature)


def shared_dispatcher(kernel, arguments, inputs):
    """The dispatcher that :func:`call_sharing_layouts` calls for these arguments (compiled or
    loaded from Numba's cache on first need; Numba converts the arguments to its one signature)."""
    layout = "C" if all(arguments[p].flags.c_contiguous for p in inputs) else "A"
    key = (kernel.py_func, layout, _argument_key(arguments, inputs))
    shared = _SHARED.get(key)
    if shared is None:
        with _SHARED_LOCK:
            shared = _SHARED.get(key)
            if shared is None:
                signature = _shared_signature(arguments, inputs, layout)
                shared = _SHARED_BY_SIGNATURE.get((kernel.py_func, signature))
                if shared is None:
                    shared = numba.njit([signature], **_grid_options())(kernel.py_func)
                    _SHARED_BY_SIGNATURE[(kernel.py_func, signature)] = shared
                _SHARED[key] = shared
    return shared


def call_sharing_layouts(kernel, arguments, inputs):
    """Call the grid kernel ``kernel`` with ``arguments``, typing the arrays at the positions
    ``inputs`` (arrays the kernel only reads) by their dtype and dimension alone.

    All of them become read-only "C" arrays if every one of them is C-contiguous, else read-only
    "A" arrays, so that every mix of strided (and read-only) caller inputs shares one compiled
    specialisation per dtype and per type of the other arguments. Returns the kernel's result.
    """
    return shared_dispatcher(kernel, arguments, inputs)(*arguments)


def specialisations(kernel):
    """The argument types of every compiled specialisation of ``kernel`` in this process: its own
    (compiled lazily at call time) and those of :func:`call_sharing_layouts`."""
    found = list(kernel.signatures)
    with _SHARED_LOCK:
        shared = [d for (function, _), d in _SHARED_BY_SIGNATURE.items()
                  if function is kernel.py_func]
    for dispatcher in shared:
        found.extend(dispatcher.signatures)
    return found


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

