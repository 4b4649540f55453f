"""Tests of emsource.conservation: residuals of the 3+1 energy and momentum equations.

Physics is checked against exact solutions of Maxwell's equations written independently in
``conservation_fixtures.py`` (sources named there: Jackson 1999 sec. 7.1 and 11.10; a moving
frame and a static coordinate distortion of flat spacetime), and the implementation is checked
term by term against a slow NumPy reference built on :func:`emsource.adm_sources`.

How the convergence tolerances are derived: a centred difference of order p has truncation
error C h^p (1 + O(h^2)), so the order observed between two grids h1 > h2 is
p + O(h1^2) deviation; on the grids used here (>= 11 points per wavelength) the measured deviation
is below 0.15, so the tolerance 0.3 leaves a margin of two. An order counts only where the finest
normalised residual is far above float64 round-off of the largest term (~1e-13; common practice,
see "Convergence traps" in DEVELOPERS.md): asserted as > 1e-10.
"""

from __future__ import annotations

import numpy as np
import pytest

import emsource
from emsource import GridPointError
import conservation_fixtures as F
from emsource import exact
from emsource.conservation import (conservation_residual, global_balance, new_work_array,
                                   level_residual)
from emsource.convergence import significant_normalised_l2
from emsource.grid import UniformGrid
from emsource.kernels.stencils import first_derivative_weights, stencil_radius

ORDERS = (2, 4, 6)
K_WAVE = 2.0 * np.pi * np.array([1.0, 0.5, 0.0])  # oblique (trap 1), ~13+ points per wavelength


def error_of(r):
    """One number per resolution: energy plus the three momentum L2 norms."""
    return r.energy_norms.l2 + float(np.sum(r.momentum_norms.l2))


def normalised_of(r):
    """Largest normalised L2 residual over the equations whose terms are above round-off."""
    return significant_normalised_l2(r)


def observed_orders(errors, spacings):
    e = np.asarray(errors)
    h = np.asarray(spacings)
    return np.log(e[:-1] / e[1:]) / np.log(h[:-1] / h[1:])


def run(make, grids, **kwargs):
    results = [level_residual(make(g, 0.37), **kwargs) for g in grids]
    return results, observed_orders([error_of(r) for r in results], [g.spacing[0] for g in grids])


SQUARES = [F.square_grid(n) for n in (24, 32, 48)]
FINE_SQUARES = [F.square_grid(n) for n in (32, 48, 64)]
CUBES = [F.cube_grid(n) for n in (16, 24, 32)]

WAVE = {"wave_vector": K_WAVE, "polarization": (0.0, 0.0, 1.0)}
CHARGE = {"charge": 1.0, "width": 0.35, "velocity": (0.4, 0.3, 0.2), "center": (0.013, -0.021, 0.017)}
FRAME = {"frame_velocity": (0.3, -0.2, 0.1), **WAVE}


def package_wave(g, t):
    return exact.plane_wave(g, t, **WAVE)


def package_charge(g, t):
    return exact.boosted_gaussian_charge(g, t, **CHARGE)


def package_frame(g, t):
    return exact.plane_wave_moving_frame(g, t, **FRAME)


def package_gauge_wave(g, t, gauge_amplitude=0.1):
    return exact.plane_wave_gauge_wave(g, t, gauge_amplitude=gauge_amplitude, gauge_wavelength=1.0)


def strong_gauge_wave(g, t):
    """A = 0.4: the curvature and lapse terms are then a sizeable part of the balance."""
    return package_gauge_wave(g, t, gauge_amplitude=0.4)


