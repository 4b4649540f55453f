"""Checks of the Kerr-Newman / Reissner-Nordstrom / Kerr data in Kerr-Schild coordinates.

Sources: C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), ch. 33 (Kerr-Newman
geometry, horizons at r = M +- sqrt(M^2 - a^2 - Q^2), asymptotic charge Q); the Kerr-Schild
form g = eta + 2 H l l with H, l, A as in emsource/exact/kerr_schild.py (from memory).
The constraint checks (Einstein-Maxwell) are in tests/test_constraints.py.
"""

import math

import numpy as np
import pytest
import sympy as sp
from scipy.optimize import brentq

from emsource.exact import kerr_schild as kn
from emsource.grid import UniformGrid

M, A, Q = 1.0, 0.6, 0.5  # r+ = 1 + sqrt(1 - 0.36 - 0.25) = 1.6245


def _sympy_route(mass, spin, charge):
    """4-metric, its derivatives and the potential, lambdified from sympy (independent route).

    r is written out explicitly (the positive root of the quadratic in r^2), every derivative
    is taken by sympy, and the 3+1 split is done numerically from the 4x4 metric.
    """
    x, y, z = sp.symbols("x y z", real=True)
    a = sp.Float(spin)
    w = x**2 + y**2 + z**2 - a**2
    r = sp.sqrt((w + sp.sqrt(w**2 + 4 * a**2 * z**2)) / 2)
    H = r**2 * (mass * r - charge**2 / 2) / (r**4 + a**2 * z**2)
    l = [sp.Integer(1), (r * x + a * y) / (r**2 + a**2), (r * y - a * x) / (r**2 + a**2), z / r]
    eta = sp.diag(-1, 1, 1, 1)
    g = [[eta[i, j] + 2 * H * l[i] * l[j] for j in range(4)] for i in range(4)]
    pot = [-charge * r**3 / (r**4 + a**2 * z**2) * c for c in l]
    X = (x, y, z)
    g_f = sp.lambdify(X, g, "numpy")
    dg_f = sp.lambdify(X, [[[sp.diff(g[i][j], X[k]) for k in range(3)] for j in range(4)]
                           for i in range(4)], "numpy")
    A_f = sp.lambdify(X, pot, "numpy")
    dA_f = sp.lambdify(X, [[sp.diff(pot[i], X[k]) for k in range(3)] for i in range(4)], "numpy")
    return g_f, dg_f, A_f, dA_f


def _reference_point(funcs, p):
    g_f, dg_f, A_f, dA_f = funcs
    g = np.array(g_f(*p), dtype=float)
    dg = np.array(dg_f(*p), dtype=float)  # dg[a, b, k] = d_k g_ab
    dA = np.array(dA_f(*p), dtype=float)  # dA[a, k] = d_k A_a
    ginv = np.linalg.inv(g)
    alpha = math.sqrt(-1.0 / ginv[0, 0])
    beta_up = alpha**2 * ginv[0, 1:]
    gamma = g[1:, 1:]
    dgam = dg[1:, 1:, :]
    dbeta = dg[0, 1:, :]  # d_k beta_i
    # Gamma^m_ij beta_m = beta^k Gamma_kij, Gamma_kij = (d_i g_kj + d_j g_ki - d_k g_ij) / 2
    gam1 = np.empty((3, 3, 3))
    for k in range(3):
        for i in range(3):
            for j in range(3):
                gam1[k, i, j] = 0.5 * (dgam[k, j, i] + dgam[k, i, j] - dgam[i, j, k])
    K = (dbeta.T + dbeta - 2.0 * np.einsum("k,kij->ij", beta_up, gam1)) / (2.0 * alpha)
    # F_ab with d_t = 0; E^i = F^{ib} n_b = -alpha F^{it} (4D inverse metric).
    F = np.zeros((4, 4))
    F[1:, 1:] = dA[1:, :].T - dA[1:, :]  # F_ij = d_i A_j - d_j A_i
    F[1:, 0] = dA[0, :]  # F_it = d_i A_t - d_t A_i
    F[0, 1:] = -dA[0, :]
    F_up = ginv @ F @ ginv.T
    E = -alpha * F_up[1:, 0]
    sqrt_gamma = math.sqrt(np.linalg.det(gamma))
    B = np.array([F[2, 3], F[3, 1], F[1, 2]]) / sqrt_gamma
    return alpha, beta_up, gamma, K, E, B


