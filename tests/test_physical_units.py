"""Code units to cgs and SI for a mass scale."""

import math

import pytest
from scipy import constants

from emsource.physical_units import NOMINAL_SOLAR_MASS_PARAMETER, physical_scale


def test_magnetic_field_unit_of_one_solar_mass():
    # One code unit of magnetic field for M = 1 M_sun is about 2.35e19 G (common practice,
    # from memory). Independently of the module: in cgs, with G = c = 1 code units, the field
    # unit is c^4 / (G^(3/2) M) gauss (sqrt of the energy-density unit c^8 / (G^3 M^2)),
    # with CODATA c, G from scipy.constants and M = (G M_sun)^N / G (IAU 2015 Resolution B3).
    c_cgs = constants.c * 100.0
    G_cgs = constants.G * 1e3
    mass_g = NOMINAL_SOLAR_MASS_PARAMETER / constants.G * 1e3
    expected = c_cgs**4 / (G_cgs**1.5 * mass_g)
    scale = physical_scale(1.0)
    assert scale.magnetic_field_G == pytest.approx(expected, rel=1e-12)
    assert scale.magnetic_field_G == pytest.approx(2.35e19, rel=5e-3)  # the recalled value
    # B scales as 1/M: ten solar masses, a tenth of the field
    assert physical_scale(10.0).magnetic_field_G == pytest.approx(expected / 10, rel=1e-12)


def test_si_and_cgs_agree_through_one_tesla_is_ten_kilogauss():
    # 1 T = 1e4 G (SI brochure, 9th ed., table 9, non-SI units of the CGS system). The SI route
    # uses mu_0, which since 2019 differs from 4 pi 1e-7 by ~5e-10 relative (CODATA 2018), so
    # the two agree to ~3e-10 (half of it, through the square root): tolerance 1e-9.
    for mass in (1.0, 2.7):
        for units in ("gaussian", "heaviside_lorentz"):
            s = physical_scale(mass, units)
            assert s.magnetic_field_T * 1e4 == pytest.approx(s.magnetic_field_G, rel=1e-9)
            # 1 statvolt = c[cm/s] * 1e-8 V = 299.79 V, so 1 statV/cm = c[m/s] * 1e-4 V/m
            # (common practice, from memory; epsilon_0 carries the same ~5e-10 as mu_0)
            assert s.electric_field_V_m == pytest.approx(
                s.electric_field_statV_cm * constants.c * 1e-4, rel=1e-9)
    hl, gauss = physical_scale(1.0, "heaviside_lorentz"), physical_scale(1.0)
    # rho = B^2/2 (HL) versus B^2/(8 pi) (Gaussian): the same energy needs a field sqrt(4 pi)
    # smaller in HL code units, so one HL code unit is sqrt(4 pi) Gaussian code units.
    assert hl.magnetic_field_G == pytest.approx(math.sqrt(4 * math.pi) * gauss.magnetic_field_G, rel=1e-14)


def test_mechanical_units():
    # G M_sun / c^2 = 1476.6 m and G M_sun / c^3 = 4.9255 us (common practice, from memory);
    # c^5 / G = 3.628e52 W (common practice, from memory), independent of the mass scale;
    # erg = 1e-7 J, cm = 1e-2 m (exact definitions).
    s = physical_scale(1.0)
    assert s.length_m == pytest.approx(1476.6, rel=1e-4)
    assert s.time_s == pytest.approx(4.9255e-6, rel=1e-4)
    assert s.luminosity_W == pytest.approx(constants.c**5 / constants.G, rel=1e-14)
    assert physical_scale(3.0).luminosity_W == pytest.approx(s.luminosity_W, rel=1e-14)
    assert s.luminosity_W == pytest.approx(3.628e52, rel=1e-3)
    assert s.luminosity_erg_s == pytest.approx(1e7 * s.luminosity_W, rel=1e-15)
    assert s.energy_density_erg_cm3 == pytest.approx(10 * s.energy_density_J_m3, rel=1e-14)
    assert s.mass_kg == pytest.approx(1.98841e30, rel=1e-4)  # IAU nominal / CODATA G
    assert s.energy_erg == pytest.approx(s.mass_g * (100 * constants.c) ** 2, rel=1e-14)


def test_bad_mass_scale():
    for bad in (0.0, -1.0, float("nan"), float("inf")):
        with pytest.raises(ValueError, match="mass_solar must be a positive finite number"):
            physical_scale(bad)
    with pytest.raises(ValueError, match="units must be one of"):
        physical_scale(1.0, "si")
