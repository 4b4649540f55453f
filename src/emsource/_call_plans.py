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
``str``; unaligned arrays are keyed apart from aligned ones (compiled code is typed by
alignment). Everything else validates in full.

The steps of a public call with a plan (:func:`call_signature`, :meth:`PlanCache.get`,
:func:`planned_outputs`; after a full validation :meth:`FlatPlan.of` and :meth:`PlanCache.put`)
are the same for every function that has plans; what a function keeps besides the views (metric
indices, kernel constants, the compiled dispatcher of a driver over spans) is its plan's
``extra``. Which calls have plans: DEVELOPERS.md, "Small calls".
"""

from __future__ import annotations

import numpy as np

from ._arguments import output_memory
from .grid_arrays import rows_of

__all__ = ["FlatPlan", "PlanCache", "signature", "call_signature", "planned_outputs",
           "PADDED_ROWS", "PADDED_SPAN"]

_NDARRAY = np.ndarray


def signature(arrays: tuple, options: tuple):
    """The key under which a call's plan is stored: the dtype, each array's shape (with its
    strides and alignment where it is not C-contiguous and aligned), then the
    options; or None where the call cannot have a plan: an argument that is not exactly an
    ndarray or not of the first array's dtype object, or an option that is not exactly a
    ``str``. (A call that allocates its outputs passes only its inputs: its key
    is shorter than that of a call with ``out``, so the two never meet.)

    The strides of a C-contiguous array are not in its key: they are fixed by its shape and
    dtype (up to axes of length 1, which no view or loop depends on). The dtypes are compared by
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
        flags = a.flags
        # The common case, C-contiguous and aligned, is keyed by its shape; anything else by
        # shape, strides and alignment (compiled code is typed by alignment): a padded grid
        # function, perhaps (the plan knows). Writeability is not in the key: a read-only
        # ``out`` meets the plan of a good call, and the per-call check refuses it.
        key.append(a.shape if flags.c_contiguous and flags.aligned
                   else (a.shape, a.strides, flags.aligned))
    for option in options:
        if type(option) is not str:
            return None
        key.append(option)
    return tuple(key)


def call_signature(inputs: tuple, out, kind, options: tuple):
    """The :func:`signature` of a call with arrays ``inputs`` and ``out``: ``out`` None (the
    call allocates: the inputs alone are the key), a ``kind`` (a NamedTuple class of outputs)
    or a plain tuple of as many arrays, or, where ``kind`` is None, one array. None for any
    other ``out`` (the full path says what is wrong with it). The key of a call with ``out`` is
    longer than that of one without, so the two never meet.
    """
    if out is None:
        return signature(inputs, options)
    if kind is None:
        return signature(inputs + (out,), options)
    if (type(out) is kind or type(out) is tuple) and len(out) == len(kind._fields):
        return signature(inputs + out, options)  # a tuple (the sum of two tuples)
    return None


def planned_outputs(plan, function: str, inputs: tuple, input_names: tuple, out, kind):
    """The outputs and the kernel views of a call whose signature has ``plan``: ``(result,
    views)``, or None where a padded array has no block from the allocator (then the call takes
    the full path; nothing has been done).

    ``result`` is new arrays of the plan's output shapes where ``out`` is None, else ``out``
    as a ``kind`` (or the one array where ``kind`` is None), checked by
    :func:`emsource._arguments.output_memory` (writeable, apart from the inputs and from one
    another): the checks that depend on memory run on every call.
    """
    if out is None:
        outputs = tuple([np.empty(shape, plan.dtype) for shape in plan.output_shapes])
    elif kind is None:
        outputs = (out,)
    else:
        outputs = out if type(out) is kind else kind(*out)
    views = plan.views(inputs + outputs)
    if views is None:
        return None
    if kind is None:
        if out is not None:
            output_memory(function, ("",), outputs, input_names, inputs)
        return outputs[0], views
    if out is None:
        outputs = kind(*outputs)
    else:
        output_memory(function, kind._fields, outputs, input_names, inputs)
    return outputs, views


_RAVEL = np.ndarray.ravel
#: :attr:`FlatPlan.view_shapes` where every view is its C-contiguous array as one line.
_ALL_LINES = ("all lines",)

