"""``emsource sources`` on the command line: summary, exit codes, nothing left on failure."""

import os

import numpy as np
import pytest

import emsource
from emsource.snapshot import read_level, write_snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_OK, EXIT_OUTPUT_ERROR

from snapshot_data import curved_levels


@pytest.fixture
def snapshot(tmp_path, rng):
    path = tmp_path / "snap.h5"
    write_snapshot(path, curved_levels(rng))
    return path


def test_help(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["sources", "--help"])
    assert stop.value.code == 0
    text = capsys.readouterr().out
    assert "--memory-limit" in text and "--mapping" in text and "Exit codes" in text


def test_computes_and_prints_a_summary(snapshot, tmp_path, capsys):
    out = tmp_path / "out.h5"
    code = main(["sources", str(snapshot), "-o", str(out), "--memory-limit", "8", "--compress"])
    assert code == EXIT_OK
    text = capsys.readouterr().out
    assert "emsource sources: done" in text and "time levels     2" in text
    assert "9 x 8 x 7 points" in text and "energy density" in text
    level = read_level(snapshot, 1)
    ref = emsource.adm_sources(level["spatial_metric"], level["electric_field"], level["magnetic_field"])
    assert np.array_equal(read_level(out, 1)["spatial_stress"], ref.S_ij)


def test_existing_output_is_kept_without_force(snapshot, tmp_path, capsys):
    out = tmp_path / "out.h5"
    out.write_bytes(b"keep me")
    assert main(["sources", str(snapshot), "-o", str(out), "--quiet"]) == EXIT_OUTPUT_ERROR
    assert "exists" in capsys.readouterr().err and out.read_bytes() == b"keep me"
    assert main(["sources", str(snapshot), "-o", str(out), "--quiet", "--force"]) == EXIT_OK
    assert read_level(out)["energy_density"].shape == (9, 8, 7)


def test_bad_inputs_exit_non_zero_and_leave_no_output(tmp_path, rng, capsys):
    level = curved_levels(rng, times=(0.0,))[0]
    del level["electric_field"]
    missing = tmp_path / "missing.h5"
    write_snapshot(missing, [level])
    text = tmp_path / "text.h5"
    text.write_text("plain text")
    for path, message in ((missing, "no 'electric_field'"), (text, "not an HDF5 file"),
                          (tmp_path / "absent.h5", "does not exist")):
        out = tmp_path / "out.h5"
        assert main(["sources", str(path), "-o", str(out), "--quiet"]) == EXIT_BAD_INPUT
        assert message in capsys.readouterr().err
        assert not out.exists()
    assert sorted(os.listdir(tmp_path)) == ["missing.h5", "text.h5"]


def test_unwritable_output_path(snapshot, tmp_path, capsys):
    out = tmp_path / "no_such_directory" / "out.h5"
    assert main(["sources", str(snapshot), "-o", str(out), "--quiet"]) == EXIT_OUTPUT_ERROR
    assert "does not exist" in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["snap.h5"]


def test_memory_limit_must_be_a_positive_number(snapshot, tmp_path, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["sources", str(snapshot), "-o", str(tmp_path / "o.h5"), "--memory-limit", "-3"])
    assert stop.value.code == 2
    assert main(["sources", str(snapshot), "-o", str(tmp_path / "o.h5"), "--memory-limit", "0.001",
                 "--quiet"]) == EXIT_BAD_INPUT
    assert "too small" in capsys.readouterr().err
