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
from .input_forms import input_form
from ._threading import kernel_call
from ._call_plans import FlatPlan, PlanCache, call_signature, planned_outputs
from .kernels import sources as kernels
from .kernels._compile import call_sharing_layouts
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


def _named_values(names, arrays, index):
    """{name: values at ``index``} of (ncomp, nx, ny, nz) or (nx, ny, nz) kernel views."""
    return {name: a[(slice(None),) + index] if a.ndim == 4 else a[index]
            for name, a in zip(names, arrays)}


def describe_bad_point(named_values: dict, dtype) -> str:
    """Why the point checks failed, from the input values at one grid point.

    The kernels reject a point when an input is not finite, the lapse (if given) is not
    positive, a pivot of gamma = L D L^T is not positive, or an output is not finite although
    every input is (overflow). This names the first of these that holds.
    """
    problems = []
    for name, values in named_values.items():
        values = np.atleast_1d(values)
        problems.extend(f"{name}[{c}] = {v}" if values.size > 1 else f"{name} = {v}"
                        for c, v in enumerate(values) if not np.isfinite(v))
    if problems:
        return "non-finite value(s): " + ", ".join(problems)
    if "alpha" in named_values and not named_values["alpha"] > 0:
        return f"lapse alpha = {named_values['alpha']} is not positive"
    g = np.asarray(named_values["gamma"], dtype=dtype)
    d1, d2, d3 = arg.metric_pivots(g)
    if not arg.metric_is_positive_definite(g, dtype):
        matrix = np.array([[g[0], g[1], g[2]], [g[1], g[3], g[4]], [g[2], g[4], g[5]]], float)
        eigenvalues = np.linalg.eigvalsh(matrix)
        what = ("not positive definite" if eigenvalues[0] <= 0 else
                f"not positive definite in {np.dtype(dtype).name} (condition number "
                f"{eigenvalues[-1] / eigenvalues[0]:.3g}, beyond 1/eps)")
        return (f"spatial metric gamma is {what} (eigenvalues {eigenvalues}; pivots of "
                f"gamma = L D L^T: {float(d1):.6g}, {float(d2):.6g}, {float(d3):.6g})")
    sizes = {name: float(np.max(np.abs(values))) for name, values in named_values.items()}
    largest = max(sizes, key=sizes.get)
    what = "the fields" if largest in ("E", "B") else {"alpha": "the lapse", "beta": "the shift",
                                                       "gamma": "the metric"}[largest]
    info = np.finfo(dtype)
    return (f"the outputs overflow the {info.dtype.name} range (largest finite {info.max:.3g}); "
            f"the largest input is {largest} of size {sizes[largest]:.3g}: rescale {what} "
            "(a larger unit)" + _or_float64(dtype))


def _or_float64(dtype) -> str:
    """The advice to switch to float64, only where the data are not float64 already."""
    return "" if np.dtype(dtype) == np.float64 else " or use float64"


def describe_underflow(named_values: dict, dtype) -> str:
    """Why underflowing energy densities are an error, and what to do."""
    size = max(float(np.max(np.abs(named_values[name]))) for name in ("E", "B"))
    info = np.finfo(dtype)
    return (f"fields of size {size:.3g} give an energy density below the smallest normal "
            f"{info.dtype.name} ({info.tiny:.3g}), and no point of the grid has one above "
            f"{info.tiny / info.eps:.3g}: the results have lost their digits. Rescale the "
            "fields (a smaller unit)" + _or_float64(dtype))


def raise_for_counts(function, counts, grid, dtype, search, search_arguments, names, views,
                     outputs, gidx):
    """Raise :class:`GridPointError` for what the kernel counted, else return.

    ``counts`` is the kernel's (bad points, underflowing points); ``search(*search_arguments,
    underflow)`` finds the first such point in the (ncomp, nx, ny, nz) ``views`` (named
    ``names``; ``gidx`` the six components of the metric). Underflowing points are an error only where they matter: when no output of the
    grid is above tiny / eps, so that the lost values are not negligible next to the largest
    one (a Gaussian tail that underflows is harmless).
    """
    bad_count, underflow_count = counts
    if not bad_count and not underflow_count:
        return
    info = np.finfo(dtype)
    if not bad_count:
        largest = max((float(np.max(np.abs(a))) if a.size else 0.0) for a in outputs)
        if largest >= info.tiny / info.eps:
            return
    underflow = not bad_count
    first = search(*search_arguments, underflow)
    npoints = int(np.prod(grid))
    count = underflow_count if underflow else bad_count
    if first < 0:  # not found again: only if re-evaluation rounds differently at a borderline point
        raise GridPointError(function, count, npoints, None, "a borderline value (see the count)")
    index4 = tuple(int(i) for i in np.unravel_index(first, views[0].shape[-3:]))
    index = tuple(int(i) for i in np.unravel_index(first, grid))
    values = _named_values(names, views, index4)
    values["gamma"] = values["gamma"][list(gidx)]  # packed (xx, xy, xz, yy, yz, zz)
    reason = describe_underflow(values, dtype) if underflow else describe_bad_point(values, dtype)
    raise GridPointError(function, count, npoints, index, reason)


