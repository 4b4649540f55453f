"""The subcommands black-hole, constraints and audit-units, end to end through emsource.cli.

Physics sources as in tests/test_constraints.py and tests/test_unit_audit.py (MTW ch. 33;
Jackson 3rd ed., appendix on units). Box [2.5, 3.5] x [0.5, 1.5] x [-0.5, 0.5], outside r+.
"""

import h5py
import numpy as np
import pytest

from emsource import commands, io
from emsource.cli import main
from emsource.exact import kerr_newman
from emsource.grid import UniformGrid

BOX = ["--lower", "2.5", "0.5", "-0.5", "--upper", "3.5", "1.5", "0.5"]


def _write(tmp_path, name, *extra):
    path = str(tmp_path / name)
    rc = main(["black-hole", path, "--spin", "0.6", "--charge", "0.5", "--points", "21", *BOX,
               *extra])
    assert rc == commands.EXIT_OK
    return path


def test_black_hole_file_matches_the_python_data(tmp_path):
    path = _write(tmp_path, "kn.h5")
    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (21, 21, 21))
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    level = io.read_level(path, 0)  # the package's native snapshot layout
    assert np.array_equal(level["spatial_metric"], d.gamma)
    assert np.array_equal(level["extrinsic_curvature"], d.K)
    assert np.array_equal(level["electric_field"], d.E)
    assert np.array_equal(level["valid_mask"].astype(bool), d.valid_mask)
    assert np.allclose(level["grid"].spacing, grid.spacing, rtol=1e-15)
    assert level["units"] == "gaussian"
    with h5py.File(path, "r") as f:
        assert (f.attrs["mass"], f.attrs["spin"], f.attrs["charge"]) == (1.0, 0.6, 0.5)
    assert main(["black-hole", path, *BOX]) == commands.EXIT_OUTPUT_ERROR  # exists, no --force
    assert main(["black-hole", str(tmp_path / "x.h5"), "--spin", "0.9", "--charge", "0.9"]) \
        == commands.EXIT_BAD_INPUT


def test_constraints_command(tmp_path, capsys):
    path = _write(tmp_path, "kn.h5")
    # Gaussian sources: normalised residual ~1e-6 at h = 1/20 (order 4); without sources ~4e-2.
    assert main(["constraints", path, "--tolerance", "1e-4"]) == commands.EXIT_OK
    assert main(["constraints", path, "--sources", "vacuum", "--tolerance", "1e-4"]) \
        == commands.EXIT_CHECK_FAILED
    out = capsys.readouterr().out
    assert "hamiltonian" in out and "sources vacuum" in out
    assert main(["constraints", str(tmp_path / "missing.h5")]) == commands.EXIT_BAD_INPUT


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
def test_audit_units_command_names_the_system(tmp_path, capsys, units):
    path = _write(tmp_path, f"{units}.h5", "--units", units)
    assert main(["audit-units", path]) == commands.EXIT_OK
    out = capsys.readouterr().out
    assert f"{units} fits" in out


def test_audit_units_command_none_fits(tmp_path, capsys):
    path = _write(tmp_path, "kn.h5")
    with h5py.File(path, "r+") as f:
        f["time_levels/0/electric_field"][...] *= 0.5
        f["time_levels/0/magnetic_field"][...] *= 0.5
    assert main(["audit-units", path]) == commands.EXIT_CHECK_FAILED
    assert "none fits" in capsys.readouterr().out


def test_constraint_convergence_command_table_and_plot(tmp_path, capsys):
    # Order 4 with Gaussian sources: between the runs h goes 1/12 -> 1/16, so the normalised
    # residual must fall by about (4/3)^4 = 3.16 (we ask for > 2.5); without sources it stays
    # at ~4e-2 (ratio within 10 % of 1).
    png = tmp_path / "conv.png"
    rc = main(["constraint-convergence", "--points", "13", "17", "--orders", "4",
               "--plot", str(png)])
    assert rc == commands.EXIT_OK
    rows = [line.split(",") for line in capsys.readouterr().out.splitlines()
            if line.startswith("4,")]
    with_em = [float(r[4]) for r in rows if r[1] == "gaussian"]
    without = [float(r[4]) for r in rows if r[1] == "vacuum"]
    assert with_em[0] / with_em[1] > 2.5
    assert abs(without[0] / without[1] - 1.0) < 0.1
    assert png.stat().st_size > 10_000 and png.read_bytes()[:4] == b"\x89PNG"


def test_committed_sample_grid_is_what_the_tool_writes():
    # Guards the committed sample (native snapshot, float32, gzip): its arrays must equal a
    # fresh float32 sample of the same Kerr-Newman hole, and the audit must call it Gaussian.
    import pathlib

    from emsource.unit_audit import audit_units

    path = pathlib.Path(__file__).parents[1] / "sample_grids" / "kerr_newman.h5"
    grid = UniformGrid.from_bounds((-6.0,) * 3, (6.0,) * 3, (32, 32, 32))
    d = kerr_newman(grid, mass=1.0, spin=0.7, charge=0.4, dtype=np.float32)
    level = io.read_level(path, 0)
    for name, attr in (("lapse", "alpha"), ("shift", "beta"), ("spatial_metric", "gamma"),
                       ("extrinsic_curvature", "K"), ("electric_field", "E"),
                       ("magnetic_field", "B")):
        # Computed in float64 and rounded to float32: equal here; one float32 ulp (6e-8)
        # leaves room for another CPU's rounding in NumPy's summation loops.
        assert level[name].dtype == np.float32
        assert np.allclose(level[name], getattr(d, attr), rtol=1.2e-7, atol=1e-12), name
    assert np.array_equal(level["valid_mask"].astype(bool), d.valid_mask)
    with h5py.File(path, "r") as f:
        assert (f.attrs["mass"], f.attrs["spin"], f.attrs["charge"]) == (1.0, 0.7, 0.4)
    # float32 storage adds ~6e-8 * 5.3 / h^2 = 2e-6 to R at h = 0.39, far below the order-4
    # truncation error there (~3e-4), so the audit still sees order-4 convergence.
    audit = audit_units(level["spatial_metric"], level["extrinsic_curvature"],
                        level["electric_field"], level["magnetic_field"],
                        spacing=level["grid"].spacing, valid_mask=d.valid_mask)
    assert audit.verdict == "gaussian"


def test_audit_reads_a_snapshot_stored_zyx(tmp_path, capsys):
    # A native snapshot in "zyx" storage order, written by emsource.io: the commands must get
    # the arrays back in (x, y, z) order (non-cubic grid, unequal spacings) and find the
    # Heaviside-Lorentz data as such.
    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (21, 23, 25))
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5, units="heaviside_lorentz")
    path = tmp_path / "snap.h5"
    io.write_snapshot(path, [d], axis_order="zyx")
    assert main(["audit-units", str(path)]) == commands.EXIT_OK
    assert "heaviside_lorentz fits" in capsys.readouterr().out
    assert main(["constraints", str(path), "--tolerance", "1e-4"]) == commands.EXIT_OK
    assert main(["constraints", str(path), "--level", "1"]) == commands.EXIT_BAD_INPUT
    lonely = tmp_path / "metric_only.h5"
    io.write_snapshot(lonely, [{"time": 0.0, "grid": grid, "units": "gaussian",
                                "spatial_metric": d.gamma}])
    capsys.readouterr()
    assert main(["constraints", str(lonely)]) == commands.EXIT_BAD_INPUT
    out, err = capsys.readouterr()
    assert "the constraints need extrinsic_curvature" in err and out == ""
