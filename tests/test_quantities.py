"""The quantity table: every list of names is derived from it, and its unit rules hold."""

import math

import numpy as np
import pytest

import emsource
from emsource import quantities
from emsource.cli import build_parser
from emsource.physical_units import physical_scale
from emsource.snapshot import mapping, native

from conftest import random_curved_data


def test_native_layout_documentation_lists_the_table_in_order():
    documented = [line.split("+--")[1].split()[0] for line in native.__doc__.splitlines()
                  if "+-- " in line and "time_levels" not in line and "0, 1, 2" not in line]
    assert documented == list(quantities.NAMES)


def test_mapping_keys_and_command_choices_come_from_the_table(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text('mapping_version = 1\naxis_order = "xyz"\nunits = "gaussian"\n'
                    '[time_levels]\npattern = "l{index}"\n[grid]\nspacing = [1, 1, 1]\n'
                    'origin = [0, 0, 0]\n[quantities.pressure]\ndataset = "p"\n')
    with pytest.raises(mapping.MappingError) as error:
        mapping.load_mapping(path)
    assert f"allowed: {sorted(quantities.NAMES)}" in str(error.value)
    sources = build_parser()._subparsers._group_actions[0].choices["sources"]
    outputs = next(a for a in sources._actions if a.dest == "outputs")
    assert tuple(outputs.choices) == quantities.OUTPUTS + quantities.FORM_OUTPUTS
    assert quantities.OUTPUTS == (
        "energy_density", "momentum_density", "spatial_stress", "stress_trace")
    assert tuple(emsource.AdmSources._fields) == tuple(quantities.BY_NAME[q].api
                                                       for q in quantities.OUTPUTS)


def test_components_match_the_kinds():
    for q in quantities.TABLE:
        expected = {"scalar": 0, "mask": 0, "vector": 3, "covector": 3, "symmetric_lower": 6,
                    "antisymmetric": 6}
        assert q.components == expected[q.kind], q.name
        assert q.dimension in quantities.DIMENSIONS, q.name


def test_heaviside_lorentz_factors_leave_the_sources_unchanged(rng):
    # Converting E and B with the table's factor and computing in Heaviside-Lorentz units must
    # give the Gaussian rho, S_i, S_ij, S (the stress-energy is a physical quantity; Jackson,
    # Classical Electrodynamics, 3rd ed., appendix on units, table 2: E_HL = E_G / sqrt(4 pi)).
    # Tolerance: one rounding of the factor per field (2 u per squared field) on top of the
    # kernel's own rounding: 1e-14 relative to rho (u = 1.1e-16, a few dozen operations).
    _, _, gamma, E, B = random_curved_data(rng, (4, 5, 6), np.float64)
    f = quantities.heaviside_lorentz_factor("electric_field")
    assert f == pytest.approx(1 / math.sqrt(4 * math.pi), rel=1e-16)
    assert quantities.heaviside_lorentz_factor("magnetic_field") == f
    assert quantities.heaviside_lorentz_factor("charge_density") == pytest.approx(1 / f)
    assert all(quantities.heaviside_lorentz_factor(q) == 1.0 for q in quantities.OUTPUTS)
    gaussian = emsource.adm_sources(gamma, E, B)
    hl = emsource.adm_sources(gamma, E * f, B * f, units="heaviside_lorentz")
    for a, b in zip(gaussian, hl):
        assert np.allclose(a, b, rtol=0, atol=1e-14 * gaussian.rho.max())


def test_physical_scale_attributes_exist_and_convert_consistently():
    scale = physical_scale(1.4)
    for q in quantities.NAMES:
        names = quantities.physical_scale_attributes(q)
        if names is not None:
            for name in names:
                assert getattr(scale, name) > 0, (q, name)
    # Gaussian cgs: energy density B^2/(8 pi) in both code and cgs units (common practice), so
    # the gauss factor squared is the energy-density factor.
    b_cgs, _ = quantities.physical_scale_attributes("magnetic_field")
    u_cgs, _ = quantities.physical_scale_attributes("energy_density")
    assert getattr(scale, b_cgs) ** 2 == pytest.approx(getattr(scale, u_cgs), rel=1e-14)
    assert quantities.physical_scale_attributes("electric_field")[1] == "electric_field_V_m"
