"""Integrated quantities: sphere quadrature, interpolation, luminosity of a rotating dipole,
energy of a boosted charge, and independence from the slab size."""

import math

import numpy as np
import pytest

from emsource import integrals, io
from emsource.exact import rotating_dipole, rotating_dipole_fields, rotating_dipole_luminosity
from emsource.grid import UniformGrid

DIPOLE = dict(moment=1.0, omega=1.0, inclination=math.pi / 4)


def test_sphere_quadrature_integrates_polynomials_exactly():
    # Surface integrals over a sphere of radius R (elementary; e.g. G. B. Folland, "How to
    # integrate a polynomial over a sphere", Amer. Math. Monthly 108 (2001) 446, Theorem):
    # area 4 pi R^2, int x^2 = 4 pi R^4 / 3, int x^2 y^2 z^2 = 4 pi R^8 / 105, int x^4 = 4 pi R^6 / 5.
    # Gauss-Legendre with n nodes is exact in cos(theta) up to degree 2n - 1, the uniform phi rule
    # for trigonometric degree < 2n: with n = 6, degree 6 is integrated to round-off.
    R = 1.7
    points, normals, w = integrals.sphere_quadrature(R, 6)
    x, y, z = points
    assert np.allclose(np.linalg.norm(normals, axis=0), 1.0, rtol=0, atol=1e-15)
    checks = [(np.ones_like(x), 4 * np.pi * R**2), (x**2, 4 * np.pi * R**4 / 3),
              (x**4, 4 * np.pi * R**6 / 5), (x**2 * y**2 * z**2, 4 * np.pi * R**8 / 105),
              (x * y**3, 0.0)]
    for f, exact in checks:
        assert abs(f @ w - exact) <= 1e-13 * 4 * np.pi * R**8


