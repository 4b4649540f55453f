"""``--workers`` and ``--scheduler`` on the snapshot commands: a real cluster of worker processes.

One local cluster of two worker processes serves the module (starting one costs seconds): the
commands run in this process with ``--scheduler`` at its address, so that their tasks, their
errors and their results cross process boundaries as on any cluster. One test runs the command
line in a subprocess with ``--workers 2`` (a cluster of its own, as a user starts it). The
reference is the single-process path on the same files (``tests/test_distributed.py`` says why
1e-13 relative to each sum's magnitude is the bound).
"""

import csv
import math
import os

import h5py
import numpy as np
import pytest

distributed = pytest.importorskip("distributed", reason="the dask extra is part of the test extra")

from emsource import cli  # noqa: E402
from emsource.integrals import integrate_snapshot  # noqa: E402
from emsource.snapshot import write_snapshot  # noqa: E402
from emsource.snapshot.sources_pipeline import compute_sources  # noqa: E402

from conftest import assert_same_arithmetic  # noqa: E402
from snapshot_data import checksums, run_cli  # noqa: E402
from test_distributed import full_levels  # noqa: E402

RTOL = 1e-13


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0", silence_logs=50,
                                  env={"NUMBA_NUM_THREADS": "1"}) as local:
        yield local.scheduler_address


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    """A time series of two files (levels at t = 0.2 and t = 0.0, 0.1)."""
    directory = tmp_path_factory.mktemp("cluster_series")
    levels = full_levels(np.random.default_rng(11), (0.0, 0.1, 0.2))
    write_snapshot(directory / "one.h5", [levels[2]])
    write_snapshot(directory / "two.h5", levels[:2])
    return directory


def test_integrate_time_series_on_a_cluster(cluster, series, tmp_path, capsys):
    table = tmp_path / "series.csv"
    code = cli.main(["integrate", str(series), "--radius", "0.35", "--csv", str(table),
                     "--memory-limit", "0.1", "--scheduler", cluster])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "dashboard http" in captured.err
    reference = (integrate_snapshot(series / "two.h5", radii=[0.35])
                 + integrate_snapshot(series / "one.h5", radii=[0.35]))
    with open(table) as handle:
        rows = list(csv.DictReader(handle))
    assert [float(r["time"]) for r in rows] == [0.0, 0.1, 0.2]
    for row, expected in zip(rows, reference):
        assert math.isclose(float(row["energy"]), expected.energy, rel_tol=RTOL)


def test_constraints_on_a_cluster_print_the_same_table(cluster, series, capsys):
    path = str(series / "two.h5")
    assert cli.main(["constraints", path, "--level", "1", "--order", "6"]) == 0
    single = capsys.readouterr().out
    assert cli.main(["constraints", path, "--level", "1", "--order", "6",
                     "--scheduler", cluster]) == 0
    assert capsys.readouterr().out == single


def test_bad_point_on_a_worker_exit_3_nothing_written(cluster, tmp_path, capsys):
    levels = full_levels(np.random.default_rng(12), (0.0,))
    levels[0]["spatial_metric"][0, 10, 2, 3] = -1.0  # not positive definite
    bad = tmp_path / "bad.h5"
    write_snapshot(bad, levels)
    before = checksums(tmp_path)
    code = cli.main(["sources", str(bad), "-o", str(tmp_path / "out.h5"), "--memory-limit", "0.1",
                     "--scheduler", cluster])
    err = capsys.readouterr().err
    assert code == 3
    lines = [line for line in err.splitlines() if line.startswith("emsource: error")]
    assert len(lines) == 1 and "grid index (10, 2, 3)" in lines[0], err
    assert "Traceback" not in err
    assert checksums(tmp_path) == before


@pytest.mark.parametrize("options", [["--workers", "0"], ["--workers", "2", "--scheduler", "x"]])
@pytest.mark.parametrize("command", [["sources", "missing.h5", "-o", "o.h5"],
                                     ["balance", "missing.h5", "--csv", "o.csv"],
                                     ["radiation", "missing.h5", "--radius", "1", "--csv", "o.csv"],
                                     ["diagnose-sources", "missing.h5", "--json", "o.json"]])
