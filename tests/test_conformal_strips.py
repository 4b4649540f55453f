"""The vectorised conformal-source drivers (one loop over spans per decomposition and input form,
``kernels/conformal.py: CONFORMAL_SOURCES``, serving contiguous data as strips of a line and
ghost-zone windows as columns) against the column loop they replace, and against the physical
route.

References:
- the column loop ``conformal_sources_grid`` (run-time decomposition and form, scalar code,
  taken by the public call for layouts without a unit stride along z), which
  ``tests/test_conformal.py`` checked against ``adm_sources`` on the physical metric before the
  drivers existed; the column loop and every driver inline one point function, so a
  difference can only come from the loop: a wrong row, step, offset or constant gives errors of
  order one, a different fusion of multiply-adds (fast-math "contract") at most ~16 eps of the
  largest value (``conftest.assert_same_arithmetic``, which derives that bound);
- an independent route written here: gamma_ij = tilde-gamma_ij / c in NumPy, ``adm_sources`` on
  it, A_ij = c (S_ij - gamma_ij S / 3) (T. W. Baumgarte and S. L. Shapiro, Numerical
  Relativity (2010), sec. 11.5; from memory), as in ``tests/test_conformal.py``;
- NumPy's own finiteness and positivity tests for the count of bad points.

Compile time: each (decomposition, form) driver compiles on first use (about 3 s per driver and
dtype). Every one of the 9 drivers runs here in float64 on both routes; float32 runs one pair
per decomposition, each input form once (chi/upper is compiled by ``tests/test_conformal.py``
too).
"""

import numpy as np
import pytest

import emsource
from emsource import GridPointError
from emsource.conformal import ConformalSources, conformal_sources
from emsource.grid_arrays import grid_function_like
from emsource.kernels import conformal as kernels
from emsource.kernels._compile import call_sharing_layouts
from emsource.kernels.vector_loops import line_as_strips
from emsource.kernels.electromagnetic import FORM_CONTRAVARIANT, FORM_COVARIANT, FORM_DENSITIZED
from emsource.metric_forms import DECOMPOSITIONS
from conftest import (assert_computed_in_float32, assert_same_arithmetic, random_curved_data,
                      unpack_symmetric)

FORMS = {"upper": FORM_CONTRAVARIANT, "lower": FORM_COVARIANT, "densitized": FORM_DENSITIZED}
#: Every (decomposition, field_index) pair: one driver each.
PAIRS = [(d, f) for d in DECOMPOSITIONS for f in FORMS]
#: One pair per decomposition, each form once: the float32 cases.
DIAGONAL = [("chi", "upper"), ("w", "lower"), ("phi", "densitized")]
#: The interior of a grid with 2 ghost points a side: 9 x 10 x 11 points in 13 x 14 x 15.
FULL = (13, 14, 15)
GHOST = 2
INNER = tuple(slice(GHOST, n - GHOST) for n in FULL)
#: The metric rows of packed storage, as the public call passes them (one compiled signature).
PACKED = emsource._arguments.PACKED_METRIC_INDEX


def _data(rng, grid, decomposition, field_index, dtype=np.float64):
    """The factor of ``decomposition`` (chi in [0.2, 2]), tilde-gamma, E and B stored in the
    form ``field_index``, and the physical metric, on ``grid``."""
    _, _, gt, E, B = random_curved_data(rng, grid)
    chi = rng.uniform(0.2, 2.0, grid)
    factor = {"chi": chi, "w": np.sqrt(chi), "phi": -np.log(chi) / 4}[decomposition]
    gamma = gt / chi
    full = np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))
    if field_index == "lower":
        E, B = (np.moveaxis(np.einsum("...ij,j...->...i", full, v), -1, 0) for v in (E, B))
    elif field_index == "densitized":
        sg = np.sqrt(np.linalg.det(full))
        E, B = sg * E, sg * B
    return tuple(a.astype(dtype) for a in (factor, gt, E, B))


