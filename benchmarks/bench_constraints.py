"""Speed of the ADM constraint kernel (emsource.constraints), stand-alone.

Prints medians of repeated runs on a Kerr-Newman box for orders 2, 4, 6:
- points per second of the compiled strip kernel (the public call, EM sources included, and
  the bare kernel call), of main's kernel before the contracted scalar curvature (``--rev``,
  default :data:`constraint_flops.BEFORE`; it built the six rows of R_ij) and of the
  point-at-a-time kernel of
  :data:`constraint_flops.POINT_AT_A_TIME`, both read from git by
  ``kernel_revision.revision_module`` and timed interleaved with the current kernel in this run;
- the same-traffic probe: the kernel's loop nest, stack buffers and stencil stage (ring of d_x g,
  gamma^ij, first derivatives, contracted second derivatives) with the algebra loop replaced by
  the same number of output stores, as a share of the kernel's time;
- the same constraints written in plain NumPy (slices for the order-4 differences, einsum for
  the contractions), and the ratio;
- a STREAM-style triad a = b + s c measured in the same run, and the kernel's effective
  bandwidth (its 16 input and 8 output arrays counted once per point) as a share of it;
- the floating-point rate: operations per interior point as written (``constraint_flops.py``)
  times interior points per second, against this machine's multiply-add peak measured in the
  same run at every vector width LLVM can emit here (128-, 256- and 512-bit, each in a child
  process started with NUMBA_CPU_FEATURES set for that width, before and after the kernels;
  8 independent chains of 16 multiply-adds per element, both threads), the highest rate
  measured in the run (at any width) being the peak used, and beside it the derived figure
  (cores x clock x 2 FMA ports x 8 lanes x 2, the port count from memory); the kernel at
  LLVM's default vector width (the same source with its ``prefer_512_bit_vectors()`` call left
  out, ``kernel_revision.variant_module``) and with a fixed band of 32 y columns per task (the
  narrowing of ``_band_width`` disabled), both interleaved with the kernel; and the roofline: operations per
  byte moved times the triad bandwidth, the rate at which the kernel would be bound by memory
  instead.

Usage: python benchmarks/bench_constraints.py [N] [repeats] [--rev REV]
       (default N = 64, 5 repeats, REV = constraint_flops.BEFORE)
"""

import math
import statistics
import time

import numpy as np

from constraint_flops import BEFORE, PACKED_PAIR, POINT_AT_A_TIME, flops_per_point
from kernel_revision import revision_module, variant_module
from emsource.constraints import adm_constraints, interior_points
from emsource.exact import kerr_newman
from emsource.grid import UniformGrid
from emsource.kernels._compile import grid_kernel
from emsource.kernels import constraints as strips
from emsource.kernels.constraints import adm_constraints_grid
from emsource.kernels.strip_buffers import strip_buffer
from emsource.kernels.stencils import first_derivative_weights, second_derivative_weights
from numba import prange

#: The strip kernel's buffer shapes, as module constants (literal sizes for strip_buffer).
_ROWS, _ROW_LENGTH = strips._ROWS, strips._ROW_LENGTH
_RING_ROWS, _SPAN = strips._RING_ROWS, strips._SPAN
_INV_ROWS, _SUM_ROWS = strips._INV_ROWS, strips._SUM_ROWS


@grid_kernel
def _triad(a, b, c, s):
    for n in prange(a.shape[0]):
        a[n] = b[n] + s * c[n]


#: Independent multiply-add chains per element in :func:`_multiply_adds`. A 256- or 512-bit FMA
#: takes 4 cycles before its result can feed the next one and a core can start up to two per
#: cycle (latency and port count from memory), so 8 independent chains keep both ports busy
#: without relying on out-of-order execution across loop iterations.
CHAINS = 8


