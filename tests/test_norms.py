"""The norms of residual fields over a point mask (``emsource.constraints.norm_partial``, kernel
``emsource.kernels.norms``) against the plain NumPy route: boolean indexing, then sums in long
double (``NormPartial.of_points``)."""

import numpy as np
import pytest
from scipy import ndimage

from emsource.constraints import adm_constraints, norm_partial
from emsource.reductions import NormPartial


def _reference(H, M, Hs, Ms, interior):
    residual = np.concatenate([H[interior][None], M[:, interior]])
    scale = np.concatenate([Hs[interior][None], Ms[:, interior]])
    return NormPartial.of_points(residual, scale)


def _fields(rng, grid):
    H = rng.standard_normal(grid)
    M = rng.standard_normal((3,) + grid) * np.array([1.0, 1e-3, 1e3])[:, None, None, None]
    Hs = np.abs(H) + rng.uniform(0, 1, grid)
    Ms = np.abs(M) + rng.uniform(0, 1, (3,) + grid)
    interior = rng.uniform(size=grid) < 0.7
    for a in (H, M, Hs, Ms):  # outside the mask the diagnostics store NaN: never summed
        a[..., ~interior] = np.nan
    return H, M, Hs, Ms, interior


def _assert_same(got, want, nz):
    # Each column is summed in float64 (n_z terms of one sign: relative error <= (n_z - 1) eps,
    # Higham, Accuracy and Stability of Numerical Algorithms, section 4.2, from memory), the
    # reference in long double; the maxima are the same values picked in either order.
    assert got.count == want.count
    eps = np.finfo(np.float64).eps
    for name in ("square_sum", "scale_square_sum"):
        np.testing.assert_allclose(getattr(got, name), getattr(want, name), rtol=nz * eps, atol=0)
    for name in ("maximum", "scale_maximum"):
        np.testing.assert_array_equal(getattr(got, name), getattr(want, name))


@pytest.mark.parametrize("grid", [(7, 5, 9), (1, 1, 1), (12, 3, 40)])
def test_norms_equal_the_numpy_route(rng, grid):
    fields = _fields(rng, grid)
    _assert_same(norm_partial(*fields), _reference(*fields), grid[2])


def test_strided_and_transposed_inputs_give_the_same_norms(rng):
    H, M, Hs, Ms, interior = _fields(rng, (10, 11, 12))
    want = _reference(H, M, Hs, Ms, interior)
    # The same values stored z, y, x and read through transposed views (layout "A").
    stored = [np.ascontiguousarray(np.swapaxes(a, -1, -3)) for a in (H, M, Hs, Ms)]
    views = [np.swapaxes(a, -1, -3) for a in stored]
    _assert_same(norm_partial(*views, interior), want, 12)


def test_no_points_and_nan_and_inf_inside_the_mask(rng):
    H, M, Hs, Ms, interior = _fields(rng, (6, 6, 6))
    empty = norm_partial(H, M, Hs, Ms, np.zeros_like(interior))
    assert empty.count == 0 and np.isnan(empty.finalise(0).l2)
    point = tuple(np.argwhere(interior)[0])
    H = H.copy()
    M = M.copy()
    H[point] = np.nan  # np.max and np.sum propagate NaN: so must the kernel
    M[(1,) + point] = np.inf
    got, want = norm_partial(H, M, Hs, Ms, interior), _reference(H, M, Hs, Ms, interior)
    assert np.isnan(got.square_sum[0]) and np.isnan(got.maximum[0])
    assert np.isinf(got.square_sum[2]) and np.isinf(got.maximum[2])
    np.testing.assert_array_equal(got.maximum, want.maximum)
    np.testing.assert_array_equal(got.square_sum[[0, 2]], want.square_sum[[0, 2]])


def test_bad_shapes_are_named(rng):
    H, M, Hs, Ms, interior = _fields(rng, (4, 5, 6))
    with pytest.raises(ValueError, match=r"norm_partial: momentum must have shape \(3, 4, 5, 6\)"):
        norm_partial(H, M[:2], Hs, Ms, interior)
    with pytest.raises(ValueError, match="norm_partial: interior must be a 3-D bool array, "
                                         "found int64"):
        norm_partial(H, M, Hs, Ms, interior.astype(np.int64))


def test_constraint_norms_are_those_of_their_fields(rng):
    # The norms of adm_constraints (computed on first access) are those of its own fields,
    # through the NumPy route, and an all-valid grid's interior is the box r points in.
    from conftest import random_curved_data

    _, _, gamma, E, B = random_curved_data(rng, (9, 10, 11))
    K = 0.1 * rng.standard_normal(gamma.shape)
    res = adm_constraints(gamma, K, E, B, spacing=(0.1, 0.2, 0.3), order=4)
    box = np.zeros((9, 10, 11), bool)
    box[2:-2, 2:-2, 2:-2] = True
    np.testing.assert_array_equal(res.interior, box)
    # The box is what scipy's erosion of an all-valid grid gives (the route for other masks).
    structure = (np.indices((5, 5, 5)) - 2 == 0).any(axis=0)
    np.testing.assert_array_equal(
        box, ndimage.binary_erosion(np.ones(box.shape, bool), structure, border_value=0))
    _assert_same(res.norm_partial, _reference(res.hamiltonian, res.momentum,
                                              res.hamiltonian_scale, res.momentum_scale,
                                              res.interior), 11)
    assert res.hamiltonian_norms == res.norm_partial.finalise(0, zero_scale=np.nan)
