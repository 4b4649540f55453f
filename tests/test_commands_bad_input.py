"""Bad input through every snapshot command: one error style, one dtype rule, messages that
name the file (regressions of the failure groups found by tests/test_hostile_input.py).

Each test runs ``emsource.cli.main`` in-process (fast); the subprocess view of the same rules
(no traceback, no file left behind) is the property test in tests/test_hostile_input.py.
"""

import os

import numpy as np
import pytest

from emsource import snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK

from snapshot_data import checksums, curved_levels, run_cli

SHAPE = (10, 10, 11)  # audit-units needs 10 points per axis at order 4
COMMANDS = ("sources", "integrate", "constraints", "audit-units")


def _snapshot(path, rng, change=None, **levels_options):
    levels = curved_levels(rng, shape=SHAPE, times=(0.0,), **levels_options)
    levels[0]["extrinsic_curvature"] = 0.1 * rng.standard_normal((6,) + SHAPE)
    if change:
        change(levels[0])
    snapshot.write_snapshot(path, levels)
    return path


def _argv(command, path, directory):
    if command == "sources":
        return [command, str(path), "-o", str(directory / "out.h5")]
    if command == "integrate":
        return [command, str(path), "--csv", str(directory / "series.csv")]
    return [command, str(path)]


def _run(command, path, capsys):
    """Exit code and stderr of a command on ``path``; checks the error style on the way."""
    directory = path.parent
    before = checksums(directory)
    code = main(_argv(command, path, directory))
    out, err = capsys.readouterr()
    if code not in (EXIT_OK, EXIT_CHECK_FAILED):
        assert out == "", (command, out)  # errors go to stderr, nothing to stdout
        assert err.startswith("emsource: error: ") and err.count("\n") == 1, (command, err)
        assert checksums(directory) == before, command  # no output, input unchanged
    return code, err


# --- constraints and audit-units: the same guard as sources and integrate ----------------------

@pytest.mark.parametrize("command", ["constraints", "audit-units"])
def test_constraint_commands_report_errors_on_stderr(tmp_path, rng, capsys, command):
    path = _snapshot(tmp_path / "snap.h5", rng)
    code, err = _run(command, path, capsys)  # before: "emsource constraints: ..." on stdout
    assert code in (EXIT_OK, EXIT_CHECK_FAILED)
    for argv, words in (([command, str(path), "--level", "3"],
                         "time level index 3 out of range: the file has 1 level(s)"),
                        ([command, str(tmp_path / "missing.h5")], "does not exist")):
        capsys.readouterr()
        assert main(argv) == EXIT_BAD_INPUT
        out, err = capsys.readouterr()
        assert out == "" and err.startswith("emsource: error: ") and words in err, err


@pytest.mark.parametrize("command", ["constraints", "audit-units"])
def test_constraint_commands_name_the_file_for_bad_points_and_small_grids(tmp_path, rng,
                                                                          capsys, command):
    def nan_in_K(level):
        level["extrinsic_curvature"][2, 4, 5, 6] = np.nan

    path = _snapshot(tmp_path / "nan.h5", rng, nan_in_K)
    code, err = _run(command, path, capsys)
    assert code == EXIT_BAD_INPUT
    assert str(path) in err and "time level 0" in err and "(4, 5, 6)" in err, err
    small = tmp_path / "small.h5"
    levels = curved_levels(rng, shape=(4, 10, 10), times=(0.0,))
    levels[0]["extrinsic_curvature"] = np.zeros((6, 4, 10, 10))
    snapshot.write_snapshot(small, levels)
    code, err = _run(command, small, capsys)
    assert code == EXIT_BAD_INPUT and str(small) in err and "(4, 10, 10)" in err, err


def test_constraint_command_needs_and_lists(tmp_path, rng, capsys):
    path = _snapshot(tmp_path / "snap.h5", rng, lambda level: level.pop("extrinsic_curvature"))
    code, err = _run("constraints", path, capsys)
    assert code == EXIT_BAD_INPUT
    assert f"snapshot {str(path)!r}, time level 0: the constraints need extrinsic_curvature " \
           "(found electric_field, lapse, magnetic_field, shift, spatial_metric)" in err


# --- one dtype rule for every command ------------------------------------------------------

@pytest.mark.parametrize("dtype", ["float16", "longdouble", "int32", "complex64"])
@pytest.mark.parametrize("command", COMMANDS)
def test_unsupported_stored_types_are_bad_input_for_every_command(tmp_path, rng, capsys,
                                                                  command, dtype):
    if np.dtype(dtype) == np.float64:
        pytest.skip("long double is float64 on this platform: nothing to refuse")

    def retype(level):
        level["magnetic_field"] = level["magnetic_field"].astype(dtype)

    path = _snapshot(tmp_path / "snap.h5", rng, retype)
    code, err = _run(command, path, capsys)
    assert code == EXIT_BAD_INPUT
    assert str(path) in err and "'magnetic_field' (/time_levels/0/magnetic_field) has dtype " \
        f"{np.dtype(dtype)}, expected float32 or float64" in err, err