def _condition_number(gt):
    """The largest condition number of tilde-gamma (that of gamma too: c scales it) on the
    grid."""
    eigenvalues = np.linalg.eigvalsh(np.moveaxis(unpack_symmetric(gt.astype(float)), (0, 1),
                                                 (-2, -1)))
    return float(np.max(eigenvalues[..., -1] / eigenvalues[..., 0]))


def _assert_same_loop_arithmetic(got, reference, field_index, kappa):
    """``got`` equals ``reference`` up to the roundings another loop shape may change.

    Contravariant fields: ``assert_same_arithmetic`` (16 eps of the largest value, derived
    there). The covariant and densitized forms also raise an index with gamma^ij or divide by
    sqrt(gamma), both from the pivots of gamma = L D L^T: a multiply-add fused differently moves
    a pivot by ~eps tr(gamma), i.e. by eps kappa relative to the smallest pivot, so the bound
    there is 16 eps kappa of the largest value (kappa ~ 10-40 on these grids; measured
    differences up to ~17 eps)."""
    for a, b in zip(got, reference):
        if field_index == "upper":
            assert_same_arithmetic(a, b)
        else:
            scale = np.max(np.abs(b))
            np.testing.assert_allclose(a, b, rtol=0,
                                       atol=16 * kappa * np.finfo(b.dtype).eps * scale)


def _x_fastest(a):
    """The values of ``a`` stored with x fastest: no unit stride along z, so that the public
    call takes the column loop."""
    return np.ascontiguousarray(a.transpose(0, 3, 2, 1)).transpose(0, 3, 2, 1)


def _column_loop(factor, gt, E, B, decomposition, field_index):
    """The column loop's outputs for these inputs, through the public call (E stored with x
    fastest: the one specialisation every strided layout shares)."""
    E = _x_fastest(E)
    grid = factor.shape
    assert emsource._arguments.unit_stride_spans(
        emsource._arguments.three_axis_views([factor, gt, E, B], grid)) is None
    return conformal_sources(factor, gt, E, B, decomposition=decomposition,
                             field_index=field_index)


def _column_count(factor, gt, E, B, decomposition):
    """The column loop's count of bad points (contravariant fields), called as the public call
    calls it."""
    grid = factor.shape
    out = [np.empty(grid), np.empty((3,) + grid), np.empty(grid), np.empty((6,) + grid)]
    return call_sharing_layouts(
        kernels.conformal_sources_grid,
        (factor, gt, PACKED, _x_fastest(E), B, *out, DECOMPOSITIONS[decomposition].code,
         FORM_CONTRAVARIANT, 1 / (4 * np.pi), float(emsource._arguments.pivot_floor(np.float64)),
         1.0), (0, 1, 3, 4))


def _windows(arrays):
    """Each array as the interior of a larger array (ghost zones filled with other values)."""
    windows = []
    for a in arrays:
        big = np.full(a.shape[:-3] + FULL, 7.0, a.dtype)
        big[(Ellipsis,) + INNER] = a
        windows.append(big[(Ellipsis,) + INNER])
    return windows


@pytest.mark.parametrize("decomposition, field_index", PAIRS)
def test_line_and_window_routes_equal_the_column_loop(rng, decomposition, field_index):
    grid = tuple(n - 2 * GHOST for n in FULL)
    inputs = _data(rng, grid, decomposition, field_index)
    reference = _column_loop(*inputs, decomposition, field_index)
    flat = conformal_sources(*inputs, decomposition=decomposition, field_index=field_index)
    windows = _windows(inputs)
    assert not windows[2].flags.c_contiguous
    assert emsource._arguments.unit_stride_spans(
        emsource._arguments.three_axis_views(windows, grid)) is not None  # the windowed route
    windowed = conformal_sources(*windows, decomposition=decomposition, field_index=field_index)
    # Outputs that are windows of larger arrays too (a state array with ghost zones).
    out = ConformalSources(*_windows([np.zeros_like(a) for a in reference]))
    into = conformal_sources(*windows, decomposition=decomposition, field_index=field_index,
                             out=out)
    assert all(a is b for a, b in zip(into, out))
    kappa = _condition_number(inputs[1])
    for got in (flat, windowed, into):
        _assert_same_loop_arithmetic(got, reference, field_index, kappa)
    # Not bit for bit between the routes: which points fall into the packed body of a loop
    # and which into its scalar remainder depends on the strip or column length, and LLVM may
    # fuse multiply-adds differently in the two (measured: 1 ulp at 14 % of the points).
    # The windowed driver into windowed outputs: the same loop, the same bits.
    for a, b in zip(into, windowed):
        np.testing.assert_array_equal(a, b)


