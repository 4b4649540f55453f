"""Slab-streamed sources: independent of the slab size, bounded memory, all-or-nothing output."""

import os
import tracemalloc

import h5py
import numpy as np
import pytest

import emsource
from emsource import snapshot
from emsource.snapshot import sources_pipeline
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import curved_levels

OUTPUTS = ("energy_density", "momentum_density", "spatial_stress", "stress_trace")


@pytest.mark.parametrize("axis_order", ["xyz", "zyx"])
def test_results_do_not_depend_on_the_slab_size(tmp_path, rng, axis_order):
    # Each output point depends on the inputs at that point only, so any slab size must give
    # the same bits; rows=1 and rows=4 (uneven last slab) against one slab of everything.
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng, shape=(9, 8, 7)), axis_order=axis_order)
    results = {}
    for rows in (1, 4, None):
        out = tmp_path / f"out_{rows}.h5"
        report = compute_sources(path, out, rows=rows)
        if rows:
            assert report.rows_per_slab == rows
        results[rows] = [snapshot.read_level(out, i) for i in range(2)]
    for rows in (1, 4):
        for a, b in zip(results[rows], results[None]):
            for q in OUTPUTS:
                assert np.array_equal(a[q], b[q]), (rows, q)


def test_levels_that_reuse_the_slab_buffers_match_the_in_memory_call(tmp_path, rng):
    """Three levels of one grid share their slab buffers (``SlabBuffers.reused``); the last slab
    of each level is short (9 planes in slabs of 4), so a level's buffers hold the previous
    level's values beyond it: every level's outputs equal ``adm_sources`` on that level alone."""
    path = tmp_path / "snap.h5"
    levels = curved_levels(rng, shape=(9, 8, 7), times=(0.0, 0.5, 1.0))
    snapshot.write_snapshot(path, levels)
    out = tmp_path / "out.h5"
    compute_sources(path, out, rows=4)
    for index, level in enumerate(levels):
        expected = emsource.adm_sources(level["spatial_metric"], level["electric_field"],
                                        level["magnetic_field"])
        got = snapshot.read_level(out, index)
        for q, want in zip(OUTPUTS, expected):
            np.testing.assert_array_equal(got[q], want)


def test_slab_buffers_are_reused_exactly_where_they_fit(tmp_path, rng):
    import weakref

    from emsource.snapshot.slabs import SlabBuffers

    path = tmp_path / "snap.h5"
    small, large = (curved_levels(rng, shape=shape, times=(0.0,))[0]
                    for shape in ((6, 5, 4), (6, 5, 6)))
    large["time"] = 1.0
    large["grid"] = emsource.grid.UniformGrid((6, 5, 6), (0.0, 0.0, 0.0), (0.1, 0.1, 0.1))
    snapshot.write_snapshot(path, [small, large])
    names = ("spatial_metric", "electric_field")
    with snapshot.open_snapshot(path) as snap:
        first, second = snap.levels
        store = {}
        buffers = SlabBuffers.reused(store, "b", first, names, 4, np.float64)
        assert store["b"] is buffers and buffers.level is first

        def again(level, rows, quantities=names, dtype=np.float64):
            return SlabBuffers.reused(store, "b", level, quantities, rows, dtype)

        assert again(first, 3) is buffers
        # planes of 20 points (first) and 30 (second): room for 4 x 20 = 80 points per component
        assert again(second, 2) is buffers and buffers.level is second  # 60 points
        np.testing.assert_array_equal(buffers.read("spatial_metric", 0, 2),
                                      large["spatial_metric"][:, 0:2])
        alive = weakref.ref(buffers)
        del buffers
        replaced = again(second, 3)  # 90 points: new buffers; the old ones are not kept
        assert alive() is None and store["b"] is replaced
        for changed in (dict(level=first, rows=3, quantities=names[:1]),
                        dict(level=first, rows=3, dtype=np.float32)):
            before = store["b"]
            assert again(**changed) is not before


