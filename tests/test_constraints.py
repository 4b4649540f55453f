"""Tests of emsource.constraints: the ADM constraint monitor with electromagnetic sources.

Sources: E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), ch. 4, from memory (Hamiltonian and
momentum constraints, H = R + K^2 - K_ij K^ij - 16 pi rho, M_i = D_j K^j_i - D_i K - 8 pi S_i);
C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), ch. 33 (Kerr, Reissner-Nordstrom
and Kerr-Newman are exact solutions of the Einstein(-Maxwell) equations, so their constraints
vanish). The box of every convergence test is stated and stays clear of the horizon and the
ring singularity (testing-notes trap 5).
"""

import math

import numpy as np
import pytest
import sympy as sp

from emsource import GridPointError
from emsource.constraints import adm_constraints, interior_points
from emsource.exact import kerr_newman, outer_horizon_radius
from emsource.grid import UniformGrid

# Box [2.5, 3.5] x [0.5, 1.5] x [-0.5, 0.5]: spheroidal r >= 2.5, above r+ <= 2 for M = 1 by a
# margin of many stencil widths (h <= 1/16), off every symmetry axis and plane.
LOWER, UPPER = (2.5, 0.5, -0.5), (3.5, 1.5, 0.5)


def _box(n):
    return UniformGrid.from_bounds(LOWER, UPPER, (n, n, n))


def _norms(mass, spin, charge, n, order, sources, data_units="gaussian", scale_fields=1.0):
    grid = _box(n)
    d = kerr_newman(grid, mass=mass, spin=spin, charge=charge, units=data_units)
    assert d.valid_mask.all()  # the whole box is outside r+
    if sources is None:
        res = adm_constraints(d.gamma, d.K, spacing=grid.spacing, order=order)
    else:
        res = adm_constraints(d.gamma, d.K, scale_fields * d.E, scale_fields * d.B,
                              spacing=grid.spacing, order=order, units=sources)
    return _summary(res.hamiltonian_norms), _summary(res.momentum_norms)


class _Summary:
    """l2 of a residual (for M_i: sqrt of sum_i l2_i^2) and its largest normalised l2."""

    def __init__(self, l2, normalised):
        self.l2, self.normalised = l2, normalised


def _summary(norms):
    l2 = np.atleast_1d(norms.l2)
    return _Summary(float(np.sqrt(np.sum(l2**2))), float(np.max(norms.normalised_l2)))


def _observed_orders(mass, spin, charge, order, sources, **kw):
    coarse = _norms(mass, spin, charge, 17, order, sources, **kw)
    fine = _norms(mass, spin, charge, 33, order, sources, **kw)
    return coarse, fine, [math.log2(c.l2 / f.l2) for c, f in zip(coarse, fine)]


@pytest.mark.parametrize("order", [2, 4, 6])
def test_vacuum_kerr_constraints_converge_at_design_order(order):
    # MTW ch. 33: Kerr (Q = 0) is a vacuum solution, so H and M_i are pure truncation error,
    # O(h^order). Measured observed orders on 17 -> 33 points: 1.98, 3.89, 5.65-5.85; we
    # require order - 0.5 < observed < order + 0.7 and the finest residual above round-off
    # (normalised > 1e-13, testing-notes trap 2).
    assert outer_horizon_radius(1.0, 0.9) < 2.0
    coarse, fine, p = _observed_orders(1.0, 0.9, 0.0, order, None)
    for f, q in zip(fine, p):
        assert f.normalised > 1e-13
        assert order - 0.5 < q < order + 0.7


@pytest.mark.parametrize("order", [2, 4, 6])
@pytest.mark.parametrize("spin, charge", [(0.0, 0.8), (0.6, 0.5)])
def test_charged_holes_converge_with_gaussian_em_sources(spin, charge, order):
    # MTW ch. 33: Reissner-Nordstrom (spin 0) and Kerr-Newman solve the Einstein-Maxwell
    # equations with the Gaussian stress-energy (T^ab = (F^ac F^b_c - g^ab F^2 / 4) / 4 pi), so
    # with rho and S_i from emsource.adm_sources(units="gaussian") H and M_i converge at the
    # design order (same bounds as for Kerr; measured 1.98, 3.89-3.90, 5.66-5.83).
    _, fine, p = _observed_orders(1.0, spin, charge, order, "gaussian")
    for f, q in zip(fine, p):
        assert f.normalised > 1e-13
        assert order - 0.5 < q < order + 0.7
    assert fine[0].normalised < 1e-3


