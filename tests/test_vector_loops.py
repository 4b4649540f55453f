"""The vectorisable loops of the source drivers (kernels/vector_loops.py): the windowed driver
over 1-D spans and the strip loops of the flat drivers.

What could go wrong and is checked here: a span or a step that addresses the wrong element
(results compared with the same data made contiguous, and with the 4D brute-force reference
built from F^ab, J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 12.10, eq.
12.113, and E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2, for the
projections); a window whose span would leave its array (foreign memory takes the slow
constructor); counts of bad points lost between strips or columns when they are summed in the
data's dtype (counts compared with NumPy's count of the same points, across many strips).
"""

import math

import numpy as np
import pytest

import emsource
import emsource.conformal
import emsource.grid_arrays
import emsource.sources
from emsource import _arguments as arg
from emsource.kernels import sources as kernels
from emsource.kernels._compile import call_sharing_layouts
from emsource.kernels.vector_loops import STRIP_POINTS

from conftest import assert_same_arithmetic, random_curved_data, unpack_symmetric
from reference_stress_energy import grid_reference

GHOSTS = (slice(None),) + (slice(3, -3),) * 3


def _route_spy(monkeypatch):
    """Record which driver each adm_sources call reaches."""
    reached = []
    real = emsource.sources.call_sharing_layouts

    def spy(kernel, arguments, inputs):
        reached.append(kernel.py_func.__name__)
        return real(kernel, arguments, inputs)

    monkeypatch.setattr(emsource.sources, "call_sharing_layouts", spy)
    return reached


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("field_index", ["upper", "lower", "densitized"])
def test_window_of_a_ghosted_grid_equals_the_same_data_made_contiguous(rng, monkeypatch, dtype,
                                                                      field_index):
    _, _, gamma, E, B = random_curved_data(rng, (12, 11, 13), dtype)
    views = [a[GHOSTS] for a in (gamma, E, B)]
    reached = _route_spy(monkeypatch)
    windowed = emsource.adm_sources(*views, field_index=field_index)
    assert reached == ["adm_sources_window"]
    copied = emsource.adm_sources(*(np.ascontiguousarray(v) for v in views),
                                  field_index=field_index)
    for a, b in zip(windowed, copied):
        assert_same_arithmetic(a, b)


def test_window_agrees_with_the_4d_reference(rng):
    """Independent route: T^ab from F^ab and the 4-metric, projected (tests/reference_stress_energy)."""
    alpha, beta, gamma, E, B = random_curved_data(rng, (9, 10, 8))
    views = [a[GHOSTS] for a in (gamma, E, B)]
    src = emsource.adm_sources(*views)
    rho, S_i, S_ij, _, _ = grid_reference(alpha[GHOSTS[1:]], beta[GHOSTS], *views, 1 / (4 * math.pi))
    # The kernel and the reference round differently (L D L^T against a 4x4 inverse): a few
    # hundred eps of the largest value bounds it for metrics of condition number below ~10.
    for ours, reference in ((src.rho, rho), (src.S_i, S_i), (src.S_ij, S_ij), (src.S, rho)):
        np.testing.assert_allclose(ours, reference, rtol=0,
                                   atol=256 * np.finfo(float).eps * np.abs(reference).max())


@pytest.mark.parametrize("grid, window", [((20,), (slice(3, -3),)),
                                          ((9, 12), (slice(1, -2), slice(3, -3)))])
def test_windows_of_one_and_two_dimensional_grids(rng, monkeypatch, grid, window):
    _, _, gamma, E, B = random_curved_data(rng, grid)
    views = [a[(slice(None),) + window] for a in (gamma, E, B)]
    reached = _route_spy(monkeypatch)
    windowed = emsource.adm_sources(*views)
    assert reached == ["adm_sources_window"]
    for a, b in zip(windowed, emsource.adm_sources(*(np.ascontiguousarray(v) for v in views))):
        assert_same_arithmetic(a, b)


def test_full_metric_padded_inputs_and_outputs_inside_one_state_array(rng, monkeypatch):
    """A (3, 3) metric, padded grid functions, and outputs that are windows of the same state
    array as the inputs (disjoint components): every array has its own steps."""
    _, _, gamma, E, B = random_curved_data(rng, (10, 10, 10))
    full = gamma[np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])]
    padded_full = emsource.grid_arrays.grid_function_like(full)
    padded_full[...] = full
    state = np.zeros((6 + 1 + 3 + 6 + 1, 10, 10, 10))
    state[0:3], state[3:6] = E, B
    window = (slice(3, -3),) * 3
    inputs = (padded_full[(slice(None), slice(None)) + window], state[(slice(0, 3),) + window],
              state[(slice(3, 6),) + window])
    out = (state[(6,) + window], state[(slice(7, 10),) + window],
           state[(slice(10, 16),) + window], state[(16,) + window])
    reached = _route_spy(monkeypatch)
    emsource.adm_sources(*inputs, out=out)
    assert reached == ["adm_sources_window"]
    expected = emsource.adm_sources(np.ascontiguousarray(gamma[GHOSTS]), E[GHOSTS], B[GHOSTS])
    for a, b in zip(out, expected):
        assert_same_arithmetic(a, b)
    np.testing.assert_array_equal(state[0:3], E)  # inputs untouched
    assert np.all(state[(slice(6, 17), slice(0, 3))] == 0)  # nothing written outside the window