def _write_big_snapshot(path, shape, rng):
    """A float64 snapshot written plane by plane (the test process never holds it whole)."""
    with h5py.File(path, "w") as f:
        snapshot.write_root_attributes(f)
        g = f.create_group("time_levels/0")
        grid = emsource.grid.UniformGrid(shape, (0.0, 0.0, 0.0), (0.1, 0.1, 0.1))
        snapshot.write_level_attributes(g, time=0.0, grid=grid, units="gaussian", axis_order="xyz")
        gamma = g.create_dataset("spatial_metric", (6,) + shape, "f8")
        E = g.create_dataset("electric_field", (3,) + shape, "f8")
        B = g.create_dataset("magnetic_field", (3,) + shape, "f8")
        for i in range(shape[0]):
            plane = np.zeros((6,) + shape[1:])
            plane[[0, 3, 5]] = 1.0 + 0.1 * rng.random((3,) + shape[1:])
            gamma[:, i] = plane
            E[:, i] = rng.standard_normal((3,) + shape[1:])
            B[:, i] = rng.standard_normal((3,) + shape[1:])


def test_peak_memory_stays_under_the_bound(tmp_path, rng):
    # 64^3 float64: 12 input + 11 output values per point are 48 MiB in all, six times the
    # 8 MiB bound. What is measured: tracemalloc's peak of Python and NumPy allocations (NumPy
    # reports its data buffers to tracemalloc) during compute_sources. HDF5's own C buffers are
    # not seen by tracemalloc; they are bounded by construction (chunk cache CHUNK_CACHE_BYTES
    # per dataset, 1 MiB conversion buffer) and counted in the fixed part of the budget.
    shape = (64, 64, 64)
    path = tmp_path / "big.h5"
    _write_big_snapshot(path, shape, rng)
    limit = 8 * 2**20
    data_bytes = 23 * 8 * int(np.prod(shape))
    assert data_bytes > 5 * limit
    compute_sources(path, tmp_path / "warm.h5", rows=64)  # compile/load kernels outside the trace
    tracemalloc.start()
    try:
        report = compute_sources(path, tmp_path / "out.h5", memory_limit=limit)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    print(f"peak {peak / 2**20:.3f} MiB, planned {report.planned_bytes / 2**20:.3f} MiB, slabs {report.slabs}")
    assert report.slabs > 1 and report.planned_bytes <= limit
    assert peak < limit, f"peak {peak / 2**20:.2f} MiB over the {limit / 2**20} MiB bound"
    # The buffers dominate: the peak is the planned slab buffers plus small change.
    assert peak < report.planned_bytes + 2**20
    # and the result is still right
    out = snapshot.read_level(tmp_path / "out.h5")
    whole = snapshot.read_level(path)
    ref = emsource.adm_sources(whole["spatial_metric"], whole["electric_field"], whole["magnetic_field"])
    assert np.array_equal(out["energy_density"], ref.rho)


def test_memory_limit_too_small_is_a_clear_error(tmp_path, rng):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    with pytest.raises(ValueError, match="memory limit .* too small.*needs"):
        compute_sources(path, tmp_path / "out.h5", memory_limit=2**20)
    assert sorted(os.listdir(tmp_path)) == ["snap.h5"]


def test_interrupted_run_leaves_no_output(tmp_path, rng, monkeypatch):
    # Ctrl-C in the middle of the second slab: neither the output nor a temporary file remains,
    # and an older output with the same name is kept as it was.
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    old = tmp_path / "out.h5"
    old.write_bytes(b"previous result")
    calls = {"n": 0}
    real = sources_pipeline.adm_sources

    def interrupt_on_second(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(sources_pipeline, "adm_sources", interrupt_on_second)
    with pytest.raises(KeyboardInterrupt):
        compute_sources(path, old, rows=2, force=True)
    assert calls["n"] == 2
    assert sorted(os.listdir(tmp_path)) == ["out.h5", "snap.h5"]
    assert old.read_bytes() == b"previous result"


def test_bad_values_name_the_slab_and_leave_no_output(tmp_path, rng):
    levels = curved_levels(rng, times=(0.0,))
    levels[0]["electric_field"][1, 6, 2, 3] = np.nan
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels)
    # The error is the kernel's GridPointError in the whole grid's terms: the absolute index,
    # with the file, the time level and the slab's rows named (issue: slab-relative indices).
    with pytest.raises(emsource.GridPointError,
                       match=r"snap.h5', time level '0' \(x rows 4:8\).*grid index \(6, 2, 3\)") as info:
        compute_sources(path, tmp_path / "out.h5", rows=4)
    assert info.value.first_index == (6, 2, 3) and info.value.bad_count == 1
    assert os.listdir(tmp_path) == ["snap.h5"]


