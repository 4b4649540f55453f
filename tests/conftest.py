"""Shared fixtures: seeded random generators and random curved 3+1 data.

Kernels compile once per signature and are cached on disk (``cache=True``), so the suite pays
for compilation only on its first run on a machine; tests reuse a few dtypes and layouts.
"""

import numpy as np
import pytest

#: Tests that call kernels in many signatures (the compile command) or in fresh processes that
#: each compile what is not yet on disk (MPI ranks): run last, when the other tests have put most
#: of those kernels into Numba's disk cache, so that a cold run does not compile them twice at
#: once in two workers. Order only; every test still runs.
RUN_LAST = ("tests/test_compile_notice.py::test_compile_command_calls_every_common_signature",
            "tests/test_patches_mpi.py::")


def pytest_collection_modifyitems(config, items):
    late = [item for item in items if item.nodeid.startswith(RUN_LAST)]
    if late:
        items[:] = [item for item in items if not item.nodeid.startswith(RUN_LAST)] + late


@pytest.fixture
def rng():
    return np.random.default_rng(20261202)


def random_curved_data(rng, grid, dtype=np.float64):
    """alpha > 0, beta, positive-definite gamma (packed), E^i, B^i of order one on ``grid``.

    gamma = A A^T with A = I + 0.3 * noise is positive definite wherever A is regular, with a
    condition number of about 6 at the median point, but not bounded: A comes close to
    singular at a few points in a thousand (on a 23 x 19 x 21 grid: 72 points above 1e3, the
    largest 2e6), where any route through an inverse loses that many digits. Tests that compare
    with an inverting reference restrict themselves to well-conditioned points or to small
    grids. With alpha > 0 and gamma positive definite the 4-metric is Lorentzian for any shift.
    """
    A = np.eye(3)[:, :, None] + 0.3 * rng.standard_normal((3, 3, int(np.prod(grid))))
    full = np.einsum("ikn,jkn->ijn", A, A).reshape((3, 3) + tuple(grid))
    gamma = np.stack([full[0, 0], full[0, 1], full[0, 2], full[1, 1], full[1, 2], full[2, 2]])
    alpha = rng.uniform(0.5, 2.0, grid)
    beta = 0.5 * rng.standard_normal((3,) + tuple(grid))
    E = rng.standard_normal((3,) + tuple(grid))
    B = rng.standard_normal((3,) + tuple(grid))
    return tuple(a.astype(dtype) for a in (alpha, beta, gamma, E, B))


def unpack_symmetric(packed):
    """(6, ...) packed (xx, xy, xz, yy, yz, zz) -> full (3, 3, ...)."""
    idx = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])
    return packed[idx]


def unpack_symmetric4(packed):
    """(10, ...) packed (tt, tx, ty, tz, xx, xy, xz, yy, yz, zz) -> full (4, 4, ...)."""
    idx = np.array([[0, 1, 2, 3], [1, 4, 5, 6], [2, 5, 7, 8], [3, 6, 8, 9]])
    return packed[idx]


def assert_same_arithmetic(a, b):
    """Equal up to the roundings that a different loop shape may change.

    The flat driver (contiguous data) and the column driver (strided views, component-last
    data), or two kernels that share a point function, inline the same point code into
    differently shaped loops. The fast-math flag
    "contract" lets LLVM fuse a multiply and an add into one FMA in one loop and not in the
    other, which moves a result by up to one rounding per fused operation: each output of the
    point code takes at most ~10 multiply-adds, each rounding at most eps of the largest term,
    so 16 eps of the array's largest value bounds the difference (measured: 1.7 eps). A wrong
    index or component order gives differences of order one.
    """
    scale = np.max(np.abs(b)) if np.size(b) else 0.0
    np.testing.assert_allclose(a, b, rtol=0, atol=16 * np.finfo(b.dtype).eps * scale)


def assert_computed_in_float32(pairs, roundings=200):
    """``pairs`` of (float32 result, float64 result of the same float32-rounded input): every
    float32 result within ``roundings`` eps32 of its float64 result's largest value, and float32
    arithmetic visible somewhere, a difference beyond the half unit in the last place that
    float64 arithmetic rounded once to float32 cannot exceed (DEVELOPERS.md "Adding a kernel"
    item 2: constants in the data's dtype, or a float64 literal promotes the whole kernel)."""
    eps = np.finfo(np.float32).eps
    beyond_half_ulp = False
    for single, double in pairs:
        assert single.dtype == np.float32
        np.testing.assert_allclose(single, double, rtol=0,
                                   atol=roundings * eps * np.abs(double).max())
        finite = np.isfinite(single) & (single != 0)
        ulps = np.abs(single - double)[finite] / np.spacing(np.abs(single[finite]))
        beyond_half_ulp |= bool(ulps.size and ulps.max() > 0.5)
    assert beyond_half_ulp, "float32 input was computed in float64"