@pytest.mark.parametrize("spin, charge", [(0.0, 0.8), (0.6, 0.5)])
@pytest.mark.parametrize("sources", [None, "heaviside_lorentz"])
def test_negative_controls_converge_to_a_non_zero_value(spin, charge, sources):
    # Without the sources H -> -16 pi rho != 0; with the Heaviside-Lorentz normalisation fed to
    # the Gaussian-unit data rho is 4 pi too large and H -> -16 pi (4 pi - 1) rho. Either way
    # the residual is O(1) of the terms already on the coarse grid (testing-notes trap 3) and
    # does not converge (observed order |p| < 0.3, measured |p| < 0.07).
    coarse, fine, p = _observed_orders(1.0, spin, charge, 4, sources)
    assert coarse[0].normalised > 1e-2 and fine[0].normalised > 1e-2
    assert abs(p[0]) < 0.3
    if spin != 0.0:
        # Kerr-Newman has a Poynting flux S_i != 0 (E.B != 0 and E x B != 0), so M_i fails too;
        # for Reissner-Nordstrom B = 0, S_i = 0 and M_i is blind to the field.
        assert fine[1].normalised > 1e-3 and abs(p[1]) < 0.3


def test_heaviside_lorentz_data_converge_with_heaviside_lorentz_sources():
    # The same spacetime with fields written in Heaviside-Lorentz units (E / sqrt(4 pi)) is
    # consistent when the sources are computed in that system (Jackson 3rd ed., appendix on
    # units: the HL stress-energy has no 1/(4 pi)).
    _, fine, p = _observed_orders(1.0, 0.6, 0.5, 4, "heaviside_lorentz",
                                  data_units="heaviside_lorentz")
    assert 3.5 < p[0] < 4.7 and 3.5 < p[1] < 4.7


def _reference_constraints(metric, curvature, point, rho=0.0, S=(0.0, 0.0, 0.0)):
    """H, M_i of analytic gamma_ij, K_ij at one point, from textbook definitions.

    R_ij = d_k Gamma^k_ij - d_j Gamma^k_ik + Gamma^k_kl Gamma^l_ij - Gamma^k_jl Gamma^l_ik,
    with Gamma^k_ij = gamma^kl Gamma_lij and d gamma^-1 = -gamma^-1 (d gamma) gamma^-1, all
    derivatives by sympy: a different route from the kernel's metric-derivative formula.
    """
    X = sp.symbols("x y z", real=True)
    sub = dict(zip(X, point))
    g = np.array([[float(metric[i][j].subs(sub)) for j in range(3)] for i in range(3)])
    dg = np.array([[[float(sp.diff(metric[i][j], X[k]).subs(sub)) for k in range(3)]
                    for j in range(3)] for i in range(3)])  # dg[i, j, k] = d_k g_ij
    ddg = np.array([[[[float(sp.diff(metric[i][j], X[k], X[m]).subs(sub)) for m in range(3)]
                      for k in range(3)] for j in range(3)] for i in range(3)])
    Kl = np.array([[float(curvature[i][j].subs(sub)) for j in range(3)] for i in range(3)])
    dK = np.array([[[float(sp.diff(curvature[i][j], X[k]).subs(sub)) for k in range(3)]
                    for j in range(3)] for i in range(3)])
    gi = np.linalg.inv(g)
    dgi = -np.einsum("ia,abk,bj->ijk", gi, dg, gi)
    # first kind: G1[l, i, j] = (d_i g_lj + d_j g_li - d_l g_ij) / 2 and its derivative.
    G1 = 0.5 * (np.einsum("lji->lij", dg) + np.einsum("lij->lij", dg) - np.einsum("ijl->lij", dg))
    dG1 = 0.5 * (np.einsum("ljim->lijm", ddg) + np.einsum("lijm->lijm", ddg)
                 - np.einsum("ijlm->lijm", ddg))
    G2 = np.einsum("kl,lij->kij", gi, G1)
    dG2 = np.einsum("klm,lij->kijm", dgi, G1) + np.einsum("kl,lijm->kijm", gi, dG1)
    ric = (np.einsum("kijk->ij", dG2) - np.einsum("kikj->ij", dG2)
           + np.einsum("kkl,lij->ij", G2, G2) - np.einsum("kjl,lik->ij", G2, G2))
    R = np.einsum("ij,ij->", gi, ric)
    trK = np.einsum("ij,ij->", gi, Kl)
    Ku = gi @ Kl @ gi
    H = R + trK**2 - np.einsum("ij,ij->", Ku, Kl) - 16 * math.pi * rho
    DK = dK.transpose(2, 0, 1) - np.einsum("mca,mb->cab", G2, Kl) - np.einsum("mcb,am->cab", G2, Kl)
    M = (np.einsum("jk,jki->i", gi, DK) - np.einsum("jk,ijk->i", gi, DK)
         - 8 * math.pi * np.asarray(S))
    return H, M


