"""The vectorised ideal-MHD drivers (one loop over spans per input form and velocity kind,
``kernels/ideal_mhd.py: IDEAL_MHD``, serving contiguous data as strips of a line and ghost-zone
windows as columns) against the column loop ``ideal_mhd_grid`` they replace on those layouts.

The column loop was checked against the brute-force 4D route in ``tests/test_ideal_mhd.py``
(and still is, for strided layouts); the drivers and the column loop inline one point function,
``_ideal_mhd_values``, so a wrong row, step, offset or constant gives errors of order one while
another fusion of multiply-adds moves a result by a few roundings: the bound of
``conftest.assert_same_arithmetic`` (16 eps of the largest value) for B^i, 16 eps kappa for the
forms that raise an index or divide by sqrt(gamma) through the pivots of gamma = L D L^T (derived
in ``tests/test_conformal_strips.py``), both widened for the Lorentz factor (``_assert_close``).
The counts of bad points are compared with the points
spoiled here.

Compile time: 6 drivers (3 forms x 2 kinds), about 3 s each, all in float64 here; float32 for two
of them.
"""

import numpy as np
import pytest

import emsource
from emsource import GridPointError
from emsource.ideal_mhd import IdealMhdFields, ideal_mhd_fields
from emsource.kernels import ideal_mhd as kernels
from emsource.kernels._compile import call_sharing_layouts
from conftest import assert_computed_in_float32, random_curved_data, unpack_symmetric

FORMS = ("upper", "lower", "densitized")
KINDS = ("eulerian", "four_velocity")
PAIRS = [(f, k) for f in FORMS for k in KINDS]
FULL = (13, 14, 15)
INNER = (slice(2, -2),) * 3


def _state(rng, grid, field_index, kind, dtype=np.float64):
    """alpha, beta (|beta|_gamma < alpha), gamma, B in the form ``field_index``, a velocity of
    kind ``kind`` (speeds 0.1-0.95), and the condition number of gamma."""
    alpha, beta, gamma, _, B = random_curved_data(rng, grid)
    alpha = alpha + 0.5  # in [1, 2.5] and |beta|_gamma < 1: u^i fixes u^t (four_velocity)
    beta = 0.2 * beta
    full = np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))
    direction = rng.standard_normal((3,) + grid)
    norm = np.sqrt(np.einsum("...ij,i...,j...->...", full, direction, direction))
    v = rng.uniform(0.1, 0.95, grid) * direction / norm
    if kind == "four_velocity":  # u^i = W (v^i - beta^i / alpha)
        W = 1 / np.sqrt(1 - np.einsum("...ij,i...,j...->...", full, v, v))
        v = W * (v - beta / alpha)
    if field_index == "lower":
        B = np.moveaxis(np.einsum("...ij,j...->...i", full, B), -1, 0)
    elif field_index == "densitized":
        B = np.sqrt(np.linalg.det(full)) * B
    eigenvalues = np.linalg.eigvalsh(full)
    kappa = float(np.max(eigenvalues[..., -1] / eigenvalues[..., 0]))
    return tuple(a.astype(dtype) for a in (alpha, beta, gamma, B, v)), kappa


def _x_fastest(a):
    """``a`` stored with x fastest: no unit stride along z, the public call's column loop."""
    axes = (0, 3, 2, 1) if a.ndim == 4 else (2, 1, 0)
    return np.ascontiguousarray(a.transpose(axes)).transpose(axes)


def _windows(arrays):
    """Each array as the interior of a larger one whose ghost zones hold other values."""
    windows = []
    for a in arrays:
        big = np.full(a.shape[:-3] + FULL, 0.5, a.dtype)
        big[(Ellipsis,) + INNER] = a
        windows.append(big[(Ellipsis,) + INNER])
    return windows


def _lorentz2(alpha, reference):
    """The largest W^2 = (alpha u^t)^2 of a result."""
    return float(np.max((alpha.astype(float) * reference.u[0]) ** 2))


def _assert_close(got, reference, field_index, kappa, alpha):
    """``got`` equals the column loop's ``reference`` up to the roundings another loop shape may
    change. ``conftest.assert_same_arithmetic`` bounds those of the point code by 16 eps of the
    largest value; the Lorentz factor W = 1 / sqrt(1 - v_i v^i) adds the roundings of v_i v^i
    (about 10: six products and adds in v_i, three more in the sum), each moving 1 - v_i v^i,
    and so W, by eps relative to W^2 (speeds up to 0.95 here: W^2 up to ~10): 16 + 10 W^2
    eps in all, bounded by 24 (1 + W^2) eps with a margin for the products W enters (measured:
    167 eps of the largest value at W^2 = 10.3, against 271 allowed); times kappa for the
    forms that go through the pivots of gamma (B_i, sqrt(gamma) B^i)."""
    factor = (1.0 + _lorentz2(alpha, reference)) * (1.0 if field_index == "upper" else kappa)
    for a, b in zip(got, reference):
        np.testing.assert_allclose(
            a, b, rtol=0, atol=24 * factor * np.finfo(b.dtype).eps * np.max(np.abs(b)))


