"""The Dask path (emsource.distributed) against the single-process path, on small files.

The reference is the single-process code of the package run on the same file (what the brief of
the Dask path asks: the same numbers): compute_sources, integrate_snapshot, adm_constraints and
global_balance. The numerics run on Dask's synchronous scheduler (the graph, the blocks, the
overlaps and the tree are the same on any scheduler; a cluster only moves them between
processes); ``tests/test_commands_distributed.py`` runs them on a real cluster.

Tolerances. Pointwise values (the sources) come from the same kernel on the same point values:
at most the roundings that FMA contraction moves between loop shapes (``assert_same_arithmetic``,
16 eps of the largest value). Sums: each block's partial is its exact sum to 0.5 eps of its
magnitude and n blocks add n - 1 roundings (emsource.reductions), so the two paths agree to
(n + 1) eps of the sum of |terms|; with at most 20 blocks here that is below 5e-15, and the
tests use the 1e-13 relative bound of the brief, relative to that magnitude (for like-signed
sums, energies and squares, it is the value itself).
"""

import math
import os

import h5py
import numpy as np
import pytest

dask = pytest.importorskip("dask", reason="the Dask path needs the dask extra (part of the test "
                                          "extra: pip install '.[test]')")

from emsource.conservation import global_balance  # noqa: E402
from emsource.constraints import adm_constraints  # noqa: E402
from emsource.distributed.arrays import block_rows, level_stack  # noqa: E402
from emsource.distributed.balance import balance_series, global_balance_series  # noqa: E402
from emsource.distributed.constraints import constraint_norms, constraint_residuals  # noqa: E402
from emsource.distributed.integrals import integrate_series, level_partials  # noqa: E402
from emsource.distributed.radiation import radiation_series  # noqa: E402
from emsource.distributed.series import choose_in_series, open_series  # noqa: E402
from emsource.distributed.sources import compute_sources_dask  # noqa: E402
from emsource.exact import TimeLevelFields  # noqa: E402
from emsource.grid import UniformGrid  # noqa: E402
from emsource.integrals import integrate_snapshot  # noqa: E402
from emsource.snapshot import SnapshotError, read_level, write_snapshot  # noqa: E402
from emsource.snapshot import open_snapshot  # noqa: E402
from emsource.snapshot.sources_pipeline import compute_sources  # noqa: E402
from emsource.radiation import radiation_snapshot  # noqa: E402
from emsource.snapshot_balance import balance_open_snapshot  # noqa: E402

from conftest import assert_same_arithmetic  # noqa: E402
from snapshot_data import curved_levels  # noqa: E402

RTOL = 1e-13
SHAPE = (14, 9, 8)
#: The origin lies inside the box, so that a small sphere fits (x from -1.75, y, z from -0.8).
GRID = UniformGrid(SHAPE, (-1.75, -0.8, -0.7), (0.25, 0.2, 0.2))
#: Bytes per block small enough that every level is cut into several blocks.
SMALL_BLOCKS = 60_000


@pytest.fixture(autouse=True)
def synchronous():
    with dask.config.set(scheduler="synchronous"):
        yield


def full_levels(rng, times, shape=SHAPE, grid=GRID):
    """Random curved levels with every quantity the balance and the constraints read."""
    levels = curved_levels(rng, shape=shape, times=times)
    for level in levels:
        level["grid"] = grid
        level["extrinsic_curvature"] = 0.1 * rng.standard_normal((6,) + shape)
        level["charge_density"] = 0.1 * rng.standard_normal(shape)
        level["current_density"] = 0.1 * rng.standard_normal((3,) + shape)
    return levels


