r"""The magnetic field of a stored vector potential: B^i = epsilon^ijk d_j A_k = [ijk] d_j A_k / sqrt(gamma).

Codes that keep div B = 0 by construction evolve the covariant vector potential A_i (the spatial
part of the 4-potential, F_ij = d_i A_j - d_j A_i) and derive B from it. With the spatial
Levi-Civita tensor epsilon^ijk = [ijk] / sqrt(gamma) ([xyz] = +1; see the package's conventions)

.. math:: B^i = \epsilon^{ijk} \partial_j A_k = \frac{[ijk]}{\sqrt{\gamma}} \partial_j A_k

(T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 11.1, the 3+1 magnetic
field from the potential; from memory). Two storages:

Collocated (:func:`magnetic_field_from_potential`). A_k on the vertices; centred differences of
order 2, 4 or 6 (:mod:`emsource.kernels.stencils`); B^i on the vertices. Only the interior has a
value: the points whose centred stencil (radius order / 2 along each axis with extent) lies on
the grid. The boundary layer, the order / 2 points next to each face, holds NaN, as the
residuals of :mod:`emsource.conservation` do. An axis of one point has no extent (derivatives
along it are zero), so 1D and 2D grids work as in the diagnostics.

Edge-staggered (:func:`magnetic_field_from_edge_potential`). A_k at the centre of the edges along
axis k: A_x at (i + 1/2, j, k), A_y at (i, j + 1/2, k), A_z at (i, j, k + 1/2), as a Yee or
constrained-transport code stores it. Staggered differences of order 2 or 4 give each component
at the centre of the face normal to its axis: B^x at (i, j + 1/2, k + 1/2), B^y at
(i + 1/2, j, k + 1/2), B^z at (i + 1/2, j + 1/2, k) (:data:`FACE_OFFSETS`). Because differences
along different axes commute, the discrete divergence of the densitised field
sqrt(gamma) B^i = [ijk] d_j A_k over a cell (the same staggered differences, at the cell centre)
vanishes to round-off: the constrained-transport property (common practice; K. S. Yee, IEEE
Trans. Antennas Propag. 14, 302 (1966)). To bring the result to the vertices, use the staggered
interpolation of the package (face centring).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from ._threading import kernel_call
from .errors import GridPointError
from .kernels import potential as kernels
from .kernels.stencils import (STAGGERED_ORDERS, first_derivative_weights,
                               staggered_derivative_weights, stencil_radius)

__all__ = ["FACE_OFFSETS", "EDGE_OFFSETS", "FaceField", "magnetic_field_from_potential",
           "magnetic_field_from_edge_potential", "potential_radii", "curl_interior"]

#: Offsets (x, y, z), in spacings, of the edge centres where A_x, A_y, A_z are stored.
EDGE_OFFSETS = ((0.5, 0.0, 0.0), (0.0, 0.5, 0.0), (0.0, 0.0, 0.5))
#: Offsets of the face centres where B^x, B^y, B^z of the edge-staggered curl sit.
FACE_OFFSETS = ((0.0, 0.5, 0.5), (0.5, 0.0, 0.5), (0.5, 0.5, 0.0))


def potential_radii(function, order, grid) -> tuple:
    """Stencil radius per (x, y, z) axis: order / 2, or 0 along an axis of one point."""
    arg.choice(function, "order", order, arg.DIFFERENCE_ORDERS)
    r = stencil_radius(order)
    radii = []
    for axis, n in enumerate(grid):
        if n == 1:
            radii.append(0)
        elif n <= 2 * r:
            raise ValueError(f"{function}: axis {axis} has {n} points; order {order} needs more "
                             f"than {2 * r} (a centred stencil of radius {r} on each side) or "
                             "exactly 1 (no extent)")
        else:
            radii.append(r)
    return tuple(radii) + (0,) * (3 - len(grid))


def curl_interior(grid, order, valid_mask=None) -> np.ndarray:
    """Where :func:`magnetic_field_from_potential` gives a value: the interior points whose
    centred stencils (the cross of radius order / 2 along each axis with extent) lie on the grid
    and, with ``valid_mask``, on valid points."""
    grid = tuple(grid)
    radii = potential_radii("curl_interior", order, grid)[: len(grid)]
    interior = np.zeros(grid, bool)
    interior[tuple(slice(r, n - r) for r, n in zip(radii, grid))] = True
    if valid_mask is None:
        return interior
    valid = arg.point_mask("curl_interior", valid_mask, grid)
    # A point is interior when every point of its cross is valid: erode by the cross.
    result = interior.copy()
    for axis, r in enumerate(radii):
        for m in range(-r, r + 1):
            result &= np.roll(valid, -m, axis=axis) | ~interior
    return result & interior


def magnetic_field_from_potential(gamma, A, spacing, *, order=2, out=None) -> np.ndarray:
    r"""B^i = [ijk] d_j A_k / sqrt(gamma) on the vertices, from a vertex-centred A_i.

    Parameters
    ----------
    gamma : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij on the vertices (packed xx, xy, xz, yy, yz, zz).
    A : (3, *grid) ndarray
        Covariant vector potential A_i (x, y, z) on the vertices, float32 or float64 (the
        dtype of gamma).
    spacing : float or sequence of float
        Grid spacing, one number or one per axis (code units).
    order : {2, 4, 6}
        Order of the centred differences.
    out : (3, *grid) ndarray, optional
        Where to write B^i (any strides); must not overlap the inputs.

    Returns
    -------
    (3, *grid) ndarray
        B^i (contravariant) on the interior; NaN on the boundary layer (module docstring, and
        :func:`curl_interior`).

    Raises
    ------
    GridPointError
        A non-finite A or gamma, or a metric that is not positive definite, at a point an
        interior stencil uses (the message gives the grid index of the first).

    References
    ----------
    T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 11.1 (from memory).

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.potential import magnetic_field_from_potential
    >>> x, y, z = np.meshgrid(*(np.arange(5.0),) * 3, indexing="ij")
    >>> A = np.stack([-y / 2, x / 2, 0 * z])          # a uniform B = (0, 0, 1)
    >>> gamma = np.zeros((6, 5, 5, 5)); gamma[[0, 3, 5]] = 1.0
    >>> B = magnetic_field_from_potential(gamma, A, 1.0)
    >>> B[:, 2, 2, 2].tolist(), bool(np.isnan(B[0, 0, 2, 2]))
    ([0.0, 0.0, 1.0], True)
    """
    function = "magnetic_field_from_potential"
    grid = arg.grid_of(function, "A", A, "component_first")
    a = arg.vector(function, "A", A, grid, "component_first")
    g, gidx = arg.spatial_metric(function, gamma, grid, "component_first")
    dtype = arg.common_dtype(function, ("gamma", "A"), (g, a))
    h = arg.grid_spacing(function, spacing, len(grid))
    radii = potential_radii(function, order, grid)
    if out is None:
        result = np.empty((3,) + grid, dtype)
    else:
        result, = arg.outputs(function, ("",), (out,), ((3,) + grid,), (1,), dtype,
                              "component_first", ("gamma", "A"), (gamma, A))
    result[...] = np.nan
    if not arg.has_points(grid):
        return out if out is not None else result
    inv_h = np.array([1.0 / x for x in h] + [0.0] * (3 - len(grid)), dtype)
    constants = (first_derivative_weights(order, dtype), inv_h, np.array(radii, np.int64),
                 dtype.type(1), dtype.type(arg.pivot_floor(dtype)))
    with kernel_call():
        a3, g3, result3 = arg.three_axis_views([a, g, result], grid)
        bad = kernels.curl_collocated(a3, g3, np.array(gidx, np.int64), result3, *constants)
    if bad:
        _raise_first_bad(function, grid, order, g, gidx, a, result, bad)
    return out if out is not None else result


def _raise_first_bad(function, grid, order, g, gidx, a, result, bad):
    interior = curl_interior(grid, order)
    # Bad inputs anywhere a stencil reaches: the whole grid (the stencils of the interior reach
    # every point but the corners of the boundary layer; a bad value there is bad input too).
    arg.check_points(function, grid, {"gamma": g, "A": a}, metric=("gamma", g, gidx))
    # Finite inputs, non-finite result: an overflow in the differences.
    failed = interior & ~np.isfinite(result).all(axis=0)
    first = tuple(int(i) for i in np.unravel_index(int(np.argmax(failed)), grid))
    raise GridPointError(function, int(bad), int(interior.sum()), first,
                         "B overflows (finite A and gamma, non-finite curl)")


class FaceField(NamedTuple):
    """A vector field stored at face centres (result of :func:`magnetic_field_from_edge_potential`).

    Attributes
    ----------
    values : (3, nx, ny, nz) ndarray
        Component c at index (i, j, k) sits at ``origin + ((i, j, k) + offsets[c]) * spacing``;
        NaN where it is not computed (the last plane along each offset axis, which lies half a
        cell outside the box, and, at order 4, the faces next to the boundary).
    offsets : tuple of 3 (x, y, z) tuples
        :data:`FACE_OFFSETS`.
    computed : (3, 2, 3) int ndarray
        For component c and axis a, the index range ``computed[c, 0, a] <= index <
        computed[c, 1, a]`` that holds values.
    """

    values: np.ndarray
    offsets: tuple
    computed: np.ndarray


def _edge_components(function, A):
    """The three edge-centred components as (n_x, n_y, n_z) arrays, and the vertex counts."""
    if isinstance(A, np.ndarray):
        if A.ndim != 4 or A.shape[0] != 3:
            raise ValueError(f"{function}: A must be a (3, nx, ny, nz) array (padded: the last "
                             "value along each component's own axis is unused) or a sequence "
                             f"of three 3D arrays, found shape {A.shape}")
        parts = [arg.float_array(function, f"A[{c}]", A[c]) for c in range(3)]
    else:
        try:
            parts = list(A)
        except TypeError:
            raise TypeError(f"{function}: A must be an array or a sequence of three arrays, "
                            f"found {type(A).__name__}") from None
        if len(parts) != 3:
            raise ValueError(f"{function}: A must hold three components (A_x, A_y, A_z), "
                             f"found {len(parts)}")
        parts = [arg.float_array(function, f"A[{c}]", p) for c, p in enumerate(parts)]
    for c, p in enumerate(parts):
        if p.ndim != 3:
            raise ValueError(f"{function}: A[{c}] must be 3D, found shape {p.shape}")
    arg.common_dtype(function, ("A[0]", "A[1]", "A[2]"), tuple(parts))
    # Vertex count of axis a: the length of the components not staggered along a.
    vertices = []
    for axis in range(3):
        lengths = {parts[c].shape[axis] for c in range(3) if c != axis}
        if len(lengths) != 1:
            found = ", ".join(f"A[{c}] {parts[c].shape}" for c in range(3))
            raise ValueError(f"{function}: components not staggered along axis {axis} must "
                             f"have the same length there (the vertex count); found {found}")
        vertices.append(lengths.pop())
    for c in range(3):
        allowed = (vertices[c] - 1, vertices[c])
        if parts[c].shape[c] not in allowed:
            raise ValueError(f"{function}: A[{c}] is staggered along axis {c} and must hold "
                             f"{allowed[0]} (between the vertices) or {allowed[1]} (padded) "
                             f"values there, found shape {parts[c].shape} for the vertex "
                             f"counts {tuple(vertices)}")
    return parts, tuple(vertices)


def magnetic_field_from_edge_potential(A, spacing, *, order=2, sqrt_gamma=None) -> FaceField:
    r"""B^i at face centres from an edge-staggered A_i, by staggered differences.

    Parameters
    ----------
    A : sequence of three 3D arrays, or a (3, nx, ny, nz) ndarray
        A_x at (i + 1/2, j, k), A_y at (i, j + 1/2, k), A_z at (i, j, k + 1/2) (:data:`EDGE_OFFSETS`).
        Along its own axis a component holds n - 1 values (between the n vertices) or n (padded,
        the last one unused); along the other axes n. float32 or float64.
    spacing : float or sequence of 3 float
        Vertex spacing (code units).
    order : {2, 4}
        Order of the staggered differences (:func:`emsource.kernels.stencils.staggered_derivative_weights`).
    sqrt_gamma : (3, nx, ny, nz) ndarray, optional
        sqrt(det gamma) at the face centres of each component (same layout as the result).
        None: the densitised field sqrt(gamma) B^i = [ijk] d_j A_k is returned, which is B^i
        itself in flat Cartesian coordinates.

    Returns
    -------
    FaceField
        ``values`` (3, nx, ny, nz) with B^x at (i, j + 1/2, k + 1/2) etc. (:data:`FACE_OFFSETS`),
        NaN where not computed; ``offsets``; ``computed`` index ranges.

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.potential import magnetic_field_from_edge_potential
    >>> n = 4
    >>> i, j, k = np.meshgrid(*(np.arange(n, dtype=float),) * 3, indexing="ij")
    >>> A = [-(j + 0) / 2, (i + 0) / 2, 0 * k]             # B = (0, 0, 1) with unit spacing
    >>> A[0] = A[0][:-1]; A[1] = A[1][:, :-1]; A[2] = A[2][:, :, :-1]
    >>> field = magnetic_field_from_edge_potential(A, 1.0)
    >>> field.values[:, 1, 1, 1].tolist(), field.offsets[2]
    ([0.0, 0.0, 1.0], (0.5, 0.5, 0.0))
    """
    function = "magnetic_field_from_edge_potential"
    if order not in STAGGERED_ORDERS:
        raise ValueError(f"{function}: order must be one of {STAGGERED_ORDERS}, found {order!r}")
    parts, grid = _edge_components(function, A)
    dtype = parts[0].dtype
    h = arg.grid_spacing(function, spacing, 3)
    r = order // 2
    for axis, n in enumerate(grid):
        if n < 2 * r:
            raise ValueError(f"{function}: axis {axis} has {n} vertices; order {order} needs at "
                             f"least {2 * r}")
    padded = np.zeros((3,) + grid, dtype)
    for c, p in enumerate(parts):
        padded[(c,) + tuple(slice(0, s) for s in p.shape)] = p
    if sqrt_gamma is None:
        root = np.ones((3,) + grid, dtype)
    else:
        root = arg.float_array(function, "sqrt_gamma", sqrt_gamma)
        if root.shape != (3,) + grid or root.dtype != dtype:
            raise ValueError(f"{function}: sqrt_gamma must have shape {(3,) + grid} and dtype "
                             f"{dtype} (the face centres of each component), found shape "
                             f"{root.shape} and dtype {root.dtype}")
    # Along its normal axis a face component lives on the vertices (0 <= index < n); along the
    # other two it is staggered, and a stencil of radius r needs r - 1 points below and r above.
    computed = np.zeros((3, 2, 3), np.int64)
    for c in range(3):
        for axis in range(3):
            if axis == c:
                computed[c, :, axis] = (0, grid[axis])
            else:
                computed[c, :, axis] = (r - 1, grid[axis] - r)
    values = np.full((3,) + grid, np.nan, dtype)
    inv_h = np.array([1.0 / x for x in h], dtype)
    with kernel_call():
        bad = kernels.curl_edges(padded, root, values, staggered_derivative_weights(order, dtype),
                                 inv_h, np.ascontiguousarray(computed[:, 0]),
                                 np.ascontiguousarray(computed[:, 1]))
    if bad:
        mask = np.zeros((3,) + grid, bool)
        for c in range(3):
            mask[(c,) + tuple(slice(lo, hi) for lo, hi in computed[c].T)] = True
        failed = mask & ~np.isfinite(values)
        c, *first = (int(i) for i in np.unravel_index(int(np.argmax(failed)), failed.shape))
        inputs_ok = all(np.isfinite(p).all() for p in parts) and np.isfinite(root).all()
        reason = ("B overflows (finite inputs)" if inputs_ok else
                  "non-finite A or sqrt_gamma in the stencil, or sqrt_gamma = 0") + \
            f" (component {'xyz'[c]})"
        raise GridPointError(function, int(bad), int(mask.sum()), tuple(first), reason)
    return FaceField(values, FACE_OFFSETS, computed)
