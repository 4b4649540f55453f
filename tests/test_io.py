"""The native snapshot layout: round trips, provenance, and clear errors on bad files."""

import json
import os

import h5py
import numpy as np
import pytest

import emsource
from conftest import assert_same_arithmetic
from emsource import snapshot
from emsource.exact import rotating_dipole
from emsource.grid import UniformGrid
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import curved_levels


@pytest.mark.parametrize("axis_order", ["xyz", "zyx"])
@pytest.mark.parametrize("compression", [None, "gzip"])
def test_round_trip_is_bit_for_bit(tmp_path, rng, axis_order, compression):
    # Writing and reading must give back the very same bits, in (x, y, z) order, whatever the
    # storage order; the sources computed from the file must equal the in-memory API's (the
    # kernel computes each point from that point's values alone; a strided storage order goes
    # through the column driver, hence assert_same_arithmetic).
    levels = curved_levels(rng)
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels, axis_order=axis_order, compression=compression)
    for index, level in enumerate(levels):
        back = snapshot.read_level(path, index)
        assert back["time"] == level["time"] and back["grid"] == level["grid"]
        for q in ("lapse", "shift", "spatial_metric", "electric_field", "magnetic_field"):
            assert back[q].dtype == level[q].dtype
            assert np.array_equal(back[q], level[q]), q
    out = tmp_path / "sources.h5"
    compute_sources(path, out)
    for index, level in enumerate(levels):
        ref = emsource.adm_sources(level["spatial_metric"], level["electric_field"],
                                   level["magnetic_field"])
        got = snapshot.read_level(out, index)
        for q, r in zip(("energy_density", "momentum_density", "spatial_stress", "stress_trace"), ref):
            assert_same_arithmetic(got[q], r)


def test_slice_fields_round_trip_keeps_mask_and_float32(tmp_path):
    grid = UniformGrid.from_bounds((-1, -1, -1), (1, 1, 1), (6, 7, 8))
    data = rotating_dipole(grid, 0.25, excision_radius=0.4)
    path = tmp_path / "dipole.h5"
    snapshot.write_snapshot(path, [data])
    back = snapshot.read_level(path)
    assert np.array_equal(back["valid_mask"].astype(bool), data.valid_mask)
    assert np.array_equal(back["magnetic_field"], data.B)
    assert np.array_equal(back["extrinsic_curvature"], data.K)
    level32 = {"electric_field": data.E.astype(np.float32), "magnetic_field": data.B.astype(np.float32),
               "time": 1.0, "grid": grid}
    snapshot.write_snapshot(tmp_path / "f32.h5", [level32])
    back32 = snapshot.read_level(tmp_path / "f32.h5")
    assert back32["electric_field"].dtype == np.float32
    assert np.array_equal(back32["electric_field"], level32["electric_field"])


def test_layout_attributes_and_provenance(tmp_path, rng):
    levels = curved_levels(rng, times=(0.0, 0.5, 1.0))
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels, axis_order="zyx")
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == snapshot.FORMAT_NAME and f.attrs["format_version"] == snapshot.FORMAT_VERSION
        g = f["time_levels/2"]
        assert g.attrs["axis_order"] == "zyx" and g.attrs["units"] == "gaussian"
        assert g.attrs["time"] == 1.0
        assert tuple(g.attrs["spacing"]) == levels[0]["grid"].spacing
        assert g["electric_field"].shape == (3, 7, 8, 9)  # (3, nz, ny, nx)
    out = tmp_path / "out.h5"
    compute_sources(path, out, memory_limit=64 * 2**20)
    with h5py.File(out, "r") as f:
        assert f.attrs["producer"] == f"emsource {emsource.__version__}"
        assert f.attrs["input_file"] == str(path.resolve())
        used = json.loads(f.attrs["input_datasets"])
        assert "/time_levels/0/electric_field" in used and "/time_levels/2/spatial_metric" in used
        assert not any("lapse" in u for u in used)  # not read, not listed
        options = json.loads(f.attrs["options"])
        assert options["memory_limit_bytes"] == 64 * 2**20 and options["check"] is True
        assert f["time_levels/1/spatial_stress"].shape == (6, 7, 8, 9)


