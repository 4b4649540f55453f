"""Staggered snapshots read through a mapping file: positions, time offsets, slabs, bad layouts.

The files are written here from an exact solution (a vacuum plane wave, Jackson, Classical
Electrodynamics, 3rd ed., sec. 7.1) sampled where a Yee lattice stores each component
(K. S. Yee, IEEE Trans. Antennas Propag. 14, 302 (1966)): E on the edges, B on the faces and half
a time step later. Read at the vertices they must approach the exact vertex values at the
interpolation order (A&S 25.2; from memory), and equal an independent in-test route.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT
from emsource.exact import plane_wave
from emsource.grid import UniformGrid
from emsource.integrals import integrate_snapshot
from emsource.snapshot import MappingError, SnapshotError, load_mapping, open_snapshot, read_level
from emsource.snapshot.sources_pipeline import compute_sources
from emsource.staggering import centring_offsets, to_vertices

from conftest import assert_same_arithmetic
from snapshot_data import run_cli

K = np.array([2.1, 1.3, 0.7])


def _wave(grid, t):
    return plane_wave(grid, t, wave_vector=K, polarization=np.cross(K, (0.2, -0.4, 1.0)),
                      units="heaviside_lorentz")


def write_staggered(path, n, *, levels=5, axis_order="xyz", dtype=np.float64):
    """E on edges (trimmed: n - 1 values along its own axis), B on faces (padded: n values),
    B at level time + dt/2. Returns (h, dt)."""
    points = (n, n - 1, n + 1)
    h = 1.0 / (n - 1)
    dt = 0.4 * h
    with h5py.File(path, "w") as f:
        for k in range(levels):
            t = k * dt
            g = f.create_group(f"sim/out{k}")
            g.attrs["t"] = t
            for name, centring, shift, trimmed in (("E", "edge", 0.0, True),
                                                   ("B", "face", dt / 2, False)):
                for c, offset in enumerate(centring_offsets(centring, 3)):
                    stored = tuple(m - 1 if (o and trimmed) else m for m, o in zip(points, offset))
                    grid = UniformGrid(stored, tuple(o * h for o in offset), (h, h, h))
                    values = getattr(_wave(grid, t + shift), name)[c].astype(dtype)
                    g[f"{name}{'xyz'[c]}"] = values if axis_order == "xyz" else values.T
    return h, dt


MAPPING = """mapping_version = 1
axis_order = "{axis_order}"
units = "heaviside_lorentz"
interpolation_order = {order}
[time_levels]
pattern = "/sim/out{{index}}"
time = {{ attribute = "t" }}
[grid]
spacing = [{h!r}, {h!r}, {h!r}]
origin = [0.0, 0.0, 0.0]
[quantities.spatial_metric]
identity = true
[quantities.electric_field]
components = ["Ex", "Ey", "Ez"]
{e_layout}
[quantities.magnetic_field]
components = ["Bx", "By", "Bz"]
{b_layout}
"""


def write_mapping(path, h, dt, *, order=2, axis_order="xyz", e_layout='centring = "edge"',
                  b_layout=None):
    if b_layout is None:
        b_layout = f'centring = "face"\ntime_offset = {dt / 2!r}'
    path.write_text(MAPPING.format(axis_order=axis_order, order=order, h=h, e_layout=e_layout,
                                   b_layout=b_layout))
    return path


@pytest.mark.parametrize("order", [2, 4])
def test_design_order_through_the_mapping(tmp_path, order):
    """Vertex values at level 2 (of 5) against the exact wave: error falls as h^order (space
    and time offsets together; dt = 0.4 h). Band: as in test_staggering (|observed - p| <=
    0.35, next term relatively O(k h) <= 25 % on the coarsest grid, k h <= 0.3 here)."""
    errors = []
    for n in (9, 17, 33):
        h, dt = write_staggered(tmp_path / f"s{n}.h5", n)
        mapping = write_mapping(tmp_path / f"s{n}.toml", h, dt, order=order)
        with open_snapshot(tmp_path / f"s{n}.h5", mapping) as snap:
            level = snap.level(2)
            exact = _wave(level.grid, level.time)
            errors.append(max(np.abs(level.read(q) - getattr(exact, a)).max()
                              for q, a in (("electric_field", "E"), ("magnetic_field", "B"))))
    errors = np.array(errors) / np.abs(exact.E).max()
    observed = np.log2(errors[:-1] / errors[1:])
    assert errors[-1] > 1e-12
    assert abs(observed[-1] - order) <= 0.35, (errors, observed)


def test_equals_an_independent_route_and_slabs_change_nothing(tmp_path):
    """The mapping's vertex values equal the in-memory route: each component through
    ``to_vertices`` (space) and the average of B at t - dt/2 and t + dt/2 (order 2 in time:
    weights 1/2, 1/2, common practice), to round-off; and a read in slabs of 1 to 3 planes
    (each with its own halo) equals the whole read bit for bit."""
    h, dt = write_staggered(tmp_path / "s.h5", 10)
    mapping = write_mapping(tmp_path / "s.toml", h, dt)
    with open_snapshot(tmp_path / "s.h5", mapping) as snap, h5py.File(tmp_path / "s.h5") as f:
        level = snap.level(2)
        n = level.storage_shape[0]
        for q, name in (("electric_field", "E"), ("magnetic_field", "B")):
            whole = level.read(q)
            for rows in (1, 2, 3):
                pieces = [level.read(q, a, min(a + rows, n)) for a in range(0, n, rows)]
                assert np.array_equal(np.concatenate(pieces, axis=1), whole)
            centring = "edge" if name == "E" else "face"
            for c, offset in enumerate(centring_offsets(centring, 3)):
                def at(k):
                    return to_vertices(f[f"sim/out{k}/{name}{'xyz'[c]}"][()], offset,
                                       points=level.grid.shape)
                want = at(2) if name == "E" else 0.5 * (at(1) + at(2))
                assert np.abs(whole[c] - want).max() <= 8 * np.finfo(float).eps * np.abs(want).max()


def test_zyx_storage_with_offsets_in_storage_order(tmp_path):
    """The same data stored with axes (z, y, x): named centrings are turned into storage order
    by the reader; explicit offsets are given in storage order (the mapping's one rule for grid
    triples). Both give the values of the xyz file."""
    h, dt = write_staggered(tmp_path / "a.h5", 9)
    write_staggered(tmp_path / "b.h5", 9, axis_order="zyx")
    xyz = read_level(tmp_path / "a.h5", 2, write_mapping(tmp_path / "a.toml", h, dt))
    named = read_level(tmp_path / "b.h5", 2, write_mapping(tmp_path / "b.toml", h, dt,
                                                          axis_order="zyx"))
    explicit = write_mapping(tmp_path / "c.toml", h, dt, axis_order="zyx",
                             e_layout="offsets = [[0, 0, 0.5], [0, 0.5, 0], [0.5, 0, 0]]")
    given = read_level(tmp_path / "b.h5", 2, explicit)
    for q in ("electric_field", "magnetic_field"):
        assert np.allclose(named[q], xyz[q], rtol=0, atol=1e-13)
        assert np.allclose(given[q], xyz[q], rtol=0, atol=1e-13)


def test_pipelines_read_staggered_files_in_slabs(tmp_path):
    """compute_sources and integrate_snapshot stream staggered files slab by slab with the
    same numbers as one slab (the source reads its halo; the kernel is pointwise)."""
    h, dt = write_staggered(tmp_path / "s.h5", 10, dtype=np.float32)
    mapping = write_mapping(tmp_path / "s.toml", h, dt)
    compute_sources(tmp_path / "s.h5", tmp_path / "one.h5", mapping=mapping)
    compute_sources(tmp_path / "s.h5", tmp_path / "many.h5", mapping=mapping, rows=2)
    one, many = read_level(tmp_path / "one.h5", 3), read_level(tmp_path / "many.h5", 3)
    # Inputs are equal bit for bit (test above); the source kernel may run a different loop
    # shape on a slab (flat vs column driver): conftest's bound for that.
    assert_same_arithmetic(one["energy_density"], many["energy_density"])
    whole = integrate_snapshot(tmp_path / "s.h5", mapping=mapping, levels=[1])[0]
    sliced = integrate_snapshot(tmp_path / "s.h5", mapping=mapping, levels=[1], rows=3)[0]
    assert np.isclose(whole.energy, sliced.energy, rtol=1e-12)


BAD_KEYS = [
    ('centring = "corner"', "[quantities.electric_field] centring must be one of"),
    ('centring = "edge"\noffsets = [[0.5, 0, 0], [0, 0.5, 0], [0, 0, 0.5]]',
     "at most one of 'centring' or 'offsets'"),
    ("offsets = [[0.5, 0, 0], [0, 0.5, 0]]", "offsets must be a list of 3 triple"),
    ("offsets = [[0.25, 0, 0], [0, 0.5, 0], [0, 0, 0.5]]",
     "each offset must be 0 or 0.5 (units of the spacing), found 0.25"),
    ('time_offset = "half"', "time_offset must be a finite number, found 'half'"),
    ('centring = "edge"\nstagger = 1', "unknown key(s) ['stagger']"),
]


@pytest.mark.parametrize("layout,words", BAD_KEYS)
def test_bad_staggering_keys_name_file_key_and_value(tmp_path, layout, words):
    mapping = write_mapping(tmp_path / "m.toml", 0.1, 0.04, e_layout=layout)
    with pytest.raises(MappingError) as error:
        load_mapping(mapping)
    assert str(mapping) in str(error.value) and words in str(error.value)


@pytest.mark.parametrize("text,words", [
    ("interpolation_order = 3", "interpolation_order must be one of [2, 4], found 3"),
    ('time = { attribute = "t", scale = -2.0 }', "time scale must be positive"),
    ('time = { attribute = "t", scale = "c" }', "time scale must be a finite number"),
    ('[quantities.lapse]\ndataset = "a"\ncentring = "face"', "applies to vectors"),
    ('[quantities.valid_mask]\ndataset = "m"\ncentring = "cell"', "cannot be interpolated"),
])
def test_bad_order_time_scale_and_misplaced_centring(tmp_path, text, words):
    body = write_mapping(tmp_path / "m.toml", 0.1, 0.04).read_text()
    if text.startswith("interpolation_order"):
        body = body.replace("interpolation_order = 2", text)
    elif text.startswith("time"):
        body = body.replace('time = { attribute = "t" }', text)
    else:
        body += text + "\n"
    (tmp_path / "m.toml").write_text(body)
    with pytest.raises(MappingError, match=None) as error:
        load_mapping(tmp_path / "m.toml")
    assert words in str(error.value)


def test_declared_offsets_that_contradict_the_vertex_count(tmp_path):
    """E declared face-centred while stored on (trimmed) edges: E^x then claims offset 0 along x
    with 8 points where the other vertex data have 9. The message names the key, the
    component's dataset, the expected and the found length."""
    h, dt = write_staggered(tmp_path / "s.h5", 9)
    mapping = write_mapping(tmp_path / "m.toml", h, dt, e_layout='centring = "face"')
    with pytest.raises(MappingError) as error:
        open_snapshot(tmp_path / "s.h5", mapping)
    text = str(error.value)
    assert "[quantities.electric_field] centring (component 0, /sim/out0/Ex) has shape (8, 8, 10)" in text
    assert "expected 9 points along that axis" in text


