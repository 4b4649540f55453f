"""Code-unit scales given as a length, a time or a mass; stored SI and cgs values to code units.

Outside references: CODATA constants through scipy.constants; IAU 2015 Resolution B3 (nominal
solar mass parameter); J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), appendix on
units and dimensions, conversion table (values marked "from memory" where recalled).
"""

import math

import numpy as np
import pytest
from scipy import constants

import emsource
from emsource.exact import plane_wave
from emsource.grid import UniformGrid
from emsource.exact.rotating_dipole import rotating_dipole_luminosity
from emsource.integrals import integrate_level_arrays
from emsource.physical_units import (NOMINAL_SOLAR_MASS_PARAMETER, STORED_UNITS, from_code_units,
                                     physical_scale, scale_of, to_code_units)

C, G = constants.c, constants.G
# Relative round-off of a handful of float64 products and quotients (each <= 1/2 ulp, 1.1e-16):
# 1e-14 leaves a wide margin over ~10 operations.
ROUND_OFF = 1e-14


def test_one_scale_three_ways():
    # G = c = 1: L = GM/c^2, T = GM/c^3 (common practice). A metre is c^2 / (G M_sun)^N solar
    # masses = 6.7722e-4 (the figure the issue worked out by hand).
    metre = physical_scale(length_m=1.0)
    assert metre.mass_solar == pytest.approx(C**2 / NOMINAL_SOLAR_MASS_PARAMETER, rel=ROUND_OFF)
    assert metre.mass_solar == pytest.approx(6.7722e-4, rel=1e-4)
    assert metre.length_m == pytest.approx(1.0, rel=ROUND_OFF)
    assert metre.time_s == pytest.approx(1.0 / C, rel=ROUND_OFF)
    assert metre.mass_kg == pytest.approx(C**2 / G, rel=ROUND_OFF)  # M = L c^2 / G
    assert physical_scale(length_cm=100.0).length_m == pytest.approx(1.0, rel=ROUND_OFF)
    second = physical_scale(time_s=1.0)
    assert second.length_m == pytest.approx(C, rel=ROUND_OFF)
    assert second.time_s == pytest.approx(1.0, rel=ROUND_OFF)
    sun_kg = NOMINAL_SOLAR_MASS_PARAMETER / G
    assert physical_scale(mass_kg=sun_kg).mass_solar == pytest.approx(1.0, rel=ROUND_OFF)
    assert physical_scale(mass_g=1e3 * sun_kg).mass_solar == pytest.approx(1.0, rel=ROUND_OFF)
    assert physical_scale(mass_kg=2.0).mass_kg == pytest.approx(2.0, rel=ROUND_OFF)
    assert scale_of(1.4, "solar_mass").mass_solar == pytest.approx(1.4, rel=ROUND_OFF)
    assert scale_of(3.0, "cm", "heaviside_lorentz").units == "heaviside_lorentz"


def test_field_unit_of_a_length_scale_against_cgs_formula():
    # Independent route (dimensional analysis in Gaussian cgs, from memory): with G = c = 1 and a
    # length unit L, the energy-density unit is c^4 / (G L^2), so the field unit is
    # sqrt(c^4 / (G L^2)) = c^2 / (sqrt(G) L) gauss (B^2/(8 pi) in both code and cgs units).
    c_cgs, g_cgs = 100 * C, 1e3 * G
    scale = physical_scale(length_cm=1.0)
    assert scale.magnetic_field_G == pytest.approx(c_cgs**2 / math.sqrt(g_cgs), rel=1e-13)
    assert scale.magnetic_field_G == pytest.approx(3.48e24, rel=1e-2)


