"""The 3+1 projections of the electromagnetic stress-energy tensor, and its 4D components.

Public wrappers around :mod:`emsource.kernels.sources`: each checks its arguments, sees every
array in the kernels' layout through views (never a copy), allocates or accepts ``out``, and
makes one kernel call, which also checks every grid point.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from .errors import GridPointError
from .kernels import sources as kernels
from .unit_systems import stress_energy_prefactor

__all__ = ["AdmSources", "GridPointError", "adm_sources", "stress_energy_4d"]


class AdmSources(NamedTuple):
    """The electromagnetic sources of the 3+1 Einstein equations on a grid.

    Attributes
    ----------
    rho : (*grid) ndarray
        Energy density measured by the normal observer, rho = n_a n_b T^ab.
    S_i : (3, *grid) ndarray
        Momentum density, S_i = -gamma_i^a n^b T_ab (covariant index).
    S_ij : (6, *grid) ndarray
        Spatial stress S_ij = gamma_i^a gamma_j^b T_ab, packed (xx, xy, xz, yy, yz, zz).
    S : (*grid) ndarray
        Trace gamma^ij S_ij. The electromagnetic T^ab is traceless, so S = rho exactly; it is
        stored separately so that adding matter sources to one does not change the other.

    With ``layout="component_last"`` the component axis of S_i and S_ij is last instead.
    Units: those of the fields squared (Gaussian or Heaviside-Lorentz, as asked), G = c = 1.
    """

    rho: np.ndarray
    S_i: np.ndarray
    S_ij: np.ndarray
    S: np.ndarray


def _describe_bad_point(named_values: dict) -> str:
    """Why the point checks failed, from the input values at one grid point."""
    problems = []
    for name, values in named_values.items():
        values = np.atleast_1d(values)
        bad = [f"{name}[{c}] = {v}" if values.size > 1 else f"{name} = {v}"
               for c, v in enumerate(values) if not np.isfinite(v)]
        problems.extend(bad)
    if problems:
        return "non-finite value(s): " + ", ".join(problems)
    if "alpha" in named_values and not named_values["alpha"] > 0:
        return f"lapse alpha = {named_values['alpha']} is not positive"
    g = named_values["gamma"]
    matrix = np.array([[g[0], g[1], g[2]], [g[1], g[3], g[4]], [g[2], g[4], g[5]]], dtype=float)
    eigenvalues = np.linalg.eigvalsh(matrix)
    if eigenvalues[0] <= 0:
        return f"spatial metric gamma is not positive definite (eigenvalues {eigenvalues})"
    return "inputs so large that their sum overflows the floating-point range"


def _raise_bad_points(function, bad_count, grid, flat, alpha, beta, gamma, gidx, E, B):
    """Find the first bad point (a serial search, run only on this error path) and raise."""
    if alpha is None:
        g4, e4, b4 = arg.as_grid_views([gamma, E, B], flat)
        first = kernels.first_invalid_spatial(g4, gidx, e4, b4)
    else:
        a4, be4, g4, e4, b4 = arg.as_grid_views([alpha, beta, gamma, E, B], flat)
        first = kernels.first_invalid_spacetime(a4, be4, g4, gidx, e4, b4)
    index = tuple(int(i) for i in np.unravel_index(first, grid))
    i, j, k = np.unravel_index(first, g4.shape[1:])
    values = {"gamma": g4[list(gidx), i, j, k], "E": e4[:, i, j, k], "B": b4[:, i, j, k]}
    if alpha is not None:
        values = {"alpha": a4[i, j, k], "beta": be4[:, i, j, k], **values}
    raise GridPointError(function, bad_count, int(np.prod(grid)), index, _describe_bad_point(values))


def _common_inputs(function, gamma, E, B, units, field_index, layout):
    """Checked, component-first views of gamma, E, B and the scalar constants of the kernel."""
    arg.choice(function, "layout", layout, arg.LAYOUTS)
    arg.choice(function, "field_index", field_index, arg.FIELD_INDICES)
    grid = arg.grid_of(function, "E", E, layout)
    metric, gidx = arg.spatial_metric(function, gamma, grid, layout)
    e = arg.vector(function, "E", E, grid, layout)
    b = arg.vector(function, "B", B, grid, layout)
    return grid, metric, gidx, e, b, stress_energy_prefactor(units), field_index == "lower"


def adm_sources(gamma, E, B, *, units="gaussian", field_index="upper",
                layout="component_first", check=True, out=None) -> AdmSources:
    r"""Energy density, momentum density, stress and its trace of the electromagnetic field.

    Implements, with E^2 = gamma_ij E^i E^j and likewise B^2 (Gaussian units; Heaviside-Lorentz
    drops the 1/(4 pi)):

    .. math::

        \rho = \frac{E^2 + B^2}{8\pi}, \qquad
        S_i = \frac{\epsilon_{ijk} E^j B^k}{4\pi}, \quad \epsilon_{ijk} = \sqrt{\gamma}\,[ijk],

        S_{ij} = \frac{1}{4\pi}\Big(-E_i E_j - B_i B_j + \tfrac12 \gamma_{ij}(E^2 + B^2)\Big),
        \qquad S = \gamma^{ij} S_{ij} = \rho .

    Parameters
    ----------
    gamma : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij, packed (xx, xy, xz, yy, yz, zz) or full (only its upper
        triangle is read). Must be positive definite at every point.
    E, B : (3, *grid) ndarray
        Electric and magnetic fields measured by the normal observer, contravariant E^i, B^i
        (covariant E_i, B_i with ``field_index="lower"``).
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of the fields; the sources come out in the same system.
    field_index : {"upper", "lower"}
        Index position of the E and B components given.
    layout : {"component_first", "component_last"}
        ``component_last`` takes (*grid, 3), (*grid, 6) or (*grid, 3, 3) arrays and returns
        S_i and S_ij as (*grid, 3) and (*grid, 6). Either way the data are only viewed.
    check : bool
        Count grid points with non-finite input or a metric that is not positive definite, and
        raise :class:`GridPointError` naming the first. The checks are folded into the kernel's
        single pass; on a 128^3 grid they cost a few percent (``benchmarks/bench_sources.py``).
        Turn them off only in a loop whose inputs are checked elsewhere.
    out : AdmSources or tuple of 4 ndarrays, optional
        Preallocated (rho, S_i, S_ij, S) in the shapes above and the inputs' dtype, so that an
        evolution loop allocates nothing. They must not overlap the inputs. After an error they
        may hold partial results.

    Returns
    -------
    AdmSources
        (rho, S_i, S_ij, S), float32 or float64 like the inputs. Grids may be 1-, 2- or 3-D.

    Raises
    ------
    TypeError
        Non-array input, integer dtype, or inputs of different dtypes.
    ValueError
        Wrong component counts or grid shapes (the message names the argument and both shapes),
        an unknown option, or an ``out`` array that does not fit.
    GridPointError
        Non-finite input or a metric that is not positive definite, with the number of bad
        points and the grid index of the first.

    References
    ----------
    E. Gourgoulhon, 3+1 Formalism in General Relativity, Lecture Notes in Physics 846 (2012),
    sec. 5.2 (the projections) ; T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010),
    sec. 5.2 ; J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 6.7-6.8.

    Examples
    --------
    >>> import numpy as np, emsource
    >>> gamma = np.zeros((6, 4, 4, 4)); gamma[[0, 3, 5]] = 1.0
    >>> E = np.zeros((3, 4, 4, 4)); E[1] = 1.0          # E along y ...
    >>> B = np.zeros((3, 4, 4, 4)); B[2] = 1.0          # ... B along z: a wave moving to +x
    >>> src = emsource.adm_sources(gamma, E, B)
    >>> bool(np.allclose(src.rho, 1 / (4 * np.pi))), bool(np.allclose(src.S_i[0], src.rho))
    (True, True)
    """
    function = "adm_sources"
    grid, metric, gidx, e, b, prefactor, fields_lower = _common_inputs(
        function, gamma, E, B, units, field_index, layout)
    dtype = arg.common_dtype(function, ("gamma", "E", "B"), (gamma, E, B))
    if out is None:
        result = AdmSources(
            np.empty(grid, dtype),
            np.empty(arg.shape_for(grid, (3,), layout), dtype),
            np.empty(arg.shape_for(grid, (6,), layout), dtype),
            np.empty(grid, dtype),
        )
        views = [result.rho, arg.component_first(result.S_i, 1, layout),
                 arg.component_first(result.S_ij, 1, layout), result.S]
    else:
        if not isinstance(out, tuple) or len(out) != 4:
            raise TypeError(f"{function}: out must be an AdmSources or a tuple (rho, S_i, S_ij, S)")
        result = AdmSources(*out)
        views = arg.outputs(
            function, AdmSources._fields, result,
            (grid, arg.shape_for(grid, (3,), layout), arg.shape_for(grid, (6,), layout), grid),
            (0, 1, 1, 0), dtype, layout, ("gamma", "E", "B"), (gamma, E, B))
    (g, ev, bv, rho, s_i, s_ij, s), flat = arg.kernel_views([metric, e, b] + views, grid)
    driver = kernels.adm_sources_flat if flat else kernels.adm_sources_grid
    bad_count = driver(g, gidx, ev, bv, rho, s_i, s_ij, s,
                       dtype.type(prefactor), dtype.type(0.5), fields_lower, bool(check))
    if bad_count:
        _raise_bad_points(function, bad_count, grid, flat, None, None, g, gidx, ev, bv)
    return result


def stress_energy_4d(alpha, beta, gamma, E, B, *, units="gaussian", index="lower",
                     field_index="upper", layout="component_first", check=True, out=None):
    r"""The spacetime components T_ab (or T^ab) of the electromagnetic stress-energy tensor.

    Assembled from the 3+1 projections (rho, S_i, S_ij of :func:`adm_sources`):

    .. math::

        T_{tt} = \alpha^2\rho - 2\alpha\beta^i S_i + \beta^i\beta^j S_{ij}, \quad
        T_{ti} = \beta^j S_{ij} - \alpha S_i, \quad T_{ij} = S_{ij},

        T^{ab} = \rho\, n^a n^b + n^a S^b + S^a n^b + S^{ab}, \quad n^a = (1, -\beta^i)/\alpha .

    Parameters
    ----------
    alpha : (*grid) ndarray
        Lapse, positive at every point.
    beta : (3, *grid) ndarray
        Shift beta^i (contravariant).
    gamma, E, B, units, field_index, check
        As for :func:`adm_sources`.
    index : {"lower", "upper"}
        T_ab or T^ab.
    layout : {"component_first", "component_last"}
        With ``component_last`` the result is (*grid, 10) and the inputs component-last too.
    out : (10, *grid) ndarray, optional
        Preallocated result in the inputs' dtype; not overlapping the inputs. After an error it
        may hold partial results.

    Returns
    -------
    (10, *grid) ndarray
        Packed (tt, tx, ty, tz, xx, xy, xz, yy, yz, zz).

    Raises
    ------
    TypeError, ValueError, GridPointError
        As for :func:`adm_sources`; the point checks also reject a lapse that is not positive
        and non-finite lapse or shift.

    References
    ----------
    E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), eq. (5.2) and sec. 4.2
    (n^a in terms of lapse and shift); signature and conventions in the package README.
    """
    function = "stress_energy_4d"
    arg.choice(function, "index", index, ("lower", "upper"))
    grid, metric, gidx, e, b, prefactor, fields_lower = _common_inputs(
        function, gamma, E, B, units, field_index, layout)
    lapse = arg.scalar(function, "alpha", alpha, grid)
    shift = arg.vector(function, "beta", beta, grid, layout)
    names = ("alpha", "beta", "gamma", "E", "B")
    inputs = (alpha, beta, gamma, E, B)
    dtype = arg.common_dtype(function, names, inputs)
    shape = arg.shape_for(grid, (10,), layout)
    if out is None:
        result = np.empty(shape, dtype)
        t_view = arg.component_first(result, 1, layout)
    else:
        result = out
        (t_view,) = arg.outputs(function, ("",), (out,), (shape,), (1,), dtype, layout, names, inputs)
    (a, be, g, ev, bv, t), flat = arg.kernel_views([lapse, shift, metric, e, b, t_view], grid)
    driver = kernels.stress_energy_flat if flat else kernels.stress_energy_grid
    bad_count = driver(a, be, g, gidx, ev, bv, t, dtype.type(prefactor), dtype.type(0.5),
                       fields_lower, index == "upper", bool(check))
    if bad_count:
        _raise_bad_points(function, bad_count, grid, flat, a, be, g, gidx, ev, bv)
    return result