CASES = {
    # (a) plane wave, flat space (Jackson 1999, sec. 7.1), emsource.exact.plane_wave.
    "a_plane_wave": (package_wave, SQUARES),
    # (b) boosted Gaussian charge (Jackson 1999, sec. 11.10): the charge and current terms.
    "b_boosted_charge": (package_charge, CUBES),
    # (c) moving frame x' = x - V t: the shift terms (Gourgoulhon 2012, sec. 4.2).
    "c_moving_frame": (package_frame, SQUARES),
    # (d) gauge-wave slicing of flat spacetime (Alcubierre et al. 2004): lapse, metric, K terms.
    # One resolution finer: at order 6 the asymptotic range starts later (observed 5.78 on 24-48).
    "d_gauge_wave": (package_gauge_wave, FINE_SQUARES),
    # extra, our own fixture: a static coordinate distortion of flat space (sqrt(gamma),
    # gamma^ij and d gamma terms with a non-diagonal metric).
    "e_distorted_coordinates": (lambda g, t: F.distorted_wave(g, t, k=K_WAVE), SQUARES),
}


def test_package_exact_data_agree_with_the_independent_fixtures():
    """The package's exact data and this file's fixtures are separate implementations of the
    same solutions (Jackson 1999, sec. 7.1 and 11.10): they must agree to round-off."""
    g = F.square_grid(12)
    ours, theirs = F.plane_wave(g, 0.37, k=K_WAVE), package_wave(g, 0.37)
    for name in ("E", "B", "dt_E", "dt_B"):
        np.testing.assert_allclose(getattr(theirs, name), getattr(ours, name), atol=1e-13)
    g = F.cube_grid(9)
    ours = F.boosted_charge(g, 0.37, q=1.0, sigma=0.35, v=CHARGE["velocity"], centre=CHARGE["center"])
    theirs = package_charge(g, 0.37)
    for name in ("E", "B", "dt_E", "dt_B", "charge_density", "current_density"):
        a, b = getattr(theirs, name), getattr(ours, name)
        np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-12 * np.max(np.abs(b)))


# --------------------------------------------------------------------------- convergence

@pytest.mark.parametrize("order", ORDERS)
@pytest.mark.parametrize("case", sorted(CASES))
def test_residual_converges_at_design_order(case, order):
    """Supplied (exact) time derivatives: the observed order equals the stencil order."""
    make, grids = CASES[case]
    results, orders = run(make, grids, order=order)
    assert abs(orders[-1] - order) < 0.3, (case, order, orders)
    assert normalised_of(results[-1]) > 1e-10  # above round-off: the order is meaningful
    assert normalised_of(results[0]) < 0.2  # and the data are resolved on the coarsest grid


@pytest.mark.parametrize("order", (2, 4))
def test_three_time_levels_converge_at_second_order(order):
    """Centred difference of three levels: error O(dt^2) + O(h^p), so min(p, 2) with dt ~ h.

    dt = 0.4 h, not h, and the wave is oblique (trap 1 of the testing notes).
    """
    make = package_wave
    errors = []
    for g in SQUARES:
        dt = 0.4 * g.spacing[0]
        r = level_residual(make(g, 0.37), before=make(g, 0.37 - dt), after=make(g, 0.37 + dt),
                           order=order)
        assert r.time_derivatives == "levels"
        errors.append(error_of(r))
    orders = observed_orders(errors, [g.spacing[0] for g in SQUARES])
    assert abs(orders[-1] - min(order, 2)) < 0.3, orders


# --------------------------------------------------------------------------- negative controls

def assert_does_not_converge(results, orders, reference, coarse_factor=10.0, measure=None):
    """Order near 0 on the finest pair (|p| < 0.5, against >= 1.7 for any working order), and
    the coarsest grid already ``coarse_factor`` times worse than the correct data on the same
    grid (the error is the wrong term itself, not truncation); the normalised residual shows
    it is not round-off (> 1e-2)."""
    measure = error_of if measure is None else measure
    assert abs(orders[-1]) < 0.5, orders
    assert measure(results[0]) > coarse_factor * measure(reference)
    assert normalised_of(results[0]) > 1e-2


def test_boosted_charge_needs_the_charge_and_current_terms():
    reference = level_residual(package_charge(CUBES[0], 0.37), order=4)
    results, orders = run(package_charge, CUBES, order=4, include_charges=False)
    assert_does_not_converge(results, orders, reference)


