"""``emsource integrate``: summary, time series files, physical units, exit codes."""

import csv
import math

import h5py
import pytest

from emsource import io
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_OK, EXIT_OUTPUT_ERROR, EXIT_USAGE
from emsource.exact import rotating_dipole, rotating_dipole_luminosity
from emsource.grid import UniformGrid


@pytest.fixture(scope="module")
def dipole(tmp_path_factory):
    path = tmp_path_factory.mktemp("dipole") / "dipole.h5"
    grid = UniformGrid.from_bounds((-3,) * 3, (3,) * 3, (33,) * 3)
    io.write_snapshot(path, [rotating_dipole(grid, t, excision_radius=0.3) for t in (0.0, 0.5)],
                      attributes={"description": "test dipole"})
    return path


def test_help(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["integrate", "--help"])
    assert stop.value.code == 0
    assert "--radius" in capsys.readouterr().out


def test_summary_csv_hdf5_and_plot(dipole, tmp_path, capsys):
    csv_path, h5_path, png = tmp_path / "t.csv", tmp_path / "t.h5", tmp_path / "t.png"
    code = main(["integrate", str(dipole), "--radius", "1.5", "--radius", "2.5", "--mass", "1.4",
                 "--csv", str(csv_path), "--hdf5", str(h5_path), "--plot", str(png)])
    assert code == EXIT_OK
    text = capsys.readouterr().out
    assert "scenario     test dipole" in text and "L(r=2.5)" in text and "erg/s" in text
    assert " G = " in text and " T" in text
    with open(csv_path) as handle:
        rows = list(csv.DictReader(handle))
    assert [float(r["time"]) for r in rows] == [0.0, 0.5]
    exact = rotating_dipole_luminosity()
    # h = 3/16 with cubic interpolation: a few 1e-5 relative (see test_integrals for the bound)
    assert float(rows[1]["luminosity_r2.5"]) == pytest.approx(exact, rel=1e-3)
    assert float(rows[1]["luminosity_r2.5_erg_s"]) == pytest.approx(
        float(rows[1]["luminosity_r2.5"]) * 3.628e59, rel=1e-3)  # c^5/G in erg/s, from memory
    with h5py.File(h5_path, "r") as f:
        assert f.attrs["mass_scale_solar"] == 1.4
        assert "/time_levels/1/magnetic_field" in f.attrs["input_datasets"]
        assert list(f["energy"][:]) == [float(r["energy"]) for r in rows]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_outputs_are_checked_before_the_work(dipole, tmp_path, capsys):
    existing = tmp_path / "t.csv"
    existing.write_text("old")
    assert main(["integrate", str(dipole), "--csv", str(existing), "--hdf5",
                 str(tmp_path / "t.h5"), "--quiet"]) == EXIT_OUTPUT_ERROR
    assert "exists" in capsys.readouterr().err
    assert existing.read_text() == "old" and not (tmp_path / "t.h5").exists()


def test_sphere_that_does_not_fit_is_bad_input(dipole, capsys):
    assert main(["integrate", str(dipole), "--radius", "2.95", "--quiet"]) == EXIT_BAD_INPUT
    assert "does not fit in the grid" in capsys.readouterr().err
    assert main(["integrate", str(dipole), "--mass", "-1", "--quiet"]) == EXIT_BAD_INPUT
    assert main(["integrate", str(dipole), "--levels", "5", "--quiet"]) == EXIT_BAD_INPUT
    assert "out of range" in capsys.readouterr().err
    assert math.isfinite(rotating_dipole_luminosity())


@pytest.mark.parametrize("radius", ["nan", "inf", "-1.5", "0"])
def test_radius_that_is_not_a_positive_number_is_a_usage_error(dipole, radius, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["integrate", str(dipole), "--radius", radius, "--quiet"])
    assert stop.value.code == EXIT_USAGE
    assert "positive and finite" in capsys.readouterr().err


def test_huge_radius_is_a_sphere_that_does_not_fit(dipole, capsys):
    assert main(["integrate", str(dipole), "--radius", "1e300", "--quiet"]) == EXIT_BAD_INPUT
    assert "does not fit in the grid" in capsys.readouterr().err


@pytest.mark.parametrize("limit", ["inf", "1e400", "nan", "-3"])
def test_memory_limit_that_is_not_a_finite_positive_number_is_a_usage_error(dipole, limit, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["integrate", str(dipole), "--memory-limit", limit, "--quiet"])
    assert stop.value.code == EXIT_USAGE
    assert "memory limit must be" in capsys.readouterr().err
