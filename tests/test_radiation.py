"""Radiation on extraction spheres: power, modes, extrapolation, snapshots, bad input.

References beside the checks:
- rotating point magnetic dipole: power (2/3) m^2 omega^4 sin^2 chi (J. D. Jackson, Classical
  Electrodynamics, 3rd ed. (1999), sec. 9.3; L. D. Landau and E. M. Lifshitz, The Classical
  Theory of Fields, sec. 72), fields of ``emsource.exact.rotating_dipole``;
- finite-radius power P(r) = (2/3)|m'' + m'/r + m/(2r^2)|^2 = L + m^2/(6 r^4) for the rotating
  dipole, and the split over the modes: (1/3) m^2 sin^2 chi (omega^4 + 1/(4 r^4)) in each of
  l = 1, m = +-1 (time dependence e^{-+ i omega u}) and m^2 cos^2 chi/(6 r^4) in the static
  l = 1, m = 0 mode: derived in the docstring of ``emsource.radiation`` from Jackson's fields;
- Poynting luminosity through the same sphere: ``emsource.integrals`` (an independent
  interpolation route: it interpolates the flux density, these tests' code E, B and gamma).

Tolerances: cubic Lagrange interpolation has error O(h^4); each check states the grid error it
allows, measured at h = 0.25 and verified to fall by ~16 at h = 0.125.
"""

import math

import numpy as np
import pytest

from emsource import io
from emsource.exact import plane_wave, rotating_dipole, rotating_dipole_luminosity
from emsource.exact.plane_wave import plane_wave_pattern
from emsource.grid import UniformGrid
from emsource.integrals import integrate_level_arrays, sphere_quadrature
from emsource.radiation import (ExtractionSpheres, extrapolate_in_inverse_radius,
                                radiation_level_arrays, radiation_open_snapshot,
                                radiation_snapshot)
from emsource.snapshot import SnapshotError
from emsource.spin_harmonics import MAX_DEGREE

RADII = (2.0, 2.5, 3.0, 3.5, 4.0)
OMEGA, CHI = 1.0, math.pi / 4
L_EXACT = rotating_dipole_luminosity(omega=OMEGA, inclination=CHI)


def _finite_radius_power(r, chi=CHI):
    return rotating_dipole_luminosity(omega=OMEGA, inclination=chi) + 1.0 / (6 * r**4)


def _grid(points):
    return UniformGrid.from_bounds((-4.75,) * 3, (4.75,) * 3, (points,) * 3)


@pytest.fixture(scope="module")
def dipole_levels():
    """Spacing h = 0.25 and 0.125; radiation at t = 0.3 (both) and t = 1.1 (coarse)."""
    out = {}
    for points in (39, 77):
        grid = _grid(points)
        spheres = ExtractionSpheres(grid, RADII, l_max=3, theta_points=8)
        times = (0.3, 1.1) if points == 39 else (0.3,)
        levels = []
        for t in times:
            d = rotating_dipole(grid, t, omega=OMEGA, inclination=CHI, excision_radius=0.5)
            levels.append((d, spheres.measure(d.gamma, d.E, d.B, valid_mask=d.valid_mask,
                                              time=t)))
        out[points] = levels
    return out


def test_dipole_power_matches_the_finite_radius_value_at_fourth_order(dipole_levels):
    errors = {}
    for points, levels in dipole_levels.items():
        level = levels[0][1]
        errors[points] = np.array([s.power - _finite_radius_power(s.radius)
                                   for s in level.spheres])
    coarse, fine = np.abs(errors[39]).max(), np.abs(errors[77]).max()
    assert coarse < 1e-4  # measured 3e-5 at h = 0.25
    assert fine > 1e-12  # above round-off: an order can be read
    assert math.log2(coarse / fine) > 3.5  # cubic interpolation: order 4 (measured ~4.1)