@grid_kernel
def _multiply_adds(rows, a, b, repeats):
    """16 dependent x = a x + b (2 flops each) in each of ``CHAINS`` independent chains, per
    element of a (threads, CHAINS, 64) block, one block per thread (4 KiB: stays in L1).
    LLVM vectorises the loop over the 64 elements at the width it chooses for this process."""
    for t in prange(rows.shape[0]):
        for _ in range(repeats):
            for n in range(rows.shape[2]):
                x0 = rows[t, 0, n]
                x1 = rows[t, 1, n]
                x2 = rows[t, 2, n]
                x3 = rows[t, 3, n]
                x4 = rows[t, 4, n]
                x5 = rows[t, 5, n]
                x6 = rows[t, 6, n]
                x7 = rows[t, 7, n]
                for _step in range(16):
                    x0 = x0 * a + b
                    x1 = x1 * a + b
                    x2 = x2 * a + b
                    x3 = x3 * a + b
                    x4 = x4 * a + b
                    x5 = x5 * a + b
                    x6 = x6 * a + b
                    x7 = x7 * a + b
                rows[t, 0, n] = x0
                rows[t, 1, n] = x1
                rows[t, 2, n] = x2
                rows[t, 3, n] = x3
                rows[t, 4, n] = x4
                rows[t, 5, n] = x5
                rows[t, 6, n] = x6
                rows[t, 7, n] = x7


def measured_peak(threads, repeats, seconds=0.1):
    """GFLOP/s of :func:`_multiply_adds` on ``threads`` blocks (median of ``repeats``), each run
    about ``seconds`` long (as long as a kernel call here, so that a shared machine's load falls
    on both alike)."""
    rows = np.ones((threads, CHAINS, 64))
    _multiply_adds(rows, 0.999999, 1e-6, 1)
    t0 = time.perf_counter()
    _multiply_adds(rows, 0.999999, 1e-6, 1000)
    count = max(1000, int(1000 * seconds / (time.perf_counter() - t0)))
    t = median_time(lambda: _multiply_adds(rows, 0.999999, 1e-6, count), repeats)
    return 2 * 16 * rows.size * count / t / 1e9


#: The vector widths LLVM can be asked for on an AVX-512 CPU, as target-feature changes added to
#: the host's features through Numba's NUMBA_CPU_FEATURES (LLVM's own tuning flags: with
#: "prefer-256-bit", its default on this CPU, loops use 256-bit registers; removing it allows
#: 512-bit ones; "prefer-128-bit" asks for 128-bit ones).
WIDTHS = {"128-bit": ",+prefer-128-bit", "256-bit": "", "512-bit": ",-prefer-256-bit"}


def host_features():
    import llvmlite.binding as llvm

    return llvm.get_host_cpu_features().flatten()


def width_of_this_process():
    """The vector width LLVM uses in this process (from NUMBA_CPU_FEATURES, else the default)."""
    import numba

    features = numba.config.CPU_FEATURES or ""
    if "-prefer-256-bit" in features:
        return "512-bit"
    if "+prefer-128-bit" in features:
        return "128-bit"
    return "256-bit"


def child_peak(width, repeats):
    """The multiply-add peak in GFLOP/s, measured by this script run with ``--peak-child`` in a
    process whose LLVM emits ``width`` vectors."""
    import os
    import subprocess
    import sys

    environment = dict(os.environ)
    environment.pop("NUMBA_CPU_FEATURES", None)
    if WIDTHS[width]:
        environment["NUMBA_CPU_FEATURES"] = host_features() + WIDTHS[width]
    result = subprocess.run([sys.executable, os.path.abspath(__file__), "--peak-child",
                             "64", str(repeats)], env=environment,
                            capture_output=True, text=True, check=True)
    return float(result.stdout)

#: The kernel's request for 512-bit vectors, left out of its default-width variant.
WIDTH_REQUEST = "        prefer_512_bit_vectors()\n"
#: The loop of ``_band_width`` that narrows the band, disabled in the fixed-band variant.
BAND_NARROWING = "    while width * (2 * r + 1) * nz > _BAND_PLANE_POINTS:\n"


def derived_peak(threads):
    """(GFLOP/s, how it is derived): threads x clock (the "cpu MHz" of /proc/cpuinfo) x 2 FMA
    ports (from memory, not measured) x 8 float64 lanes x 2 flops."""
    mhz = None
    try:
        with open("/proc/cpuinfo") as info:
            for line in info:
                if line.startswith("cpu MHz"):
                    mhz = float(line.split(":")[1])
                    break
    except OSError:
        pass
    if mhz is None:
        return None, "clock unknown"
    value = threads * mhz / 1e3 * 2 * 8 * 2
    return value, (f"{threads} cores x {mhz / 1e3:.2f} GHz x 2 FMA ports (port count from memory, "
                   f"never measured) x 8 float64 lanes x 2 flops")