def test_usage_errors_exit_2(tmp_path, command, options, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as stop:
        cli.main(command + options)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "--workers" in err and "Traceback" not in err
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("command", ["balance", "radiation"])
def test_unreachable_scheduler_is_a_usage_error_one_line(series, tmp_path, command, capsys):
    """No scheduler listens on port 9 (discard): exit 2, one line naming --scheduler and the
    address, nothing written."""
    extra = {"balance": [], "radiation": ["--radius", "0.35"]}[command]
    before = checksums(tmp_path)
    code = cli.main([command, str(series / "two.h5"), *extra, "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("emsource: error: --scheduler:"), err
    assert "tcp://127.0.0.1:9" in err
    assert checksums(tmp_path) == before


def read_csv_columns(path):
    with open(path) as handle:
        rows = list(csv.DictReader(handle))
    return {key: [row[key] for row in rows] for key in rows[0]}


def assert_same_table(found, expected):
    """Same columns and rows; numbers equal to 1e-13 of their column's largest magnitude
    (sums combined in another order: tests/test_distributed.py derives the bound)."""
    assert list(found) == list(expected)
    for key in expected:
        a, b = expected[key], found[key]
        try:
            x, y = np.array(a, float), np.array(b, float)
        except ValueError:
            assert a == b, key
            continue
        np.testing.assert_array_equal(np.isnan(x), np.isnan(y))
        size = np.nanmax(np.abs(x)) if np.isfinite(x).any() else 0.0
        assert np.all(np.abs(np.nan_to_num(x) - np.nan_to_num(y)) <= RTOL * size), key


@pytest.fixture(scope="module")
def three_levels(tmp_path_factory):
    """One file of three equally spaced levels: the middle one has a local residual."""
    path = tmp_path_factory.mktemp("cluster_balance") / "three.h5"
    write_snapshot(path, full_levels(np.random.default_rng(15), (0.0, 0.1, 0.2)))
    return str(path)


def test_balance_on_a_cluster_writes_the_same_table(cluster, three_levels, tmp_path, capsys):
    single, dask_csv = tmp_path / "single.csv", tmp_path / "dask.csv"
    code_single = cli.main(["balance", three_levels, "--order", "4", "--csv", str(single)])
    out_single = capsys.readouterr().out
    # balance has no --memory-limit: one block per level here; tests/test_distributed.py runs
    # the same functions on many blocks.
    code = cli.main(["balance", three_levels, "--order", "4", "--csv", str(dask_csv),
                     "--scheduler", cluster])
    captured = capsys.readouterr()
    assert code == code_single, captured.err
    assert "dashboard http" in captured.err
    table = read_csv_columns(dask_csv)
    assert table["energy_norm_l2"][1] != ""  # the residual of the middle level is there
    assert_same_table(table, read_csv_columns(single))
    verdict = [line for line in out_single.splitlines() if "the balance" in line]
    assert verdict and verdict[0].split("(")[0] in captured.out  # the same verdict


def test_radiation_on_a_cluster_writes_the_same_outputs(cluster, series, tmp_path, capsys):
    path = str(series / "two.h5")
    options = ["--radius", "0.3", "--radius", "0.45", "--l-max", "2", "--theta-points", "6",
               "--interpolation-points", "2"]
    assert cli.main(["radiation", path, *options, "--csv", str(tmp_path / "single.csv"),
                     "--hdf5", str(tmp_path / "single.h5")]) == 0
    capsys.readouterr()
    code = cli.main(["radiation", path, *options, "--csv", str(tmp_path / "dask.csv"),
                     "--hdf5", str(tmp_path / "dask.h5"), "--memory-limit", "0.02",
                     "--scheduler", cluster])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "dashboard http" in captured.err and "emsource radiation: done" in captured.out
    assert_same_table(read_csv_columns(tmp_path / "dask.csv"),
                      read_csv_columns(tmp_path / "single.csv"))
    with h5py.File(tmp_path / "dask.h5") as b, h5py.File(tmp_path / "single.h5") as a:
        assert sorted(b) == sorted(a) and b.attrs["units"] == a.attrs["units"]
        assert b.attrs["producer"] == a.attrs["producer"]


def test_sources_with_two_workers_in_a_subprocess(tmp_path):
    levels = full_levels(np.random.default_rng(13), (0.0, 0.5))
    path = tmp_path / "input.h5"
    write_snapshot(path, levels, axis_order="zyx")
    compute_sources(path, tmp_path / "reference.h5")
    code, out, err = run_cli("sources", path, "-o", tmp_path / "dask.h5", "--workers", "2",
                             "--memory-limit", "0.1")
    assert code == 0, err
    assert "local cluster of 2 worker process(es); dashboard http" in err
    assert "emsource sources: done" in out
    with h5py.File(tmp_path / "reference.h5") as a, h5py.File(tmp_path / "dask.h5") as b:
        for label in ("0", "1"):
            for q in a["time_levels"][label]:
                assert_same_arithmetic(b["time_levels"][label][q][...],
                                       a["time_levels"][label][q][...])


def test_without_dask_the_options_say_how_to_install_it(tmp_path, monkeypatch, capsys):
    """dask stays optional: the command line builds and runs without it, and the cluster
    options are a usage error (exit 2) naming the extra."""
    import sys

    for name in [n for n in sys.modules if n == "dask" or n.startswith(("dask.", "distributed",
                                                                        "emsource.distributed"))]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "dask", None)  # import dask raises ImportError
    path = tmp_path / "input.h5"
    write_snapshot(path, full_levels(np.random.default_rng(14), (0.0,)))
    before = checksums(tmp_path)
    code = cli.main(["sources", str(path), "-o", str(tmp_path / "out.h5"), "--workers", "1"])
    assert code == 2
    assert "pip install 'emsource[dask]'" in capsys.readouterr().err
    assert checksums(tmp_path) == before


def test_progress_bars_on_a_cluster(cluster, series, tmp_path, capsys):
    """With progress on (a terminal), the leaves are computed first and counted, then the tree
    runs over them; sources count their blocks: the results do not change."""
    from emsource.distributed.constraints import constraint_norms
    from emsource.distributed.sources import compute_sources_dask

    path = str(series / "two.h5")
    with distributed.Client(cluster):
        quiet = constraint_norms(path, order=4, block_bytes=20_000)
        shown = constraint_norms(path, order=4, block_bytes=20_000, progress=True)
        compute_sources_dask(path, tmp_path / "s.h5", block_bytes=20_000, progress=True)
    err = capsys.readouterr().err
    # tqdm redraws at most every 0.1 s and leaves no bar behind: the bars' starts are certain.
    assert "constraints:   0%" in err and "sources:   0%" in err
    for a, b in zip(quiet, shown):
        assert a.interior_points == b.interior_points > 0
        np.testing.assert_allclose(b.norm_partial.square_sum, a.norm_partial.square_sum, rtol=RTOL)


def test_diagnose_sources_on_a_cluster_prints_the_same_table(cluster, tmp_path, capsys,
                                                              monkeypatch):
    """A file the diagnosis does not explain (noise of 1e-6 on S_i, far above round-off): the
    same verdict, exit code, table and JSON from two blocks on the workers as from one process
    (numbers within the bound derived in tests/test_distributed.py: assert_same_diagnosis)."""
    import json
    import re

    from emsource.commands import _cluster_options
    from emsource.distributed.diagnosis import VALUES_PER_POINT
    from emsource.diagnosis import Diagnosis
    from test_distributed import assert_same_diagnosis, diagnosis_file

    path = diagnosis_file(tmp_path / "user.h5", ("momentum_sign",), noise=1e-6)
    monkeypatch.setattr(_cluster_options, "DEFAULT_BLOCK_BYTES", 2 * 16 * VALUES_PER_POINT * 8)
    single, spread = tmp_path / "single.json", tmp_path / "cluster.json"
    assert cli.main(["diagnose-sources", path, "--no-pairs", "--json", str(single)]) == 1
    expected = capsys.readouterr().out
    assert cli.main(["diagnose-sources", path, "--no-pairs", "--json", str(spread),
                     "--scheduler", cluster]) == 1
    captured = capsys.readouterr()
    assert "dashboard http" in captured.err and "not explained" in captured.out
    number = re.compile(r"-?\d+\.\d+(?:e[-+]\d+)?")
    assert number.sub("#", captured.out) == number.sub("#", expected)
    bound = 8 * 3 * np.finfo(np.float64).eps
    for x, y in zip(number.findall(captured.out), number.findall(expected)):
        # printed to 4 digits: equal unless a rounding of the last digit flips (one unit)
        assert abs(float(x) - float(y)) <= 1e-3 * abs(float(y)) + bound, (x, y)
    found, reference = (json.loads(p.read_text()) for p in (spread, single))
    assert found["verdict"] == reference["verdict"] == "not explained"
    assert found["best"]["candidates"] == reference["best"]["candidates"] == ["momentum_sign"]

    class Loaded(Diagnosis):   # to_dict of the stored JSON, for the shared comparison
        def __init__(self, d):
            object.__setattr__(self, "d", d)

        def to_dict(self):
            return self.d
    assert_same_diagnosis(Loaded(found), Loaded(reference), blocks=2)