def test_modes_carry_the_power(dipole_levels):
    d, level = dipole_levels[77][0]
    kappa = 1 / (4 * math.pi)
    for s in level.spheres:
        r = s.radius
        each = (1 / 3) * math.sin(CHI) ** 2 * (OMEGA**4 + 1 / (4 * r**4))
        for m in (-1, 1):
            assert kappa * r**2 * abs(s.mode("phi2", 1, m)) ** 2 == pytest.approx(each, abs=1e-5)
        static = math.cos(CHI) ** 2 / (6 * r**4)
        assert kappa * r**2 * abs(s.mode("phi2", 1, 0)) ** 2 == pytest.approx(static, abs=1e-6)
        for l in (2, 3):  # a pure dipole: only interpolation error above l = 1
            for m in range(-l, l + 1):
                assert abs(s.mode("phi2", l, m)) < 1e-5
        # Parseval: the quadrature is exact for these modes, the rest is interpolation error
        assert s.mode_power == pytest.approx(s.power, abs=1e-6)


def test_mode_phases_rotate_and_the_aligned_part_is_static(dipole_levels):
    (_, early), (_, late) = dipole_levels[39]
    dt = late.time - early.time
    for a, b in zip(early.spheres, late.spheres):
        # m = +1 goes as e^{-i omega u}, m = -1 as e^{+i omega u} (module docstring); grid error
        # of the modes ~1e-4 at h = 0.25
        assert b.mode("phi2", 1, 1) == pytest.approx(a.mode("phi2", 1, 1)
                                                     * np.exp(-1j * OMEGA * dt), abs=2e-4)
        assert b.mode("phi2", 1, -1) == pytest.approx(a.mode("phi2", 1, -1)
                                                      * np.exp(1j * OMEGA * dt), abs=2e-4)
        assert b.mode("phi2", 1, 0) == pytest.approx(a.mode("phi2", 1, 0), abs=1e-6)
        assert b.power == pytest.approx(a.power, abs=1e-5)  # rigid rotation: steady power


def test_aligned_dipole_does_not_radiate():
    grid = _grid(39)
    d = rotating_dipole(grid, 0.3, omega=OMEGA, inclination=0.0, excision_radius=0.5)
    level = radiation_level_arrays(grid, d.gamma, d.E, d.B, valid_mask=d.valid_mask,
                                   radii=(2.0, 4.0), l_max=2, theta_points=6)
    for s in level.spheres:
        assert s.power == pytest.approx(1 / (6 * s.radius**4), abs=1e-5)
        assert abs(s.mode("phi2", 1, 1)) < 1e-6 and abs(s.mode("phi2", 1, -1)) < 1e-6
        assert abs(s.net_flux) < 1e-5  # and no Poynting flux


def test_net_flux_is_the_poynting_luminosity(dipole_levels):
    differences = {}
    for points, levels in dipole_levels.items():
        d, level = levels[0]
        poynting = integrate_level_arrays(d.grid, d.gamma, d.E, d.B, valid_mask=d.valid_mask,
                                          radii=RADII, theta_points=8)
        differences[points] = np.array([s.net_flux - poynting.luminosity[s.radius]
                                        for s in level.spheres])
        # rigid rotation: the same flux L through every sphere (Jackson sec. 9.3)
        np.testing.assert_allclose([s.net_flux for s in level.spheres], L_EXACT, atol=1e-4)
    coarse, fine = np.abs(differences[39]).max(), np.abs(differences[77]).max()
    assert coarse < 1e-4 and fine > 1e-12 and math.log2(coarse / fine) > 3.5


