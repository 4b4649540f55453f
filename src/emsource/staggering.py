r"""Staggered data to common points: Lagrange interpolation in space (to the vertices) and in time.

Evolution codes often store each field component where their scheme updates it, not on the
vertices: on a Yee lattice E^x sits at the centre of an x-directed edge, (i + 1/2, j, k), and
H^x at the centre of the x-normal face, (i, j + 1/2, k + 1/2), and a leapfrog scheme holds H
half a time step away from E. emsource computes point by point, so every quantity must first
be brought to the same points: the vertices of the grid, at the time of the level.

Positions. A stored value with index i along an axis with offset o sits at
``origin + (i + o) * spacing`` (o = 0: on the vertices; o = 1/2: half-way between vertices i and
i + 1). Offsets are 0 or 1/2 per axis and per component. Along an axis with offset 1/2 and
``points`` vertices a component stores either ``points - 1`` values (between the vertices: every
value inside the box) or ``points`` values (the last one half a cell beyond the last vertex, as
in arrays padded to a common shape).

The named centrings (primal grid, vertices at integer indices; offsets per component in the
order x, y, z of the grid axes):

=========  ===================================================================================
vertex     every component at (i, j, k)
cell       every component at the cell centre (i + 1/2, j + 1/2, k + 1/2)
face       vectors only: component c at the centre of the face normal to axis c, e.g.
           B^x at (i, j + 1/2, k + 1/2)
edge       vectors only: component c at the centre of the edge along axis c, e.g.
           E^x at (i + 1/2, j, k)
=========  ===================================================================================

Interpolation in space. Along each axis with offset 1/2, vertex j (at stored-index coordinate
s = j - 1/2) is the value at s of the Lagrange polynomial through ``order`` consecutive stored
points (A&S 25.2.2; the Lagrange form, common practice):

.. math:: f(s) \approx \sum_{k=0}^{p-1} f_{i_0+k}\,\ell_k(s - i_0), \qquad
          \ell_k(t) = \prod_{m \ne k} \frac{t - m}{k - m}, \qquad p = \text{order},

with the centred start :math:`i_0 = j - p/2` in the interior. Near a face the stencil is
shifted inside (:math:`0 \le i_0 \le m - p` for m stored points), so it stays p points wide
and the outermost vertices are extrapolated half a cell: every vertex gets a value, of the same
order. "Order p" means: the interpolation error is O(h^p) for smooth data, and polynomials of
degree p - 1 are reproduced exactly (order 2: linear, 2 points; order 4: cubic, 4 points).
Axes are done one after the other (tensor-product interpolation), so a face-centred
component (two staggered axes) uses 2 x 2 or 4 x 4 points.

Interpolation in time. A quantity stored at t_j + delta at time level j (``time_offset``
delta) is brought to the time t_k of level k through the Lagrange polynomial in t through the
``order`` levels whose stored times are nearest to t_k, centred where they exist and shifted
inside at the first and last levels (order 2: the two levels around t_k, e.g. the average of
H at t^{n-1/2} and t^{n+1/2}; order 4: four levels). A file with fewer levels than ``order``
uses all of them (the order drops to the number of levels); one level cannot be interpolated.

References
----------
M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), sec. 25.2
(Lagrange interpolation formula and its remainder; from memory). K. S. Yee, IEEE Trans.
Antennas Propag. 14, 302 (1966): the staggered lattice the face and edge centrings describe.
"""

from __future__ import annotations

import numpy as np

from ._threading import kernel_call
from .kernels.staggering import interpolate_middle_axis

__all__ = ["CENTRINGS", "INTERPOLATION_ORDERS", "OFFSETS", "centring_offsets", "lagrange_weights",
           "vertex_stencils", "interpolate_axis", "to_vertices", "time_stencil",
           "stored_points_allowed"]

#: Named centrings (module docstring).
CENTRINGS = ("vertex", "cell", "face", "edge")
#: Orders of the interpolation (points per staggered direction).
INTERPOLATION_ORDERS = (2, 4)
#: Allowed offsets along one axis, in units of the spacing.
OFFSETS = (0.0, 0.5)


