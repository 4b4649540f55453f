"""Validated call layouts, kept per argument signature so that a repeated call skips deriving
them again (not API).

On a small grid most of a public call's time is Python: checking shapes, strides and dtypes,
choosing the loop and building the kernel's views (about 9 of 15 us on an 8^3 grid, see the
README's "Speed"). Those decisions depend only on the *signature* of the arguments: each array's
exact type, shape, strides and dtype, and the options. An evolution loop calls with the same
signature every step, so the first call validates in full and stores what it derived (a
:class:`FlatPlan`), and later calls with an equal signature reuse it.

What a plan never holds: anything that depends on which memory an array holds or on its
values. Writeability, overlap of outputs with inputs or with one another
(:func:`emsource._arguments.output_memory`) and the point checks run on every call, plan or
not. Arrays are never keyed by ``id()`` (an id is reused by a later array). The padded grid
functions of :mod:`emsource.grid_arrays` are the one memory-dependent case: the kernel sees
each as its (ncomp, stride) block including the gaps, which must belong to the same allocation.
A plan records that such an array was one the allocator made (shape and strides in the key);
each call asks the allocator for that array's block again (:func:`emsource.grid_arrays.rows_of`,
an identity lookup), and takes the full path when it has none (a view the caller made).

Where a plan applies: every array exactly an ``ndarray`` (subclasses take the full path), of one
dtype, either C-contiguous (so each kernel view is a reshape, which for the same shape and
strides is always a view, never a copy) or an allocator's padded array, and the options plain
``str``. Everything else validates in full.
"""

from __future__ import annotations

import numpy as np

from .grid_arrays import rows_of

__all__ = ["FlatPlan", "PlanCache", "signature", "PADDED_ROWS"]

_NDARRAY = np.ndarray


def signature(arrays: tuple, options: tuple):
    """The key under which a call's plan is stored: the dtype, each array's shape, then the
    options; or None where the call cannot have a plan: an argument that is not exactly an
    ndarray, not C-contiguous or not of the first array's dtype object, or an option that is
    not exactly a ``str``. (A call that allocates its outputs passes only its inputs: its key
    is shorter than that of a call with ``out``, so the two never meet.)

    The strides are not in the key: a C-contiguous array's are fixed by its shape and dtype
    (up to axes of length 1, which no view or loop depends on). The dtypes are compared by
    identity (NumPy's built-in dtypes are singletons; an equal dtype that is another object
    takes the full path, which accepts it), not hashed (about 40 ns each).
    Built with a plain loop: a generator costs about a microsecond more per call.
    """
    first = arrays[0]
    if type(first) is not _NDARRAY:
        return None
    dtype = first.dtype
    key = [dtype]  # float32 and float64 calls of one shape do not displace each other
    for a in arrays:
        if type(a) is not _NDARRAY or a.dtype is not dtype:
            return None
        # Not C-contiguous: a padded grid function, perhaps (the plan knows; the strides are
        # then part of the key, a tuple of tuples where a C-contiguous array has its shape).
        key.append(a.shape if a.flags.c_contiguous else (a.shape, a.strides))
    for option in options:
        if type(option) is not str:
            return None
        key.append(option)
    return tuple(key)


#: The entry of :attr:`FlatPlan.view_shapes` for a padded grid function's block.
PADDED_ROWS = "padded rows"


class FlatPlan:
    """What a full validation derived for C-contiguous arrays on the flat loop.

    Attributes
    ----------
    grid : tuple of int
        Points per grid axis.
    dtype : numpy.dtype
        The one float dtype of every array.
    view_shapes : tuple or None
        Shape of each array's kernel view, in argument order: (ncomp, npoints), or None for a
        scalar's (npoints,), taken with ``ravel`` (a third of the time of a ``reshape``). None
        where the kernel takes every array as it is.
    extra : tuple
        Whatever else the caller derived from the signature (metric component indices, the
        kernel's scalar constants), returned as it was stored.
    """

    __slots__ = ("grid", "dtype", "view_shapes", "extra")

    def __init__(self, grid, dtype, view_shapes, extra):
        self.grid = grid
        self.dtype = dtype
        self.view_shapes = view_shapes
        self.extra = extra

    @classmethod
    def of(cls, arrays, views, grid, dtype, extra):
        """The plan of a fully validated call, or None where its views are not plain reshapes
        of C-contiguous ``arrays`` (then every call validates in full).

        ``arrays`` are the call's arrays, ``views`` the kernel views the full path built from
        them (same order): each the array itself or a view of all of it in another shape, both
        C-contiguous, i.e. its reshape (``_arguments.kernel_views`` reshapes C-contiguous arrays
        whole or passes them as they are). Comparing data addresses would cost about 1 us per
        array (``ctypes``, ``__array_interface__``), more than this whole call saves.
        """
        shapes = []
        for a, v in zip(arrays, views):
            if not (type(a) is _NDARRAY and a.dtype is dtype):
                return None
            if not a.flags.c_contiguous:
                if rows_of(a) is not v:  # padded, but not an array the allocator made
                    return None
                shapes.append(PADDED_ROWS)
                continue
            if not (v.flags.c_contiguous and v.size == a.size
                    and (v is a or v.base is a or (a.base is not None and v.base is a.base))):
                return None
            shapes.append(None if v.ndim == 1 else v.shape)
        whole = all(v is a for a, v in zip(arrays, views))
        return cls(tuple(grid), dtype, None if whole else tuple(shapes), extra)

    def views(self, arrays):
        """The kernel views of ``arrays`` (which match the plan's signature): reshapes of
        C-contiguous arrays, so views that share their memory; the allocator's blocks of padded
        arrays; or the arrays themselves. None if a padded array has no block (then the call
        takes the full path)."""
        if self.view_shapes is None:
            return arrays
        views = []
        for a, shape in zip(arrays, self.view_shapes):
            if shape is PADDED_ROWS:
                block = rows_of(a)
                if block is None:
                    return None
                views.append(block)
            else:
                views.append(a.ravel() if shape is None else a.reshape(shape))
        return views


class PlanCache:
    """Plans by signature, at most ``capacity`` of them (all dropped when full: a loop uses a
    handful of signatures, and a program that keeps making new ones gains nothing from them)."""

    def __init__(self, capacity: int = 64):
        self.capacity = capacity
        self._plans = {}

    def get(self, key):
        """The plan stored under ``key`` (None: no key, or not stored)."""
        if key is None:
            return None
        return self._plans.get(key)

    def put(self, key, plan) -> None:
        if key is None or plan is None:
            return
        if len(self._plans) >= self.capacity:
            self._plans.clear()
        self._plans[key] = plan

    def clear(self) -> None:
        self._plans.clear()

    def __len__(self) -> int:
        return len(self._plans)