def test_extrapolation_in_inverse_radius(dipole_levels):
    _, level = dipole_levels[77][0]
    radii = np.array(level.radii)
    power = np.array([s.power for s in level.spheres])
    grid_error = np.abs(power - _finite_radius_power(radii)).max()
    coefficients = extrapolate_in_inverse_radius(radii, power, order=4)
    # The fit is linear in the data: its error is at most sum_i |W_ki| grid_error, W the
    # least-squares solution operator (here the inverse Vandermonde matrix in 1/r).
    W = np.linalg.pinv((1 / radii[:, None]) ** np.arange(5))
    bound = np.abs(W).sum(axis=1) * grid_error * 1.01
    expected = np.array([L_EXACT, 0.0, 0.0, 0.0, 1 / 6])  # no 1/r .. 1/r^3 term, m^2/6 r^-4
    assert np.all(np.abs(coefficients - expected) <= bound), (coefficients, bound)
    # the amplification sum_i |W_0i| is ~1000 for these radii: the bound is still 0.3 % of L
    assert bound[0] < 3e-3 * L_EXACT / 0.5
    # an order-1 fit is biased by the 1/r^4 term exactly as the same fit of the exact values
    biased = extrapolate_in_inverse_radius(radii, power, order=1)[0]
    exact_fit = np.polyfit(1 / radii, _finite_radius_power(radii), 1)[-1]  # independent route
    assert biased == pytest.approx(exact_fit, abs=10 * grid_error)
    assert level.extrapolated_power(4) == pytest.approx(coefficients[0], rel=1e-14)


def test_extrapolation_recovers_a_polynomial_to_round_off():
    r = np.array([10.0, 20.0, 40.0, 80.0])
    values = 0.5 - 3.0 / r + 7.0 / r**2
    np.testing.assert_allclose(extrapolate_in_inverse_radius(r, values, 2), [0.5, -3.0, 7.0],
                               rtol=1e-11)
    with pytest.raises(ValueError, match="order 3 needs at least 4 distinct radii"):
        extrapolate_in_inverse_radius([1.0, 2.0, 2.0, 3.0], [1, 2, 3, 4], 3)
    with pytest.raises(ValueError, match="positive"):
        extrapolate_in_inverse_radius([1.0, -2.0], [1, 2], 1)


def _plane_wave_sphere(points, units="gaussian"):
    grid = UniformGrid.from_bounds((-3.0,) * 3, (3.0,) * 3, (points,) * 3)
    k = np.array([0.9, -0.6, 0.7])
    d = plane_wave(grid, 0.4, wave_vector=k, polarization=np.cross(k, [0, 0, 1.0]),
                   amplitude=1.3, units=units)
    return radiation_level_arrays(grid, d.gamma, d.E, d.B, radii=(2.0,), l_max=6,
                                  theta_points=24, units=units).spheres[0]


def test_plane_wave_against_exact_fields_on_the_sphere():
    # Exact flux and power through the sphere from the exact fields at the nodes of a finer
    # rule (Jackson sec. 7.1: B = k-hat x E; Poynting vector E x B / 4 pi, sec. 6.7).
    k = np.array([0.9, -0.6, 0.7])
    x, normals, w = sphere_quadrature(2.0, 40)
    # the generator's own pattern function, sampled at the nodes of the finer rule
    E, B, *_ = plane_wave_pattern(x[0], x[1], x[2], 0.4, wave_vector=k,
                                  polarization=np.cross(k, [0, 0, 1.0]), amplitude=1.3,
                                  profile="sine", width=0.5, phase=0.0, function="test")
    flux = np.sum(w * np.sum(np.cross(E, B, axis=0) * normals, axis=0)) / (4 * math.pi)
    # |Phi2| = |E_T - n x B_T| / 2 (T: tangential), from Phi2 = (E_th + B_ph - i(E_ph - B_th))/2
    # in the flat triad, written here without the triad
    n = normals
    e_t = E - n * np.sum(E * n, axis=0)
    b_t = B - n * np.sum(B * n, axis=0)
    outgoing = 0.5 * (e_t - np.cross(n, b_t, axis=0))  # (E_T - n x B_T)/2: |.| = |Phi2|
    power = np.sum(w * np.sum(outgoing**2, axis=0)) / (4 * math.pi)
    coarse, fine = _plane_wave_sphere(25), _plane_wave_sphere(49)
    errors = [(abs(s.net_flux - flux), abs(s.power - power)) for s in (coarse, fine)]
    assert max(errors[0]) < 1e-3  # h = 0.25, |k| h = 0.33
    assert min(errors[1]) > 1e-12
    for a, b in zip(*errors):
        assert math.log2(a / b) > 3.5


