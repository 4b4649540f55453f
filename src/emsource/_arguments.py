"""Argument checking and layout handling shared by the public wrappers (not API).

Everything here works on views: component-last data become component-first views, a full
(3, 3) metric becomes a (9, ...) view, 1D and 2D grids get trailing length-1 axes. No function
copies an array; where a view is impossible the caller gets an error that says so.
"""

from __future__ import annotations

import math

import numpy as np

from ._threading import kernel_call
from .errors import GridPointError
from .grid_arrays import empty_line_aligned, rows_of
from .input_forms import FORMS
from .kernels import input_checks
from .kernels._compile import call_sharing_layouts
from .kernels.vector_loops import (ALIASING_BYTES, LINE_STEP_ROW_BYTES, STREAMING_ROW_BYTES,
                                   line_as_strips)

#: Flat indices, into a full (3, 3) block seen as 9, of the packed (xx, xy, xz, yy, yz, zz).
FULL_METRIC_INDEX = (0, 1, 2, 4, 5, 8)
PACKED_METRIC_INDEX = (0, 1, 2, 3, 4, 5)


def _owner(a: np.ndarray):
    """The array that owns ``a``'s memory, or None when that is not a plain owning ndarray."""
    owner = a if a.base is None else a.base
    return owner if type(owner) is np.ndarray and owner.base is None else None


LAYOUTS = ("component_first", "component_last")
#: Values of the ``field_index`` option: the names of the input forms.
FIELD_INDICES = tuple(FORMS)
#: float64 first: ``in`` tests identity before equality, and NumPy's built-in dtypes are
#: singletons, so the common case costs no dtype comparison (about 0.15 us each).
FLOAT_DTYPES = (np.dtype(np.float64), np.dtype(np.float32))


def choice(function: str, argument: str, value, allowed) -> None:
    if value not in allowed:
        raise ValueError(f"{function}: {argument} must be one of {tuple(allowed)}, found {value!r}")


