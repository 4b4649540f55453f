"""A stored vector potential read through a mapping: B^i derived slab by slab.

Independent route: the in-memory curl (:func:`emsource.potential.magnetic_field_from_potential`,
checked against exact curls in ``tests/test_potential.py``) written to a native file with the
interior as its valid_mask; the sources of both files must agree, whatever the slab size and the
storage order.
"""

import h5py
import numpy as np
import pytest

from emsource import snapshot
from emsource.commands import EXIT_BAD_INPUT
from emsource.grid import UniformGrid
from emsource.physical_units import physical_scale, to_code_units
from emsource.potential import curl_interior, magnetic_field_from_potential
from emsource.snapshot import MappingError
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import run_cli

GRID = UniformGrid((11, 9, 10), (-0.3, 0.2, 0.1), (0.1, 0.12, 0.09))

MAPPING = """mapping_version = 1
axis_order = "zyx"
units = "gaussian"

[time_levels]
pattern = "/steps/{{index}}"
time = {{ per_index = 0.5 }}

[grid]
spacing = [0.09, 0.12, 0.1]
origin = [0.1, 0.2, -0.3]

[quantities.electric_field]
dataset = "E"

[quantities.vector_potential]
dataset = "A"
curl_order = {order}
unit = "G cm"

[quantities.spatial_metric]
dataset = "metric"

[physical_units]
code_scale = {{ value = 1.4, unit = "solar_mass" }}
"""

SCALE = physical_scale(1.4)


def fields(rng):
    x, y, z = GRID.coordinates()
    A = np.stack([np.sin(2 * y) * z, np.cos(x + z), x * y - np.sin(z)])
    psi4 = (1 + 0.1 * np.sin(x) * np.cos(y + z)) ** 4
    gamma = np.stack([psi4 * 1.1, 0.1 * psi4, 0 * psi4, psi4, 0.05 * psi4, 0.9 * psi4])
    E = rng.uniform(-1, 1, (3,) + GRID.shape)
    return A, gamma, E


def storage(a):
    """(x, y, z)-ordered component-first array in "zyx" storage."""
    return np.ascontiguousarray(a.transpose((0, 3, 2, 1)) if a.ndim == 4 else a.T)


def write_files(tmp_path, rng, order, valid=None):
    A, gamma, E = fields(rng)
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        g = f.create_group("steps/0")
        g["A"] = storage(A) / to_code_units(1.0, "G cm", SCALE)  # stored in gauss centimetres
        g["metric"] = storage(gamma)
        g["E"] = storage(E)
        if valid is not None:
            g["hole"] = storage(valid.astype(np.uint8))
    mapping = tmp_path / "foreign.toml"
    text = MAPPING.format(order=order)
    if valid is not None:
        text += '\n[quantities.valid_mask]\ndataset = "hole"\n'
    mapping.write_text(text)
    interior = curl_interior(GRID.shape, order, valid)
    A_read = A.copy()
    if valid is not None:  # the independent route: zero A and flat metric at excised points
        A_read[:, ~valid] = 0
        gamma = gamma.copy()
        for c, v in enumerate((1, 0, 0, 1, 0, 1)):
            gamma[c][~valid] = v
    B = magnetic_field_from_potential(gamma, A_read, GRID.spacing, order=order)
    B[:, ~interior] = 0.0  # excised in the native file: any value
    native = tmp_path / "native.h5"
    snapshot.write_snapshot(native, [{"spatial_metric": gamma, "electric_field": E,
                                      "magnetic_field": B, "valid_mask": interior.astype(np.uint8),
                                      "time": 0.0, "grid": GRID}])
    return foreign, mapping, native, interior


@pytest.mark.parametrize("order", [2, 4])
def test_sources_from_a_stored_potential(tmp_path, rng, order):
    foreign, mapping, native, interior = write_files(tmp_path, rng, order)
    with snapshot.open_snapshot(foreign, mapping) as snap:
        level = snap.levels[0]
        assert level.grid == GRID
        B = level.read("magnetic_field")
        mask = level.read("valid_mask")
        assert np.array_equal(mask.astype(bool), interior)
        assert np.isnan(B[:, ~interior]).all()
        assert "/steps/0/A" in level.dataset_paths("magnetic_field")
    reference = snapshot.read_level(native)["magnetic_field"]
    # G cm -> code and back: a product of two roundings (4 eps of |A| / h, bound 1e-13 of max B)
    assert np.allclose(B[:, interior], reference[:, interior], rtol=0,
                       atol=1e-13 * np.abs(reference).max())
    whole, slabbed, ref = tmp_path / "w.h5", tmp_path / "s.h5", tmp_path / "r.h5"
    compute_sources(foreign, whole, mapping=mapping)
    compute_sources(foreign, slabbed, mapping=mapping, rows=2)  # slabs of 2 planes, halo order/2
    compute_sources(native, ref)
    a, b, c = (snapshot.read_level(p) for p in (whole, slabbed, ref))
    for q in ("energy_density", "momentum_density", "spatial_stress"):
        assert np.array_equal(a[q], b[q], equal_nan=True), q  # same arithmetic per point
        assert np.array_equal(np.isnan(a[q]), np.isnan(c[q]))
        assert np.allclose(a[q], c[q], rtol=1e-12, atol=1e-14, equal_nan=True), q
    assert np.array_equal(a["valid_mask"], interior.astype(np.uint8))