def _common_inputs(function, gamma, E, B, units, field_index, layout):
    """Checked, component-first views of gamma, E, B, the input form and the prefactor."""
    arg.choice(function, "layout", layout, arg.LAYOUTS)
    form = input_form(function, field_index)
    grid = arg.grid_of(function, "E", E, layout)
    metric, gidx = arg.spatial_metric(function, gamma, grid, layout)
    e = arg.vector(function, "E", E, grid, layout)
    b = arg.vector(function, "B", B, grid, layout)
    return grid, metric, gidx, e, b, stress_energy_prefactor(units), form.code


#: Argument names of the functions that take lapse and shift, in their order.
SPACETIME_INPUT_NAMES = ("alpha", "beta", "gamma", "E", "B")


def spacetime_inputs(function, alpha, beta, gamma, E, B, units, field_index, layout):
    """As :func:`_common_inputs`, with the lapse and shift checked and viewed too, and the
    one dtype of all five inputs: (grid, lapse, shift, metric, gidx, E, B, prefactor, form
    code, dtype)."""
    grid, metric, gidx, e, b, prefactor, form = _common_inputs(
        function, gamma, E, B, units, field_index, layout)
    lapse = arg.scalar(function, "alpha", alpha, grid)
    shift = arg.vector(function, "beta", beta, grid, layout)
    dtype = arg.common_dtype(function, SPACETIME_INPUT_NAMES, (alpha, beta, gamma, E, B))
    return grid, lapse, shift, metric, gidx, e, b, prefactor, form, dtype


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
    field_index : {"upper", "lower", "densitized"}
        What the E and B components given are (:mod:`emsource.input_forms`): E^i, B^i; E_i,
        B_i; or the densitized sqrt(gamma) E^i, sqrt(gamma) B^i.
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
    inputs = (gamma, E, B)
    key = call_signature(inputs, out, AdmSources, (units, field_index, layout))
    plan = _ADM_PLANS.get(key)
    if plan is not None:
        planned = planned_outputs(plan, function, inputs, _INPUT_NAMES, out, AdmSources)
        if planned is not None:
            result, views = planned
            gidx, constants, drivers = plan.extra
            _run_adm_kernel(plan.grid, plan.dtype, gidx, constants, views, drivers, check)
            return result
    grid, metric, gidx, e, b, prefactor, form = _common_inputs(
        function, gamma, E, B, units, field_index, layout)
    dtype = arg.common_dtype(function, ("gamma", "E", "B"), (gamma, E, B))
    if out is None:
        empty = arg.result_allocator(grid, dtype)
        result = AdmSources(
            empty(grid, dtype),
            empty(arg.shape_for(grid, (3,), layout), dtype),
            empty(arg.shape_for(grid, (6,), layout), dtype),
            empty(grid, dtype),
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
    if not arg.has_points(grid):
        return result
    kernel_views, flat = arg.kernel_views([metric, e, b] + views, grid, whole_grids=True)
    constants = arg.kernel_constants(form, dtype, prefactor)
    drivers = None if not flat else arg.flat_driver_tables(
        kernel_views, grid, kernels.ADM_SOURCES_FLAT, kernels.ADM_SOURCES_FLAT_LINE_STEPS,
        kernels.ADM_SOURCES_FLAT_STREAMING)
    if layout == "component_first" and key is not None:
        # Only now, after every check passed: a plan is what a full validation derived.
        _ADM_PLANS.put(key, FlatPlan.of(inputs + result, kernel_views, grid, dtype,
                                        (gidx, constants, drivers), outputs=4))
    _run_adm_kernel(grid, dtype, gidx, constants, kernel_views, drivers, check)
    return result


#: Validated layouts of :func:`adm_sources` calls by signature (:mod:`emsource._call_plans`).
_ADM_PLANS = PlanCache()


_INPUT_NAMES = ("gamma", "E", "B")


def _run_adm_kernel(grid, dtype, gidx, constants, views, flat_drivers, check):
    """One call of the source driver on kernel views: the flat loop (``flat_drivers`` the tables
    of flat drivers by form to try in turn, :func:`emsource._arguments.flat_driver_tables`;
    None for the other views), windowed loop or column loop; on counted bad points, the search
    for the first one and :class:`GridPointError`."""
    g, ev, bv, rho, s_i, s_ij, s = views
    form, physics = constants[0], constants[1:]  # the vectorised drivers: one per form
    flat = flat_drivers is not None
    with kernel_call():
        spans = None if flat else arg.unit_stride_spans(views)
        if flat:
            for table in flat_drivers:  # a streaming driver declines with (-1, -1)
                counts = table[form](g, gidx, ev, bv, rho, s_i, s_ij, s, *physics, bool(check))
                if counts[0] >= 0:
                    break
        elif spans is not None:  # windows contiguous along z (ghost zones sliced off)
            (g1, e1, b1, *outputs), steps, shape = spans
            counts = call_sharing_layouts(
                kernels.ADM_SOURCES_WINDOW[form],
                (g1, gidx, e1, b1, *outputs, steps, shape, *physics, bool(check)), (0, 2, 3))
        else:  # every mix of strided inputs shares one specialisation of the column loop
            counts = call_sharing_layouts(
                kernels.adm_sources_grid,
                (g, gidx, ev, bv, rho, s_i, s_ij, s, *constants, bool(check)), (0, 2, 3))
        if counts[0] or counts[1]:
            grid_views = arg.as_grid_views([g, ev, bv, rho, s_i, s_ij, s], flat, grid)
            raise_for_counts("adm_sources", counts, grid, dtype, kernels.first_failing_adm,
                             (grid_views[0], gidx, *grid_views[1:], *constants),
                             ("gamma", "E", "B"), grid_views[:3], grid_views[3:], gidx)


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
    names = SPACETIME_INPUT_NAMES
    inputs = (alpha, beta, gamma, E, B)
    key = call_signature(inputs, out, None, (units, index, field_index, layout))
    plan = _STRESS_ENERGY_PLANS.get(key)
    if plan is not None:
        planned = planned_outputs(plan, function, inputs, names, out, None)
        if planned is not None:
            result, views = planned
            gidx, constants, drivers = plan.extra
            _run_stress_energy_kernel(plan.grid, plan.dtype, gidx, constants, views, drivers,
                                      check)
            return result
    arg.choice(function, "index", index, ("lower", "upper"))
    (grid, lapse, shift, metric, gidx, e, b, prefactor, form,
     dtype) = spacetime_inputs(function, alpha, beta, gamma, E, B, units, field_index, layout)
    shape = arg.shape_for(grid, (10,), layout)
    if out is None:
        result = arg.result_allocator(grid, dtype)(shape, dtype)
        t_view = arg.component_first(result, 1, layout)
    else:
        result = out
        (t_view,) = arg.outputs(function, ("",), (out,), (shape,), (1,), dtype, layout, names, inputs)
    if not arg.has_points(grid):
        return result
    views, flat = arg.kernel_views([lapse, shift, metric, e, b, t_view], grid, whole_grids=True)
    constants = arg.kernel_constants(form, dtype, prefactor) + (index == "upper",)
    drivers = None if not flat else arg.flat_driver_tables(
        views, grid, kernels.STRESS_ENERGY_FLAT, kernels.STRESS_ENERGY_FLAT_LINE_STEPS,
        kernels.STRESS_ENERGY_FLAT_STREAMING)
    if layout == "component_first" and flat and key is not None:
        # Only now, after every check passed: a plan is what a full validation derived.
        _STRESS_ENERGY_PLANS.put(key, FlatPlan.of(inputs + (result,), views, grid, dtype,
                                                  (gidx, constants, drivers), outputs=1))
    _run_stress_energy_kernel(grid, dtype, gidx, constants, views, drivers, check)
    return result


#: Validated layouts of :func:`stress_energy_4d` calls by signature.
_STRESS_ENERGY_PLANS = PlanCache()


def _run_stress_energy_kernel(grid, dtype, gidx, constants, views, flat_drivers, check):
    """One call of the T_ab (T^ab) driver on kernel views: the flat loop (``flat_drivers`` its
    table, as in :func:`_run_adm_kernel`; None for the other views), windowed loop or column
    loop; on counted bad points, the search for the first one and :class:`GridPointError`."""
    a, be, g, ev, bv, t = views
    upper = constants[-1]
    physics = constants[1:-1]  # the vectorised drivers: one per (form, upper)
    form = constants[0]
    flat = flat_drivers is not None
    with kernel_call():
        spans = None if flat else arg.unit_stride_spans(views)
        if flat:
            for table in flat_drivers:
                counts = table[form, upper](a, be, g, gidx, ev, bv, t, *physics, bool(check))
                if counts[0] >= 0:
                    break
        elif spans is not None:  # windows contiguous along z (ghost zones sliced off)
            (a1, be1, g1, e1, b1, t1), steps, window = spans
            counts = call_sharing_layouts(
                kernels.STRESS_ENERGY_WINDOW[form, upper],
                (a1, be1, g1, gidx, e1, b1, t1, steps, window, *physics, bool(check)),
                (0, 1, 2, 4, 5))
        else:  # every mix of strided inputs shares one specialisation of the column loop
            counts = call_sharing_layouts(
                kernels.stress_energy_grid,
                (a, be, g, gidx, ev, bv, t, *constants, bool(check)), (0, 1, 2, 4, 5))
        if counts[0] or counts[1]:
            grid_views = arg.as_grid_views(list(views), flat, grid)
            raise_for_counts("stress_energy_4d", counts, grid, dtype,
                             kernels.first_failing_stress_energy,
                             (grid_views[0], grid_views[1], grid_views[2], gidx, grid_views[3],
                              grid_views[4], grid_views[5], *constants),
                             SPACETIME_INPUT_NAMES, grid_views[:5], grid_views[5:], gidx)