def replaced(make, **changes):
    """``make`` with some TimeLevelFields entries replaced by functions of the correct slice."""
    def wrong(g, t):
        s = make(g, t)
        return s.__class__(**{**s.__dict__, **{k: f(s) for k, f in changes.items()}})
    return wrong


def test_control_wrong_four_pi_between_the_two_sides():
    """Charges given 4 pi too large (a Heaviside-Lorentz current with Gaussian fields)."""
    wrong = replaced(package_charge, charge_density=lambda s: 4 * np.pi * s.charge_density,
                     current_density=lambda s: 4 * np.pi * s.current_density)
    reference = level_residual(package_charge(CUBES[0], 0.37), order=4)
    results, orders = run(wrong, CUBES, order=4)
    assert_does_not_converge(results, orders, reference)


def test_control_sign_of_B_flipped():
    wrong = replaced(package_wave, B=lambda s: -s.B, dt_B=lambda s: -s.dt_B)
    reference = level_residual(package_wave(SQUARES[0], 0.37), order=4)
    results, orders = run(wrong, SQUARES, order=4)
    assert_does_not_converge(results, orders, reference)


def test_control_shift_dropped():
    wrong = replaced(package_frame, beta=lambda s: np.zeros_like(s.beta))
    reference = level_residual(package_frame(SQUARES[0], 0.37), order=4)
    results, orders = run(wrong, SQUARES, order=4)
    assert_does_not_converge(results, orders, reference)


@pytest.mark.parametrize("dropped", ["K", "alpha", "untransformed_fields"])
def test_control_gauge_wave_terms_dropped(dropped):
    """Extrinsic curvature set to 0, lapse set to 1, or the inertial-frame fields of a wave along
    y put on the gauge-wave metric unchanged (not a solution there, unlike a wave along x:
    trap 3 of the testing notes): each breaks the balance."""
    def inertial_fields(s):
        return exact.plane_wave(s.grid, s.t, wave_vector=(0.0, 2 * np.pi, 0.0),
                                polarization=(0.0, 0.0, 1.0))
    changes = {
        "K": {"K": lambda s: np.zeros_like(s.K)},
        "alpha": {"alpha": lambda s: np.ones_like(s.alpha)},
        "untransformed_fields": {"E": lambda s: inertial_fields(s).E,
                                 "B": lambda s: inertial_fields(s).B,
                                 "dt_E": lambda s: inertial_fields(s).dt_E,
                                 "dt_B": lambda s: inertial_fields(s).dt_B},
    }[dropped]
    reference = level_residual(strong_gauge_wave(SQUARES[0], 0.37), order=4)
    results, orders = run(replaced(strong_gauge_wave, **changes), SQUARES, order=4)
    if dropped == "K":
        # K_ij S^ij enters only the energy equation and is a small part of this wave's balance
        # (about 3 % of the largest term): on the coarsest grid the energy residual is 2.7x the
        # correct one (measured), so the factor asked there is 2; on the finest grid it is 40x.
        assert_does_not_converge(results, orders, reference, coarse_factor=2.0,
                                 measure=lambda r: r.energy_norms.l2)
    else:
        assert_does_not_converge(results, orders, reference)


def test_control_static_divergence_of_B_is_seen():
    """Trap 4 of the testing notes: B_x += 0.3 x (curl-free, static) passes half of Maxwell's
    equations but not the momentum balance (it adds B_j div B to d_i M^i_j)."""
    def add_divergence(s):
        B = s.B.copy()
        B[0] += 0.3 * s.grid.coordinates()[0]
        return B
    reference = level_residual(package_wave(SQUARES[0], 0.37), order=4)
    results, orders = run(replaced(package_wave, B=add_divergence), SQUARES, order=4)
    assert_does_not_converge(results, orders, reference)


# --------------------------------------------------------------------------- global balance