#: The entry of :attr:`FlatPlan.view_shapes` for a padded grid function's block.
PADDED_ROWS = "padded rows"
#: The entry for a padded grid function's block seen as one line of memory (a span, for the
#: drivers over spans, :func:`emsource._arguments.driver_spans`).
PADDED_SPAN = "padded span"


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
        1-D view ((npoints,) of a scalar, or a whole array as one span), taken with ``ravel``
        (a third of the time of a ``reshape``); :data:`PADDED_ROWS` or :data:`PADDED_SPAN` for
        a padded grid function. None where the kernel takes every array as it is.
    extra : tuple
        Whatever else the caller derived from the signature (metric component indices, the
        kernel's scalar constants, a compiled dispatcher), returned as it was stored.
    output_shapes : tuple
        Shapes of the outputs a call without ``out`` allocates (C order), the last
        ``len(output_shapes)`` arrays of the call.
    """

    __slots__ = ("grid", "dtype", "view_shapes", "extra", "output_shapes")

    def __init__(self, grid, dtype, view_shapes, extra, output_shapes=()):
        self.grid = grid
        self.dtype = dtype
        self.view_shapes = view_shapes
        self.extra = extra
        self.output_shapes = output_shapes

    @classmethod
    def of(cls, arrays, views, grid, dtype, extra, outputs: int = 0):
        """The plan of a fully validated call, or None where its views are not plain reshapes
        of C-contiguous ``arrays`` or blocks of padded ones (then every call validates in full).

        ``arrays`` are the call's arrays, the last ``outputs`` of them its outputs; ``views``
        the kernel views the full path built from them (same order): each the array itself or
        a view of all of it in another shape, both C-contiguous, i.e. its reshape
        (``_arguments.kernel_views`` reshapes C-contiguous arrays whole or passes them as they
        are; ``_arguments.driver_spans`` reshapes those views to one line), or the allocator's
        block of a padded array, as it is or as one line. Comparing data addresses would cost
        about 1 us per array (``ctypes``, ``__array_interface__``), more than this whole call
        saves; it is done only for a padded array's line (an object the full path made).
        """
        shapes = []
        for a, v in zip(arrays, views):
            if not (type(a) is _NDARRAY and a.dtype is dtype):
                return None
            if not a.flags.c_contiguous:
                rows = rows_of(a)
                if rows is None:  # padded, but not an array the allocator made
                    return None
                if v is rows:
                    shapes.append(PADDED_ROWS)
                elif (v.ndim == 1 and v.size == rows.size and v.dtype == rows.dtype
                      and v.ctypes.data == rows.ctypes.data):
                    shapes.append(PADDED_SPAN)
                else:
                    return None
                continue
            if not (v.flags.c_contiguous and v.size == a.size
                    and (v is a or v.base is a or (a.base is not None and v.base is a.base))):
                return None
            shapes.append(None if v.ndim == 1 else v.shape)
        whole = all(v is a for a, v in zip(arrays, views))
        output_shapes = tuple(a.shape for a in arrays[len(arrays) - outputs:]) if outputs else ()
        if whole:
            shapes = None
        elif all(shape is None for shape in shapes):
            shapes = _ALL_LINES  # every view the array as one line (``ravel``)
        else:
            shapes = tuple(shapes)
        return cls(tuple(grid), dtype, shapes, extra, output_shapes)

    def views(self, arrays):
        """The kernel views of ``arrays`` (which match the plan's signature): reshapes of
        C-contiguous arrays, so views that share their memory; the allocator's blocks of padded
        arrays; or the arrays themselves. None if a padded array has no block (then the call
        takes the full path)."""
        if self.view_shapes is None:
            return arrays
        if self.view_shapes is _ALL_LINES:
            return list(map(_RAVEL, arrays))  # about half the time of the loop below
        views = []
        for a, shape in zip(arrays, self.view_shapes):
            if shape is PADDED_ROWS or shape is PADDED_SPAN:
                block = rows_of(a)
                if block is None:
                    return None
                views.append(block if shape is PADDED_ROWS else block.ravel())
            else:
                views.append(a.ravel() if shape is None else a.reshape(shape))
        return views


class PlanCache:
    """Plans by signature, at most ``capacity`` of them (all dropped when full: a loop uses a
    handful of signatures, and a program that keeps making new ones gains nothing from them)."""

    def __init__(self, capacity: int = 64):
        self.capacity = capacity
        self._plans = {}
        #: The plan stored under a key (None: no key, or not stored; None is never a key).
        #: The dictionary's own method: a Python method around it costs 0.1-0.2 us per call.
        self.get = self._plans.get

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