def centring_offsets(centring: str, components: int) -> tuple:
    """Per-component offset triples (x, y, z) of a named centring.

    Parameters
    ----------
    centring : {"vertex", "cell", "face", "edge"}
    components : int
        0 for a scalar (one triple is returned), 3 for a vector, 6 for a packed symmetric tensor.

    Examples
    --------
    >>> centring_offsets("face", 3)[0]
    (0.0, 0.5, 0.5)
    """
    if centring not in CENTRINGS:
        raise ValueError(f"centring must be one of {list(CENTRINGS)}, found {centring!r}")
    count = max(int(components), 1)
    if centring in ("face", "edge") and components != 3:
        raise ValueError(f"centring {centring!r} applies to vectors (3 components), found "
                         f"{components} component(s)")
    if centring == "vertex":
        return ((0.0, 0.0, 0.0),) * count
    if centring == "cell":
        return ((0.5, 0.5, 0.5),) * count
    inside = 0.5 if centring == "edge" else 0.0
    return tuple(tuple(inside if axis == c else 0.5 - inside for axis in range(3))
                 for c in range(3))


def lagrange_weights(nodes, x) -> np.ndarray:
    """Weights l_k(x) of the Lagrange polynomial through ``nodes`` (distinct), at ``x``.

    sum_k l_k(x) f(nodes[k]) is the value at x of the polynomial of degree len(nodes) - 1 that
    takes the values f(nodes[k]) (A&S 25.2.2, from memory; common practice).
    """
    nodes = np.asarray(nodes, dtype=float)
    weights = np.ones(nodes.shape)
    for k in range(nodes.size):
        for m in range(nodes.size):
            if m != k:
                weights[k] *= (x - nodes[m]) / (nodes[k] - nodes[m])
    return weights


def stored_points_allowed(points: int, offset: float) -> tuple:
    """Stored lengths allowed along an axis with ``points`` vertices and ``offset``."""
    return (points,) if offset == 0 else (points - 1, points)