def positive_number(argument: str, value) -> float:
    """``value`` as a float, or a ValueError naming ``argument`` unless it is positive and finite."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{argument} must be a positive finite number, found {value!r}") from None
    if not (math.isfinite(number) and number > 0):
        raise ValueError(f"{argument} must be a positive finite number, found {value!r}")
    return number


def float_array(function: str, argument: str, value) -> np.ndarray:
    """``value`` as an ndarray of float32 or float64 (no conversion, no copy)."""
    if not isinstance(value, np.ndarray):
        raise TypeError(
            f"{function}: {argument} must be a NumPy array of float32 or float64, "
            f"found {type(value).__name__}"
        )
    if value.dtype not in FLOAT_DTYPES:
        raise TypeError(
            f"{function}: {argument} must have dtype float32 or float64, found {value.dtype}"
        )
    return value


def common_dtype(function: str, names: tuple, arrays: tuple) -> np.dtype:
    """The one dtype all ``arrays`` share; mixed dtypes are an error (nothing is cast silently)."""
    dtype = arrays[0].dtype
    for a in arrays:
        if a.dtype is not dtype and a.dtype != dtype:  # identity first: dtypes are singletons
            found = ", ".join(f"{name}: {a.dtype}" for name, a in zip(names, arrays))
            raise TypeError(f"{function}: all inputs must share one float dtype, found {found}")
    return dtype


def component_first(array: np.ndarray, ncomp_axes: int, layout: str) -> np.ndarray:
    """A component-first view of ``array`` (its last ``ncomp_axes`` axes moved to the front)."""
    if layout == "component_first" or ncomp_axes == 0:
        return array
    first = tuple(range(array.ndim - ncomp_axes, array.ndim))
    return np.moveaxis(array, first, tuple(range(ncomp_axes)))


def shape_for(grid: tuple, components: tuple, layout: str) -> tuple:
    """The user-facing shape of an array with ``components`` on ``grid`` in ``layout``."""
    return components + grid if layout == "component_first" else grid + components


def vector(function: str, argument: str, value, grid, layout: str) -> np.ndarray:
    """A (3, *grid) component-first view of a vector argument."""
    a = component_first(float_array(function, argument, value), 1, layout)
    if a.shape != (3,) + grid:
        raise ValueError(
            f"{function}: {argument} must have shape {shape_for(grid, (3,), layout)}, "
            f"found {value.shape}"
        )
    return a


def scalar(function: str, argument: str, value, grid) -> np.ndarray:
    a = float_array(function, argument, value)
    if a.shape != grid:
        raise ValueError(f"{function}: {argument} must have shape {grid}, found {a.shape}")
    return a


def grid_of(function: str, argument: str, value, layout: str) -> tuple:
    """The grid shape implied by a vector argument (3, *grid) or (*grid, 3)."""
    a = float_array(function, argument, value)
    if not 2 <= a.ndim <= 4:
        raise ValueError(
            f"{function}: {argument} must be a vector field on a 1-3D grid, "
            f"shape {shape_for(('*grid',), (3,), layout)}, found {a.shape}"
        )
    grid = a.shape[1:] if layout == "component_first" else a.shape[:-1]
    if (a.shape[0] if layout == "component_first" else a.shape[-1]) != 3:
        raise ValueError(
            f"{function}: {argument} must have 3 components on the "
            f"{'first' if layout == 'component_first' else 'last'} axis, found shape {a.shape}"
        )
    return tuple(grid)


def spatial_metric(function: str, value, grid, layout: str):
    """``gamma`` as a component-first view and the six indices of (xx, xy, xz, yy, yz, zz).

    Packed (6, *grid) gives the view itself; full (3, 3, *grid) is reshaped to a (9, *grid)
    view and read through its upper triangle (the lower one is not looked at).
    """
    a = float_array(function, "gamma", value)
    packed = shape_for(grid, (6,), layout)
    full = shape_for(grid, (3, 3), layout)
    if a.shape == packed:
        return component_first(a, 1, layout), PACKED_METRIC_INDEX
    if a.shape == full:
        a = component_first(a, 2, layout)
        try:
            return np.reshape(a, (9,) + grid, copy=False), FULL_METRIC_INDEX
        except ValueError:
            raise ValueError(
                f"{function}: gamma of shape {value.shape} with strides {value.strides} cannot be "
                "seen as one component axis without a copy; pass the packed (6, ...) form or "
                "make the two component axes contiguous with each other"
            ) from None
    raise ValueError(
        f"{function}: gamma must have shape {packed} (packed xx,xy,xz,yy,yz,zz) or {full}, "
        f"found {a.shape}"
    )


def outputs_or_new(function: str, kind, out, shapes: tuple, component_axes: tuple, dtype,
                   input_names: tuple, inputs: tuple):
    """The outputs of ``function`` as a ``kind`` (a NamedTuple class): new arrays of ``shapes``
    and ``dtype`` when ``out`` is None, else ``out`` (a ``kind`` or a plain tuple of as many
    arrays) checked by :func:`outputs` (component-first layout)."""
    if out is None:
        empty = result_allocator(shapes[0], dtype)
        return kind(*(empty(shape, dtype) for shape in shapes))
    if not isinstance(out, tuple) or len(out) != len(kind._fields):
        article = "an" if kind.__name__[0] in "AEIOU" else "a"
        raise TypeError(f"{function}: out must be {article} {kind.__name__} or a tuple "
                        f"({', '.join(kind._fields)}), found {type(out).__name__}")
    result = kind(*out)
    outputs(function, kind._fields, result, shapes, component_axes, dtype, "component_first",
            input_names, inputs)
    return result


def outputs(function: str, names: tuple, values: tuple, shapes: tuple, component_axes: tuple,
            dtype, layout: str, input_names: tuple, inputs: tuple) -> list:
    """Check caller-supplied output arrays and return their component-first views.

    Each must be an ndarray of the expected shape and dtype (checked here, in order), and
    writeable and apart from every input and from the other outputs (:func:`output_memory`).
    """
    views = []
    # Written as plain loops with the messages built only on error: this runs on every call of
    # an evolution loop, and generator expressions and f-strings here cost microseconds.
    for name, value, shape, ncomp in zip(names, values, shapes, component_axes):
        if type(value) is not np.ndarray and not isinstance(value, np.ndarray):
            label = f"out {name}" if name else "out"  # a function with one output names none
            raise TypeError(f"{function}: {label} must be a NumPy array, found {type(value).__name__}")
        if value.shape != shape or (value.dtype is not dtype and value.dtype != dtype):
            label = f"out {name}" if name else "out"
            raise ValueError(
                f"{function}: {label} must have shape {shape} and dtype {dtype}, "
                f"found shape {value.shape} and dtype {value.dtype}"
            )
        views.append(value if ncomp == 0 or layout == "component_first"
                     else component_first(value, ncomp, layout))
    output_memory(function, names, values, input_names, inputs)
    return views


_NDARRAY = np.ndarray  # a module global: about 25 ns less per test than np.ndarray


def output_memory(function: str, names: tuple, values: tuple, input_names: tuple,
                  inputs: tuple) -> None:
    """Raise unless every output array is writeable and shares no memory with any input
    (inputs are never overwritten) or with another output.

    These are the checks that depend on which memory the arrays hold, not on their shapes,
    strides and dtypes: they run on every call, also where a call reuses a validated layout
    (:mod:`emsource._call_plans`). They are cheap in the common case: arrays that own their
    memory, or views of them, cannot overlap arrays with another owner. Anything else (views
    of one array, arrays over foreign buffers) goes to ``np.may_share_memory``.
    """
    # The usual case of an evolution loop, decided first: every array a plain ndarray that is
    # its own owner (base None), the outputs writeable and none of them the same object as an
    # input or another output; then no two can share memory. Anything else: the loop below.
    for a in inputs:
        if a.base is not None or type(a) is not _NDARRAY:
            break
    else:
        for value in values:
            if value.base is not None or type(value) is not _NDARRAY or not value.flags.writeable:
                break
        else:
            objects = set(map(id, inputs))  # ids of arrays alive now, within this call only
            distinct_inputs = len(objects)
            objects.update(map(id, values))
            if len(objects) == distinct_inputs + len(values):
                return
    input_owners = [_owner(a) for a in inputs]
    inputs_owned = True  # every input over memory of a plain owning ndarray
    for o in input_owners:
        if o is None:
            inputs_owned = False
    output_owners = []
    for name, value in zip(names, values):
        if not value.flags.writeable:
            label = f"out {name}" if name else "out"
            raise ValueError(f"{function}: {label} is read-only")
        owner = _owner(value)
        output_owners.append(owner)
        shared = owner is None or not inputs_owned
        if not shared:
            for o in input_owners:
                if o is owner:
                    shared = True
        if shared:
            for input_name, a in zip(input_names, inputs):
                if np.may_share_memory(value, a):
                    label = f"out {name}" if name else "out"
                    raise ValueError(
                        f"{function}: {label} overlaps input {input_name}; "
                        "inputs are never overwritten"
                    )
    if len(values) > 1:
        _outputs_apart(function, names, values, output_owners)


def _outputs_apart(function: str, names: tuple, values: tuple, owners: list) -> None:
    """Raise if two output arrays share memory (S_i a view into S_ij): the kernel would write
    one over the other. Arrays that own their memory, each its own, are apart by construction
    (the common case, decided without a pairwise test); anything else goes to
    ``np.may_share_memory`` (bounds only: no false negatives)."""
    distinct = set()
    for o in owners:
        if o is None:
            break
        distinct.add(id(o))
    else:
        if len(distinct) == len(owners):
            return
    for m in range(len(values)):
        for n in range(m):
            if owners[m] is not None and owners[n] is not None and owners[m] is not owners[n]:
                continue
            if np.may_share_memory(values[m], values[n]):
                raise ValueError(f"{function}: out {names[m]} overlaps out {names[n]}; "
                                 "each output needs memory of its own")


_SMALLEST_NORMAL = {dtype: dtype.type(np.finfo(dtype).tiny) for dtype in FLOAT_DTYPES}


def smallest_normal(dtype):
    """The smallest normal number of ``dtype`` (float32 or float64), as a scalar of that dtype.

    The kernels compare energy densities with it to detect underflow; a table lookup, because
    ``np.finfo`` costs a few tenths of a microsecond on every call of an evolution loop.
    """
    return _SMALLEST_NORMAL[dtype]


_KERNEL_CONSTANTS = {}


def kernel_constants(form: int, dtype, prefactor: float) -> tuple:
    """(form, coef, half, tiny, pivot floor): the scalar arguments of the point-physics kernels,
    in ``dtype`` (float32 data stay float32). Built once per (form, dtype, prefactor): making
    the four NumPy scalars costs about a microsecond, a tenth of a small grid's call."""
    key = (form, dtype, prefactor)
    constants = _KERNEL_CONSTANTS.get(key)
    if constants is None:
        dtype = np.dtype(dtype)
        constants = (form,) + kernel_scalars(dtype, prefactor, 0.5, smallest_normal(dtype),
                                             pivot_floor(dtype))
        _KERNEL_CONSTANTS[key] = constants
    return constants