def test_lagrange_weights_reproduce_polynomials_of_their_degree():
    # p-point Lagrange interpolation is exact for polynomials of degree < p (uniqueness of the
    # interpolating polynomial), and the nodes bracket the point in the middle interval.
    s = np.array([3.0, 3.25, 7.5, 9.999])
    for p in (2, 4, 6):
        i0, w = integrals.lagrange_weights(s, p)
        nodes = i0[:, None] + np.arange(p)
        assert np.all((nodes[:, p // 2 - 1] <= s) & (s < nodes[:, p // 2]))
        f = lambda u: 0.3 * u ** (p - 1) - u + 2  # noqa: E731
        assert np.allclose((w * f(nodes)).sum(axis=1), f(s), rtol=1e-13)


def _dipole_errors(n, radii, box=3.0):
    grid = UniformGrid.from_bounds((-box,) * 3, (box,) * 3, (n,) * 3)
    data = rotating_dipole(grid, 0.3, excision_radius=0.2, **DIPOLE)
    result = integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B,
                                              valid_mask=data.valid_mask.astype(np.uint8), radii=radii,
                                              theta_points=32)
    return grid, data, result


def _interpolation_bound(grid, data, R):
    """Derived bound on |L_numerical - L| from the cubic Lagrange remainder.

    1D: |f - p| <= max|f''''| / 4! * max_t |t (t-1)(t-2)(t-3)| h^4 = (9/16) / 24 h^4 max|f''''|
    on the middle interval t in [1, 2] (Lagrange remainder; e.g. K. E. Atkinson, An Introduction
    to Numerical Analysis, 2nd ed., sec. 3.2, Theorem 3.2). The tensor product adds one such
    term per axis, multiplied by the Lebesgue constant 1.25 of the other axes' 4-point weights
    (-1/16, 9/16, 9/16, -1/16 at the midpoint): factor 1 + 1.25 + 1.25^2. max|f''''| is taken
    from the 4th differences of F^i on the grid in the shell the stencils cover (each equals f''''
    somewhere in its stencil, mean value theorem for divided differences), doubled for the
    variation inside a stencil. |n.dF| <= sqrt(3) max_c |dF_c|, integrated over 4 pi R^2.
    """
    from emsource import adm_sources

    src = adm_sources(data.gamma, data.E, data.B)
    flux = src.S_i  # flat, alpha = 1, beta = 0: F^i = S_i
    h = grid.spacing[0]
    x, y, z = grid.coordinates()
    shell = np.abs(np.sqrt(x**2 + y**2 + z**2) - R) <= 2 * math.sqrt(3) * h
    m4 = 0.0
    for axis in range(3):
        d4 = np.diff(flux, n=4, axis=axis + 1) / h**4
        # a 4th difference along `axis` at index i belongs to the stencil i..i+4, centred at i+2
        centred = [slice(None)] * 3
        centred[axis] = slice(2, -2)
        m4 = max(m4, float(np.abs(d4[:, shell[tuple(centred)]]).max()))
    per_point = (1 + 1.25 + 1.25**2) * (9 / 16) / 24 * h**4 * 2 * m4
    return 4 * np.pi * R**2 * math.sqrt(3) * per_point


def test_rotating_dipole_luminosity_through_several_spheres():
    # Magnetic dipole radiation: L = (2/3) m^2 omega^4 sin^2(chi) in Gaussian units with c = 1
    # (J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 9.3). The field pattern
    # rotates rigidly, so the same flux crosses every centred sphere outside the source
    # (testing-notes trap 6), near zone included: spheres at R = 1.5, 2, 2.5 all must give L.
    exact = rotating_dipole_luminosity(**DIPOLE)
    radii = (1.5, 2.0, 2.5)
    errors = {}
    for n in (49, 97):  # h = 0.125, 0.0625
        grid, data, result = _dipole_errors(n, radii)
        for R in radii:
            error = abs(result.luminosity[R] - exact)
            bound = _interpolation_bound(grid, data, R)
            # The worst-case bound is loose (observed errors are 1e-4 to 1e-5 of it: the
            # interpolation errors change sign over the sphere and cancel); the quadrature of
            # the exact flux is at round-off (test_sphere_quadrature_of_the_exact_flux_...).
            assert error <= bound, (n, R, error, bound)
            errors[n, R] = error
    for R in radii:
        # Converges at about 4th order: the error falls by more than 2^3 when h halves (the
        # 2^4 of the asymptotic rate, with room for the pre-asymptotic coarse grid), and the
        # finest error stays far above float64 round-off (1e-13 of L), so the rate is real.
        assert errors[97, R] < errors[49, R] / 8, (R, errors[49, R], errors[97, R])
        assert errors[97, R] > 1e-11 * exact


def test_sphere_quadrature_of_the_exact_flux_is_spectral():
    # Without interpolation (exact fields at the nodes) the Gauss-Legendre x uniform rule must
    # give Jackson's L through spheres in the near (R = 0.5), intermediate (R = 2) and wave
    # (R = 20) zones to round-off with a modest number of nodes: the flux density is a
    # trigonometric polynomial of low degree on the sphere. (J. D. Jackson, Classical
    # Electrodynamics, 3rd ed., sec. 9.3; rigid rotation: testing-notes trap 6.)
    exact = rotating_dipole_luminosity(**DIPOLE)
    for R in (0.5, 2.0, 20.0):
        points, normals, w = integrals.sphere_quadrature(R, 12)
        E, B = rotating_dipole_fields(points, 0.4, **DIPOLE)
        poynting = np.cross(E, B, axis=0) / (4 * np.pi)
        value = np.einsum("cn,cn->n", poynting, normals) @ w
        # terms up to ~ m^2 / R^5 * R^2 (near zone) cancel: round-off relative to their size
        scale = 4 * np.pi * R**2 * np.abs(poynting).max()
        assert abs(value - exact) < 1e-13 * max(scale, exact), (R, value, exact)


def test_sphere_outside_the_grid_or_in_the_excision_is_an_error():
    grid = UniformGrid.from_bounds((-2,) * 3, (2,) * 3, (17,) * 3)
    data = rotating_dipole(grid, 0.0, excision_radius=0.6, **DIPOLE)
    with pytest.raises(io.SnapshotError, match="does not fit in the grid along x"):
        integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B, radii=(1.9,))
    with pytest.raises(io.SnapshotError, match="reaches excised points"):
        integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B,
                                         valid_mask=data.valid_mask.astype(np.uint8), radii=(0.7,))