def vertex_stencils(points: int, stored: int, offset: float, order: int, dtype=np.float64):
    """Stencil starts and weights that take ``stored`` values with ``offset`` to ``points`` vertices.

    Returns
    -------
    starts : (points,) int64 ndarray
        First stored index of each vertex's stencil.
    weights : (points, p) ndarray
        Lagrange weights (p = 1 for offset 0: a copy; p = ``order`` for offset 1/2).

    Raises
    ------
    ValueError
        An offset other than 0 or 1/2, an order other than 2 or 4, a stored length that does not
        fit (``stored_points_allowed``), or fewer stored points than the stencil needs.
    """
    if order not in INTERPOLATION_ORDERS:
        raise ValueError(f"interpolation order must be one of {INTERPOLATION_ORDERS}, found {order!r}")
    if offset not in OFFSETS:
        raise ValueError(f"offset must be 0 or 0.5 (in units of the spacing), found {offset!r}")
    allowed = stored_points_allowed(points, offset)
    if stored not in allowed:
        raise ValueError(f"{stored} stored points do not fit {points} vertices with offset "
                         f"{offset:g}: expected {' or '.join(map(str, allowed))}")
    if offset == 0:
        return np.arange(points, dtype=np.int64), np.ones((points, 1), dtype)
    if stored < order:
        raise ValueError(f"order {order} needs at least {order} stored points along a staggered "
                         f"axis, found {stored}")
    j = np.arange(points)
    starts = np.clip(j - order // 2, 0, stored - order).astype(np.int64)
    weights = np.empty((points, order), dtype)
    for row, (vertex, start) in enumerate(zip(j, starts)):
        # vertex j sits at stored-index coordinate j - 1/2
        weights[row] = lagrange_weights(np.arange(order), vertex - 0.5 - start)
    return starts, weights


def interpolate_axis(values, axis: int, starts, weights, *, base: int = 0, out=None) -> np.ndarray:
    """Apply per-row stencils along ``axis`` of a 3D array (the kernel of this module).

    ``out[..., j, ...] = sum_q weights[j, q] * values[..., starts[j] - base + q, ...]`` along
    ``axis``; ``values`` holds stored rows ``base`` onwards along that axis. ``out`` (C-ordered,
    values' dtype) is allocated if not given. Arguments are trusted (internal use; the public
    entry is :func:`to_vertices`).
    """
    values = np.ascontiguousarray(values)
    shape = list(values.shape)
    shape[axis] = len(starts)
    if out is None:
        out = np.empty(shape, values.dtype)
    pre = int(np.prod(shape[:axis]))
    post = int(np.prod(shape[axis + 1:]))
    starts = np.asarray(starts, np.int64)
    weights = np.asarray(weights, values.dtype)
    lo, hi = _shared_stencil_rows(starts, weights)
    with kernel_call():
        interpolate_middle_axis(values.reshape(pre, values.shape[axis], post), starts, weights,
                                int(base), lo, hi, out.reshape(pre, shape[axis], post))
    return out


def _shared_stencil_rows(starts, weights):
    """The longest run of rows lo:hi with one stencil (equal weights, starts rising by one):
    the kernel runs it as one contiguous loop."""
    n = len(starts)
    if n == 0:
        return 0, 0
    same = np.ones(n, bool)
    same[1:] = np.all(weights[1:] == weights[:-1], axis=1) & (np.diff(starts) == 1)
    best, lo = (0, 0), 0
    for j in range(1, n + 1):
        if j == n or not same[j]:
            if j - lo > best[1] - best[0]:
                best = (lo, j)
            lo = j
    return best


def to_vertices(values, offset, *, points=None, order: int = 2) -> np.ndarray:
    """One staggered component, interpolated to the vertices of its grid.

    Parameters
    ----------
    values : (m0, m1, m2) float ndarray
        Stored values (1 to 3 axes), the value with index i along an axis at (i + offset) h.
    offset : sequence of float
        One offset per axis, each 0 or 0.5 (units of the spacing); see :func:`centring_offsets`.
    points : sequence of int, optional
        Vertices per axis. Default: the stored length where the offset is 0, one more where it
        is 1/2 (values between the vertices).
    order : {2, 4}
        Points per staggered direction: error O(h^order), exact for polynomials of degree
        order - 1 (module docstring).

    Returns
    -------
    ndarray of shape ``points``, the values' dtype (float32 stays float32).

    Examples
    --------
    >>> to_vertices(np.array([1.0, 3.0, 5.0]), [0.5])   # samples of 2x + 2 at x = 0.5, 1.5, 2.5
    array([0., 2., 4., 6.])
    """
    function = "to_vertices"
    a = np.asarray(values)
    if a.dtype not in (np.float32, np.float64) or not 1 <= a.ndim <= 3:
        raise ValueError(f"{function}: values must be a 1- to 3-axis float32 or float64 array, "
                         f"found shape {a.shape}, dtype {a.dtype}")
    offset = tuple(float(o) for o in offset)
    if len(offset) != a.ndim:
        raise ValueError(f"{function}: offset needs {a.ndim} value(s) (one per axis of values), "
                         f"found {len(offset)}")
    if points is None:
        points = tuple(m + (1 if o == 0.5 else 0) for m, o in zip(a.shape, offset))
    points = tuple(int(n) for n in points)
    if len(points) != a.ndim:
        raise ValueError(f"{function}: points needs {a.ndim} value(s), found {len(points)}")
    work = a.reshape(a.shape + (1,) * (3 - a.ndim))
    for axis, (n, o) in enumerate(zip(points, offset)):
        try:
            starts, weights = vertex_stencils(n, a.shape[axis], o, order, a.dtype)
        except ValueError as error:
            raise ValueError(f"{function}: axis {axis} (values shape {a.shape}): {error}") from None
        if o != 0:
            work = interpolate_axis(work, axis, starts, weights)
    result = work.reshape(points)
    return result.copy() if np.shares_memory(result, a) else result


def time_stencil(stored_times, target: float, order: int):
    """Levels and weights that interpolate a quantity stored at ``stored_times`` to ``target``.

    Parameters
    ----------
    stored_times : (L,) array_like, increasing
        Time at which each level stores the quantity (level time + time offset).
    target : float
    order : {2, 4}
        Levels used where the file has them (module docstring); fewer if the file has fewer.

    Returns
    -------
    indices : (p,) int ndarray
        The levels used, consecutive.
    weights : (p,) float ndarray
        Lagrange weights in t (exact for polynomials of degree p - 1 in t).
    """
    if order not in INTERPOLATION_ORDERS:
        raise ValueError(f"interpolation order must be one of {INTERPOLATION_ORDERS}, found {order!r}")
    times = np.asarray(stored_times, dtype=float)
    if times.size < 2:
        raise ValueError(f"interpolation in time needs at least 2 time levels, found {times.size}")
    if not np.all(np.diff(times) > 0):
        raise ValueError(f"the times of the levels must increase, found {times}")
    p = min(order, times.size)
    r = int(np.searchsorted(times, target, side="right"))
    start = min(max(r - p // 2, 0), times.size - p)
    indices = np.arange(start, start + p)
    return indices, lagrange_weights(times[indices], float(target))
