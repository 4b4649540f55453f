"""The streaming-store source drivers (kernels/streaming_stores.py, ``ADM_SOURCES_FLAT_STREAMING``).

What could go wrong and is checked here: a line streamed to the wrong place or not at all
(outputs compared with the ordinary flat driver on the same data, which the package checks
against the 4D reference elsewhere, tests/test_vector_loops.py); the points before the first
whole cache line or after the last lost or written twice (rows that start mid-line and grids
that end mid-line); counts of bad points lost between the edges and the tasks (compared with
NumPy's count); a streaming store to a line that is not 64-byte aligned, which faults on x86
(the driver must decline rows not aligned alike, and leave them untouched); the public call
taking the driver without the fallback (a misaligned ``out`` must still get correct values);
and the hint not reaching the machine code (a driver that compiles to ordinary stores would
pass every other test).
"""

import math
import platform
import re

import numba
import numpy as np
import pytest

import emsource
import emsource.conformal
import emsource.grid_arrays
import emsource.sources
from emsource import _arguments as arg
from emsource.grid_arrays import empty_grid_function
from emsource.kernels import sources as kernels
from emsource.kernels._compile import FASTMATH_FLAGS
from emsource.kernels.streaming_stores import LINE_BYTES

from conftest import assert_same_arithmetic, random_curved_data

# 23 x 19 x 21 = 9177 points: several tasks of 1024 points, and a grid that ends mid-line.
SHAPE = (23, 19, 21)