def test_inputs_are_opened_read_only_and_left_unchanged(tmp_path, rng, monkeypatch):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    before = (path.read_bytes(), os.stat(path).st_mtime_ns)
    modes = {}
    real_file = h5py.File

    def spy(name, mode="r", *args, **kwargs):
        # outputs are opened through a file object (snapshot.writing.GuardedFile)
        modes[os.path.basename(os.fspath(getattr(name, "name", name)))] = mode
        return real_file(name, mode, *args, **kwargs)

    monkeypatch.setattr(h5py, "File", spy)
    compute_sources(path, tmp_path / "out.h5")
    assert modes["snap.h5"] == "r"
    assert (path.read_bytes(), os.stat(path).st_mtime_ns) == before


def test_missing_dataset_lists_what_the_level_holds(tmp_path, rng):
    level = curved_levels(rng, times=(0.0,))[0]
    del level["magnetic_field"]
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, [level])
    with pytest.raises(snapshot.SnapshotError, match="no 'magnetic_field'.*holds lapse, shift, "
                                              "spatial_metric, electric_field"):
        compute_sources(path, tmp_path / "out.h5")
    assert os.listdir(tmp_path) == ["snap.h5"]


def test_wrong_shapes_between_datasets(tmp_path, rng):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng, times=(0.0,)))
    with h5py.File(path, "a") as f:
        g = f["time_levels/0"]
        del g["magnetic_field"]
        g["magnetic_field"] = np.zeros((3, 9, 8, 6))
    with pytest.raises(snapshot.SnapshotError, match=r"'magnetic_field'.*shape \(3, 9, 8, 6\), "
                                              r"expected \(3, 9, 8, 7\)"):
        snapshot.open_snapshot(path)


def test_not_hdf5_truncated_and_missing_files(tmp_path, rng):
    text = tmp_path / "notes.h5"
    text.write_text("not an HDF5 file\n")
    with pytest.raises(snapshot.SnapshotError, match="not an HDF5 file"):
        snapshot.open_snapshot(text)
    good = tmp_path / "good.h5"
    snapshot.write_snapshot(good, curved_levels(rng))
    truncated = tmp_path / "truncated.h5"
    truncated.write_bytes(good.read_bytes()[: os.path.getsize(good) // 2])
    with pytest.raises(snapshot.SnapshotError, match="truncated or damaged"):
        snapshot.open_snapshot(truncated)
    with pytest.raises(snapshot.SnapshotError, match="does not exist"):
        snapshot.open_snapshot(tmp_path / "absent.h5")


def test_foreign_file_without_mapping_lists_its_contents(tmp_path):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f["run/Ex"] = np.zeros((2, 2, 2))
    with pytest.raises(snapshot.SnapshotError, match=r"not in the emsource layout.*/run/Ex \(dataset"):
        snapshot.open_snapshot(path)


def test_atomic_output_refuses_to_overwrite_and_cleans_up(tmp_path):
    target = tmp_path / "out.bin"
    target.write_text("old")
    with pytest.raises(snapshot.OutputError, match="exists"):
        with snapshot.atomic_output(target):
            pass
    with pytest.raises(RuntimeError):
        with snapshot.atomic_output(target, force=True) as temporary:
            open(temporary, "w").write("half")
            raise RuntimeError("stop")
    assert target.read_text() == "old" and os.listdir(tmp_path) == ["out.bin"]
    with snapshot.atomic_output(target, force=True) as temporary:
        open(temporary, "w").write("new")
    assert target.read_text() == "new" and os.listdir(tmp_path) == ["out.bin"]
    with pytest.raises(snapshot.OutputError, match="does not exist"):
        with snapshot.atomic_output(tmp_path / "no_dir" / "x.h5"):
            pass


def test_unwritable_output_directory(tmp_path, monkeypatch):
    directory = tmp_path / "locked"
    directory.mkdir()
    if os.geteuid() == 0:  # root writes anywhere: make the temporary file creation fail instead
        real_open = os.open

        def refuse(path, *args, **kwargs):
            if str(path).endswith(".partial"):
                raise PermissionError(13, "Permission denied")
            return real_open(path, *args, **kwargs)
        monkeypatch.setattr(snapshot.writing.os, "open", refuse)
    else:
        os.chmod(directory, 0o555)
    with pytest.raises(snapshot.OutputError, match="cannot write in output directory"):
        with snapshot.atomic_output(directory / "out.h5"):
            pass
    assert os.listdir(directory) == []
