"""Argument checking and layout handling shared by the public wrappers (not API).

Everything here works on views: component-last data become component-first views, a full
(3, 3) metric becomes a (9, ...) view, 1D and 2D grids get trailing length-1 axes. No function
copies an array; where a view is impossible the caller gets an error that says so.
"""

from __future__ import annotations

import numpy as np

#: Flat indices, into a full (3, 3) block seen as 9, of the packed (xx, xy, xz, yy, yz, zz).
FULL_METRIC_INDEX = (0, 1, 2, 4, 5, 8)
PACKED_METRIC_INDEX = (0, 1, 2, 3, 4, 5)


def _owner(a: np.ndarray):
    """The array that owns ``a``'s memory, or None when that is not a plain owning ndarray."""
    owner = a if a.base is None else a.base
    return owner if type(owner) is np.ndarray and owner.base is None else None


LAYOUTS = ("component_first", "component_last")
FIELD_INDICES = ("upper", "lower")
FLOAT_DTYPES = (np.dtype(np.float32), np.dtype(np.float64))


def choice(function: str, argument: str, value, allowed) -> None:
    if value not in allowed:
        raise ValueError(f"{function}: {argument} must be one of {tuple(allowed)}, found {value!r}")


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
        if a.dtype != dtype:
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


def outputs(function: str, names: tuple, values: tuple, shapes: tuple, component_axes: tuple,
            dtype, layout: str, input_names: tuple, inputs: tuple) -> list:
    """Check caller-supplied output arrays and return their component-first views.

    Each must be a writeable ndarray of the expected shape and dtype that shares no memory with
    any input (inputs are never overwritten). This runs on every call of an evolution loop, so
    the overlap test is cheap in the common case: arrays that own their memory, or views of
    them, cannot overlap arrays with another owner. Anything else (views of one array, arrays
    over foreign buffers) goes to ``np.may_share_memory``.
    """
    input_owners = [_owner(a) for a in inputs]
    views = []
    for name, value, shape, ncomp in zip(names, values, shapes, component_axes):
        if not isinstance(value, np.ndarray):
            raise TypeError(f"{function}: out {name} must be a NumPy array, found {type(value).__name__}")
        if value.shape != shape or value.dtype != dtype:
            raise ValueError(
                f"{function}: out {name} must have shape {shape} and dtype {dtype}, "
                f"found shape {value.shape} and dtype {value.dtype}"
            )
        if not value.flags.writeable:
            raise ValueError(f"{function}: out {name} is read-only")
        owner = _owner(value)
        if owner is None or any(o is None or o is owner for o in input_owners):
            for input_name, a in zip(input_names, inputs):
                if np.may_share_memory(value, a):
                    raise ValueError(
                        f"{function}: out {name} overlaps input {input_name}; "
                        "inputs are never overwritten"
                    )
        views.append(value if ncomp == 0 or layout == "component_first"
                     else component_first(value, ncomp, layout))
    return views


def kernel_views(arrays, grid):
    """Views of component-first ``arrays`` for the kernels, and whether the flat path applies.

    All C-contiguous: each array becomes (ncomp, npoints) (or (npoints,) for a scalar), one
    flat loop. Otherwise each becomes (ncomp, nx, ny, nz) with trailing length-1 axes added
    for 1D and 2D grids, for the strided loop. Either way no data are copied.
    """
    contiguous = True
    for a in arrays:
        contiguous = contiguous and a.flags.c_contiguous
    if contiguous:
        if len(grid) == 1:
            return arrays, True
        npoints = 1
        for n in grid:
            npoints *= n
        scalar, vector = (npoints,), (-1, npoints)
        return [a.reshape(vector if a.ndim > len(grid) else scalar) for a in arrays], True
    pad = (Ellipsis,) + (None,) * (3 - len(grid))
    return [a[pad] for a in arrays], False


def as_grid_views(arrays, flat: bool):
    """The (ncomp, nx, ny, nz) form of kernel views (a flat line becomes (ncomp, 1, 1, n))."""
    if not flat:
        return arrays
    return [a.reshape(a.shape[:-1] + (1, 1, a.shape[-1])) for a in arrays]