def test_power_does_not_depend_on_the_unit_system():
    # Heaviside-Lorentz fields are the Gaussian ones over sqrt(4 pi) and kappa is 1 instead of
    # 1/(4 pi) (Jackson, appendix on units): the same physical power
    gaussian, hl = _plane_wave_sphere(25), _plane_wave_sphere(25, "heaviside_lorentz")
    assert hl.power == pytest.approx(gaussian.power, rel=1e-13)
    assert hl.net_flux == pytest.approx(gaussian.net_flux, rel=1e-12, abs=1e-15)
    assert abs(hl.mode("phi2", 1, 0)) == pytest.approx(
        abs(gaussian.mode("phi2", 1, 0)) / math.sqrt(4 * math.pi), rel=1e-13)


def test_snapshot_time_series_equals_the_in_memory_route(tmp_path):
    grid = _grid(39)
    levels = [rotating_dipole(grid, t, excision_radius=0.5) for t in (0.0, 0.5)]
    path = tmp_path / "d.h5"
    io.write_snapshot(path, levels)
    spheres = ExtractionSpheres(grid, (1.5, 3.0), l_max=2, theta_points=6)
    # rows=4: many slabs, so nodes are served by different slabs and halos
    with io.open_snapshot(path) as snap:
        streamed = radiation_open_snapshot(snap, radii=(1.5, 3.0), l_max=2, theta_points=6,
                                           rows=4)
    whole = radiation_snapshot(path, radii=(1.5, 3.0), l_max=2, theta_points=6)
    for level, data, other in zip(streamed, levels, whole):
        direct = spheres.measure(data.gamma, data.E, data.B, valid_mask=data.valid_mask,
                                 time=data.t)
        assert level.time == data.t
        for a, b, c in zip(level.spheres, direct.spheres, other.spheres):
            # the same interpolation sums in the same order: equal to a few roundings
            assert a.power == pytest.approx(b.power, rel=1e-13)
            assert c.power == pytest.approx(b.power, rel=1e-13)
            np.testing.assert_allclose(a.modes["phi2"], b.modes["phi2"], atol=1e-13)


# ---------------------------------------------------------------- bad input

@pytest.fixture(scope="module")
def small():
    grid = UniformGrid.from_bounds((-2.0,) * 3, (2.0,) * 3, (17,) * 3)
    return grid, rotating_dipole(grid, 0.0, excision_radius=0.8)


def test_sphere_beyond_the_grid(small):
    grid, d = small
    with pytest.raises(SnapshotError, match="radius 1.9 does not fit in the grid along x"):
        ExtractionSpheres(grid, [1.9], l_max=2, theta_points=6)


def test_l_max_and_theta_points(small):
    grid, _ = small
    with pytest.raises(ValueError, match="l_max = 6 needs theta_points >= 7"):
        ExtractionSpheres(grid, [1.2], l_max=6, theta_points=6)
    with pytest.raises(ValueError, match=f"at most {MAX_DEGREE}"):
        ExtractionSpheres(grid, [1.2], l_max=MAX_DEGREE + 1, theta_points=60)
    with pytest.raises(ValueError, match="l_max must be a whole number"):
        ExtractionSpheres(grid, [1.2], l_max=0)


def test_sphere_crossing_excised_points(small):
    grid, d = small
    spheres = ExtractionSpheres(grid, [1.0], l_max=2, theta_points=6)
    with pytest.raises(SnapshotError, match="reaches excised points"):
        spheres.measure(d.gamma, d.E, d.B, valid_mask=d.valid_mask)