def chunked_copy(path, rows):
    """Rewrite every dataset of ``path`` with chunks of ``rows`` planes of the slowest axis."""
    with h5py.File(path, "r+") as f:
        for name in list(f["time_levels"]):
            group = f["time_levels"][name]
            for q in list(group):
                data = group[q][...]
                lead = data.ndim - 3
                del group[q]
                group.create_dataset(q, data=data, chunks=(1,) * lead + (rows,) + data.shape[lead + 1:])


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Two-level files: contiguous "xyz", chunked (3 planes) "xyz", contiguous "zyx", and one with
    an excised region."""
    rng = np.random.default_rng(20261204)
    directory = tmp_path_factory.mktemp("dask")
    levels = full_levels(rng, (0.0, 0.25))
    paths = {}
    for name, order in (("xyz", "xyz"), ("chunked", "xyz"), ("zyx", "zyx")):
        paths[name] = str(directory / f"{name}.h5")
        write_snapshot(paths[name], levels, axis_order=order)
    chunked_copy(paths["chunked"], 3)
    masked = [dict(level) for level in levels]
    mask = np.ones(SHAPE, np.uint8)
    mask[9:12, 6:, :3] = 0
    for level in masked:
        level["valid_mask"] = mask
        level["spatial_metric"] = level["spatial_metric"].copy()
        level["spatial_metric"][:, mask == 0] = np.nan  # never read: excised
    paths["masked"] = str(directory / "masked.h5")
    write_snapshot(paths["masked"], masked)
    return paths


def test_blocks_are_whole_stored_chunks(files):
    level = open_series(files["chunked"])[0]
    heights = block_rows(level, ("spatial_metric",), 12, 8, SMALL_BLOCKS)
    assert sum(heights) == SHAPE[0] and len(heights) > 1
    assert all(h % 3 == 0 for h in heights[:-1])  # the last one holds the remainder
    array, layout = level_stack(level, ("lapse", "spatial_metric"), heights)
    assert layout == {"lapse": slice(0, 1), "spatial_metric": slice(1, 7)}
    assert array.chunks[1] == heights
    with h5py.File(files["chunked"], "r") as f:
        stored = np.concatenate([f["time_levels/0/lapse"][...][None],
                                 f["time_levels/0/spatial_metric"][...]])
    np.testing.assert_array_equal(array.compute(), stored)


@pytest.mark.parametrize("name", ["chunked", "zyx", "masked"])
def test_sources_equal_single_process(files, tmp_path, name):
    reference, result = tmp_path / "reference.h5", tmp_path / "dask.h5"
    compute_sources(files[name], reference, rows=4)
    report = compute_sources_dask(files[name], result, block_bytes=SMALL_BLOCKS)
    assert report.slabs > 2  # several blocks per level
    with h5py.File(reference) as a, h5py.File(result) as b:
        assert sorted(a["time_levels"]) == sorted(b["time_levels"])
        for label in a["time_levels"]:
            ga, gb = a["time_levels"][label], b["time_levels"][label]
            assert sorted(ga) == sorted(gb)
            assert sorted(ga.attrs) == sorted(gb.attrs)
            for key in ga.attrs:
                np.testing.assert_array_equal(ga.attrs[key], gb.attrs[key])
            for q in ga:
                x, y = ga[q][...], gb[q][...]
                assert x.shape == y.shape and x.dtype == y.dtype
                np.testing.assert_array_equal(np.isnan(x), np.isnan(y))
                if x.dtype.kind == "f":
                    assert_same_arithmetic(np.nan_to_num(x), np.nan_to_num(y))
                else:
                    np.testing.assert_array_equal(x, y)
        assert b.attrs["format"] == a.attrs["format"]


def assert_sums_close(found, expected, magnitude):
    found, expected = np.asarray(found), np.asarray(expected)
    assert np.all(np.abs(found - expected) <= RTOL * np.asarray(magnitude)), (found, expected)


@pytest.mark.parametrize("name", ["chunked", "zyx", "masked"])
def test_integrals_equal_single_process(files, name):
    radii = [0.35] if name != "masked" else []
    reference = integrate_snapshot(files[name], radii=radii, rows=2)
    levels, partials, _ = level_partials(files[name], radii=radii, block_bytes=SMALL_BLOCKS)
    found = integrate_series(files[name], radii=radii, block_bytes=SMALL_BLOCKS)
    assert [r.time for r in found] == [r.time for r in reference] == [0.0, 0.25]
    for a, b, p in zip(reference, found, partials):
        assert math.isclose(b.energy, a.energy, rel_tol=RTOL)
        assert_sums_close(b.momentum, a.momentum, p.momentum.magnitude)
        assert_sums_close(list(b.face_flux.values()), list(a.face_flux.values()),
                          p.face_flux.magnitude)
        assert_sums_close(list(b.luminosity.values()), list(a.luminosity.values()),
                          p.luminosity.magnitude)
        assert list(b.luminosity) == list(a.luminosity)
        assert (b.excised_points, b.max_electric_field, b.max_magnetic_field) == (
            a.excised_points, a.max_electric_field, a.max_magnetic_field)
    if name == "masked":
        assert found[0].excised_points == 3 * 3 * 3


@pytest.mark.parametrize("name, order", [("xyz", 2), ("zyx", 6), ("masked", 4)])
def test_constraints_equal_single_process(files, name, order):
    for k, norms in enumerate(constraint_norms(files[name], order=order,
                                               block_bytes=SMALL_BLOCKS // 4)):
        d = read_level(files[name], k)
        mask = d.get("valid_mask")
        res = adm_constraints(d["spatial_metric"], d["extrinsic_curvature"], d["electric_field"],
                              d["magnetic_field"], spacing=d["grid"].spacing, order=order,
                              valid_mask=None if mask is None else mask.astype(bool))
        assert norms.interior_points == int(res.interior.sum()) > 0
        for got, want in ((norms.hamiltonian_norms, res.hamiltonian_norms),
                          (norms.momentum_norms, res.momentum_norms)):
            np.testing.assert_allclose(got.l2, want.l2, rtol=RTOL)
            np.testing.assert_array_equal(got.max, want.max)  # maxima are exact in any order
            np.testing.assert_allclose(got.normalised_l2, want.normalised_l2, rtol=RTOL)


def test_constraint_residual_fields_are_pointwise_the_same(files):
    """map_overlap with depth = stencil radius gives the whole-grid residual at every point."""
    level = open_series(files["masked"])[1]
    fields = constraint_residuals(level, order=4, block_bytes=SMALL_BLOCKS // 4)
    assert fields.numblocks[1] >= 2
    fields = fields.compute()
    d = read_level(files["masked"], 1)
    res = adm_constraints(d["spatial_metric"], d["extrinsic_curvature"], d["electric_field"],
                          d["magnetic_field"], spacing=d["grid"].spacing, order=4,
                          valid_mask=d["valid_mask"].astype(bool))
    np.testing.assert_array_equal(fields[8] != 0, res.interior)
    interior = res.interior
    # Same kernel, same point values: equal up to FMA roundings (16 eps of the largest value).
    assert_same_arithmetic(fields[0][interior], res.hamiltonian[interior])
    assert_same_arithmetic(fields[1:4][:, interior], res.momentum[:, interior])
    assert np.isnan(fields[0][~interior]).all()


def fields_of(path, k):
    d = read_level(path, k)
    return TimeLevelFields(d["grid"], d["time"], d["lapse"], d["shift"], d["spatial_metric"],
                           d["extrinsic_curvature"], d["electric_field"], d["magnetic_field"],
                           d["charge_density"], d["current_density"], units=d["units"])


@pytest.mark.parametrize("name", ["chunked", "zyx"])
def test_balance_equals_single_process(files, name):
    reference = global_balance([fields_of(files[name], k) for k in range(2)], order=4)
    found = global_balance_series(files[name], order=4, block_bytes=SMALL_BLOCKS)
    assert found.box == reference.box
    # Box totals of like-signed energy densities; rates with cancellation: relative to the
    # largest rate (the terms' magnitudes are not kept by GlobalBalance).
    np.testing.assert_allclose(found.totals[:, 0], reference.totals[:, 0], rtol=RTOL)
    for attribute in ("totals", "outflow_rates", "source_rates"):
        a, b = getattr(found, attribute), getattr(reference, attribute)
        assert np.all(np.abs(a - b) <= RTOL * np.abs(b).max()), attribute
    assert math.isclose(found.energy.mismatch, reference.energy.mismatch, rel_tol=1e-12)


@pytest.fixture(scope="module")
def balance_files(tmp_path_factory):
    """Three equally spaced levels (so the middle one has a local residual) plus a fourth after
    a longer step (no residual at the third): chunked "xyz" with every quantity, "zyx", and
    "bare" without lapse, shift, extrinsic curvature and current (flat defaults, charge only)."""
    rng = np.random.default_rng(20261205)
    directory = tmp_path_factory.mktemp("dask_balance")
    levels = full_levels(rng, (0.0, 0.1, 0.2, 0.35))
    paths = {}
    for name, order in (("chunked", "xyz"), ("zyx", "zyx")):
        paths[name] = str(directory / f"{name}.h5")
        write_snapshot(paths[name], levels, axis_order=order)
    chunked_copy(paths["chunked"], 3)
    bare = [{k: v for k, v in level.items()
             if k not in ("lapse", "shift", "extrinsic_curvature", "current_density")}
            for level in levels]
    paths["bare"] = str(directory / "bare.h5")
    write_snapshot(paths["bare"], bare)
    return paths


@pytest.mark.parametrize("name, order", [("chunked", 2), ("zyx", 4), ("bare", 6)])
def test_balance_command_numbers_equal_single_process(balance_files, name, order):
    """Residual norms (map_overlap, depth = stencil radius) and the global balance of
    ``emsource balance`` on Dask against the single-process path on the same file. Norms are
    sums of squares (like-signed: (n + 1) eps relative, n <= 20 blocks, under 1e-13); maxima
    are exact in any order."""
    with open_snapshot(balance_files[name]) as snap:
        reference = balance_open_snapshot(snap, order=order)
    found = balance_series(balance_files[name], order=order, block_bytes=SMALL_BLOCKS)
    assert found.absent == reference.absent
    assert found.order == reference.order == order
    with_residual = [r.label for r in reference.residuals if r.energy is not None]
    assert with_residual == ["1"]  # the middle of three equally spaced levels only
    for a, b in zip(reference.residuals, found.residuals):
        assert (b.label, b.time, b.interior_points) == (a.label, a.time, a.interior_points)
        assert (a.energy is None) == (b.energy is None)
        if a.energy is None:
            continue
        assert a.interior_points > 0
        for got, want in ((b.energy, a.energy), (b.momentum, a.momentum)):
            np.testing.assert_allclose(got.l2, want.l2, rtol=RTOL)
            np.testing.assert_allclose(got.normalised_l2, want.normalised_l2, rtol=RTOL)
            np.testing.assert_array_equal(got.max, want.max)
    a, b = reference.balance, found.balance
    assert b.box == a.box
    for attribute in ("totals", "outflow_rates", "source_rates"):
        x, y = getattr(b, attribute), getattr(a, attribute)
        assert np.all(np.abs(x - y) <= RTOL * np.abs(y).max()), attribute
    if name == "bare":
        assert found.absent == ["lapse", "shift", "extrinsic_curvature", "current_density"]


def test_balance_blocks_line_up_and_are_several(balance_files):
    """The residual really ran on several overlapping blocks (else the test above proves
    nothing about the overlap)."""
    from emsource.distributed.balance import _stacks

    chosen = open_series(balance_files["chunked"])
    heights, stacks = _stacks(chosen, 2, SMALL_BLOCKS)
    assert len(heights) > 2 and all(h % 3 == 0 for h in heights[:-1])
    assert all(stack.chunks[1] == heights for stack, _ in stacks)


def test_balance_refuses_excised_points_like_single_process(files):
    with pytest.raises(SnapshotError, match=r"does not support excised points"):
        balance_series(files["masked"], block_bytes=SMALL_BLOCKS)
    with open_snapshot(files["masked"]) as snap, pytest.raises(
            SnapshotError, match=r"does not support excised points"):
        balance_open_snapshot(snap)


@pytest.mark.parametrize("name", ["chunked", "zyx", "masked"])
def test_radiation_equals_single_process(files, name):
    """Sphere sums as chunk-local partials: each node interpolated in one block, the blocks'
    SpherePartials merged in a tree. Powers are sums of like-signed terms ((n + 1) eps
    relative); modes and the net flux cancel, so they are compared relative to their sums'
    magnitudes (emsource.reductions)."""
    radii = [0.3, 0.45] if name != "masked" else [0.25]  # the masked box excises x > 0.5
    options = dict(radii=radii, l_max=3, theta_points=6, interpolation_points=2)
    reference = radiation_snapshot(files[name], rows=2, **options)
    found = radiation_series(files[name], block_bytes=SMALL_BLOCKS // 4, **options)
    level = open_series(files[name])[0]
    assert len(block_rows(level, ("spatial_metric", "electric_field", "magnetic_field"), 26, 8,
                          SMALL_BLOCKS // 4)) > 2  # several blocks share the nodes
    assert [(r.label, r.time) for r in found] == [(r.label, r.time) for r in reference]
    for a, b in zip(reference, found):
        for sa, sb in zip(a.spheres, b.spheres):
            assert sb.radius == sa.radius
            assert math.isclose(sb.power, sa.power, rel_tol=RTOL)
            assert math.isclose(sb.mode_power, sa.mode_power, rel_tol=RTOL)
            scale = sa.power + abs(sa.net_flux)
            assert abs(sb.net_flux - sa.net_flux) <= RTOL * scale
            for scalar in sa.modes:
                size = np.abs(sa.modes[scalar]).max()
                assert np.all(np.abs(sb.modes[scalar] - sa.modes[scalar]) <= RTOL * size), scalar


def test_radiation_bad_point_is_named_in_whole_grid_terms(tmp_path):
    path = tmp_path / "bad.h5"
    levels = full_levels(np.random.default_rng(8), (0.0,))
    levels[0]["magnetic_field"][2, 8, 4, 4] = np.inf  # next to the node nearest x = (0.3, 0, 0)
    write_snapshot(path, levels)
    options = dict(radii=[0.3], l_max=2, theta_points=4, interpolation_points=4)
    with pytest.raises(SnapshotError) as single:
        radiation_snapshot(path, rows=2, **options)
    with pytest.raises(SnapshotError) as found:
        radiation_series(path, block_bytes=SMALL_BLOCKS // 4, **options)
    assert "grid index (8, 4, 4)" in str(single.value)
    # Nodes in several blocks have the bad value in their stencils, and which block's error the
    # threaded scheduler raises first depends on the schedule: the node named may differ, the
    # file, level, quantity, component and grid index may not.
    named_node = "inside the interpolation stencil of the node at x = "
    assert named_node in str(found.value)
    assert str(found.value).split(named_node)[0] == str(single.value).split(named_node)[0]


# --------------------------------------------------------------------------- time series

@pytest.fixture(scope="module")
def series_directory(tmp_path_factory):
    """Three files whose names do not sort by time; the middle time holds two levels."""
    rng = np.random.default_rng(7)
    directory = tmp_path_factory.mktemp("series")
    levels = full_levels(rng, (0.0, 0.1, 0.2, 0.3))
    write_snapshot(directory / "a_late.h5", [levels[3]])
    write_snapshot(directory / "b_early.h5", [levels[0]])
    write_snapshot(directory / "c_middle.hdf5", [levels[1], levels[2]])
    (directory / "notes.txt").write_text("not a snapshot")  # left alone
    return directory


def test_series_ordered_by_time(series_directory):
    series = open_series(str(series_directory))
    assert [level.time for level in series] == [0.0, 0.1, 0.2, 0.3]
    assert [os.path.basename(level.path) for level in series] == [
        "b_early.h5", "c_middle.hdf5", "c_middle.hdf5", "a_late.h5"]
    same = open_series(str(series_directory / "*.h*5"))
    assert [(s.path, s.index) for s in same] == [(s.path, s.index) for s in series]


def test_levels_of_one_file_are_the_file_indices_as_without_a_cluster(tmp_path):
    # A file whose levels are not stored in time order: --levels picks the same levels with and
    # without a cluster (the file's own indices); a series of files counts positions in time.
    levels = full_levels(np.random.default_rng(8), (0.0, 0.1, 0.2))
    path = tmp_path / "unordered.h5"
    write_snapshot(path, [levels[2], levels[0], levels[1]])
    with open_snapshot(path) as snap:
        single = [level.time for level in snap.select([0, 2])]
    assert single == [0.2, 0.1]
    assert [level.time for level in open_series(str(path), levels=[0, 2])] == single
    assert [level.time for level in choose_in_series(open_series(str(path)), [0, 2])] == single
    assert [level.time for level in open_series(str(path))] == [0.0, 0.1, 0.2]
    write_snapshot(tmp_path / "later.h5", [full_levels(np.random.default_rng(9), (0.3,))[0]])
    assert [level.time for level in open_series(str(tmp_path), levels=[0, 2])] == [0.0, 0.2]


def test_series_integrals_equal_per_file_integrals(series_directory):
    found = integrate_series(str(series_directory), radii=[0.35], block_bytes=SMALL_BLOCKS)
    reference = []
    for name in ("b_early.h5", "c_middle.hdf5", "a_late.h5"):
        reference += integrate_snapshot(series_directory / name, radii=[0.35])
    assert [r.time for r in found] == [r.time for r in reference]
    for a, b in zip(reference, found):
        assert math.isclose(b.energy, a.energy, rel_tol=RTOL)


def test_series_sources_in_time_order(series_directory, tmp_path):
    output = tmp_path / "series_sources.h5"
    compute_sources_dask(str(series_directory), output, block_bytes=SMALL_BLOCKS)
    single = tmp_path / "single.h5"
    compute_sources(series_directory / "c_middle.hdf5", single)
    with h5py.File(output) as out, h5py.File(single) as ref:
        assert sorted(out["time_levels"]) == ["0", "1", "2", "3"]
        assert [out["time_levels"][k].attrs["time"] for k in "0123"] == [0.0, 0.1, 0.2, 0.3]
        assert_same_arithmetic(out["time_levels/2/energy_density"][...],
                               ref["time_levels/1/energy_density"][...])


def test_series_duplicate_time_is_named(series_directory, tmp_path):
    rng = np.random.default_rng(3)
    write_snapshot(tmp_path / "again.h5", full_levels(rng, (0.2,)))
    with pytest.raises(SnapshotError, match=r"t = 0\.2 appears twice.*c_middle\.hdf5.*again\.h5"):
        open_series([str(series_directory), str(tmp_path / "again.h5")])


def test_series_different_grid_is_named(series_directory, tmp_path):
    rng = np.random.default_rng(4)
    other = UniformGrid(SHAPE, (-1.75, -0.8, -0.7), (0.25, 0.2, 0.21))
    write_snapshot(tmp_path / "other.h5", full_levels(rng, (0.4,), grid=other))
    with pytest.raises(SnapshotError, match=r"other\.h5.*spacing \(0\.25, 0\.2, 0\.21\).*"
                                            r"same grid"):
        open_series([str(series_directory), str(tmp_path / "other.h5")])


@pytest.mark.parametrize("spec, message", [
    ("empty_dir", "holds no snapshot file"),
    ("*.nothing", "matches no file"),
    ("missing.h5", "does not exist"),
])
def test_series_bad_specs(tmp_path, spec, message):
    (tmp_path / "empty_dir").mkdir()
    with pytest.raises(SnapshotError, match=message):
        open_series(str(tmp_path / spec))


def test_bad_point_in_a_block_names_the_whole_grid_index(files, tmp_path):
    """A NaN at a valid point in the third block: the error gives its index in the whole grid,
    and no output is left."""
    path = tmp_path / "bad.h5"
    levels = full_levels(np.random.default_rng(5), (0.0,))
    levels[0]["electric_field"][1, 11, 4, 5] = np.nan
    write_snapshot(path, levels)
    output = tmp_path / "out.h5"
    with pytest.raises(ValueError, match=r"grid index \(11, 4, 5\)"):
        compute_sources_dask(path, output, block_bytes=SMALL_BLOCKS)
    with pytest.raises(ValueError, match=r"grid index \(11, 4, 5\)"):
        integrate_series(path, block_bytes=SMALL_BLOCKS)
    assert sorted(os.listdir(tmp_path)) == ["bad.h5"]


# ----------------------------------------------------------------------------- source diagnosis
def diagnosis_file(path, names, *, grid=(4, 4, 4), axis_order="xyz", noise=0.0, mask=False):
    """A level whose stored sources are the reference user code's with the convention
    differences ``names`` (tests/diagnosis_reference.py, independent of emsource.diagnosis)."""
    from conftest import random_curved_data
    from diagnosis_reference import user_sources

    alpha, beta, gamma, E, B = random_curved_data(np.random.default_rng(17), grid)
    rho, S_i, S_ij = user_sources(alpha, beta, gamma, E, B, names)
    S_i = S_i + noise * np.random.default_rng(3).standard_normal(S_i.shape)
    level = {"lapse": alpha, "shift": beta, "spatial_metric": gamma, "electric_field": E,
             "magnetic_field": B, "time": 0.0, "grid": UniformGrid(grid, (0, 0, 0), (0.1,) * 3),
             "units": "gaussian", "energy_density": rho, "momentum_density": S_i,
             "spatial_stress": S_ij}
    if mask:
        valid = np.ones(grid, np.uint8)
        valid[1:3, 2:, :2] = 0
        level["valid_mask"] = valid
    write_snapshot(path, [level], axis_order=axis_order)
    return str(path)


def single_process_diagnosis(path, pairs=True):
    from emsource.commands.diagnose_sources import read_inputs
    from emsource.diagnosis import diagnose_sources

    kwargs = read_inputs(path, 0, None)
    fields = [kwargs.pop(k) for k in ("alpha", "beta", "gamma", "E", "B")]
    return diagnose_sources(*fields, pairs=pairs, **kwargs)


def assert_same_diagnosis(found, expected, blocks):
    """Same JSON: every string equal, every number within the bound of a sum over ``blocks``
    pieces. Each sum (p.p, p.d, ||d - a p||^2, ||s||^2) is an accurate sum per block, so the
    two paths differ by (n + 1) eps of its magnitude (emsource.reductions); a ratio of two such
    sums, or a square root, at most doubles that: 4 (n + 1) eps relative, with a factor 2 of
    margin. A residual at round-off (d = a p + e, |e| ~ eps |p|) moves absolutely by the
    amplitude's relative change (the misfit is stationary in a, but d - a p changes by
    delta_a p): also within 8 (n + 1) eps, so numbers below 1e-12 are compared absolutely."""
    import re

    bound = 8 * (blocks + 1) * np.finfo(np.float64).eps
    number = re.compile(r"-?\d+\.\d+(?:e[-+]\d+)?|-?\d+e[-+]\d+")

    def close(x, y):
        return abs(x - y) <= bound * max(abs(x), abs(y)) or (
            max(abs(x), abs(y)) < 1e-12 and abs(x - y) <= bound)

    def compare(a, b, where):
        if isinstance(a, dict):
            assert list(a) == list(b), where
            for key in a:
                compare(a[key], b[key], f"{where}.{key}")
        elif isinstance(a, list):
            assert len(a) == len(b), where
            for k, (x, y) in enumerate(zip(a, b)):
                compare(x, y, f"{where}[{k}]")
        elif isinstance(a, float) and not isinstance(a, bool):
            assert close(a, b), (where, a, b)
        elif isinstance(a, str):
            assert number.sub("#", a) == number.sub("#", b), where
            for x, y in zip(number.findall(a), number.findall(b)):
                assert close(float(x), float(y)), (where, x, y)
        else:
            assert a == b, where

    def by_names(d):   # rows that tie to round-off may sort either way: key them by candidates
        d = dict(d)
        for key in ("singles", "pairs"):
            d[key] = sorted(d[key], key=lambda e: e["candidates"])
        return d

    compare(by_names(found.to_dict()), by_names(expected.to_dict()), "diagnosis")


@pytest.mark.parametrize("names, axis_order, mask", [
    (("grid_axes_reversed",), "xyz", False),   # values move between blocks (a cube)
    (("unit_factor",), "zyx", True),           # fitted amplitude, other storage order, excision
])
def test_diagnosis_on_blocks_is_the_single_process_one(tmp_path, names, axis_order, mask):
    from emsource.distributed.diagnosis import VALUES_PER_POINT, diagnose_level

    path = diagnosis_file(tmp_path / "user.h5", names, axis_order=axis_order, mask=mask)
    if names == ("unit_factor",):   # the reference's unit factor: 4 pi
        with h5py.File(path, "r+") as f:
            g = f["time_levels"][list(f["time_levels"])[0]]
            for q in ("energy_density", "momentum_density", "spatial_stress"):
                g[q][...] = 4 * np.pi * g[q][...]
    one_row = 16 * VALUES_PER_POINT * 8          # a 4 x 4 plane: four blocks of one row
    with dask.config.set(scheduler="synchronous"):
        found = diagnose_level(path, block_bytes=one_row, pairs=False)
    expected = single_process_diagnosis(path, pairs=False)
    assert found.verdict == expected.verdict == "explained"
    assert found.explanations[0].names == names
    assert_same_diagnosis(found, expected, blocks=4)


def test_diagnosis_pairs_across_blocks(tmp_path):
    """A pair whose storage step moves values between blocks: the pair search on blocks finds
    the single-process pair with the same numbers."""
    from emsource.distributed.diagnosis import VALUES_PER_POINT, diagnose_level

    names = ("stress_packing_voigt", "components_last_reshaped")
    path = diagnosis_file(tmp_path / "user.h5", names)
    with dask.config.set(scheduler="synchronous"):
        found = diagnose_level(path, block_bytes=2 * 16 * VALUES_PER_POINT * 8)  # 2 blocks
    expected = single_process_diagnosis(path)
    assert found.verdict == expected.verdict == "explained"
    assert found.explanations[0].names == names
    assert_same_diagnosis(found, expected, blocks=2)


def test_diagnosis_bad_point_is_located_on_the_whole_grid(tmp_path):
    from emsource.distributed.diagnosis import VALUES_PER_POINT, diagnose_level
    from emsource.errors import GridPointError

    path = diagnosis_file(tmp_path / "user.h5", ())
    with h5py.File(path, "r+") as f:
        g = f["time_levels"][list(f["time_levels"])[0]]
        g["momentum_density"][0, 2, 1, 3] = np.nan
    with dask.config.set(scheduler="synchronous"), pytest.raises(GridPointError) as error:
        diagnose_level(path, block_bytes=16 * VALUES_PER_POINT * 8, pairs=False)
    assert "(2, 1, 3)" in str(error.value) and "S_i" in str(error.value)