def test_stored_length_that_does_not_fit_its_offsets(tmp_path):
    """E^y declared at offset 1/2 along y (explicit offsets) but stored with 2 points too few:
    the message names the key, the dataset, the expected and the found shape."""
    h, dt = write_staggered(tmp_path / "s.h5", 9)
    with h5py.File(tmp_path / "s.h5", "a") as f:
        data = f["sim/out0/Ey"][()]
        del f["sim/out0/Ey"]
        f["sim/out0/Ey"] = data[:, :-1]
    mapping = write_mapping(tmp_path / "m.toml", h, dt,
                            e_layout="offsets = [[0.5, 0, 0], [0, 0.5, 0], [0, 0, 0.5]]")
    with pytest.raises(MappingError) as error:
        open_snapshot(tmp_path / "s.h5", mapping)
    text = str(error.value)
    assert "[quantities.electric_field] offsets puts electric_field component y" in text
    assert "/sim/out0/Ey" in text
    assert "expected a stored shape (9, 7 or 8, 10), found (9, 6, 10)" in text


def test_time_offset_needs_two_levels(tmp_path):
    h, dt = write_staggered(tmp_path / "s.h5", 9, levels=1)
    with pytest.raises(MappingError, match="time_offset .*at least 2 time levels"):
        open_snapshot(tmp_path / "s.h5", write_mapping(tmp_path / "m.toml", h, dt))


