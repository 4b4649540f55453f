"""Snapshots stored in SI units read through a mapping's [physical_units] and unit keys.

Outside references: the SI energy density u = eps0 E^2 / 2 + mu0 H^2 / 2 and momentum density
g = eps0 mu0 E x H (J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 6.7, SI
form); CODATA constants through scipy.constants.
"""

import csv

import h5py
import numpy as np
import pytest
from scipy import constants

from emsource import snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_OK
from emsource.physical_units import physical_scale
from emsource.snapshot import MappingError, load_mapping
from emsource.snapshot.sources_pipeline import compute_sources
from emsource.time_series import PHYSICAL_COLUMNS

from snapshot_data import run_cli

SHAPE = (6, 5, 7)
SPACING_M = (0.02, 0.03, 0.025)
CORNER_M = (-0.05, 0.01, 0.2)
TIMES_S = (0.0, 4e-11)

MAPPING = """mapping_version = 1
axis_order = "xyz"
units = "{units}"

[time_levels]
pattern = "/run/frame_{{index}}"
time = {{ attribute = "t_seconds" }}

[grid]
spacing = {{ attribute = "dx_m" }}
origin = {{ attribute = "corner_m" }}

[quantities.electric_field]
components = ["Ex", "Ey", "Ez"]
unit = "V/m"

[quantities.magnetic_field]
components = ["Hx", "Hy", "Hz"]
unit = "A/m"

[quantities.spatial_metric]
identity = true

[physical_units]
code_scale = {{ value = {value}, unit = "{unit}" }}
length_unit = "m"
time_unit = "s"
"""


def write_si_file(path, rng):
    """Our own SI layout: E in V/m, H in A/m, one dataset per component, metres, seconds."""
    fields = []
    with h5py.File(path, "w") as f:
        for index, t in enumerate(TIMES_S):
            g = f.create_group(f"run/frame_{index}")
            g.attrs["t_seconds"] = t
            g.attrs["dx_m"] = SPACING_M
            g.attrs["corner_m"] = CORNER_M
            E = rng.uniform(-1, 1, (3,) + SHAPE) * 2e4
            H = rng.uniform(-1, 1, (3,) + SHAPE) * 50.0
            for c, axis in enumerate("xyz"):
                g[f"E{axis}"] = E[c]
                g[f"H{axis}"] = H[c]
            fields.append((E, H))
    return fields


@pytest.fixture
def si_file(tmp_path, rng):
    path = tmp_path / "si.h5"
    return path, write_si_file(path, rng)


def mapping_file(tmp_path, units="gaussian", value=1.0, unit="m", name="m.toml"):
    path = tmp_path / name
    path.write_text(MAPPING.format(units=units, value=value, unit=unit))
    return path


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
def test_si_file_energy_and_momentum_density(si_file, tmp_path, units):
    path, fields = si_file
    mapping = mapping_file(tmp_path, units)
    scale = physical_scale(length_m=1.0, units=units)
    with snapshot.open_snapshot(path, mapping) as snap:
        assert snap.physical_scale == scale
        level = snap.levels[1]
        # a code length of 1 m: spacing and origin in metres; time t[s] c
        assert np.allclose(level.grid.spacing, SPACING_M, rtol=1e-15, atol=0)
        assert np.allclose(level.grid.origin, CORNER_M, rtol=1e-15, atol=0)
        assert level.time == pytest.approx(TIMES_S[1] * constants.c, rel=1e-15)
    out = tmp_path / "s.h5"
    compute_sources(path, out, mapping=mapping)
    for index, (E, H) in enumerate(fields):
        result = snapshot.read_level(out, index)
        u = constants.epsilon_0 * (E**2).sum(0) / 2 + constants.mu_0 * (H**2).sum(0) / 2
        # each SI term carries its own constant through both routes: round-off (1e-13)
        assert np.allclose(result["energy_density"] * scale.energy_density_J_m3, u,
                           rtol=1e-13, atol=0)
        g = constants.epsilon_0 * constants.mu_0 * np.cross(E, H, axis=0)
        # eps0 mu0 c^2 = 1 holds to 1.2e-12 in scipy's CODATA values: 1e-11 of the largest
        assert np.allclose(result["momentum_density"] * scale.momentum_density_kg_m2_s, g,
                           rtol=0, atol=1e-11 * np.abs(g).max())