@grid_kernel
def _stencil_probe(gamma, K, rho, S, interior, w1, w2, inv_h, H, M, H_scale, M_scale):
    """The strip kernel's memory traffic and stencils without its algebra: the same loop nest as
    ``adm_constraints_grid``, the same stack buffers and the same calls for the ring of d_x g,
    gamma^ij, the first derivatives and the contracted second derivatives of each strip
    (``_enter_ring``, ``_strip_inputs``), then 8 of the buffers' rows to the outputs through the
    interior mask (the stores the algebra loop makes; edges of the grid are not written)."""
    u = np.uint64
    nx, ny, nz = rho.shape
    r = w1.shape[0]
    period = 2 * r + 1
    width = strips._band_width(nz, r)
    bands = (ny + width - 1) // width
    for task in prange(nx * bands):
        band = task // nx
        i = task - band * nx
        low = band * width
        first = max(low, r)
        last = min(min(ny, low + width), ny - r)
        if (i < r) | (i >= nx - r) | (first >= last):
            continue
        buf = strip_buffer(_ROWS, _ROW_LENGTH, rho)
        ring = strip_buffer(_RING_ROWS, _SPAN, rho)
        inv = strip_buffer(_INV_ROWS, _ROW_LENGTH, rho)
        sums = strip_buffer(_SUM_ROWS, _ROW_LENGTH, rho)
        for start in range(r, nz - r, strips._STRIP):
            count = min(strips._STRIP, nz - r - start)
            span = count + 2 * r
            base = u(start)
            for entering in range(first - r, last + r):
                strips._enter_ring(gamma, i, entering, start, span, r, w1, w2, inv_h[0], ring,
                                   entering % period)
                j = entering - r
                if j < first:
                    continue
                strips._strip_inputs(gamma, K, i, j, start, count, span, r, w1, w2, inv_h,
                                     ring, j % period, period, buf, inv, sums, 1.0, 2.0)
                for n in range(count):
                    k = base + u(n)
                    inside = interior[i, j, k] != 0
                    H[i, j, k] = sums[strips._R2, n] if inside else np.nan
                    H_scale[i, j, k] = inv[strips._GI, n] if inside else np.nan
                    M[0, i, j, k] = buf[strips._DG, n] if inside else np.nan
                    M[1, i, j, k] = buf[strips._DG + 7, n] if inside else np.nan
                    M[2, i, j, k] = buf[strips._DG + 14, n] if inside else np.nan
                    M_scale[0, i, j, k] = buf[strips._DK, n] if inside else np.nan
                    M_scale[1, i, j, k] = buf[strips._DK + 7, n] if inside else np.nan
                    M_scale[2, i, j, k] = buf[strips._DK + 14, n] if inside else np.nan


def interleaved_medians(functions, repeats):
    """Median seconds of each function, the functions called in turn ``repeats`` times (so that
    a shared machine's load falls on all of them alike)."""
    times = [[] for _ in functions]
    for _ in range(repeats):
        for function, record in zip(functions, times):
            t0 = time.perf_counter()
            function()
            record.append(time.perf_counter() - t0)
    return [statistics.median(record) for record in times]