def test_existing_output_needs_force(tmp_path, rng):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    out = tmp_path / "out.h5"
    compute_sources(path, out)
    first = out.read_bytes()
    with pytest.raises(snapshot.OutputError, match="exists"):
        compute_sources(path, out)
    assert out.read_bytes() == first
    compute_sources(path, out, force=True, compression="gzip")
    assert snapshot.read_level(out)["energy_density"].shape == (9, 8, 7)


def test_chosen_outputs_only(tmp_path, rng):
    path = tmp_path / "snap.h5"
    levels = curved_levels(rng)
    snapshot.write_snapshot(path, levels)
    out = tmp_path / "out.h5"
    compute_sources(path, out, outputs=("momentum_density", "energy_density"), rows=3)
    back = snapshot.read_level(out, 1)
    assert {"energy_density", "momentum_density"} <= set(back) and "spatial_stress" not in back
    ref = emsource.adm_sources(levels[1]["spatial_metric"], levels[1]["electric_field"],
                               levels[1]["magnetic_field"])
    assert np.array_equal(back["momentum_density"], ref.S_i)
    with pytest.raises(ValueError, match="outputs must be some of"):
        compute_sources(path, tmp_path / "x.h5", outputs=("pressure",))
    assert not (tmp_path / "x.h5").exists()


@pytest.mark.parametrize("axis_order", ["xyz", "zyx"])
def test_integrals_name_file_level_and_absolute_index_from_a_slab(tmp_path, rng, axis_order):
    from emsource.integrals import integrate_snapshot

    levels = curved_levels(rng, times=(0.0, 0.5))
    levels[1]["electric_field"][1, 6, 2, 5] = np.nan
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels, axis_order=axis_order)
    # Slabs of 2 rows along the slowest storage axis (x for xyz, z for zyx): the bad point lies
    # in a later slab either way, and the index must still be that of the whole (x, y, z) grid.
    rows = "x rows 6:8" if axis_order == "xyz" else "z rows 4:6"
    with pytest.raises(emsource.GridPointError, match=rf"snap.h5', time level '1' \({rows}\)") as info:
        integrate_snapshot(path, rows=2)
    assert info.value.first_index == (6, 2, 5)


def test_excised_points_are_neither_checked_nor_computed_by_sources(tmp_path, rng):
    # Issue: "Masked points are neither checked nor used anywhere (sources write a documented
    # fill value there)". NaN and a singular metric stand at excised points, as a writer puts
    # them at a singularity; the command must succeed, write NaN there, copy the mask, and
    # give at every valid point what the in-memory API gives for the same data.
    levels = curved_levels(rng, times=(0.0,))
    level = levels[0]
    valid = np.ones(level["lapse"].shape, np.uint8)
    valid[2:4, 1, 3] = 0
    valid[7, 5, 0] = 0
    level["valid_mask"] = valid
    level["electric_field"][:, 2, 1, 3] = np.nan
    level["spatial_metric"][:, 3, 1, 3] = 0.0
    level["magnetic_field"][1, 7, 5, 0] = np.inf
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels, axis_order="zyx")
    compute_sources(path, tmp_path / "out.h5", rows=2)
    got = snapshot.read_level(tmp_path / "out.h5", 0)
    keep = valid.astype(bool)
    np.testing.assert_array_equal(got["valid_mask"], valid)
    flat = np.array([1.0, 0.0, 0.0, 1.0, 0.0, 1.0])[:, None, None, None]
    ref = emsource.adm_sources(np.where(keep, level["spatial_metric"], flat),
                               np.where(keep, level["electric_field"], 0.0),
                               np.where(keep, level["magnetic_field"], 0.0))
    for q, r in zip(("energy_density", "momentum_density", "spatial_stress", "stress_trace"), ref):
        assert np.isnan(got[q][..., ~keep]).all(), q
        np.testing.assert_allclose(got[q][..., keep], r[..., keep], rtol=0,
                                   atol=16 * np.finfo(float).eps * np.abs(r).max())