def test_kernel_matches_textbook_definitions_on_generic_data():
    # Generic (non-solution) smooth data: a non-diagonal, non-conformally-flat metric and a
    # curvature tensor of our own. The kernel must reproduce H and M_i of the textbook
    # definitions (Gourgoulhon 2012, ch. 4, from memory; Ricci from the Christoffel symbols, common
    # practice) with an error that falls as h^6 at order 6 (observed order 5.3 - 6.7).
    x, y, z = sp.symbols("x y z", real=True)
    metric = [[1 + 0.2 * sp.sin(x + 2 * y), 0.1 * sp.cos(y - z), 0.05 * x * z],
              [0, 1 + 0.1 * x**2 + 0.1 * sp.cos(z), 0.1 * sp.sin(x * y)],
              [0, 0, 1.2 + 0.15 * sp.sin(z - x) * sp.cos(y)]]
    for i in range(3):
        for j in range(i):
            metric[i][j] = metric[j][i]
    curvature = [[0.3 * sp.cos(x) * y, 0.1 * sp.sin(z), 0.2 * x * y],
                 [0, -0.2 + 0.1 * z**2, 0.3 * sp.sin(x - y)],
                 [0, 0, 0.1 * sp.cos(x + y + z)]]
    for i in range(3):
        for j in range(i):
            curvature[i][j] = curvature[j][i]
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    gf = sp.lambdify((x, y, z), [metric[i][j] for i, j in packed], "numpy")
    kf = sp.lambdify((x, y, z), [curvature[i][j] for i, j in packed], "numpy")
    centre = (0.3, -0.2, 0.4)
    H_ref, M_ref = _reference_constraints(metric, curvature, centre)
    errors = []
    for h in (0.1, 0.05):
        n = 7  # order 6 needs 3 points per side: the centre point is the only one evaluated
        off = (np.arange(n) - 3) * h
        X, Y, Z = np.meshgrid(centre[0] + off, centre[1] + off, centre[2] + off, indexing="ij")
        gam = np.array([np.broadcast_to(c, X.shape) for c in gf(X, Y, Z)], dtype=float)
        K = np.array([np.broadcast_to(c, X.shape) for c in kf(X, Y, Z)], dtype=float)
        res = adm_constraints(gam, K, spacing=h, order=6)
        assert res.interior.sum() == 1 and res.interior[3, 3, 3]
        errors.append(np.hstack((res.hamiltonian[3, 3, 3] - H_ref,
                                 res.momentum[:, 3, 3, 3] - M_ref)))
    assert abs(H_ref) > 0.05 and np.abs(M_ref).min() > 0.01  # the data are far from a solution
    p = np.log2(np.abs(errors[0]) / np.abs(errors[1]))
    assert np.all((5.3 < p) & (p < 6.7)), p
    assert np.abs(errors[1]).max() < 1e-6


def test_mask_excludes_every_stencil_that_touches_it():
    # A point is evaluated only if the three coordinate planes of its stencil cube (radius
    # order / 2) are inside the grid and unmasked; brute force over all points.
    rng = np.random.default_rng(3)
    mask = rng.random((9, 10, 11)) > 0.03
    for order in (2, 4):
        r = order // 2
        ev = interior_points(mask, order)
        for idx in np.ndindex(mask.shape):
            ok = all(r <= idx[a] < mask.shape[a] - r for a in range(3))
            if ok:
                for a in range(3):
                    for b in (c for c in range(3) if c != a):
                        for m in range(-r, r + 1):
                            for q in range(-r, r + 1):
                                p = list(idx)
                                p[a] += m
                                p[b] += q
                                ok &= bool(mask[tuple(p)])
            assert ev[idx] == ok


def test_excised_region_with_nan_inside_is_never_read():
    # Kerr-Newman on a box through the hole, excised inside r = 1.2 r+: NaN written into the
    # masked points must not reach any evaluated residual, and the evaluated residuals must
    # equal those computed from the intact data.
    grid = UniformGrid.from_bounds((-3.0, -3.0, -3.0), (3.0, 3.0, 3.0), (21, 21, 21))
    rp = outer_horizon_radius(1.0, 0.6, 0.5)
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5, excision_radius=1.2 * rp)
    gamma, K, E, B = (a.copy() for a in (d.gamma, d.K, d.E, d.B))
    for a in (gamma, K, E, B):
        a[:, ~d.valid_mask] = np.nan
    res = adm_constraints(gamma, K, E, B, spacing=grid.spacing, order=4, valid_mask=d.valid_mask)
    intact = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5, excision_radius=0.0)
    ref = adm_constraints(intact.gamma, intact.K, intact.E, intact.B, spacing=grid.spacing,
                          order=4, valid_mask=intact.valid_mask)
    ev = res.interior
    assert ev.sum() > 1000 and not ev[10, 10, 10]
    assert np.all(np.isfinite(res.hamiltonian[ev])) and np.all(np.isnan(res.hamiltonian[~ev]))
    assert np.array_equal(res.hamiltonian[ev], ref.hamiltonian[ev])
    assert np.array_equal(res.momentum[:, ev], ref.momentum[:, ev])
    assert math.isfinite(res.hamiltonian_norms.l2)
    assert res.momentum_norms.l2.shape == (3,) and np.all(np.isfinite(res.momentum_norms.l2))
    # The norms are those of the conservation diagnostic: RMS, max, and both over the scale.
    H = res.hamiltonian[ev]
    assert math.isclose(res.hamiltonian_norms.l2, float(np.sqrt(np.mean(H**2))), rel_tol=1e-12)
    assert math.isclose(res.hamiltonian_norms.normalised_max,
                        float(np.abs(H).max() / res.hamiltonian_scale[ev].max()), rel_tol=1e-12)