@pytest.mark.parametrize("command", COMMANDS)
def test_float32_and_mixed_types_are_read_by_every_command(tmp_path, rng, capsys, command):
    def mixed(level):
        level["electric_field"] = level["electric_field"].astype(np.float32)

    for name, change, options in (("mixed.h5", mixed, {}), ("single.h5", None,
                                                             {"dtype": np.float32})):
        path = _snapshot(tmp_path / name, rng, change, **options)
        code, err = _run(command, path, capsys)
        assert code in (EXIT_OK, EXIT_CHECK_FAILED), (name, err)  # random data: a check may fail
        for leftover in ("out.h5", "series.csv"):
            if (tmp_path / leftover).exists():
                os.remove(tmp_path / leftover)


# --- valid_mask holds 0 and 1 only -----------------------------------------------------------

@pytest.mark.parametrize("command", COMMANDS)
@pytest.mark.parametrize("stored, value", [("uint8", 2), ("uint8", 255), ("int32", -1),
                                           ("int32", 256)])
def test_valid_mask_values_other_than_0_and_1_are_refused(tmp_path, rng, capsys, command,
                                                          stored, value):
    # int32 -1 and 256 would be clipped to 0 and 255 by HDF5's conversion into integrate's
    # uint8 buffer: the check must see the stored values.
    def mask(level):
        m = np.ones(SHAPE, stored)
        m[3, 1, 4] = value
        level["valid_mask"] = m

    path = _snapshot(tmp_path / "snap.h5", rng, mask)
    code, err = _run(command, path, capsys)
    assert code == EXIT_BAD_INPUT
    assert str(path) in err and "'valid_mask' (/time_levels/0/valid_mask)" in err, err
    assert f"must hold 0 (excluded) or 1 (valid); found {value} at storage index (3, 1, 4)" in err


def test_valid_mask_of_floats_is_refused_by_type(tmp_path, rng, capsys):
    def mask(level):
        level["valid_mask"] = np.full(SHAPE, 0.5)

    path = _snapshot(tmp_path / "snap.h5", rng, mask)
    code, err = _run("integrate", path, capsys)
    assert code == EXIT_BAD_INPUT and "'valid_mask'" in err and "has dtype float64" in err


def test_valid_mask_of_bools_and_of_0_1_integers_is_read(tmp_path, rng):
    for dtype in (bool, np.int16):
        def mask(level):
            m = np.ones(SHAPE, dtype)
            m[0, 0, 0] = 0
            level["valid_mask"] = m

        path = _snapshot(tmp_path / f"{np.dtype(dtype).name}.h5", rng, mask)
        data = snapshot.read_level(path)
        assert int(np.count_nonzero(data["valid_mask"] == 0)) == 1


# --- messages name the file ----------------------------------------------------------------

def test_slab_messages_name_the_file(tmp_path, rng, capsys):
    def nan(level):
        level["electric_field"][1, 6, 2, 3] = np.inf

    path = _snapshot(tmp_path / "snap.h5", rng, nan)
    for command in ("sources", "integrate"):
        code, err = _run(command, path, capsys)
        assert code == EXIT_BAD_INPUT and str(path) in err and "(6, 2, 3)" in err, err
    good = _snapshot(tmp_path / "good.h5", rng)
    for argv in (["sources", str(good), "-o", str(tmp_path / "o.h5"), "--memory-limit", "0.01"],
                 ["integrate", str(good), "--radius", "100"]):
        assert main(argv) == EXIT_BAD_INPUT
        err = capsys.readouterr().err
        assert str(good) in err and ("too small" in err or "does not fit" in err), err


@pytest.mark.parametrize("command, option, value", [
    ("integrate", "--theta-points", "0"),
    ("integrate", "--theta-points", "x"),
    ("integrate", "--angular-points", "1"),
    ("integrate", "--interpolation-points", "3"),
    ("integrate", "--interpolation-points", "0"),
    ("constraints", "--tolerance", "nan"),
    ("constraints", "--tolerance", "-1"),
])
def test_bad_option_values_are_usage_errors_naming_the_option(tmp_path, command, option, value):
    # Exit 2 (usage) before any file is read, naming the option: a bad value is the caller's
    # mistake, not the file's (exit 3 would blame the input).
    code, out, err = run_cli(command, tmp_path / "absent.h5", option, value)
    assert code == 2 and option in err and "Traceback" not in err and out == ""