def test_full_metric_on_both_routes(rng):
    """tilde-gamma given as a full (3, 3, *grid) array: its six rows picked by the metric index
    on the line and in the window (the same values as packed storage)."""
    grid = tuple(n - 2 * GHOST for n in FULL)
    factor, gt, E, B = _data(rng, grid, "chi", "upper")
    full = np.ascontiguousarray(unpack_symmetric(gt))
    packed = conformal_sources(factor, gt, E, B, decomposition="chi")
    for arrays in ((factor, full, E, B), _windows((factor, full, E, B))):
        got = conformal_sources(*arrays, decomposition="chi")
        for a, b in zip(got, packed):
            assert_same_arithmetic(a, b)


@pytest.mark.parametrize("decomposition, field_index", DIAGONAL)
def test_drivers_equal_the_physical_route(rng, decomposition, field_index):
    """Independent route (module docstring): physical metric in NumPy, adm_sources, A_ij in
    NumPy. Tolerance as in tests/test_conformal.py: the kernel forms gamma_ij as
    tilde-gamma_ij * (1/c), two roundings per component against one, which moves each output by
    a few eps kappa of its size (kappa ~ 10 here): 1e-12 (1 + max|value|) leaves a margin of
    ~10x, and a wrong power of c changes the results by order one."""
    grid = tuple(n - 2 * GHOST for n in FULL)
    factor, gt, E, B = _data(rng, grid, decomposition, field_index)
    c = {"chi": factor, "w": factor ** 2, "phi": np.exp(-4 * factor)}[decomposition]
    gamma = gt / c
    ref = emsource.adm_sources(gamma, E, B, field_index=field_index)
    A = c * (ref.S_ij - gamma * ref.S / 3)
    windows = _windows((factor, gt, E, B))
    for got in (conformal_sources(factor, gt, E, B, decomposition=decomposition,
                                  field_index=field_index),
                conformal_sources(*windows, decomposition=decomposition,
                                  field_index=field_index)):
        for a, b in zip(got, (ref.rho, ref.S_i, ref.S, A)):
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * (1 + np.abs(b).max()))


@pytest.mark.parametrize("decomposition, field_index", DIAGONAL)
def test_float32_drivers(rng, decomposition, field_index):
    """float32 data are computed in float32 on both routes, and the flat and windowed float32
    drivers agree with the float32 column loop (``_assert_same_loop_arithmetic``).

    Against float64 of the same rounded input: tests/test_conformal.py allows 200 eps32 for
    the contravariant form on metrics of condition number ~3; each of those roundings is
    amplified by at most kappa where an index is raised or sqrt(gamma) divided out (the
    pivots), so 200 kappa / 3 roundings here for every form (kappa measured on the data)."""
    grid = tuple(n - 2 * GHOST for n in FULL)
    inputs32 = _data(rng, grid, decomposition, field_index, np.float32)
    inputs64 = [a.astype(np.float64) for a in inputs32]
    options = dict(decomposition=decomposition, field_index=field_index)
    double = conformal_sources(*inputs64, **options)
    reference = _column_loop(*inputs32, decomposition, field_index)
    kappa = _condition_number(inputs32[1])
    for single in (conformal_sources(*inputs32, **options),
                   conformal_sources(*_windows(inputs32), **options)):
        assert_computed_in_float32(list(zip(single, double)),
                                   roundings=200 * max(1.0, kappa / 3))
        _assert_same_loop_arithmetic(single, reference, field_index, kappa)