def test_code_scale_in_other_units(si_file, tmp_path):
    path, _ = si_file
    # a code length of 1 cm: the spacing in metres reads as 100 x in code units; a code time of
    # 1 s: lengths in light-seconds
    for value, unit, factor in ((1.0, "cm", 100.0), (1.0, "s", 1 / constants.c)):
        mapping = mapping_file(tmp_path, value=value, unit=unit, name=f"{unit}.toml")
        with snapshot.open_snapshot(path, mapping) as snap:
            assert np.allclose(snap.levels[0].grid.spacing, np.array(SPACING_M) * factor,
                               rtol=1e-15, atol=0)


def test_integrate_reports_si_values_from_the_mapping_scale(si_file, tmp_path, capsys):
    path, fields = si_file
    mapping = mapping_file(tmp_path)
    table = tmp_path / "t.csv"
    assert main(["integrate", str(path), "--mapping", str(mapping), "--csv", str(table)]) == EXIT_OK
    text = capsys.readouterr().out
    assert "physical units (the mapping's code_scale)" in text and "energy [J]" in text
    with open(table) as handle:
        rows = list(csv.DictReader(handle))
    columns = list(rows[0])
    # every code column but the level label has its cgs and SI columns
    for column in columns:
        if column == "level" or any(column.endswith("_" + s) for units in PHYSICAL_COLUMNS.values()
                                    for s, _ in units):
            continue
        assert any(c.startswith(column + "_") for c in columns), column
    # Independent route: the trapezoidal volume integral of the SI energy density in SI
    # coordinates (common practice), against the package's code-unit integral times J.
    for row, (E, H), t in zip(rows, fields, TIMES_S):
        u = constants.epsilon_0 * (E**2).sum(0) / 2 + constants.mu_0 * (H**2).sum(0) / 2
        weights = [np.full(n, h) for n, h in zip(SHAPE, SPACING_M)]
        for w in weights:
            w[[0, -1]] /= 2
        energy = np.einsum("ijk,i,j,k->", u, *weights)
        assert float(row["energy_J"]) == pytest.approx(energy, rel=1e-12)
        assert float(row["energy_erg"]) == pytest.approx(1e7 * energy, rel=1e-12)
        assert float(row["time_s"]) == pytest.approx(t, rel=1e-14, abs=1e-30)
        magnitude = np.sqrt((H**2).sum(0)).max() * constants.mu_0
        assert float(row["max_magnetic_field_T"]) == pytest.approx(magnitude, rel=1e-12)
        assert float(row["max_electric_field_V_m"]) == pytest.approx(
            np.sqrt((E**2).sum(0)).max(), rel=1e-12)


