"""The subcommands black-hole, constraints and audit-units, end to end through emsource.cli.

Physics sources as in tests/test_constraints.py and tests/test_unit_audit.py (MTW ch. 33;
Jackson 3rd ed., appendix on units). Box [2.5, 3.5] x [0.5, 1.5] x [-0.5, 0.5], outside r+.
"""

import h5py
import numpy as np
import pytest

from emsource import commands
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
    with h5py.File(path, "r") as f:
        assert np.array_equal(f["spatial_metric"][()], d.gamma)
        assert np.array_equal(f["electric_field"][()], d.E)
        assert np.allclose(f.attrs["spacing"], grid.spacing, rtol=1e-15)
        assert f.attrs["units"] == "gaussian"
    assert main(["black-hole", path, *BOX]) == commands.EXIT_OUTPUT_ERROR  # exists, no --force
    assert main(["black-hole", str(tmp_path / "x.h5"), "--spin", "0.9", "--charge", "0.9"]) \
        == commands.EXIT_BAD_INPUT


def test_constraints_command(tmp_path, capsys):
    path = _write(tmp_path, "kn.h5")
    # Gaussian sources: normalised residual ~1e-6 at h = 1/20 (order 4); without sources ~4e-2.
    assert main(["constraints", path, "--tolerance", "1e-4"]) == commands.EXIT_OK
    assert main(["constraints", path, "--sources", "none", "--tolerance", "1e-4"]) \
        == commands.EXIT_CHECK_FAILED
    out = capsys.readouterr().out
    assert "hamiltonian" in out and "sources none" in out
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
        f["electric_field"][...] *= 0.5
        f["magnetic_field"][...] *= 0.5
    assert main(["audit-units", path]) == commands.EXIT_CHECK_FAILED
    assert "none fits" in capsys.readouterr().out
