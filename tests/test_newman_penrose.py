"""Newman-Penrose scalars from E, B and the metric, against independent routes.

- a brute-force 4D contraction F_ab l^a m^b ... with F^ab from ``tests/reference_stress_energy.py``
  (random lapse, shift and metric), the tetrad built in 4D from n^a and the triad; the null
  normalisation l.k = -1, m.mbar = 1 checked with g_ab (E. T. Newman and R. Penrose,
  J. Math. Phys. 3, 566 (1962), definitions from memory);
- the identities |Phi2|^2 - |Phi0|^2 = eps_ijk r^i E^j B^k and
  |Phi0|^2 + 2|Phi1|^2 + |Phi2|^2 = (E^2 + B^2)/2 (derived in emsource.newman_penrose);
- closed forms for an outgoing wave, a plane wave, and the point magnetic dipole
  (fields: J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 9.3; the scalars
  Phi2 = -(M_phi + i M_theta)/r, M = m'' + m'/r + m/(2 r^2), Phi0 = -(m_phi - i m_theta)/(2 r^3),
  Phi1 = i (n.m/r^3 + n.m'/r^2) derived by hand from them: peeling r^-1, r^-2, r^-3).
"""

import math

import numpy as np
import pytest

from emsource.exact import rotating_dipole_fields
from emsource.exact.plane_wave import plane_wave_pattern
from emsource.newman_penrose import metric_dot, newman_penrose_scalars, sphere_triad
from reference_stress_energy import point_faraday, point_geometry

EPS = np.finfo(float).eps
PACK = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]


def _random_metric(rng, n):
    a = rng.normal(scale=0.3, size=(n, 3, 3))
    full = np.einsum("nij,nkj->nik", a, a) + np.eye(3)
    return np.stack([full[:, i, j] for i, j in PACK])


def _points(rng, n, radius=2.0):
    x = rng.normal(size=(3, n))
    return radius * x / np.linalg.norm(x, axis=0)


def test_triad_is_orthonormal_and_right_handed(rng):
    n = 50
    x, g = _points(rng, n), _random_metric(rng, n)
    triad = sphere_triad(x, g)
    for i, u in enumerate(triad):
        for j, v in enumerate(triad):
            # a few roundings per Gram-Schmidt step, on a metric of condition ~ 10
            np.testing.assert_allclose(metric_dot(g, u, v), float(i == j), atol=64 * EPS)
    for k in range(n):
        gamma3 = np.array([[g[PACK.index(tuple(sorted((i, j)))), k] for j in range(3)]
                           for i in range(3)])
        volume = math.sqrt(np.linalg.det(gamma3)) * np.linalg.det(
            np.stack([t[:, k] for t in triad]))
        assert volume == pytest.approx(1.0, abs=64 * EPS)  # eps_ijk r th ph = +1
    # Gram-Schmidt order radial first: r-hat along x, theta-hat with a positive theta part
    r_hat, t_hat, _ = triad
    np.testing.assert_allclose(np.cross(r_hat, x, axis=0), 0, atol=64 * EPS)
    assert np.all(np.sum(r_hat * x, axis=0) > 0)
    theta = np.arccos(x[2] / np.linalg.norm(x, axis=0))
    polar = np.stack([np.cos(theta) * x[0] / np.hypot(x[0], x[1]),
                      np.cos(theta) * x[1] / np.hypot(x[0], x[1]), -np.sin(theta)])
    assert np.all(metric_dot(g, t_hat, polar) > 0)


def test_against_four_dimensional_contraction(rng):
    n = 20
    x, g = _points(rng, n), _random_metric(rng, n)
    E, B = rng.normal(size=(3, n)), rng.normal(size=(3, n))
    alpha = rng.uniform(0.5, 1.5, n)
    beta = rng.normal(scale=0.3, size=(3, n))
    phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    r_hat, t_hat, p_hat = sphere_triad(x, g)
    for k in range(n):
        gamma3 = np.array([[g[PACK.index(tuple(sorted((i, j)))), k] for j in range(3)]
                           for i in range(3)])
        g4, _, n_up, _, _ = point_geometry(alpha[k], beta[:, k], gamma3)
        F_up = point_faraday(alpha[k], beta[:, k], gamma3, E[:, k], B[:, k])
        F = g4 @ F_up @ g4.T
        spatial = [np.concatenate([[0.0], v[:, k]]) for v in (r_hat, t_hat, p_hat)]
        l = (n_up + spatial[0]) / math.sqrt(2)
        kk = (n_up - spatial[0]) / math.sqrt(2)
        m = (spatial[1] + 1j * spatial[2]) / math.sqrt(2)
        # null tetrad normalisation with the 4-metric
        assert l @ g4 @ kk == pytest.approx(-1, abs=1e-13)
        assert (m @ g4 @ m.conj()).real == pytest.approx(1, abs=1e-13)
        assert abs(l @ g4 @ l) < 1e-13 and abs(m @ g4 @ m) < 1e-13 and abs(l @ g4 @ m) < 1e-13
        expected = (l @ F @ m, 0.5 * (l @ F @ kk + m.conj() @ F @ m), m.conj() @ F @ kk)
        for ours, theirs in zip((phi0[k], phi1[k], phi2[k]), expected):
            assert ours == pytest.approx(theirs, abs=1e-12)