def test_window_over_foreign_memory(rng):
    """Arrays over a bytearray (no owning ndarray): the span comes from as_strided."""
    _, _, gamma, E, B = random_curved_data(rng, (10, 9, 11))
    foreign = []
    for a in (gamma, E, B):
        buffer = bytearray(a.nbytes)
        view = np.frombuffer(buffer, a.dtype).reshape(a.shape)
        view[...] = a
        foreign.append(view[GHOSTS])
    spans, _, _ = arg.unit_stride_spans(arg.three_axis_views(foreign, foreign[0].shape[1:]))
    for span, view in zip(spans, foreign):
        assert span.__array_interface__["data"][0] == view.__array_interface__["data"][0]
    got = emsource.adm_sources(*foreign)
    for a, b in zip(got, emsource.adm_sources(*(a[GHOSTS] for a in (gamma, E, B)))):
        np.testing.assert_array_equal(a, b)


def test_views_without_unit_z_stride_take_the_column_loop(rng, monkeypatch):
    _, _, gamma, E, B = random_curved_data(rng, (8, 8, 8))
    reached = _route_spy(monkeypatch)
    reversed_views = [a[:, :, :, ::-1] for a in (gamma, E, B)]
    every_other = [a[:, :, :, ::2] for a in (gamma, E, B)]
    emsource.adm_sources(*reversed_views)
    emsource.adm_sources(*every_other)
    emsource.adm_sources(*(np.moveaxis(a, 0, -1) for a in (gamma, E, B)),
                         layout="component_last")
    assert reached == ["adm_sources_grid"] * 3


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("route", ["flat", "window", "columns"])
def test_counts_of_bad_and_underflowing_points_are_exact_across_strips(rng, dtype, route):
    """Counts summed per strip (flat) or column (window) in the data's dtype, then in int64:
    compared with NumPy's count of the same points over many strips (grid of ~15 strips)."""
    shape = (26, 25, 24)  # 15600 points, 15.2 strips of 1024
    assert math.prod(shape) > 15 * STRIP_POINTS
    _, _, gamma, E, B = random_curved_data(rng, tuple(n + 6 for n in shape), dtype)
    inner = GHOSTS[1:]
    bad = rng.random(shape) < 0.3
    original = gamma.copy()
    gamma[(0,) + inner][bad] = np.nan
    if route == "flat":
        arrays = [np.ascontiguousarray(a[GHOSTS]) for a in (gamma, E, B)]
    elif route == "window":
        arrays = [a[GHOSTS] for a in (gamma, E, B)]
    else:
        arrays = [a[GHOSTS][..., ::-1] for a in (gamma, E, B)]
    with pytest.raises(emsource.GridPointError) as err:
        emsource.adm_sources(*arrays)
    assert f"{int(bad.sum())} of {bad.size} grid points" in str(err.value)
    # Underflow: every field component tiny enough that E^2 + B^2 falls below the smallest
    # normal number (|f| ~ 1e-30 in float32, 1e-170 in float64), on a third of the points.
    gamma[...] = original
    low = rng.random(shape) < 0.35
    tiny = np.finfo(dtype).tiny ** 0.5 / 16
    for field in (E, B):
        for c in range(3):
            field[(c,) + inner][low] = tiny
    if route == "flat":
        arrays = [np.ascontiguousarray(a[GHOSTS]) for a in (gamma, E, B)]
    counts = _driver_counts(arrays, route)
    assert counts == (0, int(low.sum()))