def test_bad_inputs_are_named():
    grid = _box(9)
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    with pytest.raises(ValueError, match="order"):
        adm_constraints(d.gamma, d.K, spacing=grid.spacing, order=3)
    with pytest.raises(ValueError, match="K must have shape"):
        adm_constraints(d.gamma, d.K[:, :-1], spacing=grid.spacing)
    with pytest.raises(ValueError, match="both E and B"):
        adm_constraints(d.gamma, d.K, d.E, spacing=grid.spacing)
    with pytest.raises(ValueError, match="units"):
        adm_constraints(d.gamma, d.K, d.E, d.B, spacing=grid.spacing, units="si")
    bad = d.gamma.copy()
    bad[3, 4, 5, 6] = np.nan
    with pytest.raises(GridPointError, match=r"grid index \(4, 5, 6\): non-finite value\(s\): gamma\[3\] = nan") as error:
        adm_constraints(bad, d.K, spacing=grid.spacing)
    assert error.value.first_index == (4, 5, 6)
    mask = np.ones(grid.shape, bool)
    mask[4, 5, 6] = False
    adm_constraints(bad, d.K, spacing=grid.spacing, valid_mask=mask)  # a masked point is not checked
    bad = d.gamma.copy()
    bad[0, 1, 2, 3] = -1.0
    with pytest.raises(GridPointError, match=r"grid index \(1, 2, 3\): gamma is not positive definite"):
        adm_constraints(bad, d.K, spacing=grid.spacing)
    before = d.gamma.copy()
    adm_constraints(d.gamma, d.K, d.E, d.B, spacing=grid.spacing)
    assert np.array_equal(before, d.gamma)  # inputs are never modified


def test_sign_of_K_is_fixed_by_the_poynting_term():
    # M_i is linear in K and S_i: vacuum Kerr cannot see a flipped sign convention of K
    # (M -> -M = 0), but Kerr-Newman's S_i = E x B / 4 pi != 0 can. With K -> -K the momentum
    # residual converges to -2 * 8 pi S_i instead of zero (order ~0, O(1e-3) of its terms),
    # while H, quadratic in K, is unchanged.
    out = []
    for n in (17, 33):
        grid = _box(n)
        d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
        right = adm_constraints(d.gamma, d.K, d.E, d.B, spacing=grid.spacing, order=4)
        flipped = adm_constraints(d.gamma, -d.K, d.E, d.B, spacing=grid.spacing, order=4)
        assert np.allclose(flipped.hamiltonian[right.interior], right.hamiltonian[right.interior],
                           rtol=0, atol=1e-12)
        out.append(_summary(flipped.momentum_norms))
    assert out[1].normalised > 1e-3
    assert abs(math.log2(out[0].l2 / out[1].l2)) < 0.3


def test_float32_data_are_evaluated_in_float64():
    # float32 data carry a rounding of 6e-8 relative; the second-difference weights of order 4
    # sum to 2.5 + 2 (4/3 + 1/12) = 5.3 in absolute value, h = 1/16, so one O(1) metric term
    # moves by up to 6e-8 * 5.3 * 256 = 8e-5; with a few such terms in R we allow 1e-3
    # (measured 2e-4). The residuals themselves are float64 arrays.
    grid = _box(17)
    d64 = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    d32 = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5, dtype=np.float32)
    r64 = adm_constraints(d64.gamma, d64.K, d64.E, d64.B, spacing=grid.spacing)
    r32 = adm_constraints(d32.gamma, d32.K, d32.E, d32.B, spacing=grid.spacing)
    assert r32.hamiltonian.dtype == np.float64
    ev = r64.interior
    assert np.abs(r32.hamiltonian[ev] - r64.hamiltonian[ev]).max() < 1e-3