def test_matches_an_independent_sympy_route():
    # Source: Kerr-Schild form of MTW ch. 33 (from memory); the package's hand-written chain
    # rule versus sympy differentiation of the explicit r(x, y, z) and a numerical 3+1 split.
    rng = np.random.default_rng(5)
    funcs = _sympy_route(M, A, Q)
    pts = rng.uniform(-4.0, 4.0, size=(40, 3))
    r = kn.kerr_schild_radius(pts[:, 0], pts[:, 1], pts[:, 2], A)
    pts = pts[r > 1.2][:12]  # both sides of r+ = 1.62, away from the ring singularity
    v = kn.kerr_newman_arrays(pts[:, 0], pts[:, 1], pts[:, 2], mass=M, spin=A, charge=Q)
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    for n, p in enumerate(pts):
        alpha, beta, gamma, K, E, B = _reference_point(funcs, p)
        # Values are O(1) here; the two routes round differently through ~100 operations and
        # a 4x4 inversion, so 1e-12 absolute (about 1e4 float64 epsilons) is the tolerance.
        tol = 1e-12
        assert abs(v["alpha"][n] - alpha) < tol
        assert np.allclose(v["beta"][:, n], beta, rtol=0, atol=tol)
        assert np.allclose(v["gamma"][:, n], [gamma[i, j] for i, j in packed], rtol=0, atol=tol)
        assert np.allclose(v["K"][:, n], [K[i, j] for i, j in packed], rtol=0, atol=tol)
        assert np.allclose(v["E"][:, n], E, rtol=0, atol=tol)
        assert np.allclose(v["B"][:, n], B, rtol=0, atol=tol)
    assert np.abs(v["B"]).max() > 1e-3  # spin and charge give a magnetic dipole