def test_padded_grid_functions_take_the_flat_driver(rng):
    """Padded rows (emsource.grid_arrays) in and out: the line route with the rows' stride as
    component step, the same bits as on contiguous arrays (same strips, same point code)."""
    grid = (9, 10, 11)
    inputs = _data(rng, grid, "chi", "upper")
    padded = [grid_function_like(a) for a in inputs]
    for p, a in zip(padded, inputs):
        p[...] = a
    assert not padded[1].flags.c_contiguous
    plain = conformal_sources(*inputs, decomposition="chi")
    out = ConformalSources(*(grid_function_like(a) for a in plain))
    got = conformal_sources(*padded, decomposition="chi", out=out)
    for a, b in zip(got, plain):
        np.testing.assert_array_equal(a, b)


def _spoil(arrays):
    """Bad values at points spread over several strips of a 16^3 grid (8 strips of 512 points,
    ``kernels.vector_loops.strip_length``) and several columns of its window: a factor of 0
    (chi, W) or +Inf (phi, so that exp(-4 phi) = 0), NaN and Inf in E, NaN in tilde-gamma, and a
    tilde-gamma that is not positive definite. Returns the spoiled copies."""
    factor, gt, E, B = (a.copy() for a in arrays)
    points = [(0, 0, 5), (3, 7, 2), (6, 1, 15), (9, 9, 9), (12, 4, 0), (15, 15, 15)]
    factor[points[0]] = 0.0
    E[(1,) + points[1]] = np.nan
    B[(2,) + points[2]] = np.inf
    gt[(4,) + points[3]] = np.nan
    gt[(0,) + points[4]] = -1.0  # gamma_xx < 0
    E[(0,) + points[5]] = -np.inf
    return (factor, gt, E, B), points


@pytest.mark.parametrize("decomposition", list(DECOMPOSITIONS))
def test_bad_points_counted_exactly_on_every_route(rng, decomposition):
    """The count of each driver equals NumPy's count of bad points, over many strips and
    columns; a phi factor of +Inf gives c = 0, gamma_ij = Inf: rejected too."""
    grid = (16, 16, 16)
    (factor, gt, E, B), points = _spoil(_data(rng, grid, decomposition, "upper"))
    if decomposition == "phi":
        factor[points[0]] = np.inf
    expected = len(points)
    assert _column_count(factor, gt, E, B, decomposition) == expected
    driver = kernels.CONFORMAL_SOURCES[DECOMPOSITIONS[decomposition].code, FORM_CONTRAVARIANT]
    physics = (1 / (4 * np.pi), float(emsource._arguments.pivot_floor(np.float64)), 1.0)
    arrays = [factor, gt, E, B, np.empty(grid), np.empty((3,) + grid), np.empty(grid),
              np.empty((6,) + grid)]

    def count(spans, steps, shape, last, check=True):
        # As the public call makes it (inputs typed read-only: the signature compiled there).
        return call_sharing_layouts(
            driver, (spans[0], spans[1], PACKED, *spans[2:], steps, shape, last, *physics, check),
            (0, 1, 3, 4))

    # The line of 4096 points as 8 strips of 512 (vector_loops.line_as_strips).
    line = [a.reshape(-1) for a in arrays]
    shape, last = line_as_strips(factor.size)
    assert shape == (1, 8, 512) and last == 512
    steps = np.zeros((8, 3), np.uint64)
    steps[:, 2] = shape[2]
    steps[[1, 2, 3, 5, 7], 0] = factor.size
    assert count(line, steps, shape, last) == expected
    assert count(line, steps, shape, last, check=False) == 0
    # Strips of 500 points, the last one 96: the count of a short last strip is exact too.
    steps[:, 2] = 500
    assert count(line, steps, (1, 9, 500), 96) == expected
    # The window of one ghost point a side: 256 columns.
    spans, steps, shape = emsource._arguments.unit_stride_spans(
        emsource._arguments.three_axis_views(_windows_of(arrays, grid), grid))
    assert count(spans, steps, shape, shape[2]) == expected