_KERNEL_SCALARS = {}


def kernel_scalars(dtype, *values) -> tuple:
    """``values`` rounded to ``dtype``, as a kernel's scalar arguments: NumPy scalars of
    ``dtype`` (float32 data stay float32), but Python floats for float64: Numba types them
    float64 as it does NumPy's float64 scalars (the same compiled kernel), and unboxes them
    about 50 ns faster each per call. Built once per (dtype, values)."""
    key = (dtype, values)
    scalars = _KERNEL_SCALARS.get(key)
    if scalars is None:
        dtype = np.dtype(dtype)
        scalars = tuple([dtype.type(v) for v in values])
        if dtype == np.float64:
            scalars = tuple([float(v) for v in scalars])
        _KERNEL_SCALARS[key] = scalars
    return scalars


#: Relative floor of the metric pivots, per dtype (see :func:`pivot_floor`).
_PIVOT_FLOOR = {np.dtype(np.float64): np.float64(16 * np.finfo(np.float64).eps),
                np.dtype(np.float32): np.float32(0.0)}


def pivot_floor(dtype):
    """c eps such that gamma counts as positive definite when its pivots exceed c eps tr(gamma).

    float64: 16 eps. Every pivot of a positive-definite metric is at least its smallest
    eigenvalue >= tr(gamma) / (3 kappa), so no metric with kappa < 1 / (48 eps) = 9e13 is
    rejected, while exactly singular metrics whose last pivot rounds to a tiny positive number
    are (``tests/test_metric_conditioning.py``). float32: 0, pivots merely positive. There no
    floor separates the two cases for the condition numbers the package accepts (up to 1e6,
    1/8 of 1/eps): a singular metric's computed pivot reaches 4.5 eps tr(gamma), a definite one
    at kappa = 1e6 may be 4 eps tr(gamma) (measured). Use float64 where that matters.
    """
    return _PIVOT_FLOOR[np.dtype(dtype)]


