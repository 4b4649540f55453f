r"""Ideal MHD: the electric field of a perfectly conducting fluid, its 4-velocity and the
magnetic field in its frame, from B^i and the fluid velocity.

Derivation in the package's conventions (README; signature -+++, epsilon_0123 = +sqrt(-g),
epsilon_ijk = n^a epsilon_aijk = sqrt(gamma) [ijk]). Write the fluid 4-velocity as
u^a = W (n^a + v^a), v^a spatial (the Eulerian 3-velocity, measured by the normal observer),
W = -n_a u^a = 1 / sqrt(1 - v_i v^i). With F_ab = n_a E_b - E_a n_b + epsilon_abcd n^c B^d,

    F_ab n^b = E_a                                     (n_b n^b = -1, E_b n^b = 0),
    gamma_a^c F_cb v^b = epsilon_abcd v^b n^c B^d = epsilon_abd v^b B^d
                         (epsilon_abcd n^c = n^c epsilon_cabd = epsilon_abd).

The ideal-MHD condition F_ab u^b = 0 (no electric field in the fluid frame), projected on the
slice and divided by W, is E_a + epsilon_abd v^b B^d = 0, that is

.. math::

    E_i = -\epsilon_{ijk} v^j B^k, \qquad E^i = -\epsilon^{ijk} v_j B_k
        = -[ijk]\, v_j B_k / \sqrt\gamma

(flat space: E = -v x B). Its normal projection, n^a F_ab u^b = W E_b v^b, vanishes by then.

The magnetic field in the fluid frame, b^a = -(1/2) epsilon^abcd u_b F_cd (the definition of
B^a with n replaced by u), is, in terms of B^i and v^i,

.. math::

    b^a = B^a / W + (B_i v^i)\, u^a, \qquad
    b^t = W B_i v^i / \alpha, \quad b^i = B^i / W + (B_j v^j) u^i, \qquad
    b_a b^a = B^2 / W^2 + (B_i v^i)^2,

with b_a u^a = 0; and the stress-energy tensor takes the comoving form

.. math::

    T^{ab} = k \big( b^2 u^a u^b + \tfrac12 b^2 g^{ab} - b^a b^b \big),
    \qquad k = 1/(4\pi) \text{ (Gaussian) or } 1 \text{ (Heaviside-Lorentz)}.

Both are checked against an independent route in ``tests/test_ideal_mhd.py``: b^a against the
brute-force contraction -(1/2) epsilon^abcd u_b F_cd, T^ab against
:func:`emsource.stress_energy_4d` with E from :func:`ideal_mhd_fields`.

Velocity kinds (``velocity_kind``): "eulerian", v^i as above; "four_velocity", the spatial
coordinate components u^i of u^a, for which W = alpha u^t solves g_ab u^a u^b = -1 (see
:mod:`emsource.kernels.ideal_mhd`) and v^i = u^i / W + beta^i / alpha. That needs
|beta|_gamma < alpha at the point: where the shift is faster than light, u^i alone does not fix
u^t (two future-directed unit vectors share it), and the point is rejected.

References: T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 5.2
(b^a in terms of B^i and v^i and the comoving stress-energy tensor; from memory);
E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.6 (the 3+1 split of F;
from memory); the ideal-MHD condition F_ab u^b = 0 itself is common practice.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from ._call_plans import FlatPlan, PlanCache, call_signature, planned_outputs
from ._threading import kernel_call
from .faraday import raise_for_bad_points
from .input_forms import input_form
from .kernels import ideal_mhd as kernels
from .kernels._compile import call_sharing_layouts, shared_dispatcher

__all__ = ["VELOCITY_KINDS", "IdealMhdFields", "ideal_mhd_fields"]

#: The velocity kinds, by the name that selects them.
VELOCITY_KINDS = {"eulerian": kernels.VELOCITY_EULERIAN, "four_velocity": kernels.VELOCITY_FOUR}


class IdealMhdFields(NamedTuple):
    """What :func:`ideal_mhd_fields` returns.

    Attributes
    ----------
    E : (3, *grid) ndarray
        E^i = -epsilon^ijk v_j B_k, the electric field of the normal observer (contravariant).
    u : (4, *grid) ndarray
        The fluid 4-velocity u^a = (u^t, u^x, u^y, u^z).
    b : (4, *grid) ndarray
        The magnetic field in the fluid frame, b^a = B^a / W + (B_i v^i) u^a, in the units of B
        (divide by sqrt(4 pi) for the convention T^ab = b^2 u^a u^b + ... without 1/(4 pi)).
    """

    E: np.ndarray
    u: np.ndarray
    b: np.ndarray


def ideal_mhd_fields(alpha, beta, gamma, B, velocity, *, velocity_kind="eulerian",
                     field_index="upper", check=True, out=None) -> IdealMhdFields:
    r"""E^i from the ideal-MHD condition F_ab u^b = 0, with u^a and b^a (module docstring).

    Parameters
    ----------
    alpha : (*grid) ndarray
        Lapse, positive.
    beta : (3, *grid) ndarray
        Shift beta^i.
    gamma : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij.
    B : (3, *grid) ndarray
        Magnetic field of the normal observer in the input form ``field_index`` ("upper" B^i,
        "lower" B_i or "densitized" sqrt(gamma) B^i; :mod:`emsource.input_forms`).
    velocity : (3, *grid) ndarray
        The fluid velocity of kind ``velocity_kind``: "eulerian" v^i (normal observer's
        3-velocity, v_i v^i < 1) or "four_velocity" u^i (spatial part of u^a).
    check : bool
        Raise :class:`GridPointError` at the first point with non-finite input or output, a
        lapse that is not positive, a metric that is not positive definite, a velocity not
        below light, or (four_velocity) a shift with |beta|_gamma >= alpha.
    out : IdealMhdFields or tuple of 3 ndarrays, optional
        Preallocated (E, u, b) in the shapes below and the inputs' dtype; not overlapping the
        inputs. After an error they may hold partial results.

    Returns
    -------
    IdealMhdFields
        (E, u, b); E goes to :func:`emsource.adm_sources` with the same B (as E^i, B^i: pass
        ``field_index="upper"`` there with B^i).

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.ideal_mhd import ideal_mhd_fields
    >>> g = np.zeros((6, 1)); g[[0, 3, 5]] = 1.0
    >>> B = np.array([[0.0], [0.0], [1.0]]); v = np.array([[0.5], [0.0], [0.0]])
    >>> f = ideal_mhd_fields(np.ones(1), np.zeros((3, 1)), g, B, v)
    >>> (f.E[:, 0] + 0.0).tolist()        # E = -v x B
    [0.0, 0.5, 0.0]
    """
    function = "ideal_mhd_fields"
    inputs = (alpha, beta, gamma, B, velocity)
    key = call_signature(inputs, out, IdealMhdFields, (velocity_kind, field_index))
    plan = _IDEAL_MHD_PLANS.get(key)
    if plan is not None:
        planned = planned_outputs(plan, function, inputs, _INPUT_NAMES, out, IdealMhdFields)
        if planned is not None:
            result, spans = planned
            driver, gidx, tail = plan.extra
            with kernel_call():
                count = driver(spans[0], spans[1], spans[2], gidx, *spans[3:], *tail, bool(check))
            if check and count:
                metric, gidx = arg.spatial_metric(function, gamma, plan.grid, "component_first")
                _raise_for_bad_points(function, count, plan.grid, alpha, beta, metric, gidx, B,
                                      velocity, result, velocity_kind)
            return result
    arg.choice(function, "velocity_kind", velocity_kind, tuple(VELOCITY_KINDS))
    form = input_form(function, field_index)
    grid = arg.grid_of(function, "B", B, "component_first")
    metric, gidx = arg.spatial_metric(function, gamma, grid, "component_first")
    lapse = arg.scalar(function, "alpha", alpha, grid)
    shift = arg.vector(function, "beta", beta, grid, "component_first")
    b_in = arg.vector(function, "B", B, grid, "component_first")
    v_in = arg.vector(function, "velocity", velocity, grid, "component_first")
    dtype = arg.common_dtype(function, _INPUT_NAMES, inputs)
    result = arg.outputs_or_new(function, IdealMhdFields, out,
                                ((3,) + grid, (4,) + grid, (4,) + grid), (1, 1, 1), dtype,
                                _INPUT_NAMES, inputs)
    E, u, b = result
    if not arg.has_points(grid):
        return result
    views, flat = arg.kernel_views([lapse, shift, metric, b_in, v_in, E, u, b], grid,
                                   whole_grids=True)
    kind = VELOCITY_KINDS[velocity_kind]
    physics = arg.kernel_scalars(dtype, arg.pivot_floor(dtype), 1)
    count = -1  # the streaming driver's count where it ran and did not decline
    if flat and arg.tries_streaming(views, grid):
        # Large rows that do not alias: the streaming driver, which declines (-1) where the
        # output rows are not aligned alike. No plan: there a call's Python part is negligible.
        with kernel_call():
            count = kernels.IDEAL_MHD_STREAMING[form.code, kind](
                *views[:3], gidx, *views[3:], *physics, bool(check))
    if count < 0:
        found = arg.driver_spans(views, grid, flat)
        if found is None:  # the column loop (run-time form and kind), one specialisation for
            # every mix of strided inputs
            with kernel_call():
                count = call_sharing_layouts(
                    kernels.ideal_mhd_grid,
                    (*views[:3], gidx, *views[3:], form.code, kind, *physics), _DRIVER_INPUTS)
        else:  # contiguous lines and ghost-zone windows: the vectorised driver of (form, kind)
            spans, steps, shape, last = found
            tail = (steps, shape, last, *physics)
            arguments = (*spans[:3], gidx, *spans[3:], *tail, bool(check))
            driver = shared_dispatcher(kernels.IDEAL_MHD[form.code, kind], arguments,
                                       _DRIVER_INPUTS)
            with kernel_call():
                count = driver(*arguments)
            if flat and key is not None:  # after every check passed: a plan is what a full
                # validation derived
                _IDEAL_MHD_PLANS.put(key, FlatPlan.of(inputs + result, spans, grid, dtype,
                                                      (driver, gidx, tail), outputs=3))
    if check and count:
        _raise_for_bad_points(function, count, grid, lapse, shift, metric, gidx, b_in, v_in,
                              result, velocity_kind)
    return result


_INPUT_NAMES = ("alpha", "beta", "gamma", "B", "velocity")
#: Positions of the arrays the drivers only read (alpha, beta, gamma, B, velocity).
_DRIVER_INPUTS = (0, 1, 2, 4, 5)
#: Validated layouts of :func:`ideal_mhd_fields` calls by signature
#: (:mod:`emsource._call_plans`).
_IDEAL_MHD_PLANS = PlanCache()


def _raise_for_bad_points(function, count, grid, lapse, shift, metric, gidx, B, velocity, result,
                          velocity_kind):
    """:class:`GridPointError` for the ``count`` points the driver rejected (component-first
    inputs, ``metric`` and ``gidx`` as :func:`emsource._arguments.spatial_metric` gives them;
    ``result`` the outputs it wrote). The stacked outputs are built on the error path only."""
    E, u, b = result
    raise_for_bad_points(
        function, count, grid, {"alpha": lapse, "beta": shift, "B": B, "velocity": velocity,
                                "out": np.concatenate([E, u, b])},
        lapse="alpha", metric=("gamma", metric, gidx),
        reason=lambda index: _velocity_reason(velocity_kind, lapse, shift, metric, gidx,
                                              velocity, index))


def _velocity_reason(kind, lapse, shift, metric, gidx, velocity, index):
    """Why a point with finite inputs was rejected: the speed or the shift, with the values."""
    sl = (slice(None),) + index
    g = np.asarray(metric[sl], float)[list(gidx)]
    full = np.array([[g[0], g[1], g[2]], [g[1], g[3], g[4]], [g[2], g[4], g[5]]])
    w = np.asarray(velocity[sl], float)
    if kind == "eulerian":
        return (f"the velocity is not below the speed of light: v_i v^i = {w @ full @ w:.6g} "
                f"(velocity = {w.tolist()})")
    s = np.asarray(shift[sl], float)
    return (f"|beta|_gamma = {np.sqrt(s @ full @ s):.6g} is not below alpha = "
            f"{float(lapse[index]):.6g}: u^i alone does not fix u^t there (velocity_kind "
            "'four_velocity'); or the outputs overflow")