def _windows_of(arrays, grid):
    """``arrays`` on ``grid`` copied into the interior of arrays with one ghost point a side."""
    windows = []
    for a in arrays:
        big = np.zeros(a.shape[:-3] + tuple(n + 2 for n in grid))
        inner = (Ellipsis,) + (slice(1, -1),) * 3
        big[inner] = a
        windows.append(big[inner])
    return windows


@pytest.mark.parametrize("route", ["flat", "window", "column"])
def test_bad_point_errors_name_the_same_index_on_every_route(rng, route):
    """The same error (count, first grid index, reason) whichever loop ran; the inputs are
    left as they were. The column route is taken by E stored with x fastest (no unit stride
    along z)."""
    grid = (16, 16, 16)
    clean = _data(rng, grid, "w", "upper")
    expected = {
        0: r"6 of 4096 grid points have invalid input; the first is grid index \(0, 0, 5\): "
           r".*conformal_factor = 0.0 is not positive",
        1: r"5 of 4096 grid points have invalid input; the first is grid index \(3, 7, 2\): "
           r"non-finite value\(s\): E\[1\] = nan",
    }
    spoiled, _ = _spoil(clean)
    for drop_first in (0, 1):
        arrays = [a.copy() for a in spoiled]
        if drop_first:  # the first bad point repaired: the next one is named
            arrays[0][0, 0, 5] = clean[0][0, 0, 5]
        if route == "window":
            arrays = _windows_of(arrays, grid)
        elif route == "column":
            arrays[2] = _x_fastest(arrays[2])
        copies = [a.copy() for a in arrays]
        with pytest.raises(GridPointError, match=expected[drop_first]):
            conformal_sources(*arrays, decomposition="w")
        for a, b in zip(arrays, copies):
            np.testing.assert_array_equal(a, b)
    assert conformal_sources(*spoiled, decomposition="w", check=False).rho.shape == grid


@pytest.mark.parametrize("route", ["flat", "window"])
def test_unchecked_call_writes_every_point(rng, route):
    """check=False: no error, the bad points' outputs are not finite and every other point
    holds the values of the clean data (the flat strips and the window columns write every
    point, bad or not)."""
    grid = (16, 16, 16)
    clean = _data(rng, grid, "chi", "upper")
    spoiled, points = _spoil(clean)
    if route == "window":
        clean, spoiled = _windows_of(clean, grid), _windows_of(spoiled, grid)
    good = conformal_sources(*clean, decomposition="chi")
    got = conformal_sources(*spoiled, decomposition="chi", check=False)
    mask = np.ones(grid, bool)
    for p in points:
        mask[p] = False
    for a, b in zip(got, good):
        np.testing.assert_array_equal(a[..., mask], b[..., mask])
    non_finite_input = [p for n, p in enumerate(points) if n != 4]  # 4: a finite metric
    assert not any(np.isfinite(got.rho[p]) for p in non_finite_input)


def test_out_is_checked(rng):
    grid = (4, 5, 6)
    inputs = _data(rng, grid, "chi", "upper")
    result = conformal_sources(*inputs, decomposition="chi")
    with pytest.raises(ValueError, match=r"out A_ij must have shape \(6, 4, 5, 6\) and dtype "
                                         r"float64, found shape \(3, 4, 5, 6\)"):
        conformal_sources(*inputs, decomposition="chi",
                          out=(result.rho, result.S_i, result.S, result.S_i))
    with pytest.raises(ValueError, match=r"out S_i overlaps input E"):
        conformal_sources(*inputs, decomposition="chi",
                          out=(result.rho, inputs[2], result.S, result.A_ij))
    with pytest.raises(TypeError, match=r"out must be a ConformalSources or a tuple"):
        conformal_sources(*inputs, decomposition="chi", out=result.rho)