@pytest.mark.parametrize("field_index, kind", PAIRS)
def test_line_and_window_routes_equal_the_column_loop(rng, field_index, kind):
    grid = tuple(n - 4 for n in FULL)
    inputs, kappa = _state(rng, grid, field_index, kind)
    options = dict(field_index=field_index, velocity_kind=kind)
    strided = list(inputs)
    strided[3] = _x_fastest(strided[3])
    assert emsource._arguments.unit_stride_spans(
        emsource._arguments.three_axis_views(strided, grid)) is None
    reference = ideal_mhd_fields(*strided, **options)
    line = ideal_mhd_fields(*inputs, **options)
    windows = _windows(inputs)
    windowed = ideal_mhd_fields(*windows, **options)
    out = IdealMhdFields(*_windows([np.zeros_like(a) for a in reference]))
    into = ideal_mhd_fields(*windows, **options, out=out)
    assert all(a is b for a, b in zip(into, out))
    for got in (line, windowed, into):
        _assert_close(got, reference, field_index, kappa, inputs[0])
    for a, b in zip(into, windowed):  # the same driver, the same loop: the same bits
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("field_index, kind", [("upper", "eulerian"), ("lower", "four_velocity")])
def test_float32_drivers(rng, field_index, kind):
    """float32 computed in float32 on both routes: within 400 kappa / 3 eps32 of float64 on the
    same rounded input (tests/test_ideal_mhd.py derives 400 for B^i; each rounding is amplified
    by at most kappa where an index is raised or sqrt(gamma) divided out), and as the float32
    column loop (``_assert_close``)."""
    grid = tuple(n - 4 for n in FULL)
    inputs32, kappa = _state(rng, grid, field_index, kind, np.float32)
    options = dict(field_index=field_index, velocity_kind=kind)
    double = ideal_mhd_fields(*(a.astype(np.float64) for a in inputs32), **options)
    strided = list(inputs32)
    strided[3] = _x_fastest(strided[3])
    reference = ideal_mhd_fields(*strided, **options)
    for single in (ideal_mhd_fields(*inputs32, **options),
                   ideal_mhd_fields(*_windows(inputs32), **options)):
        assert_computed_in_float32(list(zip(single, double)), roundings=400 * max(1.0, kappa / 3))
        _assert_close(single, reference, field_index, kappa, inputs32[0])


def _spoil(arrays):
    """Bad points spread over the 8 strips of a 16^3 line and the columns of its window: lapse
    0, NaN in the shift, a speed above light, Inf in B, a metric that is not positive definite."""
    alpha, beta, gamma, B, v = (a.copy() for a in arrays)
    points = [(0, 0, 5), (3, 7, 2), (6, 1, 15), (9, 9, 9), (15, 15, 15)]
    alpha[points[0]] = 0.0
    beta[(1,) + points[1]] = np.nan
    v[(slice(None),) + points[2]] *= 20.0  # speeds of at least 0.1: now at least twice light
    B[(2,) + points[3]] = np.inf
    gamma[(0,) + points[4]] = -1.0
    return (alpha, beta, gamma, B, v), points


def test_bad_points_counted_exactly_and_named(rng):
    grid = (16, 16, 16)
    (alpha, beta, gamma, B, v), _ = _state(rng, grid, "upper", "eulerian")
    spoiled, points = _spoil((alpha, beta, gamma, B, v))
    pivot = float(emsource._arguments.pivot_floor(np.float64))
    for arrays in (spoiled, _windows_of(spoiled, grid)):
        outputs = [np.empty((n,) + grid) for n in (3, 4, 4)]
        views, flat = emsource._arguments.kernel_views(list(arrays) + outputs, grid)
        spans, steps, shape, last = emsource._arguments.driver_spans(views, grid, flat)
        for check, expected in ((True, len(points)), (False, 0)):
            count = call_sharing_layouts(
                kernels.IDEAL_MHD[0, kernels.VELOCITY_EULERIAN],
                (*spans[:3], emsource._arguments.PACKED_METRIC_INDEX, *spans[3:], steps, shape,
                 last, pivot, 1.0, check), (0, 1, 2, 4, 5))
            assert count == expected
        copies = [a.copy() for a in arrays]
        # The message carries the kernel's count (5, above: the 4 bad inputs and the point
        # too fast) and names the first of them in C order.
        with pytest.raises(GridPointError, match=r"5 of 4096 grid points have invalid input; "
                                                 r"the first is grid index \(0, 0, 5\): "
                                                 r"lapse alpha = 0.0 is not positive"):
            ideal_mhd_fields(*arrays)
        for a, b in zip(arrays, copies):  # inputs left as they were
            np.testing.assert_array_equal(a, b)


def _windows_of(arrays, grid):
    windows = []
    for a in arrays:
        big = np.zeros(a.shape[:-3] + tuple(n + 2 for n in grid))
        inner = (Ellipsis,) + (slice(1, -1),) * 3
        big[inner] = a
        windows.append(big[inner])
    return windows


def test_out_is_checked(rng):
    grid = (4, 5, 6)
    inputs, _ = _state(rng, grid, "upper", "eulerian")
    result = ideal_mhd_fields(*inputs)
    with pytest.raises(ValueError, match=r"out u must have shape \(4, 4, 5, 6\) and dtype "
                                         r"float64, found shape \(3, 4, 5, 6\)"):
        ideal_mhd_fields(*inputs, out=(result.E, result.E, result.b))
    with pytest.raises(ValueError, match=r"out E overlaps input beta"):
        ideal_mhd_fields(*inputs, out=(inputs[1], result.u, result.b))
    with pytest.raises(TypeError, match=r"out must be an IdealMhdFields or a tuple"):
        ideal_mhd_fields(*inputs, out=result.E)