def _balance_run(m, order=4, include_charges=True):
    """Boosted charge leaving the box through x = +1.2 between t = 0 and 1.6.

    The grid is built so that the balance box (the interior points) is [-1.2, 1.2]^3 at every
    resolution, and the number of time samples grows with the points, dt ~ h.
    """
    r = stencil_radius(order)
    half_width = 1.2
    h = 2 * half_width / (m - 1)
    grid = UniformGrid.from_bounds((-half_width - r * h,) * 3, (half_width + r * h,) * 3,
                                   (m + 2 * r,) * 3)
    times = np.linspace(0.0, 1.6, m)
    levels = [exact.boosted_gaussian_charge(grid, t, charge=1.0, width=0.3, velocity=(0.5, 0.1, 0.0),
                                            center=(0.45, 0.013, -0.017)) for t in times]
    return global_balance(levels, order=order, include_charges=include_charges), h


def test_global_balance_of_a_charge_leaving_the_box_converges_at_second_order():
    """Energy lost = time-integrated face flux - work on the charges, to O(h^2 + dt^2).

    Gauss's theorem on the flux-conservative equations (Gourgoulhon 2012, sec. 6); trapezoid
    rule in space and time, second order (common practice).
    """
    balances, spacings = zip(*(_balance_run(m) for m in (13, 19, 25)))
    first = balances[0]
    # The charge really leaves: a sizeable energy change and face flux.
    assert first.energy.change < -0.3 and first.energy.outflow > 0.4
    assert first.box == (slice(2, 15),) * 3
    mismatch = [abs(b.energy.mismatch) + float(np.sum(np.abs(b.momentum.mismatch))) for b in balances]
    orders = observed_orders(mismatch, spacings)
    assert abs(orders[-1] - 2.0) < 0.3, orders
    assert balances[-1].energy.relative_mismatch < 3e-3
    # Without the Lorentz-force term the balance is off by the work done on the charge.
    no_work, _ = _balance_run(13, include_charges=False)
    assert no_work.energy.relative_mismatch > 0.2


# --------------------------------------------------------------------------- reference implementation

