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
def test_usage_errors_exit_2(tmp_path, options, capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(["sources", "missing.h5", "-o", str(tmp_path / "o.h5"), *options])
    assert stop.value.code == 2
    assert os.listdir(tmp_path) == []


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