@pytest.mark.parametrize("axis_order", ["xyz", "zyx"])
def test_streamed_integrals_do_not_depend_on_the_slab_size(tmp_path, axis_order):
    # Slabs change only the order of the floating-point sums: agreement to ~1e-13 relative.
    grid = UniformGrid.from_bounds((-3, -2.5, -2), (3, 2.5, 2), (25, 21, 17))
    levels = [rotating_dipole(grid, t, excision_radius=0.3, **DIPOLE) for t in (0.0, 0.7)]
    path = tmp_path / "dipole.h5"
    io.write_snapshot(path, levels, axis_order=axis_order)
    whole = integrals.integrate_level_arrays(grid, levels[1].gamma, levels[1].E, levels[1].B,
                                             valid_mask=levels[1].valid_mask.astype(np.uint8), radii=(1.2, 1.6))
    for rows in (2, 5, None):
        streamed = integrals.integrate_snapshot(path, radii=(1.2, 1.6), rows=rows)[1]
        assert streamed.time == 0.7
        assert streamed.energy == pytest.approx(whole.energy, rel=1e-13)
        assert np.allclose(streamed.momentum, whole.momentum, rtol=0, atol=1e-13 * whole.energy)
        for face in integrals.FACES:
            assert streamed.face_flux[face] == pytest.approx(whole.face_flux[face], rel=1e-12)
        for R in (1.2, 1.6):
            assert streamed.luminosity[R] == pytest.approx(whole.luminosity[R], rel=1e-12)
        assert streamed.excised_points == whole.excised_points > 0
        assert streamed.max_magnetic_field == pytest.approx(whole.max_magnetic_field, rel=1e-15)


# --- boosted Gaussian charge ----------------------------------------------------------------

CHARGE = dict(charge=1.0, width=0.4, velocity=np.array([0.6, 0.0, 0.0]),
              center=np.array([0.1, -0.05, 0.0]))
T_CHARGE = 0.5
BOX = 2.0


def _closed_form_energy_density(points):
    """(E^2 + B^2) / (8 pi) of the boosted Gaussian charge at points (npts, 3), written here
    independently of the generator: rest-frame field E' = q P(3/2, r'^2 / (2 sigma^2)) r' / r'^3
    (Gauss's law with the charge inside r' of a 3D Gaussian, the regularized incomplete gamma
    function; J. D. Jackson, Classical Electrodynamics, 3rd ed., sec. 1.3), boosted with
    E = gamma q g(r') d, r'^2 = d^2 + gamma^2 (v.d)^2, B = v x E (Jackson sec. 11.10)."""
    from scipy import special

    q, sigma, v = CHARGE["charge"], CHARGE["width"], CHARGE["velocity"]
    lorentz = 1 / math.sqrt(1 - v @ v)
    d = points - CHARGE["center"] - v * T_CHARGE
    r2 = (d * d).sum(-1) + lorentz**2 * (d @ v) ** 2
    g = special.gammainc(1.5, r2 / (2 * sigma**2)) / r2**1.5
    E = q * lorentz * g[:, None] * d
    B = np.cross(v, E)
    return ((E * E).sum(-1) + (B * B).sum(-1)) / (8 * math.pi)


def _boosted_charge(n, t=T_CHARGE):
    from emsource.exact import boosted_gaussian_charge

    grid = UniformGrid.from_bounds((-BOX,) * 3, (BOX,) * 3, (n,) * 3)
    return grid, boosted_gaussian_charge(grid, t, **CHARGE)


