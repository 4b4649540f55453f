r"""The Faraday tensor as input and output, and the two field invariants.

Public wrappers around :mod:`emsource.kernels.faraday`. An antisymmetric 4x4 tensor is packed
as its six components above the diagonal, in the order (tx, ty, tz, xy, xz, yz)
(:data:`FARADAY_COMPONENTS`), component axis first: ``(6, *grid)``.

Conventions (the package README; signature -+++, epsilon_0123 = +sqrt(-g)): E^a = F^ab n_b,
B^a = -(1/2) epsilon^abcd n_b F_cd, so in coordinates, with sg = sqrt(det gamma_ij),

.. math::

    F_{ti} = -\alpha E_i + \sqrt\gamma\,[ijk] B^j \beta^k, \quad
    F_{ij} = \sqrt\gamma\,[ijk] B^k, \quad
    F^{ti} = E^i/\alpha, \quad
    F^{ij} = (E^i\beta^j - \beta^i E^j)/\alpha + [ijk] B_k/\sqrt\gamma,

    F_{ab}F^{ab} = 2(B^2 - E^2), \qquad F_{ab}{}^*\!F^{ab} = 4 E_i B^i,
    \quad {}^*\!F^{ab} = \tfrac12 \epsilon^{abcd} F_{cd}.

The sign of the second invariant follows from epsilon^0123 = -1/sqrt(-g): in flat space each
of the four positions of the index 0 in epsilon^abcd F_ab F_cd gives
(-[ijk]) (-E_i) ([jkl] B_l) = 2 E.B, so F_ab *F^ab = (1/2) 4 (2 E.B) = 4 E.B (derived here;
checked against a brute-force 4D contraction in ``tests/test_faraday.py``).

References: C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), sec. 3.5 and ex.
3.14 (the invariants; their sign convention for the dual differs, from memory); E. Gourgoulhon,
3+1 Formalism in General Relativity (2012), sec. 5.6 (the 3+1 split of F, from memory);
T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 5.2 (from memory).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from ._threading import kernel_call
from .errors import GridPointError
from .input_forms import input_form
from .kernels import faraday as kernels

__all__ = ["FARADAY_COMPONENTS", "FieldInvariants", "faraday_tensor", "fields_from_faraday",
           "field_invariants"]

#: The packed order of an antisymmetric 4x4 tensor (the components above the diagonal).
FARADAY_COMPONENTS = ("tx", "ty", "tz", "xy", "xz", "yz")
INDICES = ("lower", "upper")


class FieldInvariants(NamedTuple):
    """The two Lorentz invariants of the field, each of shape ``grid``.

    Attributes
    ----------
    square : ndarray
        F_ab F^ab = 2 (B^2 - E^2).
    dual : ndarray
        F_ab *F^ab = 4 E_i B^i (*F^ab = (1/2) epsilon^abcd F_cd, epsilon_0123 = +sqrt(-g)).
    """

    square: np.ndarray
    dual: np.ndarray


def raise_for_bad_points(function, count, grid, named, *, lapse=None, metric=None, reason=None):
    """Raise :class:`GridPointError` for the ``count`` points a conversion kernel rejected.

    The error carries the kernel's ``count`` (the points it rejected, for any reason) and names
    the first of them in C order with its reason. Candidates for that point: the first bad input
    point (non-finite, lapse not positive, metric not positive definite) from
    :func:`emsource._arguments.check_points`, and the first point whose outputs ``named["out"]``
    (if given) are not finite: the kernels write non-finite outputs where they reject a point for
    something the inputs alone do not show (``reason`` says what: a text, or a function of the
    point's index; by default the outputs overflowed). The earlier of the two is named.
    """
    if not count:
        return
    out = named.pop("out", None)
    npoints = int(np.prod(grid))
    output_index = None
    if out is not None:
        bad = ~np.isfinite(np.asarray(out).reshape((-1,) + tuple(grid))).all(axis=0)
        if bad.any():
            output_index = tuple(int(i) for i in np.unravel_index(int(np.argmax(bad)), grid))
    try:
        arg.check_points(function, grid, named, lapse=lapse, metric=metric)
    except GridPointError as error:  # a bad input point: named unless an output point is earlier
        if output_index is None or error.first_index <= output_index:  # C order
            raise GridPointError(function, int(count), npoints, error.first_index,
                                 error.reason) from None
    # The first rejected point has inputs that pass every input check.
    if callable(reason):
        reason = reason(output_index) if output_index is not None else None
    raise GridPointError(function, int(count), npoints, output_index,
                         reason or "the outputs overflow: rescale the inputs (a larger unit)")


def _spacetime(function, alpha, beta, gamma, grid):
    metric, gidx = arg.spatial_metric(function, gamma, grid, "component_first")
    lapse = arg.scalar(function, "alpha", alpha, grid)
    shift = arg.vector(function, "beta", beta, grid, "component_first")
    return lapse, shift, metric, gidx


def _packed_faraday(function, argument, value):
    """``value`` as a (6, *grid) float array, and its grid."""
    a = arg.float_array(function, argument, value)
    if not 2 <= a.ndim <= 4 or a.shape[0] != 6:
        raise ValueError(f"{function}: {argument} must have shape (6, *grid) on a 1-3D grid, "
                         f"packed {FARADAY_COMPONENTS}, found {a.shape}")
    return a, tuple(a.shape[1:])


def faraday_tensor(alpha, beta, gamma, E, B, *, index="lower", field_index="upper",
                   check=True, out=None):
    r"""The coordinate components F_ab (or F^ab) of the Faraday tensor, from E and B.

    Implements (module docstring) F_ti = -alpha E_i + sqrt(gamma) [ijk] B^j beta^k,
    F_ij = sqrt(gamma) [ijk] B^k, or F^ti = E^i / alpha,
    F^ij = (E^i beta^j - beta^i E^j) / alpha + [ijk] B_k / sqrt(gamma).

    Parameters
    ----------
    alpha : (*grid) ndarray
        Lapse, positive.
    beta : (3, *grid) ndarray
        Shift beta^i.
    gamma : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij (packed xx, xy, xz, yy, yz, zz, or full).
    E, B : (3, *grid) ndarray
        The fields of the normal observer in the input form ``field_index``
        (:mod:`emsource.input_forms`: "upper", "lower" or "densitized").
    index : {"lower", "upper"}
        F_ab or F^ab.
    check : bool
        Raise :class:`GridPointError` at the first point with non-finite input or output, a
        lapse that is not positive or a metric that is not positive definite.
    out : (6, *grid) ndarray, optional
        Preallocated result in the inputs' dtype, not overlapping them.

    Returns
    -------
    (6, *grid) ndarray
        Packed (tx, ty, tz, xy, xz, yz), component axis first. Arithmetic in the inputs' dtype
        (float32 inputs: float32 arithmetic and result).

    References
    ----------
    See the module docstring.

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.faraday import faraday_tensor
    >>> g = np.zeros((6, 2)); g[[0, 3, 5]] = 1.0
    >>> E = np.zeros((3, 2)); E[0] = 1.0; B = np.zeros((3, 2)); B[2] = 2.0
    >>> F = faraday_tensor(np.ones(2), np.zeros((3, 2)), g, E, B)
    >>> (F[:, 0] + 0.0).tolist()          # F_tx = -E_x, F_xy = B^z
    [-1.0, 0.0, 0.0, 2.0, 0.0, 0.0]
    """
    function = "faraday_tensor"
    arg.choice(function, "index", index, INDICES)
    form = input_form(function, field_index)
    grid = arg.grid_of(function, "E", E, "component_first")
    lapse, shift, metric, gidx = _spacetime(function, alpha, beta, gamma, grid)
    e = arg.vector(function, "E", E, grid, "component_first")
    b = arg.vector(function, "B", B, grid, "component_first")
    names = ("alpha", "beta", "gamma", "E", "B")
    inputs = (alpha, beta, gamma, E, B)
    dtype = arg.common_dtype(function, names, inputs)
    shape = (6,) + grid
    if out is None:
        out = np.empty(shape, dtype)
    else:
        arg.outputs(function, ("out",), (out,), (shape,), (1,), dtype, "component_first", names,
                    inputs)
    if not arg.has_points(grid):
        return out
    views = arg.three_axis_views([lapse, shift, metric, e, b, out], grid)
    with kernel_call():
        count = kernels.faraday_grid(*views[:3], gidx, *views[3:], form.code, index == "upper",
                                     dtype.type(arg.pivot_floor(dtype)),
                                     dtype.type(1))
    if check:
        raise_for_bad_points(function, count, grid,
                             {"alpha": lapse, "beta": shift, "E": e, "B": b, "out": out},
                             lapse="alpha", metric=("gamma", metric, gidx))
    return out


def fields_from_faraday(alpha, beta, gamma, F, *, index="lower", check=True):
    r"""Contravariant E^i, B^i of the normal observer from F_ab (or F^ab).

    Implements E_i = (sqrt(gamma) [ijk] B^j beta^k - F_ti) / alpha,
    B^i = (1/2) [ijk] F_jk / sqrt(gamma) from F_ab, and E^i = alpha F^ti,
    B_i = (1/2) sqrt(gamma) [ijk] (F^jk - (E^j beta^k - beta^j E^k) / alpha) from F^ab, the
    inverse of :func:`faraday_tensor`; indices moved with gamma_ij.

    Parameters
    ----------
    alpha, beta, gamma
        As for :func:`faraday_tensor`.
    F : (6, *grid) ndarray
        Packed (tx, ty, tz, xy, xz, yz) components.
    index : {"lower", "upper"}
        Whether ``F`` holds F_ab or F^ab.
    check : bool
        As for :func:`faraday_tensor`.

    Returns
    -------
    E, B : (3, *grid) ndarray
        E^i and B^i, ready for :func:`emsource.adm_sources`.
    """
    function = "fields_from_faraday"
    arg.choice(function, "index", index, INDICES)
    f, grid = _packed_faraday(function, "F", F)
    lapse, shift, metric, gidx = _spacetime(function, alpha, beta, gamma, grid)
    dtype = arg.common_dtype(function, ("alpha", "beta", "gamma", "F"), (alpha, beta, gamma, F))
    E = np.empty((3,) + grid, dtype)
    B = np.empty((3,) + grid, dtype)
    if not arg.has_points(grid):
        return E, B
    views = arg.three_axis_views([lapse, shift, metric, f, E, B], grid)
    with kernel_call():
        count = kernels.fields_from_faraday_grid(*views[:3], gidx, *views[3:], index == "upper",
                                                 dtype.type(arg.pivot_floor(dtype)),
                                                 dtype.type(1))
    if check:
        raise_for_bad_points(function, count, grid,
                             {"alpha": lapse, "beta": shift, "F": f,
                              "out": np.concatenate([E, B])},
                             lapse="alpha", metric=("gamma", metric, gidx))
    return E, B


def field_invariants(gamma, E, B, *, field_index="upper", check=True) -> FieldInvariants:
    r"""The invariants F_ab F^ab = 2 (B^2 - E^2) and F_ab *F^ab = 4 E_i B^i.

    Parameters
    ----------
    gamma, E, B, field_index
        As for :func:`emsource.adm_sources` (component-first layout).
    check : bool
        Raise :class:`GridPointError` at the first point with non-finite input or output or a
        metric that is not positive definite.

    Returns
    -------
    FieldInvariants
        (square, dual), each of shape ``grid``, in the units of the fields squared.

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.faraday import field_invariants
    >>> g = np.zeros((6, 1)); g[[0, 3, 5]] = 1.0
    >>> E = np.array([[1.0], [0.0], [0.0]]); B = np.array([[1.0], [1.0], [0.0]])
    >>> [float(v[0]) for v in field_invariants(g, E, B)]
    [2.0, 4.0]
    """
    function = "field_invariants"
    form = input_form(function, field_index)
    grid = arg.grid_of(function, "E", E, "component_first")
    metric, gidx = arg.spatial_metric(function, gamma, grid, "component_first")
    e = arg.vector(function, "E", E, grid, "component_first")
    b = arg.vector(function, "B", B, grid, "component_first")
    dtype = arg.common_dtype(function, ("gamma", "E", "B"), (gamma, E, B))
    out = np.empty((2,) + grid, dtype)
    if arg.has_points(grid):
        views = arg.three_axis_views([metric, e, b, out], grid)
        with kernel_call():
            count = kernels.invariants_grid(views[0], gidx, *views[1:], form.code,
                                            dtype.type(arg.pivot_floor(dtype)),
                                            dtype.type(1))
        if check:
            raise_for_bad_points(function, count, grid, {"E": e, "B": b, "out": out},
                                 metric=("gamma", metric, gidx))
    return FieldInvariants(out[0], out[1])