@pytest.mark.parametrize("mass, spin, charge", [(1.0, 0.6, 0.5), (1.0, 0.0, 0.8), (1.0, 0.9, 0.0)])
def test_outer_horizon_where_the_radial_direction_turns_null(mass, spin, charge):
    # Source: MTW ch. 33, horizons of Kerr-Newman where Delta = r^2 - 2 M r + a^2 + Q^2 = 0,
    # r+ = M + sqrt(M^2 - a^2 - Q^2). The data's own lapse, shift and metric give
    # g^rr = g^ab d_a r d_b r = gamma^ij d_i r d_j r - (beta^i d_i r)^2 / alpha^2, which is zero
    # on the horizon. d_i r comes from a sympy derivative of the explicit r(x, y, z).
    x, y, z = sp.symbols("x y z", real=True)
    a = sp.Float(spin)
    w = x**2 + y**2 + z**2 - a**2
    r = sp.sqrt((w + sp.sqrt(w**2 + 4 * a**2 * z**2)) / 2)
    grad_f = sp.lambdify((x, y, z), [sp.diff(r, v) for v in (x, y, z)], "numpy")
    direction = np.array([0.48, -0.36, 0.8])  # unit vector, off the symmetry axis and plane

    def g_rr(scale):
        p = scale * direction
        v = kn.kerr_newman_arrays(*p, mass=mass, spin=spin, charge=charge)
        gam = np.empty((3, 3))
        for c, (i, j) in enumerate([(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]):
            gam[i, j] = gam[j, i] = v["gamma"][c]
        dr = np.array(grad_f(*p), dtype=float)
        return dr @ np.linalg.solve(gam, dr) - (v["beta"] @ dr) ** 2 / v["alpha"] ** 2

    r_plus = kn.outer_horizon_radius(mass, spin, charge)
    r_minus = kn.inner_horizon_radius(mass, spin, charge)
    # Bracket between the horizons (g^rr < 0) and far outside (g^rr > 0) in coordinate distance;
    # on this ray the spheroidal radius is a monotonic function of the distance.
    mid = 0.5 * (r_plus + r_minus) if r_minus > 0.05 else 0.5 * r_plus
    lo = brentq(lambda d: kn.kerr_schild_radius(*(d * direction), spin) - mid, 1e-3, 10.0)
    assert g_rr(lo) < 0 < g_rr(5.0)
    d_h = brentq(g_rr, lo, 5.0, xtol=1e-14)
    r_h = float(kn.kerr_schild_radius(*(d_h * direction), spin))
    # brentq locates the root to xtol; g^rr has a simple zero, so r_h is good to ~1e-12.
    assert abs(r_h - r_plus) < 1e-10
    assert abs(r_plus - (mass + math.sqrt(mass**2 - spin**2 - charge**2))) < 1e-15


def _flux_over_4pi(radius, units, n_theta=48, n_phi=96):
    """(1/4pi) closed integral of sqrt(gamma) E^i n_i dA over a coordinate sphere."""
    mu, w_mu = np.polynomial.legendre.leggauss(n_theta)
    phi = 2.0 * math.pi * np.arange(n_phi) / n_phi
    MU, PHI = np.meshgrid(mu, phi, indexing="ij")
    sin_t = np.sqrt(1.0 - MU**2)
    nrm = np.stack((sin_t * np.cos(PHI), sin_t * np.sin(PHI), MU))
    p = radius * nrm
    v = kn.kerr_newman_arrays(*p, mass=M, spin=A, charge=Q, units=units)
    sqrt_gamma = 1.0 / v["alpha"]  # det gamma = 1 + 2H = 1 / alpha^2 (checked in tests/derivations/)
    integrand = sqrt_gamma * np.einsum("i...,i...->...", v["E"], nrm) * radius**2
    total = np.einsum("i,ij->", w_mu, integrand) * (2.0 * math.pi / n_phi)
    return total / (4.0 * math.pi)


@pytest.mark.parametrize("radius", [3.0, 40.0])
def test_flux_of_E_over_4pi_is_the_charge(radius):
    # Source: MTW ch. 33 (Q is the charge seen at infinity); Gauss's law in 3+1 form,
    # d_i(sqrt(gamma) E^i) = 4 pi sqrt(gamma) rho_e (Baumgarte & Shapiro, Numerical Relativity
    # (2010), ch. 2, from memory), so in electrovacuum every sphere around the hole carries 4 pi Q.
    # The integrand is analytic and periodic in phi: Gauss-Legendre in cos(theta) and the
    # trapezoid rule in phi converge exponentially; doubling both must change the value by less
    # than 1e-13, and the value must equal Q to 1e-12 (a few thousand terms of O(1) summed in
    # float64 round off at ~1e-13).
    f = _flux_over_4pi(radius, "gaussian")
    f2 = _flux_over_4pi(radius, "gaussian", 96, 192)
    assert abs(f - f2) < 1e-13
    assert abs(f - Q) < 1e-12
    # Heaviside-Lorentz fields are the Gaussian ones over sqrt(4 pi) (the same energy density).
    f_hl = _flux_over_4pi(radius, "heaviside_lorentz")
    assert abs(f_hl - Q / math.sqrt(4.0 * math.pi)) < 1e-12


def _d1_order4(f, h, axis):
    """Centred 4th-order first derivative along ``axis`` on interior points (2 cut per side)."""
    n = f.shape[axis]

    def take(lo, hi):
        return np.take(f, np.arange(lo, n - 4 + lo), axis=axis)

    d = (-take(4, 0) + 8 * take(3, 0) - 8 * take(1, 0) + take(0, 0)) / (12 * h)
    return d


def _divergence_residual(n):
    # Box [2, 3] x [1, 2] x [0.5, 1.5]: spheroidal r > 2.2 > r+ = 1.62, far from the singularity.
    grid = UniformGrid.from_bounds((2.0, 1.0, 0.5), (3.0, 2.0, 1.5), (n, n, n))
    data = kn.kerr_newman(grid, mass=M, spin=A, charge=Q)
    h = grid.spacing[0]
    sqrt_gamma = 1.0 / data.alpha.astype(float)
    out = []
    for field in (data.E, data.B):
        dens = sqrt_gamma * field
        div = sum(
            _d1_order4(dens[i], h, i)[tuple(slice(2, -2) if ax != i else slice(None) for ax in range(3))]
            for i in range(3)
        )
        scale = max(np.abs(_d1_order4(dens[i], h, i)).max() for i in range(3))
        out.append(np.abs(div).max() / scale)
    return out


def test_maxwell_constraints_div_E_and_div_B_vanish():
    # Source: the 3+1 Maxwell constraints d_i(sqrt(gamma) E^i) = 4 pi sqrt(gamma) rho_e = 0 and
    # d_i(sqrt(gamma) B^i) = 0 (Baumgarte & Shapiro (2010), ch. 2, from memory). With a
    # 4th-order stencil the residual, relative to the largest single derivative, falls as h^4;
    # measured observed orders on 17 -> 33 -> 65 points are 3.5-3.7 then 3.8 (the next term in
    # h^6 still contributes at h = 1/16), so we require an observed order between 3.3 and 4.7:
    # a wrong field component (e.g. B^x + 0.3 x) gives order 0. The finest residual must sit
    # above round-off (1e-13 of the terms, testing-notes trap 2).
    coarse = _divergence_residual(17)
    fine = _divergence_residual(33)
    for c, f in zip(coarse, fine):
        assert f > 1e-13
        assert 3.3 < math.log2(c / f) < 4.7
        assert f < 1e-5


def test_kerr_has_no_field_and_reissner_nordstrom_no_magnetic_field():
    # MTW ch. 33: Kerr is vacuum; Reissner-Nordstrom is a static point charge (B = 0, E radial).
    grid = UniformGrid.from_bounds((2.0, -1.0, 0.5), (3.0, 1.0, 1.5), (5, 5, 5))
    k = kn.kerr(grid, mass=M, spin=A)
    assert np.all(k.E == 0) and np.all(k.B == 0)
    rn = kn.reissner_nordstrom(grid, mass=M, charge=Q)
    assert np.abs(rn.B).max() < 1e-15
    x, y, z = grid.coordinates()
    radial = np.stack((x, y, z))
    cross = np.cross(rn.E, radial, axis=0)
    assert np.abs(cross).max() < 1e-14 * np.abs(rn.E).max() * np.abs(radial).max()
    # The Eulerian observer measures the Coulomb field Q / r^2 (orthonormal-frame magnitude).
    r = np.sqrt(x * x + y * y + z * z)
    magnitude = np.sqrt(np.einsum("i...,i...->...", _lower(rn.gamma, rn.E), rn.E))
    assert np.allclose(magnitude, Q / r**2, rtol=1e-13, atol=0)


def _lower(g, V):
    gxx, gxy, gxz, gyy, gyz, gzz = g
    return np.stack((gxx * V[0] + gxy * V[1] + gxz * V[2], gxy * V[0] + gyy * V[1] + gyz * V[2],
                     gxz * V[0] + gyz * V[1] + gzz * V[2]))


def test_kerr_newman_field_invariants():
    # Source: the Kerr-Newman field has the complex invariant
    # E^2 - B^2 + 2 i E.B = Q^2 / (r - i a cos(theta))^4 with cos(theta) = z / r (from memory;
    # MTW ch. 33 gives the field in Boyer-Lindquist form). An invariant does not care about the
    # slicing, so this checks E and B (including the sign of their relative orientation).
    rng = np.random.default_rng(11)
    pts = rng.uniform(-5.0, 5.0, size=(3, 200))
    v = kn.kerr_newman_arrays(*pts, mass=M, spin=A, charge=Q)
    keep = v["r"] > 1.0
    E, B, g, r = v["E"][:, keep], v["B"][:, keep], v["gamma"][:, keep], v["r"][keep]
    invariant = (np.einsum("i...,i...->...", _lower(g, E), E)
                 - np.einsum("i...,i...->...", _lower(g, B), B)
                 + 2j * np.einsum("i...,i...->...", _lower(g, E), B))
    expected = Q**2 / (r - 1j * A * pts[2][keep] / r) ** 4
    # O(Q^2 / r^4) values computed through ~200 float64 operations: 1e-12 relative.
    assert np.allclose(invariant, expected, rtol=1e-12, atol=0)
    assert np.abs(expected.imag).max() > 1e-3  # E.B != 0 is really tested


def test_mask_and_dtype():
    grid = UniformGrid.from_bounds((-3.0, -3.0, -3.0), (3.0, 3.0, 3.0), (13, 13, 13))
    data = kn.kerr_newman(grid, mass=M, spin=A, charge=Q, dtype=np.float32)
    assert data.gamma.dtype == np.float32 and data.E.dtype == np.float32
    x, y, z = grid.coordinates()
    r = kn.kerr_schild_radius(x, y, z, A)
    assert np.array_equal(data.valid_mask, r >= kn.outer_horizon_radius(M, A, Q))
    # excision_radius=0 keeps everything finite, but the origin sits on the singular disc r = 0.
    inner = kn.kerr_newman(grid, mass=M, spin=A, charge=Q, excision_radius=0.0)
    assert not inner.valid_mask[6, 6, 6] and inner.valid_mask.sum() > data.valid_mask.sum()
    assert np.all(data.dt_gamma == 0) and np.all(data.charge_density == 0)


@pytest.mark.parametrize("kwargs, word", [
    (dict(mass=1.0, spin=0.8, charge=0.7), "spin^2 + charge^2"),
    (dict(mass=-1.0), "mass"),
    (dict(mass=1.0, units="si"), "units"),
    (dict(mass=1.0, excision_radius=-1.0), "excision_radius"),
])
def test_bad_parameters_are_named(kwargs, word):
    grid = UniformGrid.from_bounds((2, 2, 2), (3, 3, 3), (3, 3, 3))
    with pytest.raises(ValueError, match=word.replace("^", r"\^").replace("+", r"\+")):
        kn.kerr_newman(grid, **kwargs)
