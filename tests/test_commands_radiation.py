"""``emsource radiation``: summary, CSV / HDF5 / plot, exit codes, nothing written on failure."""

import csv
import math

import h5py
import numpy as np
import pytest

from emsource import io
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_OK, EXIT_OUTPUT_ERROR, EXIT_USAGE
from emsource.exact import rotating_dipole, rotating_dipole_luminosity
from emsource.grid import UniformGrid

from snapshot_data import checksums, run_cli


@pytest.fixture(scope="module")
def dipole(tmp_path_factory):
    path = tmp_path_factory.mktemp("dipole") / "dipole.h5"
    grid = UniformGrid.from_bounds((-3,) * 3, (3,) * 3, (33,) * 3)
    io.write_snapshot(path, [rotating_dipole(grid, t, excision_radius=0.6) for t in (0.0, 0.5)])
    return path


def test_summary_csv_hdf5_and_plot(dipole, tmp_path, capsys):
    csv_path, h5_path, png = tmp_path / "r.csv", tmp_path / "r.h5", tmp_path / "r.png"
    code = main(["radiation", str(dipole), "--radius", "1.5", "--radius", "2.5",
                 "--l-max", "2", "--theta-points", "6", "--extrapolation-order", "1",
                 "--csv", str(csv_path), "--hdf5", str(h5_path), "--plot", str(png)])
    assert code == EXIT_OK
    text = capsys.readouterr().out
    assert "Phi2 modes at r = 2.5" in text and "l=2:" in text and "degree 1 in 1/r" in text
    with open(csv_path) as handle:
        rows = list(csv.DictReader(handle))
    assert [(float(r["time"]), float(r["radius"])) for r in rows] == [
        (0.0, 1.5), (0.0, 2.5), (0.5, 1.5), (0.5, 2.5)]
    # finite-radius power L + m^2/(6 r^4) (derived in emsource.radiation from Jackson sec. 9.3);
    # h = 3/16: interpolation error ~1e-5
    for row in rows:
        r = float(row["radius"])
        assert float(row["power"]) == pytest.approx(rotating_dipole_luminosity() + 1 / (6 * r**4),
                                                    abs=1e-4)
        assert float(row["net_flux"]) == pytest.approx(rotating_dipole_luminosity(), abs=1e-4)
    with h5py.File(h5_path, "r") as f:
        assert f["phi2_modes"].shape == (2, 2, 8) and f["phi1_modes"].shape == (2, 2, 9)
        assert list(f["phi2_l"][:3]) == [1, 1, 1] and list(f["phi2_m"][:3]) == [-1, 0, 1]
        assert f["power"][0, 1] == float(rows[1]["power"])
        assert f["phi2_modes"][1, 0, 2].real == float(rows[2]["phi2_l1_m1_re"])
        assert f.attrs["units"] == "gaussian" and f.attrs["l_max"] == 2
        assert "/time_levels/1/electric_field" in f.attrs["input_datasets"]
        assert math.isfinite(f["power_extrapolated"][0])
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("options, message", [
    (["--radius", "2.9"], "does not fit in the grid"),
    (["--radius", "0.7"], "reaches excised points"),
])
def test_bad_spheres_exit_3_and_write_nothing(dipole, tmp_path, capsys, options, message):
    before = checksums(tmp_path)
    code = main(["radiation", str(dipole), *options, "--l-max", "2", "--theta-points", "6",
                 "--csv", str(tmp_path / "r.csv"), "--hdf5", str(tmp_path / "r.h5")])
    assert code == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1 and "Traceback" not in err
    assert checksums(tmp_path) == before


@pytest.mark.parametrize("options, message", [
    (["--radius", "1.5", "--l-max", "6", "--theta-points", "6"], "--theta-points of at least 7"),
    (["--l-max", "2"], "at least one --radius"),
    (["--radius", "1.5", "--l-max", "25", "--theta-points", "40"], "--l-max must be at most 24"),
    (["--radius", "1.5", "--extrapolation-order", "1"], "needs at least 2 distinct radii"),
])
def test_usage_errors_exit_2(dipole, tmp_path, capsys, options, message):
    code = main(["radiation", str(dipole), *options, "--csv", str(tmp_path / "r.csv")])
    assert code == EXIT_USAGE
    assert message in capsys.readouterr().err
    assert not (tmp_path / "r.csv").exists()


def test_existing_output_needs_force(dipole, tmp_path, capsys):
    existing = tmp_path / "r.csv"
    existing.write_text("old")
    assert main(["radiation", str(dipole), "--radius", "1.5", "--l-max", "1",
                 "--theta-points", "4", "--csv", str(existing)]) == EXIT_OUTPUT_ERROR
    assert existing.read_text() == "old"


def test_missing_field_in_a_subprocess(tmp_path):
    grid = UniformGrid.from_bounds((-2,) * 3, (2,) * 3, (9,) * 3)
    d = rotating_dipole(grid, 0.0, excision_radius=0.4)
    path = tmp_path / "no_b.h5"
    io.write_snapshot(path, [{"spatial_metric": d.gamma, "electric_field": d.E, "time": 0.0,
                              "grid": grid}])
    before = checksums(tmp_path)
    code, out, err = run_cli("radiation", path, "--radius", "1", "--l-max", "1",
                             "--theta-points", "4", "--csv", tmp_path / "r.csv", cwd=tmp_path)
    assert code == EXIT_BAD_INPUT, err
    assert "magnetic_field" in err and "Traceback" not in err and out == ""
    assert checksums(tmp_path) == before
    assert np.all(np.isfinite(d.E))


def test_code_scale_gives_watts(dipole, tmp_path, capsys):
    """Issue 11 item 7: ``--code-scale 1 m`` adds the SI and cgs columns: a code power is
    c^5 / G (G = c = 1 units, common practice; c, G from scipy.constants, CODATA) and a code
    time 1 m / c. Tolerance 1e-12: a product of a few roundings."""
    from scipy.constants import G, c

    csv_path = tmp_path / "si.csv"
    assert main(["radiation", str(dipole), "--radius", "1.5", "--radius", "2.5", "--l-max", "1",
                 "--theta-points", "4", "--code-scale", "1", "m", "--csv", str(csv_path)]) == EXIT_OK
    text = capsys.readouterr().out
    assert "physical (--code-scale)" in text and "power [W]" in text
    with open(csv_path) as handle:
        rows = list(csv.DictReader(handle))
    for row in rows:
        for column in ("power", "mode_power", "net_flux", "power_extrapolated"):
            assert float(row[f"{column}_W"]) == pytest.approx(float(row[column]) * c**5 / G,
                                                              rel=1e-12)
            assert float(row[f"{column}_erg_s"]) == pytest.approx(1e7 * float(row[f"{column}_W"]),
                                                                  rel=1e-12)
        assert float(row["radius_m"]) == float(row["radius"])
        assert float(row["radius_cm"]) == pytest.approx(100 * float(row["radius"]), rel=1e-15)
        assert float(row["time_s"]) == pytest.approx(float(row["time"]) / c, rel=1e-12)
    assert not any(k.startswith("phi") and k.endswith("_W") for k in rows[0])
    assert main(["radiation", str(dipole), "--radius", "1.5", "--mass", "1",
                 "--code-scale", "1", "m"]) == EXIT_USAGE