def _reference_residual(alpha, beta, gamma, K, E, B, rho_e, j, dE, dB, dgamma, spacing, order,
                        units):
    """Slow, plain NumPy evaluation of the documented equations (full 3x3 matrices, einsum).

    rho, S_i, S_ij come from emsource.adm_sources; derivatives apply the centred weights by
    slicing. Returns (4, *interior) residuals.
    """
    grid = alpha.shape
    nd = len(grid)
    r = stencil_radius(order)
    w = first_derivative_weights(order)
    inner = tuple(slice(r, n - r) for n in grid)
    idx = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]

    def full(packed):
        m = np.empty((3, 3) + packed.shape[1:])
        for c, (a, b) in enumerate(idx):
            m[a, b] = m[b, a] = packed[c]
        return m

    def deriv(f, axis):
        """d f / dx^axis on the interior (zero along axes the grid does not have)."""
        if axis >= nd:
            return np.zeros(f[(Ellipsis,) + inner].shape)
        out = 0.0
        lead = f.ndim - nd
        for m_, wm in enumerate(w, start=1):
            plus = list(inner)
            minus = list(inner)
            plus[axis] = slice(r + m_, grid[axis] - r + m_)
            minus[axis] = slice(r - m_, grid[axis] - r - m_)
            out = out + wm * (f[(slice(None),) * lead + tuple(plus)]
                              - f[(slice(None),) * lead + tuple(minus)])
        return out / spacing[axis]

    src = emsource.adm_sources(gamma, E, B, units=units)
    g = full(gamma)
    ginv = np.moveaxis(np.linalg.inv(np.moveaxis(g, (0, 1), (-2, -1))), (-2, -1), (0, 1))
    sg = np.sqrt(np.linalg.det(np.moveaxis(g, (0, 1), (-2, -1))))
    rho, S_lo, S_ij = src.rho, src.S_i, full(src.S_ij)
    S_up = np.einsum("ij...,j...->i...", ginv, S_lo)
    S_mixed = np.einsum("ik...,kj...->ij...", ginv, S_ij)  # S^i_j
    S_upup = np.einsum("ik...,kl...,jl...->ij...", ginv, S_ij, ginv)
    flux_e = sg * (alpha * S_up - beta * rho)
    flux_m = sg * (alpha * S_mixed - np.einsum("i...,j...->ij...", beta, S_lo))
    # Time terms by the chain rule (in matrix form: d det = det tr(g^-1 dg)).
    dg = full(dgamma)
    dlndet = np.einsum("ij...,ij...->...", ginv, dg)
    E_lo = np.einsum("ij...,j...->i...", g, E)
    B_lo = np.einsum("ij...,j...->i...", g, B)
    coef = 1 / (4 * np.pi) if units == "gaussian" else 1.0
    drho = coef * (0.5 * np.einsum("ij...,i...,j...->...", dg, E, E)
                   + 0.5 * np.einsum("ij...,i...,j...->...", dg, B, B)
                   + np.einsum("i...,i...->...", E_lo, dE) + np.einsum("i...,i...->...", B_lo, dB))
    dt_e = sg * (0.5 * dlndet * rho + drho)
    det = sg ** 2
    dt_m = (dlndet * sg * S_lo + coef * det * (np.cross(dE, B, axis=0) + np.cross(E, dB, axis=0)))
    I = (slice(None),) + inner
    div_e = sum(deriv(flux_e[a], a) for a in range(3))
    div_m = np.array([sum(deriv(flux_m[a, q], a) for a in range(3)) for q in range(3)])
    d_alpha = np.array([deriv(alpha, a) for a in range(3)])
    d_beta = np.array([deriv(beta, a) for a in range(3)])  # [q, i]
    d_g = np.array([deriv(g, a) for a in range(3)])  # [q, i, k]
    al, sgi = alpha[inner], sg[inner]
    src_e = sgi * (al * np.einsum("ij...,ij...->...", full(K)[(slice(None),) * 2 + inner],
                                  S_upup[(slice(None),) * 2 + inner])
                   - np.einsum("i...,i...->...", S_up[I], d_alpha)
                   - al * np.einsum("i...,i...->...", j[I], E_lo[I]))
    lorentz = rho_e[inner] * E_lo[I] + sgi * np.cross(j[I], B[I], axis=0)
    src_m = sgi * (0.5 * al * np.einsum("ik...,qik...->q...", S_upup[(slice(None),) * 2 + inner], d_g)
                   + np.einsum("i...,qi...->q...", S_lo[I], d_beta)
                   - rho[inner] * d_alpha - al * lorentz)
    return np.concatenate([(dt_e[inner] + div_e - src_e)[None], dt_m[I] + div_m - src_m])


def _random_curved_data(shape, rng):
    """Smooth random fields (low trigonometric modes) with every metric term switched on."""
    grid = UniformGrid(shape, (0.0,) * len(shape), tuple(0.07 + 0.01 * a for a in range(len(shape))))
    coords = grid.coordinates()

    def smooth(amplitude, offset=0.0):
        kx, ky, kz, phase = rng.uniform(0.5, 2.0, 4)
        return offset + amplitude * np.sin(kx * coords[0] + ky * coords[1] + kz * coords[2] + phase)

    alpha = smooth(0.1, 1.0)
    beta = np.array([smooth(0.2) for _ in range(3)])
    gamma = np.array([smooth(0.1, 1.0), smooth(0.05), smooth(0.05), smooth(0.1, 1.1),
                      smooth(0.05), smooth(0.1, 0.9)])
    fields = [np.array([smooth(1.0) for _ in range(3)]) for _ in range(4)]
    K = np.array([smooth(0.3) for _ in range(6)])
    rho_e = smooth(0.5)
    j = np.array([smooth(0.5) for _ in range(3)])
    dgamma = np.array([smooth(0.2) for _ in range(6)])
    return grid, alpha, beta, gamma, K, fields, rho_e, j, dgamma


