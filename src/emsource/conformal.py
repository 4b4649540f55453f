r"""Sources from the conformal variables of BSSN- and CCZ4-type evolutions, in the forms their
right-hand sides use.

Decompositions (:mod:`emsource.metric_forms`; tilde-gamma_ij the conformal metric, usually with
det tilde-gamma = 1, which is neither assumed nor checked here):

================  ============================================  ==========================
``decomposition``  physical metric                               rescale c
================  ============================================  ==========================
``"chi"``          gamma_ij = tilde-gamma_ij / chi                c = chi
``"w"``            gamma_ij = tilde-gamma_ij / W^2, W = sqrt(chi)  c = W^2
``"phi"``          gamma_ij = e^{4 phi} tilde-gamma_ij            c = e^{-4 phi}
================  ============================================  ==========================

Outputs (Gaussian units; Heaviside-Lorentz drops the 1/(4 pi)), computed with the physical
metric at each point:

.. math::

    \rho = \frac{E^2 + B^2}{8\pi}, \quad S_i = \frac{\epsilon_{ijk} E^j B^k}{4\pi}, \quad
    S = \gamma^{ij} S_{ij} = \rho,

    A_{ij} \equiv c\,\big(S_{ij} - \tfrac13 \gamma_{ij} S\big)
          = c\,S_{ij} - \tfrac13 \tilde\gamma_{ij} S
    \quad (\text{e.g. } e^{-4\phi} S_{ij}^{TF} = \chi S_{ij}^{TF}).

Where they enter (T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 11.5,
eqs. for d_t K, d_t tilde-A_ij, d_t tilde-Gamma^i; M. Alcubierre, Introduction to 3+1 Numerical
Relativity (2008), sec. 2.8; both from memory):

    d_t K            = ... + 4 pi alpha (rho + S)
    d_t tilde-A_ij   = ... - 8 pi alpha A_ij            (the trace-free part, rescaled by c)
    d_t tilde-Gamma^i = ... - 16 pi alpha tilde-gamma^ij S_j

and in the CCZ4 form the same A_ij, S_i, and rho, S in the equations of K and Theta (from
memory). The electromagnetic S equals rho exactly; it is written separately so that a code can
add matter sources to one of them.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from ._call_plans import FlatPlan, PlanCache, call_signature, planned_outputs
from ._threading import kernel_call
from .faraday import raise_for_bad_points
from .input_forms import input_form
from .kernels._compile import call_sharing_layouts, shared_dispatcher
from .kernels import conformal as kernels
from .metric_forms import decomposition as find_decomposition
from .unit_systems import stress_energy_prefactor

__all__ = ["ConformalSources", "conformal_sources", "physical_metric"]


class ConformalSources(NamedTuple):
    """The sources in the forms the conformal right-hand sides use (module docstring).

    Attributes
    ----------
    rho : (*grid) ndarray
        Energy density.
    S_i : (3, *grid) ndarray
        Momentum density (covariant).
    S : (*grid) ndarray
        Trace gamma^ij S_ij (= rho for the electromagnetic field).
    A_ij : (6, *grid) ndarray
        c (S_ij - gamma_ij S / 3), packed (xx, xy, xz, yy, yz, zz): the trace-free stress
        rescaled by chi, W^2 or e^{-4 phi}.
    """

    rho: np.ndarray
    S_i: np.ndarray
    S: np.ndarray
    A_ij: np.ndarray


def _conformal_inputs(function, factor, gamma_tilde, grid, decomposition):
    code = find_decomposition(function, decomposition).code
    f = arg.float_array(function, "conformal_factor", factor)
    if f.shape != grid:
        raise ValueError(f"{function}: conformal_factor must have shape {grid}, found {f.shape}")
    try:
        metric, gidx = arg.spatial_metric(function, gamma_tilde, grid, "component_first")
    except ValueError as error:  # name the argument as the caller knows it
        raise ValueError(str(error).replace("gamma", "gamma_tilde", 1)) from None
    return code, f, metric, gidx


#: Positions of the arrays the conformal-source drivers only read (factor, tilde-gamma, E, B).
_DRIVER_INPUTS = (0, 1, 3, 4)


def _run_conformal_kernel(decomposition, form, gidx, arrays, grid, dtype, prefactor, check):
    """One call of the conformal-source driver on ``arrays`` (factor, tilde-gamma, E, B, rho,
    S_i, S, A_ij, checked and component-first): ``(count of bad points, spans, extra)``, where
    the call is one line of points the spans the driver took and what else a plan keeps (the
    driver's dispatcher, the metric indices, its arguments after the arrays), else None, None.

    Large grids whose rows do not alias first try the streaming-store driver
    (:data:`emsource.kernels.conformal.CONFORMAL_SOURCES_STREAMING`,
    :func:`emsource._arguments.tries_streaming`). C-contiguous data and padded rows are one
    line of points, cut into strips; views
    contiguous along z (ghost zones sliced off) are windows: both go to the vectorised driver of
    (decomposition, form) over spans (:data:`emsource.kernels.conformal.CONFORMAL_SOURCES`,
    :func:`emsource._arguments.driver_spans`). Everything else (no unit stride along z,
    negative strides) takes the column loop.
    """
    views, flat = arg.kernel_views(arrays, grid, whole_grids=True)
    physics = arg.kernel_scalars(dtype, prefactor, arg.pivot_floor(dtype), 1)
    if flat and arg.tries_streaming(views, grid):
        # Large rows that do not alias: the streaming driver, unless it declines (output rows
        # not aligned alike). No plan: on such grids a call's Python part is negligible.
        f, metric, e, b, *outputs = views
        with kernel_call():
            count = kernels.CONFORMAL_SOURCES_STREAMING[decomposition, form](
                f, metric, gidx, e, b, *outputs, *physics, bool(check))
        if count >= 0:
            return count, None, None
    found = arg.driver_spans(views, grid, flat)
    if found is None:  # the column loop, run-time decomposition and form; every mix of
        # strided inputs shares one specialisation
        f, metric, e, b, *outputs = views
        with kernel_call():
            count = call_sharing_layouts(
                kernels.conformal_sources_grid,
                (f, metric, gidx, e, b, *outputs, decomposition, form, *physics), (0, 1, 3, 4))
        return count, None, None
    (f, metric, e, b, *outputs), steps, shape, last = found
    tail = (steps, shape, last, *physics)
    arguments = (f, metric, gidx, e, b, *outputs, *tail, bool(check))
    drivers = (kernels.CONFORMAL_SOURCES_LINE_STEPS if flat and arg.takes_line_steps(views, grid)
               else kernels.CONFORMAL_SOURCES)
    driver = shared_dispatcher(drivers[decomposition, form], arguments, _DRIVER_INPUTS)
    with kernel_call():
        count = driver(*arguments)
    if not flat:
        return count, None, None
    return count, [f, metric, e, b, *outputs], (driver, gidx, tail)


def _bad_factor_reason(decomposition, factor):
    return (f"{'chi' if decomposition == 'chi' else 'W'} must be positive" if decomposition != "phi"
            else "phi overflows exp(-4 phi)")


def physical_metric(conformal_factor, gamma_tilde, *, decomposition):
    """The physical gamma_ij (packed, (6, *grid)) from tilde-gamma_ij and chi, W or phi.

    Parameters
    ----------
    conformal_factor : (*grid) ndarray
        chi, W or phi, as ``decomposition`` says.
    gamma_tilde : (6, *grid) or (3, 3, *grid) ndarray
        The conformal metric tilde-gamma_ij.
    decomposition : {"chi", "w", "phi"}
        See the module docstring.

    Returns
    -------
    (6, *grid) ndarray
        gamma_ij, for every function of the package that takes ``gamma``. No point checks here
        (those functions check the metric they are given).
    """
    function = "physical_metric"
    f = arg.float_array(function, "conformal_factor", conformal_factor)
    code, f, metric, gidx = _conformal_inputs(function, conformal_factor, gamma_tilde,
                                              tuple(f.shape), decomposition)
    dtype = arg.common_dtype(function, ("conformal_factor", "gamma_tilde"),
                             (conformal_factor, gamma_tilde))
    out = np.empty((6,) + f.shape, dtype)
    if arg.has_points(f.shape):
        views = arg.three_axis_views([f, metric, out], f.shape)
        with kernel_call():
            kernels.physical_metric_grid(views[0], views[1], gidx, views[2], code,
                                         dtype.type(1))
    return out


def conformal_sources(conformal_factor, gamma_tilde, E, B, *, decomposition, units="gaussian",
                      field_index="upper", check=True, out=None) -> ConformalSources:
    r"""rho, S_i, S and the rescaled trace-free stress A_ij from conformal variables.

    Parameters
    ----------
    conformal_factor : (*grid) ndarray
        chi, W or phi (``decomposition``).
    gamma_tilde : (6, *grid) or (3, 3, *grid) ndarray
        The conformal metric tilde-gamma_ij.
    E, B : (3, *grid) ndarray
        The fields of the normal observer in the input form ``field_index`` ("upper",
        "lower" or "densitized"; indices moved and densities taken with the physical metric).
    decomposition : {"chi", "w", "phi"}
        Required: which factor ``conformal_factor`` holds (never assumed).
    units : {"gaussian", "heaviside_lorentz"}
    check : bool
        Raise :class:`GridPointError` at the first point with non-finite input or output, a
        chi or W that is not positive, or a physical metric that is not positive definite.
    out : ConformalSources or tuple of 4 ndarrays, optional
        Preallocated (rho, S_i, S, A_ij) in the shapes below and the inputs' dtype, so that a
        right-hand side evaluated every step allocates nothing (padded grid functions of
        :mod:`emsource.grid_arrays` are welcome). They must not overlap the inputs. After an
        error they may hold partial results.

    Returns
    -------
    ConformalSources
        (rho, S_i, S, A_ij), component axis first.

    References
    ----------
    See the module docstring.

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.conformal import conformal_sources
    >>> chi = np.full(1, 0.25); gt = np.zeros((6, 1)); gt[[0, 3, 5]] = 1.0  # gamma = 4 delta
    >>> E = np.array([[0.5], [0.0], [0.0]]); B = np.zeros((3, 1))
    >>> s = conformal_sources(chi, gt, E, B, decomposition="chi", units="heaviside_lorentz")
    >>> float(s.rho[0]), (s.A_ij[:, 0] + 0.0).round(6).tolist()   # E^2 = 4 * 0.25 = 1
    (0.5, [-0.666667, 0.0, 0.0, 0.333333, 0.0, 0.333333])
    """
    function = "conformal_sources"
    inputs = (conformal_factor, gamma_tilde, E, B)
    key = call_signature(inputs, out, ConformalSources, (decomposition, units, field_index))
    plan = _CONFORMAL_PLANS.get(key)
    if plan is not None:
        planned = planned_outputs(plan, function, inputs, _INPUT_NAMES, out, ConformalSources)
        if planned is not None:
            result, spans = planned
            driver, gidx, tail = plan.extra
            with kernel_call():
                count = driver(spans[0], spans[1], gidx, *spans[2:], *tail, bool(check))
            if check and count:
                _raise_for_bad_points(function, count, plan.grid, inputs, decomposition, result)
            return result
    form = input_form(function, field_index)
    prefactor = stress_energy_prefactor(units)
    grid = arg.grid_of(function, "E", E, "component_first")
    code, f, metric, gidx = _conformal_inputs(function, conformal_factor, gamma_tilde, grid,
                                              decomposition)
    e = arg.vector(function, "E", E, grid, "component_first")
    b = arg.vector(function, "B", B, grid, "component_first")
    dtype = arg.common_dtype(function, _INPUT_NAMES, inputs)
    result = arg.outputs_or_new(function, ConformalSources, out,
                                (grid, (3,) + grid, grid, (6,) + grid), (0, 1, 0, 1), dtype,
                                _INPUT_NAMES, inputs)
    if not arg.has_points(grid):
        return result
    count, spans, extra = _run_conformal_kernel(code, form.code, gidx, [f, metric, e, b, *result],
                                                grid, dtype, prefactor, check)
    if spans is not None and key is not None:  # after every check passed: a plan is what a
        # full validation derived
        _CONFORMAL_PLANS.put(key, FlatPlan.of(inputs + result, spans, grid, dtype, extra,
                                              outputs=4))
    if check and count:
        _raise_for_bad_points(function, count, grid, inputs, decomposition, result)
    return result


_INPUT_NAMES = ("conformal_factor", "gamma_tilde", "E", "B")
#: Validated layouts of :func:`conformal_sources` calls by signature
#: (:mod:`emsource._call_plans`).
_CONFORMAL_PLANS = PlanCache()


def _raise_for_bad_points(function, count, grid, inputs, decomposition, result):
    """:class:`GridPointError` for the ``count`` points the driver rejected (inputs as the
    caller gave them, validated; ``result`` the outputs it wrote)."""
    conformal_factor, gamma_tilde, E, B = inputs
    physical = physical_metric(conformal_factor, gamma_tilde, decomposition=decomposition)
    f = conformal_factor
    positive = f if decomposition != "phi" else np.exp(-4.0 * f.astype(float))
    raise_for_bad_points(
        function, count, grid,
        {"conformal_factor": f, "E": E, "B": B,
         "out": np.concatenate([result.rho[None], result.A_ij])},
        lapse=None if decomposition == "phi" else "conformal_factor",
        metric=("gamma (physical)", physical, arg.PACKED_METRIC_INDEX),
        reason=None if np.all(positive > 0) else _bad_factor_reason(decomposition, f))
