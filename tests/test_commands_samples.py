"""``emsource samples``: writes the sample snapshots, never over existing files without --force."""

import os

from emsource.cli import main
from emsource.commands import EXIT_OK, EXIT_OUTPUT_ERROR

NAMES = ["boosted_charge.h5", "rotating_dipole.h5", "rotating_dipole_foreign.h5",
         "rotating_dipole_foreign.toml"]


def test_writes_the_samples_and_keeps_existing_ones(tmp_path, capsys):
    directory = tmp_path / "samples"
    assert main(["samples", "--output-dir", str(directory)]) == EXIT_OK
    assert sorted(os.listdir(directory)) == NAMES
    assert "rotating_dipole.h5" in capsys.readouterr().out
    stamps = {n: os.stat(directory / n).st_mtime_ns for n in NAMES}
    assert main(["samples", "--output-dir", str(directory)]) == EXIT_OUTPUT_ERROR
    assert "use --force" in capsys.readouterr().err
    assert {n: os.stat(directory / n).st_mtime_ns for n in NAMES} == stamps
    assert main(["samples", "--output-dir", str(directory), "--force"]) == EXIT_OK
    assert sorted(os.listdir(directory)) == NAMES


def test_help_lists_every_snapshot_command(capsys):
    import pytest

    with pytest.raises(SystemExit) as stop:
        main(["--help"])
    assert stop.value.code == 0
    text = capsys.readouterr().out
    assert all(name in text for name in ("sources", "integrate", "samples"))
    with pytest.raises(SystemExit) as stop:
        main(["samples", "--help"])
    assert stop.value.code == 0 and "--output-dir" in capsys.readouterr().out