@pytest.mark.parametrize("shape", [(14, 13), (9, 10, 11)])
@pytest.mark.parametrize("order", ORDERS)
def test_kernel_matches_plain_numpy_reference(shape, order, rng):
    grid, alpha, beta, gamma, K, (E, B, dE, dB), rho_e, j, dgamma = _random_curved_data(shape, rng)
    units = "gaussian" if order != 4 else "heaviside_lorentz"
    inputs = [a.copy() for a in (alpha, beta, gamma, K, E, B, rho_e, j, dE, dB, dgamma)]
    r = conservation_residual(alpha, beta, gamma, K, E, B, spacing=grid.spacing, order=order,
                              units=units, charge_density=rho_e, current_density=j,
                              dt_E=dE, dt_B=dB, dt_gamma=dgamma)
    expected = _reference_residual(alpha, beta, gamma, K, E, B, rho_e, j, dE, dB, dgamma,
                                   grid.spacing, order, units)
    inner = tuple(slice(stencil_radius(order), n - stencil_radius(order)) for n in shape)
    got = np.concatenate([r.energy[None], r.momentum])[(slice(None),) + inner]
    scale = np.concatenate([r.energy_scale[None], r.momentum_scale])[(slice(None),) + inner]
    # Round-off: a few hundred operations on terms of size `scale`, float64 eps 2.2e-16.
    np.testing.assert_array_less(np.abs(got - expected), 1e-12 * scale + 1e-300)
    assert np.max(np.abs(expected)) > 1e-2  # the random data are far from a solution
    for before, after in zip(inputs, (alpha, beta, gamma, K, E, B, rho_e, j, dE, dB, dgamma)):
        np.testing.assert_array_equal(before, after)  # inputs are never modified


def test_three_level_time_term_is_the_centred_difference(rng):
    """With levels, the time term is (D(t+dt) - D(t-dt)) / (2 dt), D = sqrt(gamma) (rho, S_j)
    from emsource.adm_sources: the residual differs from the supplied-derivative one by exactly
    that difference minus the supplied rate."""
    grid, alpha, beta, gamma, K, (E, B, E2, B2), rho_e, j, dgamma = _random_curved_data((12, 11), rng)
    gamma_b = gamma + 0.01 * dgamma
    gamma_a = gamma - 0.013 * dgamma
    levels = conservation_residual(alpha, beta, gamma, K, E, B, spacing=grid.spacing, order=2,
                                   before={"gamma": gamma_a, "E": E2, "B": B2},
                                   after={"gamma": gamma_b, "E": E, "B": B2}, time_step=0.05)
    zero3 = np.zeros_like(E)
    static = conservation_residual(alpha, beta, gamma, K, E, B, spacing=grid.spacing, order=2,
                                   dt_E=zero3, dt_B=zero3, dt_gamma=np.zeros_like(gamma))

    def density(g, e, b):
        s = emsource.adm_sources(g, e, b)
        det = (g[0] * (g[3] * g[5] - g[4] ** 2) - g[1] * (g[1] * g[5] - g[4] * g[2])
               + g[2] * (g[1] * g[4] - g[3] * g[2]))
        return np.sqrt(det) * np.concatenate([s.rho[None], s.S_i])

    rate = (density(gamma_b, E, B2) - density(gamma_a, E2, B2)) / 0.1
    got = np.concatenate([levels.energy[None], levels.momentum]) - np.concatenate(
        [static.energy[None], static.momentum])
    interior = levels.interior
    np.testing.assert_allclose(got[:, interior], rate[:, interior], rtol=1e-10, atol=1e-12)


# --------------------------------------------------------------------------- result object and errors

