"""Flushing an output to disk while it is written (emsource.snapshot.writing.BackgroundFlush),
and the per-stage times of the sources pipeline: speed must not cost data safety."""

import errno
import os

import h5py
import numpy as np
import pytest

from emsource import snapshot
from emsource.snapshot import writing
from emsource.snapshot.errors import OutputError
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import curved_levels


@pytest.mark.parametrize("compression", [None, "gzip"])
def test_a_failed_background_flush_fails_the_output_and_leaves_nothing(tmp_path, rng, monkeypatch,
                                                                        compression):
    # A delayed write error is reported once by Linux, to the first fsync that sees it: the
    # background flush must pass it on, or the final fsync would find the file "clean".
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    old = tmp_path / "out.h5"
    old.write_bytes(b"previous result")
    calls = []

    def failing_fdatasync(fd):
        calls.append(fd)
        raise OSError(errno.EIO, os.strerror(errno.EIO))

    monkeypatch.setattr(writing.os, "fdatasync", failing_fdatasync)
    with pytest.raises(OutputError, match=r"out\.h5.*Input/output error"):
        compute_sources(path, old, rows=2, force=True, compression=compression)
    assert calls
    assert sorted(os.listdir(tmp_path)) == ["out.h5", "snap.h5"]
    assert old.read_bytes() == b"previous result"


def test_flush_in_the_background_writes_what_is_read_back(tmp_path, rng):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    out = tmp_path / "out.h5"
    report = compute_sources(path, out, rows=3)
    whole = compute_sources(path, tmp_path / "whole.h5", rows=9)  # one slab per level
    with h5py.File(out, "r") as a, h5py.File(tmp_path / "whole.h5", "r") as b:
        for q in ("energy_density", "momentum_density", "spatial_stress", "stress_trace"):
            for level in ("0", "1"):
                np.testing.assert_array_equal(a[f"time_levels/{level}/{q}"][...],
                                              b[f"time_levels/{level}/{q}"][...])
    for r in (report, whole):
        stages = r.stage_seconds
        assert set(stages) == {"read", "kernel", "write", "finish"}
        assert all(s >= 0.0 for s in stages.values())
        assert 0.0 < sum(stages.values()) <= r.seconds


def test_guarded_file_truncates_a_file_with_contents(tmp_path):
    # The outputs are new empty files, which are not truncated (ext4 would then flush them on
    # close); a file with contents still is, so no stale bytes trail the new HDF5 file.
    path = tmp_path / "out.h5"
    path.write_bytes(b"x" * 1_000_000)
    with writing.hdf5_output(path, path) as f:
        f["a"] = np.arange(10.0)
    assert os.path.getsize(path) < 100_000
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["a"][...], np.arange(10.0))