def test_stored_valid_mask_is_eroded_by_the_stencil(tmp_path, rng):
    x, y, z = GRID.coordinates()
    valid = (x - 0.2) ** 2 + (y - 0.7) ** 2 + (z - 0.5) ** 2 > 0.15**2
    assert (~valid).sum() > 5
    foreign, mapping, native, interior = write_files(tmp_path, rng, 4, valid)
    with h5py.File(foreign, "a") as f:  # anything at excised points: they are never used
        data = f["steps/0/A"][...]
        data[:, ~storage(valid[None])[0]] = np.nan
        f["steps/0/A"][...] = data
    with snapshot.open_snapshot(foreign, mapping) as snap:
        mask = snap.levels[0].read("valid_mask").astype(bool)
    assert np.array_equal(mask, interior)
    assert (~interior & valid).sum() > (~curl_interior(GRID.shape, 4)).sum()  # eroded around the hole
    out, ref = tmp_path / "o.h5", tmp_path / "r.h5"
    compute_sources(foreign, out, mapping=mapping, rows=3)
    compute_sources(native, ref)
    a, c = snapshot.read_level(out), snapshot.read_level(ref)
    assert np.allclose(a["energy_density"], c["energy_density"], rtol=1e-12, atol=1e-14,
                       equal_nan=True)


@pytest.mark.parametrize("edit, error, message", [
    (("curl_order = 4", "curl_order = 3"), MappingError,
     r"\[quantities.vector_potential\] curl_order must be one of \[2, 4, 6\], found 3"),
    (("unit = \"G cm\"", "unit = \"T\""), MappingError,
     r"\[quantities.vector_potential\] unit must be one of \['T m', 'G cm'\], found 'T'"),
    (("[quantities.electric_field]", '[quantities.magnetic_field]\ndataset = "B"\n'
                                     "[quantities.electric_field]"), MappingError,
     r"names both magnetic_field and vector_potential"),
    (('[quantities.spatial_metric]\ndataset = "metric"', ""), MappingError,
     r"vector_potential needs the spatial_metric"),
    (("curl_order = 4", "curl_order = 6"), MappingError,
     r"curl_order = 6 on the grid \(6, 9, 10\): vector_potential: axis 0 has 6 points; order 6 "
     r"needs more than 6"),
])
def test_bad_potential_keys(tmp_path, rng, edit, error, message):
    foreign, mapping, _, _ = write_files(tmp_path, rng, 4)
    text = mapping.read_text()
    assert edit[0] in text
    mapping.write_text(text.replace(edit[0], edit[1]))
    if "curl_order = 6" in edit[1]:  # a grid too small for order 6: 6 points along x
        with h5py.File(foreign, "a") as f:
            for name in ("A", "metric", "E"):
                data = f[f"steps/0/{name}"][..., :6]
                del f[f"steps/0/{name}"]
                f[f"steps/0/{name}"] = data
    with pytest.raises(error, match=message):
        with snapshot.open_snapshot(foreign, mapping) as snap:
            snap.levels[0].read("magnetic_field")


def test_bad_potential_from_the_command_line(tmp_path, rng):
    foreign, mapping, _, _ = write_files(tmp_path, rng, 4)
    mapping.write_text(mapping.read_text().replace("curl_order = 4", "curl_order = 5"))
    before = sorted(p.name for p in tmp_path.iterdir())
    code, out, err = run_cli("sources", foreign, "--mapping", mapping, "-o", tmp_path / "o.h5")
    assert code == EXIT_BAD_INPUT and out == "" and "Traceback" not in err
    assert err.count("\n") == 1 and "curl_order must be one of [2, 4, 6], found 5" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == before