def _driver_counts(arrays, route):
    """The (bad, underflowing) counts the driver of ``route`` returns for ``arrays``."""
    gamma, E, B = arrays
    dtype = gamma.dtype
    out = [np.empty(gamma.shape[1:], dtype), np.empty((3,) + gamma.shape[1:], dtype),
           np.empty((6,) + gamma.shape[1:], dtype), np.empty(gamma.shape[1:], dtype)]
    constants = arg.kernel_constants(0, dtype, 1 / (4 * math.pi))
    gidx = arg.PACKED_METRIC_INDEX  # the package's own argument type: no compilation of its own
    if route == "flat":
        return tuple(kernels.ADM_SOURCES_FLAT[0](gamma, gidx, E, B, *out, *constants[1:], True))
    # Through the route the package takes, which shares one compiled specialisation per layout.
    if route == "window":
        (g, e, b, *outputs), steps, shape = arg.unit_stride_spans([gamma, E, B] + out)
        arguments = (g, gidx, e, b, *outputs, steps, shape, *constants[1:], True)
        return tuple(call_sharing_layouts(kernels.ADM_SOURCES_WINDOW[0], arguments, (0, 2, 3)))
    arguments = (gamma, gidx, E, B, *out, *constants, True)
    return tuple(call_sharing_layouts(kernels.adm_sources_grid, arguments, (0, 2, 3)))


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("index", ["lower", "upper"])
def test_spacetime_components_on_a_window_equal_the_same_data_made_contiguous(rng, monkeypatch,
                                                                             dtype, index):
    alpha, beta, gamma, E, B = random_curved_data(rng, (11, 12, 10), dtype)
    views = [alpha[GHOSTS[1:]]] + [a[GHOSTS] for a in (beta, gamma, E, B)]
    reached = _route_spy(monkeypatch)
    windowed = emsource.stress_energy_4d(*views, index=index)
    assert reached == ["stress_energy_window"]
    assert_same_arithmetic(windowed, emsource.stress_energy_4d(
        *(np.ascontiguousarray(v) for v in views), index=index))


