"""``emsource integrate``: summary, time series files, physical units, exit codes."""

import csv
import math
from dataclasses import replace

import h5py
import numpy as np
import pytest

from emsource import adm_sources, integrals, io
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
    assert "max |B| [G]" in text and "max |B| [T]" in text
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


@pytest.mark.parametrize("mass", ["-1", "0", "nan", "inf", "abc"])
def test_mass_that_is_not_a_positive_number_is_a_usage_error(dipole, capsys, mass):
    # Like --radius: an option value the caller got wrong (exit 2), named, before any reading.
    with pytest.raises(SystemExit) as stop:
        main(["integrate", str(dipole), "--mass", mass, "--quiet"])
    assert stop.value.code == EXIT_USAGE and "--mass" in capsys.readouterr().err


def test_sphere_that_does_not_fit_is_bad_input(dipole, capsys):
    assert main(["integrate", str(dipole), "--radius", "2.95", "--quiet"]) == EXIT_BAD_INPUT
    assert "does not fit in the grid" in capsys.readouterr().err
    assert main(["integrate", str(dipole), "--levels", "5", "--quiet"]) == EXIT_BAD_INPUT
    assert "out of range" in capsys.readouterr().err
    assert math.isfinite(rotating_dipole_luminosity())


@pytest.mark.parametrize("value", ["nan", "inf", "-1.5", "0", "x"])
def test_radius_that_is_not_positive_and_finite_is_a_usage_error(dipole, value, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["integrate", str(dipole), "--radius", value, "--quiet"])
    assert stop.value.code == EXIT_USAGE
    assert "--radius" in capsys.readouterr().err


def test_huge_radius_does_not_fit_and_does_not_overflow(dipole, capsys):
    assert main(["integrate", str(dipole), "--radius", "1e300", "--quiet"]) == EXIT_BAD_INPUT
    assert "radius 1e+300 does not fit in the grid" in capsys.readouterr().err


def test_black_hole_output_with_nan_at_the_masked_centre_integrates(tmp_path, capsys):
    # Issue: the package must integrate its own output. 33 points on [-4, 4]^3 put a grid point
    # at r = 0, where the Kerr-Newman data are singular (NaN); it lies inside the excision mask.
    path = str(tmp_path / "bh.h5")
    assert main(["black-hole", path, "--spin", "0.6", "--charge", "0.5", "--points", "33"]) == EXIT_OK
    level = io.read_level(path, 0)
    valid = level["valid_mask"].astype(bool)
    assert not np.isfinite(level["spatial_metric"][:, 16, 16, 16]).all() and not valid[16, 16, 16]
    capsys.readouterr()
    assert main(["integrate", path, "--radius", "3", "--quiet"]) == EXIT_OK
    (result,) = integrals.integrate_snapshot(path, radii=(3.0,))
    # Independent sum over the valid points: rho from adm_sources, sqrt(gamma) from
    # numpy.linalg.det of the full 3x3 metric, trapezoid weights, math.fsum. The two routes
    # differ by a few roundings per term (determinant by LU instead of L D L^T, condition
    # number of gamma below 3 outside the horizon): 1e-12 relative is ample.
    grid = level["grid"]
    g = level["spatial_metric"][:, valid]
    full = np.stack([g[[0, 1, 2]], g[[1, 3, 4]], g[[2, 4, 5]]]).transpose(2, 0, 1)
    rho = adm_sources(level["spatial_metric"][:, valid][:, :, None],
                      level["electric_field"][:, valid][:, :, None],
                      level["magnetic_field"][:, valid][:, :, None]).rho[:, 0]
    weights = [np.full(n, h) for n, h in zip(grid.shape, grid.spacing)]
    for w in weights:
        w[[0, -1]] *= 0.5
    cell = (weights[0][:, None, None] * weights[1][None, :, None] * weights[2][None, None, :])[valid]
    expected = math.fsum((rho * np.sqrt(np.linalg.det(full)) * cell).tolist())
    assert result.energy == pytest.approx(expected, rel=1e-12)
    assert result.excised_points == int((~valid).sum()) > 0 and np.isfinite(result.luminosity[3.0])


@pytest.mark.parametrize("bad, reason", [(np.nan, "non-finite"), (-0.5, "is not positive")])
def test_bad_lapse_on_a_face_is_bad_input(tmp_path, capsys, bad, reason):
    grid = UniformGrid.from_bounds((-3,) * 3, (3,) * 3, (13,) * 3)
    data = rotating_dipole(grid, 0.0, excision_radius=0.5)
    alpha = data.alpha.copy()
    alpha[12, 4, 5] = bad  # on the x_upper face
    beta = data.beta.copy()
    path = tmp_path / "bad.h5"
    io.write_snapshot(path, [replace(data, alpha=alpha, beta=beta)])
    assert main(["integrate", str(path), "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "grid index (12, 4, 5)" in err and reason in err
    shift = data.beta.copy()
    shift[1, 0, 0, 0] = np.inf
    io.write_snapshot(path, [replace(data, beta=shift)], force=True)
    assert main(["integrate", str(path), "--quiet"]) == EXIT_BAD_INPUT
    assert "grid index (0, 0, 0): non-finite value(s): shift[1] = inf" in capsys.readouterr().err


@pytest.mark.parametrize("limit", ["inf", "1e400", "nan", "-3", "2e12"])
def test_memory_limit_that_is_not_a_sensible_number_is_a_usage_error(dipole, limit, capsys):
    # 2e12 MiB is above the 1 EiB cap: accepting it would overflow nothing but mean nothing.
    with pytest.raises(SystemExit) as stop:
        main(["integrate", str(dipole), "--memory-limit", limit, "--quiet"])
    assert stop.value.code == 2
    assert "memory limit must be" in capsys.readouterr().err


def test_integrate_opens_the_snapshot_once(dipole, monkeypatch, capsys):
    # Every way of reading an HDF5 file ends in h5py.File; count the opens of the input.
    opened = []
    real_file = h5py.File

    def counting_file(name, *args, **kwargs):
        opened.append(str(name))
        return real_file(name, *args, **kwargs)

    monkeypatch.setattr(h5py, "File", counting_file)
    assert main(["integrate", str(dipole), "--radius", "1.5", "--levels", "1", "--quiet"]) == EXIT_OK
    assert opened == [str(dipole)]


def test_integrals_of_an_open_snapshot_equal_those_of_its_path(dipole):
    from emsource.snapshot import open_snapshot

    by_path = integrals.integrate_snapshot(dipole, radii=(1.5,))
    with open_snapshot(dipole) as snap:
        by_object = integrals.integrate_open_snapshot(snap, radii=(1.5,))
        assert snap.level(0).read("lapse").shape == (33, 33, 33)  # still open afterwards
    assert [r.energy for r in by_object] == [r.energy for r in by_path]
    assert [r.luminosity for r in by_object] == [r.luminosity for r in by_path]
    with pytest.raises(TypeError, match="snap must be an emsource.snapshot.SnapshotFile"):
        integrals.integrate_open_snapshot(str(dipole))