def test_new_factors_against_textbook_relations():
    s = physical_scale(2.5)
    # Energy flux = energy density x c, momentum density = energy density / c (a field moving at
    # c: Poynting vector S = c u and momentum density g = S / c^2; Jackson sec. 6.7, from memory).
    assert s.energy_flux_W_m2 == pytest.approx(s.energy_density_J_m3 * C, rel=ROUND_OFF)
    assert s.momentum_density_kg_m2_s == pytest.approx(s.energy_density_J_m3 / C, rel=ROUND_OFF)
    # Unit definitions: 1 W/m^2 = 1e7 erg/s / 1e4 cm^2 = 1e3 erg s^-1 cm^-2;
    # 1 kg m^-2 s^-1 = 1e3 g / (1e4 cm^2 s) = 0.1 g cm^-2 s^-1.
    assert s.energy_flux_erg_s_cm2 == pytest.approx(1e3 * s.energy_flux_W_m2, rel=ROUND_OFF)
    assert s.momentum_density_g_cm2_s == pytest.approx(0.1 * s.momentum_density_kg_m2_s, rel=ROUND_OFF)
    assert s.power_W == s.luminosity_W and s.power_erg_s == s.luminosity_erg_s
    assert s.momentum_g_cm_s == pytest.approx(1e5 * s.momentum_kg_m_s, rel=ROUND_OFF)
    # B = curl A: 1 T m = 1e4 G x 1e2 cm = 1e6 G cm (mu_0's 5e-10 CODATA shift: 1e-9, see below)
    assert s.vector_potential_T_m * 1e6 == pytest.approx(s.vector_potential_G_cm, rel=1e-9)


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
def test_si_cgs_conversion_table(units):
    # Jackson, appendix on units, conversion table (from memory): 1 T = 1e4 G; 1 V/m =
    # 1/(c[m/s] 1e-4) statV/cm (1 statvolt = 299.79 V); H: 1 A/m = 4 pi 1e-3 oersted, and in
    # vacuum the Gaussian B in gauss equals H in oersted. The SI factors use mu_0 and epsilon_0,
    # which since 2019 differ from 4 pi 1e-7 and 1/(4 pi 1e-7 c^2) by ~5e-10 relative (CODATA
    # 2018), so these agree to ~5e-10: tolerance 1e-9.
    s = physical_scale(length_m=0.37, units=units)
    one_tesla = to_code_units(1.0, "T", s)
    assert from_code_units(one_tesla, "G", s) == pytest.approx(1e4, rel=1e-9)
    one_v_m = to_code_units(1.0, "V/m", s)
    assert from_code_units(one_v_m, "statV/cm", s) == pytest.approx(1 / (C * 1e-4), rel=1e-9)
    one_a_m = to_code_units(1.0, "A/m", s)
    assert from_code_units(one_a_m, "G", s) == pytest.approx(4 * math.pi * 1e-3, rel=1e-9)
    assert from_code_units(to_code_units(1.0, "T m", s), "G cm", s) == pytest.approx(1e6, rel=1e-9)
    assert to_code_units(0.37, "m", s) == pytest.approx(1.0, rel=ROUND_OFF)
    assert to_code_units(37.0, "cm", s) == pytest.approx(1.0, rel=ROUND_OFF)
    assert to_code_units(0.37 / C, "s", s) == pytest.approx(1.0, rel=ROUND_OFF)
    # round trip through every stored unit; arrays are not modified
    values = np.array([1.5, -2.0])
    for unit in STORED_UNITS:
        back = from_code_units(to_code_units(values, unit, s), unit, s)
        assert np.allclose(back, values, rtol=ROUND_OFF, atol=0)
    assert values.tolist() == [1.5, -2.0]


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
@pytest.mark.parametrize("scale_args", [{"length_m": 1.0}, {"mass_solar": 1.4}])
def test_si_field_energy_and_momentum_density_through_the_package(rng, units, scale_args):
    # Direct SI formulas (Jackson sec. 6.7): u = eps0 E^2 / 2 + B^2 / (2 mu0), g = eps0 E x B.
    s = physical_scale(units=units, **scale_args)
    shape = (3, 4, 5)
    E_si = rng.uniform(-1, 1, (3,) + shape) * 3e5     # V/m
    H_si = rng.uniform(-1, 1, (3,) + shape) * 8e2     # A/m
    B_si = constants.mu_0 * H_si                     # T
    gamma = np.zeros((6,) + shape)
    gamma[[0, 3, 5]] = 1.0
    for magnetic, unit in ((B_si, "T"), (H_si, "A/m")):
        sources = emsource.adm_sources(gamma, to_code_units(E_si, "V/m", s),
                                       to_code_units(magnetic, unit, s), units=units)
        u = (constants.epsilon_0 * np.sum(E_si**2, axis=0) / 2
             + np.sum(B_si**2, axis=0) / (2 * constants.mu_0))
        # Each SI term uses its own constant (eps0 or mu0) in both routes: round-off only.
        assert np.allclose(sources.rho * s.energy_density_J_m3, u, rtol=1e-13, atol=0)
        g = constants.epsilon_0 * np.cross(E_si, B_si, axis=0)
        # The code route gives E x B sqrt(eps0 / mu0) / c, equal to eps0 E x B only where
        # eps0 mu0 c^2 = 1; scipy's CODATA values meet that to 1.2e-12: tolerance 1e-11
        # of the largest component.
        assert np.allclose(sources.S_i * s.momentum_density_kg_m2_s, g, rtol=0,
                           atol=1e-11 * np.abs(g).max())