def test_undeclared_staggering_is_named_from_the_command_line(tmp_path):
    """The issue's trap: staggered arrays read through a mapping without offsets. Shapes that
    differ by one point say so, and the command line exits 3 with one line, writing nothing."""
    h, dt = write_staggered(tmp_path / "s.h5", 9)
    mapping = write_mapping(tmp_path / "m.toml", h, dt, e_layout="", b_layout="")
    with pytest.raises(SnapshotError, match="looks like a staggered layout"):
        open_snapshot(tmp_path / "s.h5", mapping)
    before = sorted(p.name for p in tmp_path.iterdir())
    code = main(["sources", str(tmp_path / "s.h5"), "-o", str(tmp_path / "out.h5"), "--mapping",
                 str(mapping), "--quiet"])
    assert code == EXIT_BAD_INPUT
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    code, out, err = run_cli("balance", tmp_path / "s.h5", "--mapping", mapping)
    assert code == EXIT_BAD_INPUT and "looks like a staggered layout" in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_padded_unstaggered_quantity_mixed_with_staggered_ones(tmp_path):
    """A quantity on the vertices (a lapse, read through the ordinary source) beside staggered
    fields sets the vertex count; a lapse of the wrong length is named."""
    h, dt = write_staggered(tmp_path / "s.h5", 9)
    with h5py.File(tmp_path / "s.h5", "a") as f:
        for k in range(5):
            f[f"sim/out{k}/alpha"] = np.ones((9, 8, 10))
    body = write_mapping(tmp_path / "m.toml", h, dt).read_text()
    (tmp_path / "m.toml").write_text(body + '[quantities.lapse]\ndataset = "alpha"\n')
    with open_snapshot(tmp_path / "s.h5", tmp_path / "m.toml") as snap:
        assert snap.grid.shape == (9, 8, 10)
    with h5py.File(tmp_path / "s.h5", "a") as f:
        del f["sim/out0/alpha"]
        f["sim/out0/alpha"] = np.ones((9, 9, 10))
    with pytest.raises(MappingError, match="differ in length"):
        open_snapshot(tmp_path / "s.h5", tmp_path / "m.toml")