@pytest.mark.parametrize("route", ["flat", "window"])
def test_spacetime_components_count_every_bad_lapse_across_strips(rng, route):
    """A lapse that is not positive fails the T_ab point check: counted exactly over ~15 strips
    (the status bits the T_ab point function returns since it vectorises)."""
    shape = (26, 25, 24)
    alpha, beta, gamma, E, B = random_curved_data(rng, tuple(n + 6 for n in shape))
    bad = rng.random(shape) < 0.4
    alpha[GHOSTS[1:]][bad] = -1.0
    views = [alpha[GHOSTS[1:]]] + [a[GHOSTS] for a in (beta, gamma, E, B)]
    if route == "flat":
        views = [np.ascontiguousarray(v) for v in views]
    with pytest.raises(emsource.GridPointError) as err:
        emsource.stress_energy_4d(*views)
    assert f"{int(bad.sum())} of {bad.size} grid points" in str(err.value)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_line_step_driver_equals_the_default_driver_and_counts_alike(rng, dtype):
    """The 512-bit flat driver (whole cache lines per step) is the same point code in a wider
    loop: at good points its outputs equal the default driver's up to contraction
    (``assert_same_arithmetic``) and the 4D reference (Jackson sec. 12.10 eq. 12.113;
    Gourgoulhon sec. 5.2) within the bound of ``test_window_agrees_with_the_4d_reference``; both
    counts equal the default driver's, bad metrics counted exactly, over ~9 strips, and on a grid
    (7 * 11 * 13 points) that ends within a vector."""
    shape = (7, 11, 13) if dtype == np.float32 else (23, 19, 21)
    alpha, beta, gamma, E, B = random_curved_data(rng, shape, dtype)
    bad = rng.random(shape) < 0.3
    broken = gamma.copy()
    broken[0][bad] = -1.0
    good = ~bad
    out = {}
    for name, table in (("default", kernels.ADM_SOURCES_FLAT),
                        ("lines", kernels.ADM_SOURCES_FLAT_LINE_STEPS)):
        arrays = [np.empty(shape, dtype), np.empty((3,) + shape, dtype),
                  np.empty((6,) + shape, dtype), np.empty(shape, dtype)]
        constants = arg.kernel_constants(0, dtype, 1 / (4 * math.pi))
        counts = table[0](broken, arg.PACKED_METRIC_INDEX, E, B, *arrays, *constants[1:], True)
        out[name] = tuple(counts), [a[..., good] for a in arrays]
    # (Some bad points also count as underflowing: their rho is negative.)
    assert out["lines"][0] == out["default"][0] and out["lines"][0][0] == int(bad.sum())
    for a, b in zip(out["lines"][1], out["default"][1]):
        assert_same_arithmetic(a, b)
    if dtype == np.float64:
        # The reference inverts the 4-metric: its error grows with gamma's condition number,
        # which A A^T with A = I + 0.3 noise takes up to 2e6 on this grid (median 6, 72 points
        # above 1e3; there the reference's rho was up to 2e-6 off, the kernel's within 0.8 eps
        # of an extended-precision sum). Compared where it is below 10 (74 % of the points),
        # the range the bound of the 4-D reference test is stated for.
        well = good & (np.linalg.cond(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
                       < 10)
        rho, S_i, S_ij, _, _ = grid_reference(alpha, beta, gamma, E, B, 1 / (4 * math.pi))
        for ours, reference in zip(out["lines"][1], (rho, S_i, S_ij, rho)):
            ours, reference = ours[..., well[good]], reference[..., well]
            np.testing.assert_allclose(ours, reference, rtol=0,
                                       atol=256 * np.finfo(float).eps * np.abs(reference).max())


def test_line_steps_exactly_on_long_rows_that_share_cache_sets():
    """The choice of the line-step form, from kernel views (arrays allocated, never touched):
    rows a multiple of 4 KiB apart (common practice: one way of the first-level cache) and
    16 MiB long or more take it; a grid of 8^3 (rows 4 KiB apart, short), 120^3 float64
    (13.8 MB), 127^3 (rows not aliased), the allocator's padded grid functions and float32 at
    128^3 (8 MiB rows) do not."""
    def line_steps(shape, dtype=np.float64, padded=False):
        make = emsource.grid_arrays.empty_grid_function if padded else np.empty
        arrays = [make((6,) + shape, dtype), np.empty((3,) + shape, dtype),
                  np.empty((3,) + shape, dtype), np.empty(shape, dtype),
                  np.empty((3,) + shape, dtype), np.empty((6,) + shape, dtype),
                  np.empty(shape, dtype)]
        views, flat = arg.kernel_views(arrays, shape, whole_grids=True)
        assert flat
        return arg.takes_line_steps(views, shape)

    assert line_steps((128, 128, 128))
    assert line_steps((256, 128, 128), np.float32)
    assert line_steps((256, 128, 64))
    assert not line_steps((8, 8, 8))
    assert not line_steps((128, 128, 128), np.float32)
    assert not line_steps((120, 120, 120))
    assert not line_steps((127, 127, 127))
    assert not line_steps((128, 128, 128), padded=True)
    # Scalars on a whole grid are 3-D arrays whose first stride (ny nz itemsize) need not be
    # a multiple of 4 KiB: they are not rows.
    assert line_steps((2048, 96, 96))


def test_public_calls_take_and_plan_the_line_step_drivers(rng, monkeypatch):
    """With the row threshold lowered to 4 KiB, a 16^3 grid takes the line-step drivers of
    adm_sources, stress_energy_4d and conformal_sources (their plans keep the line-step table
    or dispatcher) and gives the default drivers' results up to contraction; a planned second
    call the same bits as the first."""
    shape = (16, 16, 16)
    alpha, beta, gamma, E, B = random_curved_data(rng, shape)
    chi = rng.uniform(0.5, 1.5, shape)
    calls = {
        "adm": (lambda **kw: emsource.adm_sources(gamma, E, B, **kw), emsource.sources._ADM_PLANS),
        "T": (lambda **kw: emsource.stress_energy_4d(alpha, beta, gamma, E, B, **kw),
              emsource.sources._STRESS_ENERGY_PLANS),
        "conformal": (lambda **kw: emsource.conformal.conformal_sources(
            chi, gamma, E, B, decomposition="chi", **kw), emsource.conformal._CONFORMAL_PLANS),
    }
    default = {name: call() for name, (call, _) in calls.items()}
    monkeypatch.setattr(arg, "LINE_STEP_ROW_BYTES", 4096)
    line_tables = (kernels.ADM_SOURCES_FLAT_LINE_STEPS, kernels.STRESS_ENERGY_FLAT_LINE_STEPS)
    conformal_lines = emsource.kernels.conformal.CONFORMAL_SOURCES_LINE_STEPS[
        emsource.kernels.conformal.DECOMPOSITION_CHI, kernels.FORM_CONTRAVARIANT]
    for name, (call, plans) in calls.items():
        plans.clear()  # the calls above stored plans with the default drivers
        first = call()
        plans.clear()
        out = tuple(np.empty_like(a) for a in first) if name != "T" else np.empty_like(first)
        call(out=out)  # the full path stores the plan
        call(out=out)  # and this call runs it
        (plan,) = plans._plans.values()
        if name == "conformal":
            assert plan.extra[0].py_func is conformal_lines.py_func
        else:
            (table,) = plan.extra[2]  # 16^3 rows are below the streaming threshold
            assert table in line_tables
        as_tuple = (lambda r: (r,)) if name == "T" else tuple
        for a, b, c in zip(as_tuple(first), as_tuple(out), as_tuple(default[name])):
            np.testing.assert_array_equal(a, b)
            assert_same_arithmetic(a, c)
        plans.clear()