def test_boundary_is_marked_and_norms_are_over_the_interior():
    g = F.square_grid(20)
    r = level_residual(package_wave(g, 0.1), order=6)
    assert r.radius == 3 and r.order == 6 and r.time_derivatives == "supplied"
    assert r.interior.sum() == 14 * 14
    assert np.all(np.isnan(r.energy[~r.interior])) and np.all(np.isfinite(r.energy[r.interior]))
    assert np.all(np.isnan(r.momentum[:, ~r.interior]))
    inner = r.energy[r.interior]
    assert r.energy_norms.max == pytest.approx(np.max(np.abs(inner)), rel=1e-15)
    assert r.energy_norms.l2 == pytest.approx(np.sqrt(np.mean(inner ** 2)), rel=1e-12)
    assert r.energy_norms.normalised_max == pytest.approx(
        np.max(np.abs(inner)) / np.max(r.energy_scale[r.interior]), rel=1e-12)
    # Pointwise normalised residual: bounded by 1 + (number of terms) since |R| <= sum |terms|.
    ratio = r.normalised_energy[r.interior]
    assert np.all(np.abs(ratio) <= 9) and np.all(np.isnan(r.normalised_energy[~r.interior]))
    assert r.momentum_norms.l2.shape == (3,)


def test_work_array_is_reusable_and_checked():
    """A caller's scratch array gives the same residual as a fresh one, also when reused.

    (An array with other strides works too but runs another compiled specialisation, whose
    fused multiply-adds may round differently; not exercised here to keep compile time down.)"""
    g = F.square_grid(16)
    s = package_wave(g, 0.2)
    fresh = level_residual(s, order=4)
    args = (s.alpha, s.beta, s.gamma, s.K, s.E, s.B)
    rates = dict(dt_E=s.dt_E, dt_B=s.dt_B, dt_gamma=s.dt_gamma, spacing=g.spacing, order=4)
    work = new_work_array(g.shape)
    work[:] = np.nan  # stale content must not leak into the result
    for _ in range(2):
        again = conservation_residual(*args, **rates, work=work)
        np.testing.assert_array_equal(again.energy, fresh.energy)
        np.testing.assert_array_equal(again.momentum, fresh.momentum)
    with pytest.raises(ValueError, match=r"work must be an ndarray of shape \(16, 16, 16\)"):
        conservation_residual(*args, **rates, work=np.zeros((16, 16, 15)))


def test_an_axis_of_length_one_has_no_extent():
    """A (n, n, 1) grid gives the same residual as the (n, n) grid."""
    g2 = F.square_grid(16)
    s = F.plane_wave(g2, 0.2, k=K_WAVE)
    r2 = level_residual(s, order=4)
    add = lambda a: a[..., None]  # noqa: E731
    r3 = conservation_residual(add(s.alpha), add(s.beta), add(s.gamma), add(s.K), add(s.E),
                               add(s.B), spacing=g2.spacing + (1.0,), order=4, dt_E=add(s.dt_E),
                               dt_B=add(s.dt_B), dt_gamma=add(s.dt_gamma))
    np.testing.assert_array_equal(r3.energy[..., 0], r2.energy)


def _flat_inputs(shape=(10, 10)):
    alpha, beta, gamma, K = F._flat_geometry(shape)
    E = np.ones((3,) + shape)
    zero = np.zeros((3,) + shape)
    return dict(alpha=alpha, beta=beta, gamma=gamma, K=K, E=E, B=E.copy()), dict(
        dt_E=zero, dt_B=zero, dt_gamma=np.zeros((6,) + shape))