def _euler_maclaurin_correction(h):
    """Leading trapezoidal error in 3D: (h^2 / 12) sum_a int [d_a f]_{x_a = -L}^{x_a = L} dA.

    The Euler-Maclaurin formula (e.g. K. E. Atkinson, An Introduction to Numerical Analysis,
    2nd ed., sec. 5.4) applied along each axis, with the other two integrated exactly to leading
    order; d_a f by a centred difference of the closed form (step 1e-4: error ~1e-8 relative).
    """
    from scipy import integrate

    total = 0.0
    for a in range(3):
        others = [b for b in range(3) if b != a]
        for side, sign in ((BOX, 1.0), (-BOX, -1.0)):
            def normal_derivative(p2, a=a, others=others, side=side):
                p = np.empty((p2.shape[0], 3))
                p[:, others] = p2
                p[:, a] = side + 1e-4
                upper = _closed_form_energy_density(p)
                p[:, a] = side - 1e-4
                return (upper - _closed_form_energy_density(p)) / 2e-4
            total += sign * integrate.cubature(normal_derivative, [-BOX] * 2, [BOX] * 2,
                                               rtol=1e-8, atol=1e-13).estimate
    return h * h / 12 * total


def test_boosted_charge_energy_in_a_box_matches_direct_quadrature():
    # Reference: adaptive cubature (scipy.integrate.cubature) of the closed-form energy density
    # over the box [-2, 2]^3, to 1e-10. The grid integral (trapezoidal rule) must differ from it
    # by the Euler-Maclaurin term h^2/12 [d_a f] (the Gaussian core is integrated spectrally, the
    # Coulomb tail at the faces is not): what remains is the next term, O(h^4), below
    # (h^2 / 60) max|f'''/f'| ~ (h^2/60) * 30/r^2 ~ 0.125 h^2 for f ~ r^-4 at r >= 2: with a
    # factor two of room, |error - correction| <= 0.25 h^2 |correction|.
    from scipy import integrate

    reference = integrate.cubature(_closed_form_energy_density, [-BOX] * 3, [BOX] * 3,
                                   rtol=1e-10, atol=1e-13).estimate
    for n in (21, 41):
        grid, data = _boosted_charge(n)
        energy = integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B).energy
        h = grid.spacing[0]
        correction = _euler_maclaurin_correction(h)
        assert abs(correction) > 1e-5 * reference  # the error is really there to be predicted
        assert abs((energy - reference) - correction) <= 0.25 * h**2 * abs(correction), n


def test_boosted_charge_energy_balance_through_the_faces():
    # Poynting's theorem (Jackson sec. 6.7): d/dt (field energy in the box) = -(flux out through
    # the faces) - int J.E. For a uniformly moving, symmetric charge int J.E = v . int rho E = 0
    # (no self-force), so dE/dt from a centred time difference of the generator's slices must
    # equal minus the net face flux, up to the trapezoidal O(h^2) errors of both: the mismatch
    # must fall by about 4 (at least 3) when h halves, and stay above round-off.
    mismatch = []
    for n in (21, 41):
        energies = []
        for dt in (-0.01, 0.01):
            grid, data = _boosted_charge(n, T_CHARGE + dt)
            energies.append(integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B).energy)
        grid, data = _boosted_charge(n)
        result = integrals.integrate_level_arrays(grid, data.gamma, data.E, data.B)
        rate = (energies[1] - energies[0]) / 0.02  # time-difference error ~ (0.01)^2 v^2/sigma^2 ~ 2e-4
        mismatch.append(abs(rate + result.net_flux) / abs(result.net_flux))
        # The charge moves to +x: most energy leaves through x_upper, and x_lower takes some in.
        assert result.face_flux["x_upper"] > 0 > result.face_flux["x_lower"]
    assert mismatch[1] < mismatch[0] / 3 and mismatch[1] > 1e-10, mismatch