def _rows_at(offset, shape, dtype, ncomp=None):
    """Uninitialised (ncomp, row) block (or a (npoints,) row) whose every row starts ``offset``
    bytes into a cache line: the kernel view of a grid function whose rows are so placed."""
    dtype = np.dtype(dtype)
    npoints = math.prod(shape)
    row_bytes = -(-npoints * dtype.itemsize // LINE_BYTES) * LINE_BYTES
    count = ncomp or 1
    buffer = np.empty(count * row_bytes + 2 * LINE_BYTES, np.uint8)
    start = (-buffer.ctypes.data) % LINE_BYTES + offset
    rows = buffer[start:start + count * row_bytes].view(dtype).reshape(count, -1)
    return rows if ncomp else rows[0, :npoints]


def _outputs(shape, dtype, offsets=(0, 0, 0, 0)):
    """rho, S_i, S_ij, S kernel views with rows at the given offsets into a line."""
    return [_rows_at(offsets[0], shape, dtype), _rows_at(offsets[1], shape, dtype, 3),
            _rows_at(offsets[2], shape, dtype, 6), _rows_at(offsets[3], shape, dtype)]


def _run(table, form, arrays, outputs, dtype):
    gamma, E, B = arrays
    constants = arg.kernel_constants(form, np.dtype(dtype), 1 / (4 * math.pi))
    return tuple(table[form](gamma, arg.PACKED_METRIC_INDEX, E, B, *outputs, *constants[1:],
                             True))


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("form", sorted(kernels.INPUT_FORMS))
@pytest.mark.parametrize("offset", [0, 16])
@pytest.mark.parametrize("shape", [SHAPE, (1, 1, 5)], ids=["9177-points", "5-points"])
def test_streaming_driver_equals_the_flat_driver_at_every_point_and_counts_alike(
        rng, dtype, form, offset, shape):
    """Rows at the start of a line (a padded grid function) and 16 bytes into one (where a
    large NumPy array's rows start): every output point equals the ordinary flat driver's up to
    contraction (``assert_same_arithmetic``), the head before the first whole line and the tail
    after the last included, and both counts are the flat driver's, the bad metrics counted
    exactly (a third of the points, in the edges too). A row of 5 points holds no whole line:
    all of it is head (or tail)."""
    _, _, gamma, E, B = random_curved_data(rng, shape, dtype)
    npoints = math.prod(shape)
    gamma, E, B = (a.reshape(-1, npoints) for a in (gamma, E, B))
    bad = rng.random(npoints) < 0.3
    edge = min(LINE_BYTES // np.dtype(dtype).itemsize, npoints // 3)
    bad[:edge] = bad[-edge:] = True  # whatever the head and tail, they hold bad points
    bad[npoints // 2] = False  # and a good point is compared on every grid
    gamma = gamma.copy()
    gamma[0, bad] = -1.0
    expected_outputs = _outputs(shape, dtype)
    expected = _run(kernels.ADM_SOURCES_FLAT, form, (gamma, E, B), expected_outputs, dtype)
    streamed_outputs = _outputs(shape, dtype, (offset,) * 4)
    unwritten = np.finfo(dtype).max  # no output here reaches it (bad points give NaN)
    for a in streamed_outputs:
        a[...] = unwritten
    counts = _run(kernels.ADM_SOURCES_FLAT_STREAMING, form, (gamma, E, B), streamed_outputs,
                  dtype)
    assert counts == expected and counts[0] == int(bad.sum())
    for ours, theirs in zip(streamed_outputs, expected_outputs):
        ours, theirs = ours[..., :npoints], theirs[..., :npoints]
        assert not (ours == unwritten).any()
        assert_same_arithmetic(ours[..., ~bad], theirs[..., ~bad])


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("upper", [False, True])
@pytest.mark.parametrize("offset", [0, 48])
def test_streaming_spacetime_driver_equals_the_flat_driver_and_declines_misaligned_rows(
        rng, dtype, upper, offset):
    """T_ab and T^ab (contravariant fields): every point equals the ordinary flat driver's up
    to contraction, head and tail included, and the counts are its counts (a lapse that is not
    positive at a third of the points, the first and last line's points among them); with its
    10 rows not aligned alike (contiguous rows of an odd length) the driver returns (-1, -1)
    and leaves them as they were."""
    alpha, beta, gamma, E, B = random_curved_data(rng, SHAPE, dtype)
    npoints = math.prod(SHAPE)
    alpha = alpha.reshape(npoints).copy()
    beta, gamma, E, B = (a.reshape(-1, npoints) for a in (beta, gamma, E, B))
    bad = rng.random(npoints) < 0.3
    lanes = LINE_BYTES // np.dtype(dtype).itemsize
    bad[:lanes] = bad[-lanes:] = True
    alpha[bad] = -1.0
    constants = arg.kernel_constants(0, np.dtype(dtype), 1 / (4 * math.pi))

    def run(table, T):
        return tuple(table[0, upper](alpha, beta, gamma, arg.PACKED_METRIC_INDEX, E, B, T,
                                     *constants[1:], True))

    expected_T = _rows_at(0, SHAPE, dtype, 10)
    expected = run(kernels.STRESS_ENERGY_FLAT, expected_T)
    T = _rows_at(offset, SHAPE, dtype, 10)
    unwritten = np.finfo(dtype).max
    T[...] = unwritten
    counts = run(kernels.STRESS_ENERGY_FLAT_STREAMING, T)
    assert counts == expected and counts[0] == int(bad.sum())
    T, expected_T = T[:, :npoints], expected_T[:, :npoints]
    assert not (T == unwritten).any()
    assert_same_arithmetic(T[:, ~bad], expected_T[:, ~bad])

    # C-contiguous rows of an odd number of points: each row starts at another offset.
    shifted = np.ones((10, npoints), dtype)
    assert run(kernels.STRESS_ENERGY_FLAT_STREAMING, shifted) == (-1, -1)
    assert (shifted == 1.0).all()


@pytest.mark.parametrize("offsets", [(0, 0, 16, 0), (8, 8, 8, 0), (4, 4, 4, 4)],
                         ids=["one-array-apart", "one-row-apart", "not-on-elements"])
def test_streaming_driver_declines_rows_not_aligned_alike_and_writes_nothing(rng, offsets):
    """A streaming store to a line that is not 64-byte aligned faults, so the driver checks
    every output row first: S_ij 16 bytes off the others, S 8 bytes off, or float64 rows 4
    bytes into a line (not on whole elements) make it return (-1, -1) with the outputs as
    they were, bit for bit."""
    _, _, gamma, E, B = random_curved_data(rng, SHAPE)
    npoints = math.prod(SHAPE)
    arrays = [a.reshape(-1, npoints) for a in (gamma, E, B)]
    outputs = _outputs(SHAPE, np.float64, offsets)
    for a in outputs:
        a[...] = rng.standard_normal(a.shape)
    before = [a.copy() for a in outputs]
    assert _run(kernels.ADM_SOURCES_FLAT_STREAMING, 0, arrays, outputs, np.float64) == (-1, -1)
    for a, b in zip(outputs, before):
        np.testing.assert_array_equal(a, b)


@pytest.mark.skipif(platform.machine().lower() not in ("x86_64", "amd64"),
                    reason="the instruction names checked are x86's")
def test_streaming_driver_compiles_to_non_temporal_stores_and_a_fence(rng):
    """The point of the driver is in its machine code: non-temporal vector stores (``vmovnt``
    on x86) and the fence that orders them (``sfence``); the ordinary flat driver has neither.
    A driver whose hint LLVM dropped would pass every value test above. (Serial, uncached
    copies of both drivers: Numba shows no machine code of cached kernels.)"""
    _, _, gamma, E, B = random_curved_data(rng, (4, 4, 4))
    arrays = [a.reshape(-1, 64) for a in (gamma, E, B)]
    options = dict(fastmath=set(FASTMATH_FLAGS), error_model="numpy")
    code = {}
    for name, table in (("streaming", kernels.ADM_SOURCES_FLAT_STREAMING),
                        ("ordinary", kernels.ADM_SOURCES_FLAT)):
        copy = numba.njit(**options)(table[0].py_func)
        _run({0: copy}, 0, arrays, _outputs((4, 4, 4), np.float64), np.float64)
        code[name] = copy.inspect_asm(copy.signatures[0])
    assert len(re.findall(r"\bvmovnt\w*", code["streaming"])) >= 11  # one per output row
    assert "sfence" in code["streaming"]
    assert not re.findall(r"\bv?movnt\w*", code["ordinary"]) and "sfence" not in code["ordinary"]


def test_streaming_stores_from_two_mebibyte_rows():
    """The choice by size: rows of 2 MiB or more (64^3 float64, 81^3 float32) try the
    streaming drivers; 63^3 float64 and 80^3 float32 (2.05 MB) do not."""
    assert arg.takes_streaming_stores((64, 64, 64), np.float64)
    assert not arg.takes_streaming_stores((63, 63, 63), np.float64)
    assert arg.takes_streaming_stores((81, 81, 81), np.float32)
    assert not arg.takes_streaming_stores((80, 80, 80), np.float32)


class _Recorder:
    """A driver table entry that records its calls and their counts."""

    def __init__(self, real):
        self.real = real
        self.counts = []

    def __call__(self, *arguments):
        counts = self.real(*arguments)
        self.counts.append(tuple(counts) if isinstance(counts, tuple) else counts)
        return counts


def test_public_call_streams_into_padded_grid_functions_and_falls_back_on_misaligned_out(
        rng, monkeypatch):
    """With the size threshold lowered to 4 KiB, adm_sources on a 16^3 grid: into padded grid
    functions (rows on line starts) the streaming driver runs, and a planned second call too;
    into an ``out`` whose rho starts one element into a line it declines and the ordinary
    driver fills the outputs. Both give the ordinary driver's values up to contraction."""
    shape = (16, 16, 16)
    _, _, gamma, E, B = random_curved_data(rng, shape)
    expected = emsource.adm_sources(gamma, E, B)
    monkeypatch.setattr(arg, "STREAMING_ROW_BYTES", 4096)
    recorder = _Recorder(kernels.ADM_SOURCES_FLAT_STREAMING[0])
    monkeypatch.setitem(kernels.ADM_SOURCES_FLAT_STREAMING, 0, recorder)
    emsource.sources._ADM_PLANS.clear()

    padded = emsource.AdmSources(empty_grid_function(shape), empty_grid_function((3,) + shape),
                                 empty_grid_function((6,) + shape), empty_grid_function(shape))
    emsource.adm_sources(gamma, E, B, out=padded)
    emsource.adm_sources(gamma, E, B, out=padded)  # through the plan the first call stored
    assert recorder.counts == [(0, 0), (0, 0)]
    (plan,) = emsource.sources._ADM_PLANS._plans.values()
    assert plan.extra[2] == (kernels.ADM_SOURCES_FLAT_STREAMING, kernels.ADM_SOURCES_FLAT)
    for ours, theirs in zip(padded, expected):
        assert_same_arithmetic(ours, theirs)

    storage = np.empty(math.prod(shape) + LINE_BYTES // 8, np.float64)
    start = (-storage.ctypes.data) % LINE_BYTES // 8 + 1  # one element into a line
    misaligned = emsource.AdmSources(storage[start:start + math.prod(shape)].reshape(shape),
                                     np.empty((3,) + shape), np.empty((6,) + shape),
                                     np.empty(shape))
    for a in misaligned:
        a[...] = np.nan
    emsource.adm_sources(gamma, E, B, out=misaligned)
    assert recorder.counts[-1] == (-1, -1)
    for ours, theirs in zip(misaligned, expected):
        assert_same_arithmetic(ours, theirs)

    # Results the call allocates itself start on cache lines (C-contiguous), so they stream.
    allocated = emsource.adm_sources(gamma, E, B)
    assert recorder.counts[-1] == (0, 0)
    for ours, theirs in zip(allocated, expected):
        assert ours.flags.c_contiguous and ours.ctypes.data % LINE_BYTES == 0
        assert_same_arithmetic(ours, theirs)
    emsource.sources._ADM_PLANS.clear()


def test_public_spacetime_call_streams_where_it_allocates_and_into_padded_out(rng, monkeypatch):
    """stress_energy_4d with the threshold lowered to 4 KiB on a 16^3 grid: its own result and
    a padded ``out`` take the streaming driver (the plan keeps the streaming table first), and
    both equal the ordinary driver's result up to contraction."""
    shape = (16, 16, 16)
    alpha, beta, gamma, E, B = random_curved_data(rng, shape)
    expected = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    monkeypatch.setattr(arg, "STREAMING_ROW_BYTES", 4096)
    recorder = _Recorder(kernels.STRESS_ENERGY_FLAT_STREAMING[0, False])
    monkeypatch.setitem(kernels.STRESS_ENERGY_FLAT_STREAMING, (0, False), recorder)
    emsource.sources._STRESS_ENERGY_PLANS.clear()
    allocated = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    padded = empty_grid_function((10,) + shape)
    emsource.stress_energy_4d(alpha, beta, gamma, E, B, out=padded)
    emsource.stress_energy_4d(alpha, beta, gamma, E, B, out=padded)
    assert recorder.counts == [(0, 0)] * 3
    plans = list(emsource.sources._STRESS_ENERGY_PLANS._plans.values())
    assert plans and all(plan.extra[2][0] is kernels.STRESS_ENERGY_FLAT_STREAMING
                         for plan in plans)
    assert_same_arithmetic(allocated, expected)
    assert_same_arithmetic(padded, expected)
    emsource.sources._STRESS_ENERGY_PLANS.clear()


def test_line_aligned_allocation_is_an_ordinary_contiguous_array():
    """empty_line_aligned: the asked shape and dtype, C-contiguous, writeable, its first
    element on a line start, for shapes whose byte length is not a whole number of lines and
    for an empty one."""
    for shape, dtype in (((3, 5, 7, 9), np.float64), ((11,), np.float32), ((0, 4), np.float64)):
        a = emsource.grid_arrays.empty_line_aligned(shape, dtype)
        assert a.shape == shape and a.dtype == dtype and a.flags.c_contiguous
        assert a.flags.writeable
        assert a.size == 0 or a.ctypes.data % LINE_BYTES == 0  # (no element: no address)
        a[...] = 1
        assert a.sum() == a.size


@pytest.mark.parametrize("decomposition", ["chi", "w", "phi"])
@pytest.mark.parametrize("offset", [0, 16])
def test_streaming_conformal_driver_equals_the_ordinary_call_and_counts_bad_factors(
        rng, decomposition, offset):
    """The conformal sources' streaming driver (chi, W, phi; contravariant fields): every
    output point equals the ordinary public call's up to contraction, head and tail included,
    and its count of bad points is NumPy's count of conformal factors that are not positive
    (chi, W) placed in the first and last line too; rows not aligned alike are declined (-1)
    and left as they were."""
    from emsource.conformal import conformal_sources
    from emsource.kernels import conformal as conformal_kernels
    from emsource.metric_forms import decomposition as find_decomposition

    _, _, gamma, E, B = random_curved_data(rng, SHAPE)
    npoints = math.prod(SHAPE)
    factor = rng.uniform(0.5, 1.5, SHAPE) if decomposition != "phi" else rng.uniform(
        -0.3, 0.3, SHAPE)
    bad = np.zeros(npoints, bool)
    if decomposition != "phi":
        bad = rng.random(npoints) < 0.2
        bad[:16] = bad[-16:] = True
        factor.reshape(npoints)[bad] = -1.0
    good = ~bad
    expected = conformal_sources(np.where(bad.reshape(SHAPE), 1.0, factor), gamma, E, B,
                                 decomposition=decomposition)
    code = find_decomposition("test", decomposition).code
    driver = conformal_kernels.CONFORMAL_SOURCES_STREAMING[code, kernels.FORM_CONTRAVARIANT]
    physics = arg.kernel_scalars(np.dtype(np.float64), 1 / (4 * math.pi),
                                 arg.pivot_floor(np.float64), 1)
    rho, S = _rows_at(offset, SHAPE, np.float64), _rows_at(offset, SHAPE, np.float64)
    S_i, A = _rows_at(offset, SHAPE, np.float64, 3), _rows_at(offset, SHAPE, np.float64, 6)
    unwritten = np.finfo(np.float64).max
    for a in (rho, S_i, S, A):
        a[...] = unwritten
    inputs = (factor.reshape(npoints), gamma.reshape(6, npoints), arg.PACKED_METRIC_INDEX,
              E.reshape(3, npoints), B.reshape(3, npoints))
    count = driver(*inputs, rho, S_i, S, A, *physics, True)
    assert count == int(bad.sum())
    for ours, theirs in zip((rho, S_i, S, A), expected):
        ours = ours[..., :npoints]
        assert not (ours == unwritten).any()
        assert_same_arithmetic(ours[..., good], theirs.reshape(ours.shape)[..., good])

    misaligned = [np.ones(npoints), np.ones((3, npoints)), np.ones(npoints), np.ones((6, npoints))]
    assert driver(*inputs, *misaligned, *physics, True) == -1
    assert all((a == 1.0).all() for a in misaligned)


def test_public_conformal_call_streams_into_padded_out(rng, monkeypatch):
    """conformal_sources (chi) with the threshold lowered to 4 KiB on a 16^3 grid: into padded
    grid functions and into its own results it takes the streaming driver, and both equal the
    ordinary call up to contraction; a bad chi is still reported with its count."""
    from emsource.conformal import ConformalSources, conformal_sources
    from emsource.kernels import conformal as conformal_kernels

    shape = (16, 16, 16)
    _, _, gamma, E, B = random_curved_data(rng, shape)
    chi = rng.uniform(0.5, 1.5, shape)
    expected = conformal_sources(chi, gamma, E, B, decomposition="chi")
    monkeypatch.setattr(arg, "STREAMING_ROW_BYTES", 4096)
    key = (conformal_kernels.DECOMPOSITION_CHI, kernels.FORM_CONTRAVARIANT)
    recorder = _Recorder(conformal_kernels.CONFORMAL_SOURCES_STREAMING[key])
    monkeypatch.setitem(conformal_kernels.CONFORMAL_SOURCES_STREAMING, key, recorder)
    emsource.conformal._CONFORMAL_PLANS.clear()  # the call above planned the ordinary driver
    padded = ConformalSources(empty_grid_function(shape), empty_grid_function((3,) + shape),
                              empty_grid_function(shape), empty_grid_function((6,) + shape))
    conformal_sources(chi, gamma, E, B, decomposition="chi", out=padded)
    allocated = conformal_sources(chi, gamma, E, B, decomposition="chi")
    assert recorder.counts == [0, 0]
    for ours, mine, theirs in zip(padded, allocated, expected):
        assert_same_arithmetic(ours, theirs)
        assert_same_arithmetic(mine, theirs)
    chi[3, 4, 5] = -1.0
    with pytest.raises(emsource.GridPointError, match="1 of 4096 grid points"):
        conformal_sources(chi, gamma, E, B, decomposition="chi", out=padded)
    assert recorder.counts[-1] == 1
    assert not emsource.conformal._CONFORMAL_PLANS._plans  # streamed calls store no plan


@pytest.mark.parametrize("kind", ["eulerian", "four_velocity"])
@pytest.mark.parametrize("offset", [0, 16])
def test_streaming_ideal_mhd_driver_equals_the_ordinary_call_and_counts_bad_lapses(
        rng, kind, offset):
    """Ideal MHD's streaming driver (both velocity kinds, contravariant B): E^i, u^a, b^a equal
    the ordinary public call's up to contraction at every good point, head and tail included;
    its count is NumPy's count of the lapses set to 0 (the first and last line among them);
    rows not aligned alike are declined (-1) and left as they were."""
    from emsource.ideal_mhd import VELOCITY_KINDS, ideal_mhd_fields
    from emsource.kernels import ideal_mhd as mhd_kernels
    from test_ideal_mhd_strips import _state

    (alpha, beta, gamma, B, v), _ = _state(rng, SHAPE, "upper", kind)
    npoints = math.prod(SHAPE)
    expected = ideal_mhd_fields(alpha, beta, gamma, B, v, velocity_kind=kind)
    bad = rng.random(npoints) < 0.2
    bad[:8] = bad[-8:] = True
    alpha = alpha.reshape(npoints).copy()
    alpha[bad] = 0.0
    driver = mhd_kernels.IDEAL_MHD_STREAMING[kernels.FORM_CONTRAVARIANT, VELOCITY_KINDS[kind]]
    physics = arg.kernel_scalars(np.dtype(np.float64), arg.pivot_floor(np.float64), 1)
    inputs = (alpha, beta.reshape(3, npoints), gamma.reshape(6, npoints),
              arg.PACKED_METRIC_INDEX, B.reshape(3, npoints), v.reshape(3, npoints))
    outputs = [_rows_at(offset, SHAPE, np.float64, ncomp) for ncomp in (3, 4, 4)]
    unwritten = np.finfo(np.float64).max
    for a in outputs:
        a[...] = unwritten
    assert driver(*inputs, *outputs, *physics, True) == int(bad.sum())
    for ours, theirs in zip(outputs, expected):
        ours = ours[:, :npoints]
        assert not (ours == unwritten).any()
        assert_same_arithmetic(ours[:, ~bad], theirs.reshape(ours.shape)[:, ~bad])

    misaligned = [np.ones((3, npoints)), np.ones((4, npoints)), np.ones((4, npoints))]
    assert driver(*inputs, *misaligned, *physics, True) == -1
    assert all((a == 1.0).all() for a in misaligned)


def test_public_ideal_mhd_call_streams_into_padded_out(rng, monkeypatch):
    """ideal_mhd_fields with the threshold lowered to 4 KiB on a 16^3 grid: into padded grid
    functions it takes the streaming driver (no plan stored) and equals the ordinary call up to
    contraction; a lapse of 0 is still reported with its count."""
    from emsource.ideal_mhd import IdealMhdFields, ideal_mhd_fields
    from emsource.kernels import ideal_mhd as mhd_kernels
    from test_ideal_mhd_strips import _state

    import emsource.ideal_mhd

    shape = (16, 16, 16)
    (alpha, beta, gamma, B, v), _ = _state(rng, shape, "upper", "eulerian")
    expected = ideal_mhd_fields(alpha, beta, gamma, B, v)
    monkeypatch.setattr(arg, "STREAMING_ROW_BYTES", 4096)
    key = (kernels.FORM_CONTRAVARIANT, mhd_kernels.VELOCITY_EULERIAN)
    recorder = _Recorder(mhd_kernels.IDEAL_MHD_STREAMING[key])
    monkeypatch.setitem(mhd_kernels.IDEAL_MHD_STREAMING, key, recorder)
    emsource.ideal_mhd._IDEAL_MHD_PLANS.clear()
    padded = IdealMhdFields(empty_grid_function((3,) + shape), empty_grid_function((4,) + shape),
                            empty_grid_function((4,) + shape))
    ideal_mhd_fields(alpha, beta, gamma, B, v, out=padded)
    assert recorder.counts == [0]
    for ours, theirs in zip(padded, expected):
        assert_same_arithmetic(ours, theirs)
    alpha[2, 3, 4] = 0.0
    with pytest.raises(emsource.GridPointError, match="1 of 4096 grid points"):
        ideal_mhd_fields(alpha, beta, gamma, B, v, out=padded)
    assert recorder.counts[-1] == 1
    assert not emsource.ideal_mhd._IDEAL_MHD_PLANS._plans