def median_time(function, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        function()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def numpy_constraints(gamma, K, rho, S, h):
    """H and M_i on interior points (2 per face cut) with 4th-order differences, plain NumPy."""
    w1 = (2.0 / 3.0, -1.0 / 12.0)
    w2 = (-5.0 / 2.0, 4.0 / 3.0, -1.0 / 12.0)
    n = gamma.shape[1:]
    core = tuple(slice(2, m - 2) for m in n)

    def shifted(f, axis, m):
        sl = [slice(None)] + list(core)
        sl[axis + 1] = slice(2 + m, n[axis] - 2 + m)
        return f[tuple(sl)]

    def d1(f, axis):
        return sum(w * (shifted(f, axis, m) - shifted(f, axis, -m))
                   for m, w in zip((1, 2), w1)) / h

    def d1_full(f, axis):  # first derivative on a region widened by 2 along the other axes
        out = np.zeros_like(f)
        sl = [slice(None)] * 4
        sl[axis + 1] = slice(2, f.shape[axis + 1] - 2)
        acc = 0
        for m, w in zip((1, 2), w1):
            p = [slice(None)] * 4
            q = [slice(None)] * 4
            p[axis + 1] = slice(2 + m, f.shape[axis + 1] - 2 + m)
            q[axis + 1] = slice(2 - m, f.shape[axis + 1] - 2 - m)
            acc = acc + w * (f[tuple(p)] - f[tuple(q)])
        out[tuple(sl)] = acc / h
        return out

    def full(p):
        return np.stack([np.stack([p[PACKED_PAIR[i, j]] for j in range(3)]) for i in range(3)])

    g = full(gamma[(slice(None),) + core])
    Kl = full(K[(slice(None),) + core])
    dg = np.stack([full(d1(gamma, a)) for a in range(3)], axis=2)  # [i, j, k] = d_k g_ij
    dK = np.stack([full(d1(K, a)) for a in range(3)], axis=2)
    ddg = np.empty((3, 3, 3, 3) + g.shape[2:])
    for a in range(3):
        second = w2[0] * gamma[(slice(None),) + core] + sum(
            w * (shifted(gamma, a, m) + shifted(gamma, a, -m)) for m, w in zip((1, 2), w2[1:]))
        ddg[:, :, a, a] = full(second / h**2)
        for b in range(a + 1, 3):
            mixed = full(d1(d1_full(gamma, a), b))
            ddg[:, :, a, b] = mixed
            ddg[:, :, b, a] = mixed
    gm = np.moveaxis(g, (0, 1), (-2, -1))
    gi = np.moveaxis(np.linalg.inv(gm), (-2, -1), (0, 1))
    G1 = 0.5 * (np.einsum("kji...->kij...", dg) + dg - np.einsum("ijk...->kij...", dg))
    G2 = np.einsum("mk...,kij...->mij...", gi, G1)
    second = (np.einsum("adcb...->abcd...", ddg) + np.einsum("cbad...->abcd...", ddg)
              - ddg - np.einsum("cdab...->abcd...", ddg))
    ric = (0.5 * np.einsum("cd...,abcd...->ab...", gi, second)
           + np.einsum("cd...,mad...,mcb...->ab...", gi, G2, G1)
           - np.einsum("cd...,mab...,mcd...->ab...", gi, G2, G1))
    R = np.einsum("ab...,ab...->...", gi, ric)
    trK = np.einsum("ab...,ab...->...", gi, Kl)
    Ku = np.einsum("ac...,bd...,cd...->ab...", gi, gi, Kl)
    H = R + trK**2 - np.einsum("ab...,ab...->...", Ku, Kl) - 16 * math.pi * rho[core]
    DK = (np.einsum("abc...->cab...", dK) - np.einsum("mca...,mb...->cab...", G2, Kl)
          - np.einsum("mcb...,am...->cab...", G2, Kl))
    M = (np.einsum("jk...,jki...->i...", gi, DK) - np.einsum("jk...,ijk...->i...", gi, DK)
         - 8 * math.pi * S[(slice(None),) + core])
    return H, M


def kernel_data(n):
    """The benchmark's Kerr-Newman box: grid, exact data, rho and S_i (Gaussian units)."""
    from emsource import adm_sources

    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (n, n, n))
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    s = adm_sources(d.gamma, d.E, d.B, units="gaussian")
    return grid, d, np.ascontiguousarray(s.rho), np.ascontiguousarray(s.S_i)


def kernel_call(grid, d, rho, S, order):
    """A function that runs the bare strip kernel once at ``order`` (outputs allocated once)."""
    ev = interior_points(np.ones(grid.shape, dtype=bool), order).view(np.uint8)
    outs = (np.empty(grid.shape), np.empty((3,) + grid.shape), np.empty(grid.shape),
            np.empty((3,) + grid.shape))
    w1, w2 = first_derivative_weights(order), second_derivative_weights(order)
    inv_h = np.full(3, 1.0 / grid.spacing[0])

    def bare():
        adm_constraints_grid(d.gamma, d.K, rho, S, ev, w1, w2, inv_h, 16 * math.pi, 8 * math.pi,
                             *outs)
    return bare, outs, (ev, w1, w2, inv_h)