def test_errors_name_the_argument_and_the_grid_index():
    fields, rates = _flat_inputs()
    call = lambda **kw: conservation_residual(**{**fields, **rates, "spacing": 0.1, **kw})  # noqa: E731
    with pytest.raises(ValueError, match=r"beta must have shape \(3, 10, 10\)"):
        call(beta=np.zeros((3, 10, 9)))
    with pytest.raises(ValueError, match="order must be one of"):
        call(order=3)
    with pytest.raises(ValueError, match="spacing must be one positive number"):
        call(spacing=(0.1, -0.1))
    with pytest.raises(ValueError, match="not both"):
        call(before=fields, after=fields, time_step=0.1)
    with pytest.raises(ValueError, match="time derivatives needed"):
        conservation_residual(**fields, spacing=0.1, dt_E=rates["dt_E"])
    with pytest.raises(TypeError, match="share one float dtype"):
        call(E=fields["E"].astype(np.float32))
    bad = fields["E"].copy()
    bad[1, 4, 6] = np.nan
    with pytest.raises(GridPointError, match=r"grid index \(4, 6\): non-finite value\(s\): E\[1\] = nan") as error:
        call(E=bad)
    assert error.value.first_index == (4, 6) and error.value.bad_count == 1
    metric = fields["gamma"].copy()
    metric[0, 5, 5] = -1.0  # not positive definite: sqrt(det) is NaN there
    with pytest.raises(GridPointError, match=r"grid index \(5, 5\): gamma is not positive definite"):
        call(gamma=metric)
    lapse = fields["alpha"].copy()
    lapse[3, 7] = -0.5  # finite residual, but a lapse that is not positive is not a 3+1 slicing
    with pytest.raises(GridPointError, match=r"grid index \(3, 7\): lapse alpha = -0.5 is not positive"):
        call(alpha=lapse)
    # The same bad points are neither checked nor used where the mask excludes them.
    mask = np.ones((10, 10), bool)
    mask[4, 6] = mask[5, 5] = mask[3, 7] = False
    bad_gamma = metric.copy()
    bad_gamma[0, 4, 6] = np.nan
    r = call(E=bad, gamma=bad_gamma, alpha=lapse, valid_mask=mask)
    assert not r.interior[4, 6] and not r.interior[4, 7] and np.isnan(r.energy[4, 7])


def test_order_six_on_a_short_axis_is_rejected():
    fields, rates = _flat_inputs((10, 6))
    with pytest.raises(ValueError, match="axis 1 has 6 points; order 6 needs more than 6"):
        conservation_residual(**fields, **rates, spacing=0.1, order=6)


def test_global_balance_of_a_drifting_closed_box_is_relative_to_its_energy():
    """A uniform static field whose amplitude drifts by 1 % between two time levels: no face flux
    (equal on opposite faces) and no volume source, so the whole change is mismatch. Relative
    to the energy in the box it is 1 - 1/1.01^2 = 0.0197, not 1 (the size of the change itself)."""
    from dataclasses import replace

    grid = UniformGrid((9, 9, 9), (0.0, 0.0, 0.0), (0.1, 0.1, 0.1))
    alpha, beta, gamma, K = F._flat_geometry(grid.shape)
    E = np.zeros((3,) + grid.shape)
    E[1] = 1.0
    B = np.zeros_like(E)
    B[2] = 0.5
    zero = np.zeros_like(E)
    first = exact.TimeLevelFields(grid=grid, t=0.0, alpha=alpha, beta=beta, gamma=gamma, K=K, E=E,
                              B=B, charge_density=np.zeros(grid.shape), current_density=zero,
                              units="gaussian", dt_E=zero, dt_B=zero,
                              dt_gamma=np.zeros_like(gamma))
    second = replace(first, t=0.1, E=1.01 * E, B=1.01 * B)
    balance = global_balance([first, second], order=2)
    energy = balance.totals[:, 0]
    # trapezoid box integral of a constant: exact up to a few roundings per point (729 terms)
    volume = 0.6**3
    assert energy[0] == pytest.approx((1.0 + 0.25) / (8 * np.pi) * volume, rel=1e-13)
    assert abs(balance.energy.outflow) < 1e-15 * energy[0]
    assert balance.energy.absolute_mismatch == pytest.approx(energy[1] - energy[0], rel=1e-12)
    assert balance.energy.relative_mismatch == pytest.approx(1 - 1 / 1.01**2, rel=1e-12)