@pytest.mark.parametrize("axis", ["first", "last"])
def test_stacked_dataset_with_a_component_axis(tmp_path, axis):
    """B (padded: every component n values along every axis) stored as one dataset with the
    component axis first or last reads as the three datasets do."""
    h, dt = write_staggered(tmp_path / "s.h5", 9)
    with h5py.File(tmp_path / "s.h5", "a") as f:
        for k in range(5):
            g = f[f"sim/out{k}"]
            stacked = np.stack([g[f"B{a}"][()] for a in "xyz"])
            g["B"] = stacked if axis == "first" else np.moveaxis(stacked, 0, -1)
    want = read_level(tmp_path / "s.h5", 2, write_mapping(tmp_path / "a.toml", h, dt))
    b_layout = (f'dataset = "B"\ncomponent_axis = "{axis}"\ncentring = "face"\n'
                f"time_offset = {dt / 2!r}")
    body = write_mapping(tmp_path / "b.toml", h, dt, b_layout=b_layout).read_text()
    (tmp_path / "b.toml").write_text(body.replace(
        'components = ["Bx", "By", "Bz"]\ndataset', 'dataset'))
    got = read_level(tmp_path / "s.h5", 2, tmp_path / "b.toml")
    assert np.array_equal(got["magnetic_field"], want["magnetic_field"])