def main():
    import argparse
    import os

    import numba

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("points", nargs="?", type=int, default=64, help="points per axis (64)")
    parser.add_argument("repeats", nargs="?", type=int, default=5,
                        help="repetitions per median (5)")
    parser.add_argument("--rev", default=BEFORE,
                        help=f"git revision of kernels/constraints.py timed as the before "
                             f"(default {BEFORE})")
    parser.add_argument("--peak-child", action="store_true", help=argparse.SUPPRESS)
    options = parser.parse_args()
    threads = numba.get_num_threads()
    if options.peak_child:  # the child process of child_peak: print the peak, nothing else
        print(f"{measured_peak(threads, options.repeats):.3f}")
        return
    n, repeats = options.points, options.repeats
    own_width = width_of_this_process()

    grid, d, src_rho, src_S = kernel_data(n)
    h = grid.spacing[0]
    print(f"Kerr-Newman box, {n}^3 points, float64, {threads} threads, median of {repeats}; "
          f"this process: {own_width} vectors; load average at the start "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}")

    # Triad over as many points as the kernel touches arrays: 24 arrays of n^3.
    m = 24 * n**3
    a, b, c = np.zeros(m), np.ones(m), np.full(m, 2.0)
    _triad(a, b, c, 3.0)
    t_triad = median_time(lambda: _triad(a, b, c, 3.0), repeats)
    triad_bw = 3 * 8 * m / t_triad
    # The multiply-add peak at every width, each in a child process (LLVM's width is fixed per
    # process), before and after the kernels; the own width again beside each order.
    width_peaks = {w: [child_peak(w, repeats)] for w in WIDTHS}
    peaks = [measured_peak(threads, repeats)]
    print(f"triad: {triad_bw / 1e9:.2f} GB/s (3 arrays counted); multiply-add peak at the start: "
          + ", ".join(f"{w} {v[0]:.1f}" for w, v in width_peaks.items())
          + f" GFLOP/s (child processes), {own_width} in this process {peaks[0]:.1f}")

    # Bytes per point: 16 float64 inputs, 8 float64 outputs, the uint8 interior mask.
    bytes_per_point = 24 * 8 + 1
    before_kernel = revision_module(options.rev, "constraints").adm_constraints_grid
    point_kernel = revision_module(POINT_AT_A_TIME, "constraints").adm_constraints_grid
    default_width_kernel = variant_module("constraints", "default_width",
                                          [(WIDTH_REQUEST, "")]).adm_constraints_grid
    fixed_band_kernel = variant_module("constraints", "fixed_band",
                                       [(BAND_NARROWING, "    while False:\n")]
                                       ).adm_constraints_grid
    results = {}
    for order in (2, 4, 6):
        bare, outs, (ev, w1, w2, inv_h) = kernel_call(grid, d, src_rho, src_S, order)
        before = tuple(np.empty_like(o) for o in outs)
        scratch = tuple(np.empty_like(o) for o in outs)

        def main_kernel():
            before_kernel(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, 16 * math.pi,
                          8 * math.pi, *before)

        def point_at_a_time():
            point_kernel(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, PACKED_PAIR,
                         16 * math.pi, 8 * math.pi, *scratch)

        def default_width():
            default_width_kernel(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, 16 * math.pi,
                                 8 * math.pi, *scratch)

        def fixed_band():
            fixed_band_kernel(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, 16 * math.pi,
                              8 * math.pi, *scratch)

        def probe():
            _stencil_probe(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, *scratch)

        bare()
        main_kernel()
        point_at_a_time()
        default_width()
        fixed_band()
        probe()
        peaks.append(measured_peak(threads, repeats))
        t_bare, t_main, t_default, t_fixed, t_probe = interleaved_medians(
            (bare, main_kernel, default_width, fixed_band, probe), repeats)
        peaks.append(measured_peak(threads, repeats))
        t_point = median_time(point_at_a_time, repeats)
        t_public = median_time(lambda: adm_constraints(d.gamma, d.K, d.E, d.B, spacing=h,
                                                       order=order), repeats)
        # Work is done at interior points only (radius = order / 2 from every face).
        npts = (n - order) ** 3
        bw = 24 * 8 * n**3 / t_bare
        flops, _ = flops_per_point(order)
        flops_main, _ = flops_per_point(order, options.rev)
        flops_point, _ = flops_per_point(order, POINT_AT_A_TIME)
        agree = max(float(np.nanmax(np.abs(x - y))) for x, y in zip(outs[:2], before[:2]))
        results[order] = dict(t_bare=t_bare, t_probe=t_probe, t_main=t_main, t_point=t_point,
                              t_public=t_public, npts=npts, bw=bw, flops=flops,
                              flops_main=flops_main, flops_point=flops_point, agree=agree)
        print(f"order {order}: kernel {npts / t_bare / 1e6:7.2f} Mpoint/s ({t_bare * 1e3:6.1f} ms; "
              f"effective bandwidth {100 * bw / triad_bw:5.1f} % of triad), public call with EM "
              f"sources and checks {npts / t_public / 1e6:7.2f} Mpoint/s")
        print(f"         main's kernel at {options.rev} (interleaved) {t_main * 1e3:6.1f} ms: "
              f"this kernel takes {t_bare / t_main:5.3f} of its time (max |difference| of H, M "
              f"{agree:.1e}); point-at-a-time kernel at {POINT_AT_A_TIME} "
              f"{npts / t_point / 1e6:7.2f} Mpoint/s ({t_point / t_bare:4.2f}x this kernel's time)")
        print(f"         the same kernel at LLVM's default width (interleaved) "
              f"{t_default * 1e3:6.1f} ms: with 512-bit vectors it takes {t_bare / t_default:5.3f} "
              f"of that time")
        print(f"         the same kernel with a fixed band of {strips._BAND} columns (interleaved) "
              f"{t_fixed * 1e3:6.1f} ms: with bands of "
              f"{strips._band_width.py_func(n, order // 2)} it takes {t_bare / t_fixed:5.3f} "
              f"of that time")
        print(f"         stencils and traffic alone (same buffer, no algebra): "
              f"{t_probe / t_bare:4.2f} of the kernel's time")
        print(f"         multiply-add peak beside this order ({own_width}): {peaks[-2]:.1f} and "
              f"{peaks[-1]:.1f} GFLOP/s")
        if order == 4:
            t_np = median_time(lambda: numpy_constraints(d.gamma, d.K, src_rho, src_S, h),
                               max(1, repeats // 2))
            H_np, M_np = numpy_constraints(d.gamma, d.K, src_rho, src_S, h)
            core = (slice(2, -2),) * 3
            diff = max(np.abs(H_np - outs[0][core]).max(),
                       np.abs(M_np - outs[1][(slice(None),) + core]).max())
            print(f"         plain NumPy (order 4): {npts / t_np / 1e6:7.2f} Mpoint/s; "
                  f"kernel is {t_np / t_bare:5.1f}x faster; max |difference| {diff:.1e}")

    for w, v in width_peaks.items():
        v.append(child_peak(w, repeats))
    # The peak is the highest rate measured in this run, at any width and in any process: other
    # jobs on a shared machine only slow a measurement down, so the highest one is the closest
    # to what the machine can do (a median would lower the peak and flatter the kernel).
    width_best = {w: max(v) for w, v in width_peaks.items()}
    width_best[own_width] = max(width_best[own_width], max(peaks))
    best_width = max(width_best, key=width_best.get)
    best = width_best[best_width]
    own = width_best[own_width]
    derived, how = derived_peak(threads)
    print()
    print("multiply-add peak, GFLOP/s (child processes before and after the kernels): "
          + "; ".join(f"{w} {v[0]:.1f} / {v[1]:.1f}" for w, v in width_peaks.items())
          + f"; {own_width} in this process ({len(peaks)} runs): "
          + " ".join(f"{x:.1f}" for x in peaks))
    print(f"peak used: the highest measured, {best:.1f} GFLOP/s ({best_width}; {own_width}: "
          f"{own:.1f}); derived: "
          + (f"{derived:.0f} GFLOP/s = {how}" if derived else how))
    for order, r in results.items():
        flops, t_bare, npts = r["flops"], r["t_bare"], r["npts"]
        rate = flops * npts / t_bare / 1e9
        rate_main = r["flops_main"] * npts / r["t_main"] / 1e9
        equivalent = r["flops_main"] * npts / t_bare / 1e9
        roof = triad_bw * flops / bytes_per_point / 1e9
        shares = (f"{100 * rate / best:4.1f} % of the highest measured peak, "
                  f"{100 * rate / own:4.1f} % of the {own_width} peak"
                  + (f", {100 * rate / derived:4.1f} % of the derived peak" if derived else ""))
        print(f"order {order}: {flops:.0f} flops per interior point as written: "
              f"{rate:5.1f} GFLOP/s = {shares}")
        print(f"         main's kernel at {options.rev}: {r['flops_main']:.0f} flops per point, "
              f"{rate_main:5.1f} GFLOP/s = {100 * rate_main / best:4.1f} % of the highest peak; "
              f"its count over this kernel's time: {equivalent:5.1f} GFLOP/s = "
              f"{100 * equivalent / best:4.1f} %")
        print(f"         roofline: {flops / bytes_per_point:5.2f} flops/byte x triad = "
              f"{roof:6.1f} GFLOP/s if memory-bound ({roof / best:4.1f}x the highest peak)")
    print(f"load average at the end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