@pytest.mark.parametrize("edit, message", [
    (("[physical_units]\ncode_scale", "[physical_units]\nscale"),
     r"unknown key\(s\) \['scale'\] in \[physical_units\]"),
    (('unit = "m" }', 'unit = "km" }'),
     r"\[physical_units\] code_scale unit must be one of \['m', 'cm', 's', 'kg', 'g', "
     r"'solar_mass'\], found 'km'"),
    (("value = 1.0", "value = -2.0"), r"code_scale value must be positive, found -2.0"),
    (("value = 1.0, ", ""), r"code_scale needs 'value'"),
    (('time_unit = "s"', 'time_unit = "ms"'),
     r"\[physical_units\] time_unit must be one of \['s'\], found 'ms'"),
    (('length_unit = "m"', 'length_unit = 1'),
     r"\[physical_units\] length_unit must be a non-empty string, found 1"),
    (('unit = "V/m"', 'unit = "T"'),
     r"\[quantities.electric_field\] unit must be one of \['V/m', 'statV/cm'\], found 'T'"),
    (('unit = "A/m"', 'unit = "Oe"'),
     r"\[quantities.magnetic_field\] unit must be one of \['T', 'G', 'A/m'\], found 'Oe'"),
    (("identity = true", 'identity = true\nunit = "m"'),
     r"\[quantities.spatial_metric\] takes no unit"),
    (("[physical_units]\ncode_scale = { value = 1.0, unit = \"m\" }\n", "[physical_units]\n"),
     r"\[physical_units\] needs code_scale"),
    (("\n[physical_units]\ncode_scale = { value = 1.0, unit = \"m\" }\nlength_unit = \"m\"\n"
      "time_unit = \"s\"\n", "\n"),
     r"\[quantities.electric_field\] unit = 'V/m' needs \[physical_units\] code_scale"),
    (("identity = true", 'identity = true\ncurl_order = 4'),
     r"\[quantities.spatial_metric\] curl_order applies to vector_potential only"),
])
def test_bad_unit_keys(tmp_path, edit, message):
    text = MAPPING.format(units="gaussian", value=1.0, unit="m")
    assert edit[0] in text
    path = tmp_path / "bad.toml"
    path.write_text(text.replace(edit[0], edit[1]))
    with pytest.raises(MappingError, match=message):
        load_mapping(path)


def test_bad_unit_key_from_the_command_line(si_file, tmp_path):
    path, _ = si_file
    mapping = tmp_path / "bad.toml"
    mapping.write_text(MAPPING.format(units="gaussian", value=1.0, unit="m")
                       .replace('unit = "A/m"', 'unit = "V/m"'))
    before = sorted(p.name for p in tmp_path.iterdir())
    code, out, err = run_cli("sources", path, "--mapping", mapping, "-o", tmp_path / "o.h5")
    assert code == EXIT_BAD_INPUT and out == ""
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "[quantities.magnetic_field] unit must be one of ['T', 'G', 'A/m'], found 'V/m'" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == before


@pytest.mark.parametrize("arguments, message", [
    (["--mass", "1", "--code-scale", "1", "m"], "give --mass or --code-scale, not both"),
    (["--code-scale", "1", "km"], "unit must be one of m, cm, s, kg, g, solar_mass, found 'km'"),
    (["--code-scale", "-1", "m"], "the code scale must be a positive, finite number"),
])
def test_code_scale_option_usage_errors(si_file, tmp_path, capsys, arguments, message):
    path, _ = si_file
    mapping = mapping_file(tmp_path)
    with pytest.raises(SystemExit) as stop:
        code = main(["integrate", str(path), "--mapping", str(mapping), "--quiet", *arguments])
        raise SystemExit(code)
    assert stop.value.code == 2
    assert message in capsys.readouterr().err


def test_code_scale_option_must_agree_with_the_mapping(si_file, tmp_path, capsys):
    path, _ = si_file
    mapping = mapping_file(tmp_path)
    table = tmp_path / "t.csv"
    # The stored SI values were converted with the mapping's scale (1 m): a report with another
    # scale would be wrong, so it is refused (exit 2, nothing written); the same scale given
    # another way (100 cm) is accepted.
    assert main(["integrate", str(path), "--mapping", str(mapping), "--csv", str(table),
                 "--quiet", "--code-scale", "2", "m"]) == 2
    assert "but the mapping's code_scale is M = 0.00067722 M_sun" in capsys.readouterr().err
    assert not table.exists()
    assert main(["integrate", str(path), "--mapping", str(mapping), "--csv", str(table),
                 "--quiet", "--code-scale", "100", "cm"]) == EXIT_OK
    with open(table) as handle:
        row = next(csv.DictReader(handle))
    assert float(row["energy_J"]) == pytest.approx(
        float(row["energy"]) * physical_scale(length_m=1.0).energy_J, rel=1e-14)