def test_non_finite_data_and_shapes(small):
    grid, d = small
    spheres = ExtractionSpheres(grid, [1.5], l_max=2, theta_points=6)
    E = d.E.copy()
    E[1, 14, 8, 8] = np.nan  # x = 1.5, on the sphere's stencils
    before = E.copy()
    with pytest.raises(SnapshotError, match=r"electric_field component 1 is not finite at grid "
                                            r"index \(14, 8, 8\)"):
        spheres.measure(d.gamma, E, d.B)
    np.testing.assert_array_equal(E, before)  # inputs are never modified
    with pytest.raises(ValueError, match=r"gamma must have shape \(6, 17, 17, 17\)"):
        spheres.measure(d.gamma[:, :-1], d.E, d.B)
    with pytest.raises(ValueError, match="E must have shape"):
        spheres.measure(d.gamma, d.E[:2], d.B)
    with pytest.raises(ValueError, match="valid_mask must have shape"):
        spheres.measure(d.gamma, d.E, d.B, valid_mask=np.ones((3, 3, 3)))
    bad = d.gamma.copy()
    bad[0, 12:, :, :] = -1.0
    with pytest.raises(SnapshotError, match="not positive definite"):
        spheres.measure(bad, d.E, d.B)
    with pytest.raises(ValueError, match="units must be one of"):
        spheres.measure(d.gamma, d.E, d.B, units="si")


def test_time_series_from_an_evolution_loop(tmp_path):
    # An evolution loop builds the spheres once and measures each step from its own arrays;
    # the list of levels is a time series for the same writers as the command's.
    from emsource.radiation_output import write_radiation_csv, write_radiation_hdf5
    import csv
    import h5py

    grid = _grid(39)
    spheres = ExtractionSpheres(grid, (2.0, 3.0), l_max=1, theta_points=4)
    series = []
    for step in range(3):
        t = 0.25 * step
        d = rotating_dipole(grid, t, excision_radius=0.5)  # stands in for the evolved fields
        series.append(spheres.measure(d.gamma, d.E, d.B, valid_mask=d.valid_mask,
                                      label=str(step), time=t))
    write_radiation_csv(tmp_path / "s.csv", series, 1)
    write_radiation_hdf5(tmp_path / "s.h5", series, {"units": "gaussian"}, 1)
    with open(tmp_path / "s.csv") as handle:
        rows = list(csv.DictReader(handle))
    assert [row["level"] for row in rows] == ["0", "0", "1", "1", "2", "2"]
    with h5py.File(tmp_path / "s.h5") as f:
        assert f["phi2_modes"].shape == (3, 2, 3)
        np.testing.assert_allclose(f["time"][:], [0.0, 0.25, 0.5])
        # the m = +1 mode at r = 3 turns by -omega dt per step (module docstring)
        ratio = f["phi2_modes"][1, 1, 2] / f["phi2_modes"][0, 1, 2]
        assert np.angle(ratio) == pytest.approx(-0.25 * OMEGA, abs=1e-3)
        assert f["power_extrapolated"][0] == pytest.approx(
            float(rows[0]["power_extrapolated"]), rel=1e-15)


def test_non_finite_value_in_a_streamed_snapshot_names_the_grid_index(small, tmp_path):
    grid, d = small
    E = d.E.copy()
    E[2, 14, 8, 8] = np.inf
    path = tmp_path / "bad.h5"
    io.write_snapshot(path, [{"spatial_metric": d.gamma, "electric_field": E,
                              "magnetic_field": d.B, "time": 0.0, "grid": grid}])
    # rows=3: the bad point lies in a later slab than the first; its index is in the whole grid
    with pytest.raises(SnapshotError, match=r"bad.h5.*time level '0'.*electric_field component 2 "
                                            r"is not finite at grid index \(14, 8, 8\)"):
        radiation_snapshot(path, radii=(1.5,), l_max=1, theta_points=6, rows=3)