def metric_is_positive_definite(g, dtype):
    """The kernels' criterion on packed components ``g`` (arrays or scalars) of ``dtype``:
    every pivot of gamma = L D L^T above :func:`pivot_floor` times tr(gamma)."""
    d1, d2, d3 = metric_pivots(g)
    least = pivot_floor(dtype) * (g[0] + g[3] + g[5])
    with np.errstate(invalid="ignore"):
        return (d1 > least) & (d2 > least) & (d3 > least)


def has_points(grid) -> bool:
    """False for a grid with a zero-length axis: nothing to compute, empty results."""
    return 0 not in grid


def _row_block(a: np.ndarray, ncomp_axes: int, ncomp: int, npoints: int):
    """``a`` (component rows C-contiguous, spaced evenly) as a C-contiguous (ncomp, stride)
    view that includes the gaps between the rows, or None where that memory is not known to
    belong to the same allocation (then the caller takes the strided path).

    The kernels read and write only the first ``npoints`` of each row; the view exists so that
    Numba types it as C-contiguous: its strided ("A") arrays cost 10-20 % in the flat loop
    (measured, ``benchmarks/bench_sources.py`` history in DEVELOPERS.md "Grid functions").
    """
    itemsize = a.itemsize
    # Rows are spaced by the stride of the last component axis ((3, 3, ...) metrics have two).
    step = a.strides[ncomp_axes - 1] if ncomp > 1 else npoints * itemsize
    if step < npoints * itemsize or step % itemsize:
        return None
    rows = rows_of(a)  # an array of the allocator: its block is known (no address lookups)
    if rows is not None and rows.shape == (ncomp, step // itemsize) and rows.dtype == a.dtype:
        return rows
    for axis in range(1, ncomp_axes):  # further component axes, as (3, 3): evenly spaced too
        if a.strides[axis] * a.shape[axis] != a.strides[axis - 1]:
            return None
    owner = a
    while isinstance(owner.base, np.ndarray):
        owner = owner.base
    if owner.base is not None:  # memory of a foreign object (mmap, bytes): extent unknown
        return None
    offset = a.__array_interface__["data"][0] - owner.__array_interface__["data"][0]
    if offset < 0 or offset + ncomp * step > owner.nbytes:
        return None
    return np.ndarray((ncomp, step // itemsize), a.dtype, buffer=owner, offset=offset)


def kernel_views(arrays, grid, whole_grids=False):
    """Views of component-first ``arrays`` for the kernels, and whether the flat path applies.

    The flat path takes each array as (ncomp, stride) (or (npoints,) for a scalar) and runs
    one loop over the first npoints of every row. It applies when every component row is
    C-contiguous: C-contiguous arrays (stride = npoints) and the padded grid functions of
    :mod:`emsource.grid_arrays` (rows a little more than npoints apart; the loop never
    touches the gaps). Otherwise each array becomes (ncomp, nx, ny, nz) with trailing
    length-1 axes added for 1D and 2D grids, for the strided loop. Either way no data are
    copied.

    ``whole_grids=True`` (for a flat driver that reshapes C-contiguous arrays itself, as
    ``kernels.sources.ADM_SOURCES_FLAT`` and ``STRESS_ENERGY_FLAT``): C-contiguous arrays on a 3-D grid are returned as
    they are, which spares seven reshapes (about 1 us) on a small grid's call; 1-D grids are
    passed as they are in any case, 2-D grids are reshaped (one compiled signature less).
    """
    contiguous = True
    for a in arrays:
        if not a.flags.c_contiguous:
            contiguous = False
            break
    ndim = len(grid)
    if contiguous and (ndim == 1 or (whole_grids and ndim == 3)):
        return arrays, True
    npoints = 1
    for n in grid:
        npoints *= n
    if contiguous:
        scalar, vector = (npoints,), (-1, npoints)
        return [a.reshape(vector) if a.ndim > ndim else a.reshape(scalar) for a in arrays], True
    views = []
    for a in arrays:
        if a.flags.c_contiguous:
            views.append(a.reshape((-1, npoints) if a.ndim > len(grid) else (npoints,)))
            continue
        block = None
        if a.ndim > len(grid) and a.strides[len(a.shape) - len(grid):] == _c_strides(a, grid):
            block = _row_block(a, a.ndim - len(grid), a.size // npoints, npoints)
        if block is None:
            return three_axis_views(arrays, grid), False
        views.append(block)
    return views, True


def takes_line_steps(views, grid) -> bool:
    """Whether a flat driver should take its line-step form (512-bit vectors, a whole cache
    line of every row per step) for the flat kernel ``views`` on ``grid`` (from
    :func:`kernel_views`: (ncomp, stride) blocks or whole C-contiguous arrays): rows of at
    least :data:`~emsource.kernels.vector_loops.LINE_STEP_ROW_BYTES`, and the component rows of
    every view with more than one row a multiple of
    :data:`~emsource.kernels.vector_loops.ALIASING_BYTES` apart, so that the rows of one point
    fall into the same cache set. Never true of the padded grid functions of
    :mod:`emsource.grid_arrays` (padded to avoid exactly this). A function of shapes and strides
    only: a call plan keeps its answer."""
    npoints = 1
    for n in grid:
        npoints *= n
    if npoints * views[0].itemsize < LINE_STEP_ROW_BYTES:
        return False
    for view in views:  # the arrays with a component axis (first) hold more than npoints
        if view.size > npoints and view.strides[0] % ALIASING_BYTES:
            return False
    return True


def takes_streaming_stores(grid, dtype) -> bool:
    """Whether a flat driver should first try its streaming-store form
    (:mod:`emsource.kernels.streaming_stores`) on ``grid``: rows of at least
    :data:`~emsource.kernels.vector_loops.STREAMING_ROW_BYTES`. The driver itself checks that
    the output rows share their offset within a cache line, which depends on addresses, not
    on the shapes a call plan keeps."""
    npoints = 1
    for n in grid:
        npoints *= n
    return npoints * np.dtype(dtype).itemsize >= STREAMING_ROW_BYTES


def result_allocator(grid, dtype):
    """``np.empty``, or :func:`emsource.grid_arrays.empty_line_aligned` where the flat drivers
    try their streaming form (:func:`takes_streaming_stores`), so that results the package
    allocates on large grids start on cache lines and take it."""
    return empty_line_aligned if takes_streaming_stores(grid, dtype) else np.empty


def flat_driver_tables(views, grid, default, line_steps=None, streaming=None) -> tuple:
    """The tables of flat drivers (by form) that a call tries in turn, each until one returns
    counts that are not negative: the line-step table alone where :func:`takes_line_steps`
    (long rows a multiple of 4 KiB apart); else the streaming-store table where
    :func:`takes_streaming_stores` (its drivers return (-1, -1), having written nothing, on
    output rows not aligned alike), then ``default``. Shapes and strides only: a call plan
    keeps the answer.

    Not streaming on rows that alias: on C-contiguous 128^3 and 256^3 float64 grids the
    streaming driver took 1.05 / 1.25 of the ordinary driver's time in one run and 0.65 / 0.52
    in another (same benchmark, same day: which physical pages the rows get seems to decide),
    where on padded grid functions and on 134^3 / 262^3 it took 0.62-0.75 in both."""
    aliasing = takes_line_steps(views, grid)
    if line_steps is not None and aliasing:
        return (line_steps,)
    if streaming is not None and not aliasing and takes_streaming_stores(grid, views[0].dtype):
        return (streaming, default)
    return (default,)


def tries_streaming(views, grid) -> bool:
    """Whether a flat call on kernel ``views`` first tries a streaming-store driver: rows long
    enough (:func:`takes_streaming_stores`) that do not alias (not :func:`takes_line_steps`;
    see :func:`flat_driver_tables`)."""
    return takes_streaming_stores(grid, views[0].dtype) and not takes_line_steps(views, grid)


def _c_strides(a: np.ndarray, grid) -> tuple:
    """The strides of a C-contiguous array of shape ``grid`` and ``a``'s dtype."""
    strides = []
    step = a.itemsize
    for n in reversed(grid):
        strides.append(step)
        step *= n
    return tuple(reversed(strides))


def unit_stride_spans(views):
    """``views`` (the (ncomp, nx, ny, nz) and (nx, ny, nz) column-loop views of one call) as
    1-D spans of their memory with element steps, for the windowed kernels; None if they
    cannot be.

    Returns ``(spans, steps, shape)``: ``spans[a]`` is a C-contiguous 1-D array from the first
    to the last element of ``views[a]``, ``steps[a]`` the uint64 (component, x, y) element
    steps, ``shape`` the (nx, ny, nz) window, so that ``views[a][c, i, j, k]`` is
    ``spans[a][c steps[a, 0] + i steps[a, 1] + j steps[a, 2] + k]``. Applies when every view
    has non-negative strides that are whole elements and is contiguous along z (ghost zones
    sliced off C-ordered or padded arrays); component-last and reversed views go to the column
    loop. A span covers memory between the window's points that belongs to the same array
    (ghost zones, other components); the kernels touch the window's points only.
    """
    shape = views[0].shape[-3:]
    steps = np.empty((len(views), 3), np.uint64)
    spans = []
    for position, view in enumerate(views):
        itemsize = view.itemsize
        strides = view.strides
        if view.ndim > 4 or min(strides) < 0 or any(s % itemsize for s in strides):
            return None  # one component axis at most (a (3, 3) metric arrives seen as 9)
        if view.shape[-1] != 1 and strides[-1] != itemsize:
            return None
        element_steps = [s // itemsize for s in strides]
        steps[position] = element_steps[-4] if view.ndim == 4 else 0, element_steps[-3], element_steps[-2]
        extent = 1
        for n, step in zip(view.shape, element_steps):
            extent += (n - 1) * step
        spans.append(_span(view, extent))
    return spans, steps, tuple(int(n) for n in shape)


def driver_spans(views, grid, flat: bool):
    """``views`` (from :func:`kernel_views` with ``whole_grids=True``, ``flat`` as it said) as
    the arguments of a driver over spans that takes whole lines and windows alike (the conformal
    sources, ideal MHD): ``(spans, steps, shape, last)``, or None where the views need the
    column loop.

    A flat line of npoints (C-contiguous arrays, padded rows) becomes the window
    (1, strips, strip length) of :func:`emsource.kernels.vector_loops.line_as_strips`, each
    array a 1-D span with steps (row stride, 0, strip length) and ``last`` the length of the last
    strip; C-contiguous arrays on a 3-D grid are passed whole (the driver sees each as its one
    line: a reshape there costs nothing, here about 0.1 us per array on a small grid's call);
    other views go through :func:`unit_stride_spans` (``last`` = nz).
    """
    if not flat:
        found = unit_stride_spans(views)
        if found is None:
            return None
        spans, steps, shape = found
        return spans, steps, shape, shape[2]
    npoints = 1
    for n in grid:
        npoints *= n
    shape, last = line_as_strips(npoints)
    steps = np.zeros((len(views), 3), np.uint64)
    steps[:, 2] = shape[2]
    spans = []
    for position, view in enumerate(views):
        if view.ndim == 2:  # (ncomp, row) block, or components on a 1-D grid
            steps[position, 0] = view.shape[1]
        elif view.ndim == 4:  # a whole C-contiguous (ncomp, nx, ny, nz) array
            steps[position, 0] = npoints
        spans.append(view if view.ndim >= 3 else view.reshape(-1))
    return spans, steps, shape, last


def _span(view: np.ndarray, extent: int) -> np.ndarray:
    """A C-contiguous 1-D array of ``extent`` elements starting at ``view``'s first element."""
    owner = view
    while isinstance(owner.base, np.ndarray):
        owner = owner.base
    if owner.base is None and type(owner) is np.ndarray and owner.flags.c_contiguous:
        offset = view.__array_interface__["data"][0] - owner.__array_interface__["data"][0]
        if 0 <= offset and offset + extent * view.itemsize <= owner.nbytes:
            # About 0.5 us; as_strided below takes about 6 us.
            return np.ndarray((extent,), view.dtype, buffer=owner, offset=offset)
    return np.lib.stride_tricks.as_strided(view, shape=(extent,), strides=(view.itemsize,),
                                           writeable=view.flags.writeable)


def three_axis_views(arrays, grid):
    """Views of component-first arrays on a 1-, 2- or 3-D ``grid`` with length-1 axes appended
    up to three grid axes, the form the column kernels take (no copy)."""
    pad = (Ellipsis,) + (None,) * (3 - len(grid))
    return [a[pad] for a in arrays]


def as_grid_views(arrays, flat: bool, grid):
    """The (ncomp, nx, ny, nz) form of kernel views on ``grid`` (a flat line becomes
    (ncomp, 1, 1, npoints); the gaps of padded rows are cut off; arrays on a 3-D grid passed
    whole, ``kernel_views(..., whole_grids=True)``, are that form already)."""
    if not flat:
        return arrays
    npoints = 1
    for n in grid:
        npoints *= n
    grid = tuple(grid)
    return [a if len(grid) == 3 and a.shape[a.ndim - 3:] == grid
            else a[..., :npoints].reshape(a.shape[:-1] + (1, 1, npoints)) for a in arrays]


#: Orders of the centred finite differences the diagnostics offer (kernels/stencils.py).
DIFFERENCE_ORDERS = (2, 4, 6)


def grid_spacing(function: str, value, ndim: int) -> tuple:
    """``spacing`` as one positive finite float per grid axis (one number is repeated)."""
    try:
        h = np.atleast_1d(np.asarray(value, dtype=float))
    except (TypeError, ValueError):
        h = np.array([np.nan])
    if h.shape == (1,):
        h = np.repeat(h, ndim)
    if h.shape != (ndim,) or not np.all(np.isfinite(h)) or not np.all(h > 0):
        raise ValueError(
            f"{function}: spacing must be one positive number or one per grid axis "
            f"({ndim} here), found {value!r}"
        )
    return tuple(float(x) for x in h)


def point_mask(function: str, valid_mask, grid) -> np.ndarray:
    """``valid_mask`` (True or nonzero where the data are valid) as a bool array of shape ``grid``.

    None means every point is valid. Integer masks (a file's uint8 ``valid_mask``) are read as
    nonzero = valid; the caller's array is not changed.
    """
    if valid_mask is None:
        return np.ones(grid, dtype=bool)
    m = np.asarray(valid_mask)
    if m.shape != tuple(grid) or not (m.dtype == np.bool_ or np.issubdtype(m.dtype, np.integer)):
        raise ValueError(f"{function}: valid_mask must be a bool (or integer) array of shape "
                         f"{tuple(grid)}, found {m.dtype} of shape {m.shape}")
    return m.astype(bool, copy=False)


def metric_pivots(g):
    """Pivots (d1, d2, d3) of gamma = L D L^T from the six packed components ``g`` (arrays or
    scalars): the criterion of the kernels (:mod:`emsource.kernels.metric`), where gamma is
    positive definite exactly when all three are positive (NaN fails)."""
    with np.errstate(all="ignore"):
        d1 = g[0]
        d2 = g[3] - g[1] * g[1] / d1
        d3 = g[5] - g[2] * g[2] / d1 - (g[4] - g[2] * g[1] / d1) ** 2 / d2
    return d1, d2, d3


def _suspect_points(grid, named: dict, where, lapse, metric) -> int:
    """Counts of :mod:`emsource.kernels.input_checks`, summed: zero means that
    :func:`check_points` would find no bad point (the kernels flag at least what it rejects)."""
    three_d = grid + (1,) * (3 - len(grid))
    valid = np.asarray(where, dtype=bool).reshape(three_d).view(np.uint8)
    total = 0
    for name, a in named.items():
        if a is None:
            continue
        a = np.asarray(a)
        if a.dtype not in FLOAT_DTYPES:
            return 1  # not float32 or float64 (the kernels' types): the NumPy test decides
        values = a.reshape((-1,) + three_d)
        with kernel_call():
            total += call_sharing_layouts(input_checks.nonfinite_points, (values, valid), (0, 1))
            if name == lapse:
                total += call_sharing_layouts(input_checks.nonpositive_points, (values, valid),
                                              (0, 1))
    if metric is not None:
        _, m, index = metric
        m = np.asarray(m)
        if m.dtype not in FLOAT_DTYPES:
            return 1
        values = m.reshape((-1,) + three_d)
        eps = np.finfo(values.dtype).eps
        margin = values.dtype.type(2 * pivot_floor(values.dtype) + 64 * eps)
        with kernel_call():
            total += call_sharing_layouts(input_checks.suspect_metric_points,
                                          (values, np.asarray(index, np.int64), valid, margin),
                                          (0, 2))
    return total


def check_points(function: str, grid, named: dict, *, valid=None, lapse=None, metric=None):
    """Raise :class:`emsource.GridPointError` at the first bad valid point, else return.

    ``named`` maps argument names to component-first arrays on ``grid`` (scalars of shape
    ``grid``) that must be finite; ``lapse`` names an entry of ``named`` that must be positive;
    ``metric`` is ``(name, array, six indices)`` of a symmetric tensor that must be positive
    definite (:func:`metric_is_positive_definite`, the kernels' criterion). Only points where ``valid`` is True
    are looked at (all when None). This is a NumPy pass over the arrays: callers run it where a
    check is asked for, or on an error path.
    """

    grid = tuple(grid)
    where = np.ones(grid, bool) if valid is None else valid
    if not _suspect_points(grid, named, where, lapse, metric):
        return  # the counting kernels found nothing the NumPy test below could reject
    bad = np.zeros(grid, bool)
    views = {}
    for name, a in named.items():
        if a is None:
            continue
        a = np.asarray(a)
        v = a.reshape((-1,) + grid)
        views[name] = v
        bad |= ~np.isfinite(v).all(axis=0)
    if lapse is not None and named.get(lapse) is not None:
        with np.errstate(invalid="ignore"):
            bad |= ~(np.asarray(named[lapse]).reshape(grid) > 0)
    if metric is not None:
        mname, m, index = metric
        g = [np.asarray(m).reshape((-1,) + grid)[c] for c in index]
        bad |= ~metric_is_positive_definite(g, np.result_type(g[0], np.float32))
    bad &= where
    count = int(np.count_nonzero(bad))
    if count == 0:
        return
    first = tuple(int(i) for i in np.unravel_index(int(np.argmax(bad)), grid))
    reasons = []
    for name, v in views.items():
        values = v[(slice(None),) + first]
        for c, x in enumerate(values):
            if not np.isfinite(x):
                reasons.append(f"{name}[{c}] = {x}" if values.size > 1 else f"{name} = {x}")
    if reasons:
        reason = "non-finite value(s): " + ", ".join(reasons)
    elif lapse is not None and not views[lapse][(0,) + first] > 0:
        reason = f"lapse {lapse} = {views[lapse][(0,) + first]} is not positive"
    else:
        values = [float(x[first]) for x in g]
        reason = (f"{mname} is not positive definite ({mname}_xx, xy, xz, yy, yz, zz = "
                  + ", ".join(f"{x:.6g}" for x in values) + ")")
    raise GridPointError(function, count, int(np.count_nonzero(where)), first, reason)