def test_plane_wave_energy_and_face_flux_in_si():
    # A wave along x with E0 = 100 V/m in a box of 2 m x 0.5 m x 0.25 m holding one wavelength.
    # Hand-derived (Jackson sec. 7.1, SI): u = eps0 E0^2 sin^2(kx - wt) (electric and magnetic
    # halves equal), so over one wavelength U = eps0 E0^2 V / 2; the Poynting flux through the
    # face x = 2 m at phase s is S A = c eps0 E0^2 sin^2(s) A.
    s = physical_scale(length_m=1.0)
    e0 = 100.0
    n = (17, 5, 3)
    grid = UniformGrid(n, (0.0, 0.0, 0.0), (2.0 / 16, 0.5 / 4, 0.25 / 2))
    k = 2 * math.pi / 2.0
    t = 0.3  # code time = 0.3 m / c
    level = plane_wave(grid, t, wave_vector=(k, 0, 0), polarization=(0, 1, 0),
                       amplitude=to_code_units(e0, "V/m", s))
    result = integrate_level_arrays(grid, level.gamma, level.E, level.B)
    volume = 2.0 * 0.5 * 0.25
    # The trapezoidal rule over one full period of sin^2 is exact for this trigonometric
    # polynomial (common practice); what is left is round-off of ~17x5x3 sums: 1e-12.
    assert result.energy * s.energy_J == pytest.approx(
        constants.epsilon_0 * e0**2 * volume / 2, rel=1e-12)
    phase = k * 2.0 - k * t
    # eps0 (in the E factor) and c eps0 E0^2 agree to CODATA's eps0 mu0 c^2 - 1 ~ 1e-12.
    expected = C * constants.epsilon_0 * e0**2 * math.sin(phase) ** 2 * 0.5 * 0.25
    assert result.face_flux["x_upper"] * s.luminosity_W == pytest.approx(expected, rel=1e-11)


def test_rotating_dipole_luminosity_in_si():
    # SI magnetic-dipole radiation (Jackson sec. 9.3, SI form, from memory):
    # P = mu0 |m''|^2 / (6 pi c^3) = mu0 m^2 omega^4 sin^2(chi) / (6 pi c^3). The SI dipole field
    # B = mu0 / (4 pi) m / r^3 against the Gaussian B = m / r^3 fixes the code moment:
    # m_code = (mu0 m / (4 pi)) [T m^3] / (B unit x L^3).
    s = physical_scale(length_m=1e4)
    m_si, omega_si, chi = 1e27, 2 * math.pi * 10.0, 0.6
    m_code = constants.mu_0 * m_si / (4 * math.pi) / (s.magnetic_field_T * s.length_m**3)
    omega_code = omega_si * s.time_s
    luminosity = rotating_dipole_luminosity(moment=m_code, omega=omega_code, inclination=chi)
    expected = constants.mu_0 * m_si**2 * omega_si**4 * math.sin(chi) ** 2 / (6 * math.pi * C**3)
    # mu0 enters both routes; c^5/G and the field factor share CODATA values: round-off and
    # eps0 mu0 c^2 - 1 ~ 1e-12 at most: 1e-11.
    assert luminosity * s.luminosity_W == pytest.approx(expected, rel=1e-11)


def test_bad_scale_arguments():
    with pytest.raises(ValueError, match=r"exactly one of .*found none"):
        physical_scale()
    with pytest.raises(ValueError, match=r"exactly one of .*found \['length_m', 'mass_solar'\]"):
        physical_scale(1.0, length_m=2.0)
    for bad in (0.0, -1.0, float("nan"), float("inf"), "abc"):
        with pytest.raises(ValueError, match="length_m must be a positive finite number"):
            physical_scale(length_m=bad)
    with pytest.raises(ValueError, match=r"unit must be one of \['m', 'cm', 's'.*found 'km'"):
        scale_of(1.0, "km")
    with pytest.raises(ValueError, match=r"units must be one of"):
        physical_scale(time_s=1.0, units="si")
    s = physical_scale(1.0)
    with pytest.raises(ValueError, match=r"unit must be one of \['V/m'.*found 'mT'"):
        to_code_units(1.0, "mT", s)
