"""An edge-staggered vector potential read through a mapping (``centring = "edge"`` on
``[quantities.vector_potential]``): the mapping interpolates A_i to the vertices (order 2 or 4,
:mod:`emsource.staggering`) and then takes the collocated curl (order 2, 4 or 6,
:mod:`emsource.potential`). The error of B is O(h^min(interpolation order, curl order)): the
interpolation error of A_x is a smooth function times h^p (its form changes only along x, next
to the faces, where one-sided stencils take over) and the curl differentiates A_x only along y
and z, so no power of h is lost to a difference of the interpolation error.

Outside reference: the exact vacuum plane wave E = E0 e cos(k.x - omega t), B = k_hat x E
(J. D. Jackson, Classical Electrodynamics, 3rd ed., sec. 7.1) with its potential
A = (E0 / omega) sin(k.x - omega t) e (E = -d_t A, B = curl A; the same potential, shifted
by a quarter period, as in ``tests/test_potential.py``), sampled at the edge centres A_x at (i + 1/2, j, k), ...
"""

import h5py
import numpy as np
import pytest

from emsource import snapshot
from emsource.snapshot import MappingError

#: Oblique wave vector (unequal components: no cancellation between axes), amplitude, time.
K = np.array([1.1, -0.7, 0.5])
E0, T = 0.8, 0.37
#: Cells per axis at refinement 1 (unequal sides), spacing, origin.
CELLS, SPACING, ORIGIN = (10, 8, 9), 0.25, np.array([-0.4, 0.3, 0.1])

MAPPING = """mapping_version = 1
axis_order = "xyz"
units = "gaussian"
interpolation_order = {interpolation}

[time_levels]
pattern = "/level_{{index}}"
time = {{ per_index = 1.0 }}

[grid]
spacing = [{h!r}, {h!r}, {h!r}]
origin = [{o[0]!r}, {o[1]!r}, {o[2]!r}]

[quantities.spatial_metric]
identity = true

[quantities.electric_field]
dataset = "E"

[quantities.vector_potential]
components = ["ax", "ay", "az"]
centring = "edge"
curl_order = {curl}
"""


def polarisation():
    khat = K / np.linalg.norm(K)
    e = np.cross(khat, (0.3, 0.2, 1.0))
    return e / np.linalg.norm(e), khat


def exact(points):
    """E, A and B of the plane wave at points (3, ...) (module docstring)."""
    e, khat = polarisation()
    omega = np.linalg.norm(K)
    phase = np.tensordot(K, points, axes=1) - omega * T
    E = E0 * np.multiply.outer(e, np.cos(phase))
    A = (E0 / omega) * np.multiply.outer(e, np.sin(phase))
    B = np.cross(khat, E, axis=0)
    return E, A, B


def positions(shape, h, offset):
    axes = [ORIGIN[a] + (np.arange(n) + offset[a]) * h for a, n in enumerate(shape)]
    return np.array(np.meshgrid(*axes, indexing="ij"))


def write(directory, refinement, interpolation, curl):
    """File and mapping at a refinement: A_c on the edges along c (n - 1 values along c)."""
    shape = tuple(n * refinement + 1 for n in CELLS)  # vertices
    h = SPACING / refinement
    path = directory / f"edge_{refinement}_{interpolation}_{curl}.h5"
    with h5py.File(path, "w") as f:
        g = f.create_group("level_0")
        g["E"] = exact(positions(shape, h, (0, 0, 0)))[0]
        for c, name in enumerate(("ax", "ay", "az")):
            offset = [0.0, 0.0, 0.0]
            offset[c] = 0.5
            stored = tuple(n - 1 if a == c else n for a, n in enumerate(shape))
            g[name] = exact(positions(stored, h, offset))[1][c]
    mapping = directory / f"edge_{refinement}_{interpolation}_{curl}.toml"
    mapping.write_text(MAPPING.format(interpolation=interpolation, curl=curl, h=h,
                                      o=[float(v) for v in ORIGIN]))
    return path, mapping, shape, h


def max_error(directory, refinement, interpolation, curl):
    path, mapping, shape, h = write(directory, refinement, interpolation, curl)
    with snapshot.open_snapshot(path, mapping) as snap:
        level = snap.levels[0]
        assert level.grid.shape == shape  # the vertex count inferred from the edge shapes
        B = level.read("magnetic_field")
        valid = level.read("valid_mask").astype(bool)
    # the boundary layer of curl_order / 2 points has no centred stencil: marked invalid
    r = curl // 2
    inner = np.zeros(shape, bool)
    inner[r:-r, r:-r, r:-r] = True
    assert np.array_equal(valid, inner)
    reference = exact(positions(shape, h, (0, 0, 0)))[2]
    error = np.abs(B[:, valid] - reference[:, valid]).max()
    return error


@pytest.mark.parametrize("interpolation, curl, design", [(2, 2, 2), (4, 4, 4), (2, 4, 2)])
def test_edge_potential_converges_at_the_smaller_order(tmp_path, interpolation, curl, design):
    errors = [max_error(tmp_path, r, interpolation, curl) for r in (1, 2, 4)]
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    # above round-off: |B| ~ E0 = 0.8, float64 differences of A ~ 1e-16 E0 / h ~ 1e-14
    assert errors[-1] > 1e-9, errors
    # measured (12.9.2026): 1.99, 2.00 (2, 2); 3.99, 4.00 (4, 4); 2.02, 2.01 (2, 4): within 0.15
    # of the design order (the truncation error's next term is h^2 smaller)
    assert np.all(np.abs(orders - design) < 0.15), (errors, orders)


def test_stored_field_and_potential_together_are_refused(tmp_path):
    """A face-centred stored B beside a (collocated or edge) A: which B is meant is unclear."""
    path, mapping, _, _ = write(tmp_path, 1, 2, 2)
    with h5py.File(path, "a") as f:
        f["level_0/B"] = np.zeros((3, 11, 9, 10))
    text = mapping.read_text() + ('\n[quantities.magnetic_field]\ndataset = "B"\n'
                                  'centring = "face"\n')
    for variant in (text, text.replace('centring = "edge"\n', "", 1)):
        mapping.write_text(variant)
        with pytest.raises(MappingError, match=r"names both magnetic_field and vector_potential"):
            with snapshot.open_snapshot(path, mapping) as snap:
                snap.levels[0].read("magnetic_field")