def test_flux_and_energy_identities(rng):
    n = 30
    x, g = _points(rng, n), _random_metric(rng, n)
    E, B = rng.normal(size=(3, n)), rng.normal(size=(3, n))
    phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    r_hat, _, _ = sphere_triad(x, g)
    for k in range(n):
        gamma3 = np.array([[g[PACK.index(tuple(sorted((i, j)))), k] for j in range(3)]
                           for i in range(3)])
        radial_poynting = math.sqrt(np.linalg.det(gamma3)) * np.linalg.det(
            np.stack([r_hat[:, k], E[:, k], B[:, k]]))
        assert abs(phi2[k]) ** 2 - abs(phi0[k]) ** 2 == pytest.approx(radial_poynting, abs=1e-12)
        energy = 0.5 * (E[:, k] @ gamma3 @ E[:, k] + B[:, k] @ gamma3 @ B[:, k])
        total = abs(phi0[k]) ** 2 + 2 * abs(phi1[k]) ** 2 + abs(phi2[k]) ** 2
        assert total == pytest.approx(energy, rel=1e-13)


def test_outgoing_wave_in_flat_space(rng):
    n = 30
    x = _points(rng, n)
    g = np.zeros((6, n))
    g[[0, 3, 5]] = 1
    r_hat, t_hat, p_hat = sphere_triad(x, g)
    a, b = rng.normal(size=(2, n))
    E = a * t_hat + b * p_hat
    B = np.cross(r_hat, E, axis=0)
    phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    np.testing.assert_allclose(phi0, 0, atol=1e-15)
    np.testing.assert_allclose(phi1, 0, atol=1e-15)
    np.testing.assert_allclose(phi2, a - 1j * b, rtol=1e-14)
    # time reversal: an ingoing wave (B -> -B) lives in Phi0 alone
    phi0, _, phi2 = newman_penrose_scalars(x, g, E, -B)
    np.testing.assert_allclose(phi2, 0, atol=1e-15)
    np.testing.assert_allclose(np.abs(phi0), np.hypot(a, b), rtol=1e-14)


def test_plane_wave_is_outgoing_ahead_and_ingoing_behind():
    # Jackson sec. 7.1: E = A e f(s), B = k-hat x E; at the sphere point along +k-hat the wave
    # leaves the sphere (only Phi2), along -k-hat it enters (only Phi0); Phi1 = E_r + i B_r = 0.
    k = np.array([0.6, -0.3, 0.5])
    k_hat = k / np.linalg.norm(k)
    x = np.stack([2.0 * k_hat, -2.0 * k_hat], axis=1)
    E, B, *_ = plane_wave_pattern(x[0], x[1], x[2], 0.4, wave_vector=k,
                                  polarization=np.cross(k, [0, 0, 1.0]), amplitude=1.3,
                                  profile="sine", width=0.5, phase=0.2, function="test")
    g = np.zeros((6, 2))
    g[[0, 3, 5]] = 1
    phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    size = np.linalg.norm(E, axis=0)
    assert abs(phi0[0]) < 1e-15 and abs(phi2[1]) < 1e-15
    np.testing.assert_allclose(np.abs(phi1), 0, atol=1e-15)
    assert abs(phi2[0]) == pytest.approx(size[0], rel=1e-14)
    assert abs(phi0[1]) == pytest.approx(size[1], rel=1e-14)


def test_point_dipole_closed_forms_and_peeling(rng):
    x = _points(rng, 25, radius=1.0) * rng.uniform(0.7, 6.0, 25)
    t, omega, chi = 0.7, 1.3, 0.6
    E, B = rotating_dipole_fields(x, t, omega=omega, inclination=chi)
    g = np.zeros((6, x.shape[1]))
    g[[0, 3, 5]] = 1
    phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    r = np.linalg.norm(x, axis=0)
    u = t - r
    m0 = np.stack([np.sin(chi) * np.cos(omega * u), np.sin(chi) * np.sin(omega * u),
                   np.cos(chi) * np.ones_like(u)])
    m1 = omega * np.stack([-np.sin(chi) * np.sin(omega * u), np.sin(chi) * np.cos(omega * u),
                           np.zeros_like(u)])
    m2 = -omega**2 * np.concatenate([m0[:2], np.zeros((1,) + u.shape)])
    n = x / r
    r_hat, t_hat, p_hat = sphere_triad(x, g)
    M = m2 + m1 / r + m0 / (2 * r**2)
    comp = lambda v, e: np.sum(v * e, axis=0)  # noqa: E731
    np.testing.assert_allclose(phi2, -(comp(M, p_hat) + 1j * comp(M, t_hat)) / r, atol=1e-14)
    np.testing.assert_allclose(phi0, -(comp(m0, p_hat) - 1j * comp(m0, t_hat)) / (2 * r**3),
                               atol=1e-14)
    np.testing.assert_allclose(phi1, 1j * (comp(n, m0) / r**3 + comp(n, m1) / r**2), atol=1e-14)


def test_bad_input():
    g = np.zeros((6, 1))
    g[[0, 3, 5]] = 1
    with pytest.raises(ValueError, match="z axis"):
        sphere_triad(np.array([[0.0], [0.0], [1.0]]), g)
    with pytest.raises(ValueError, match="points must have shape"):
        sphere_triad(np.zeros(3), g)
    with pytest.raises(ValueError, match=r"gamma must have shape \(6, 1\)"):
        sphere_triad(np.ones((3, 1)), np.ones((6, 2)))
    bad = g.copy()
    bad[0] = -1.0
    with pytest.raises(ValueError, match="not positive definite"):
        sphere_triad(np.array([[1.0], [0.2], [0.3]]), bad)
    with pytest.raises(ValueError, match=r"E must have shape \(3, 1\)"):
        newman_penrose_scalars(np.ones((3, 1)), g, np.ones((3, 2)), np.ones((3, 1)))
