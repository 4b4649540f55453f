"""Speed of the ADM constraint kernel (emsource.constraints), stand-alone.

Prints medians of repeated runs on a Kerr-Newman box for orders 2, 4, 6:
- points per second of the compiled strip kernel (the public call, EM sources included, and
  the bare kernel call) and of the point-at-a-time kernel it replaced
  (``constraint_point_kernel.py``), timed in the same run;
- the same constraints written in plain NumPy (slices for the order-4 differences, einsum for
  the contractions), and the ratio;
- a STREAM-style triad a = b + s c measured in the same run, and the kernel's effective
  bandwidth (its 16 input and 8 output arrays counted once per point) as a share of it;
- the floating-point rate: operations per point as written (``constraint_flops.py``) times
  points per second, against this machine's peak measured in the same run by a multiply-add
  kernel (16 dependent multiply-adds per element of a 512-element row per thread: the rows
  stay in L1 and out-of-order execution overlaps the chains of successive elements), and the
  roofline: operations per byte moved times the triad bandwidth, the rate at which the kernel
  would be bound by memory instead.

Usage: python benchmarks/bench_constraints.py [N] [repeats]    (default N = 64, 5 repeats)
"""

import math
import statistics
import time

import numpy as np

from constraint_flops import flops_per_point
from constraint_point_kernel import SYM as _SYM
from constraint_point_kernel import point_at_a_time_constraints
from emsource.constraints import adm_constraints, interior_points
from emsource.exact import kerr_newman
from emsource.grid import UniformGrid
from emsource.kernels._compile import grid_kernel
from emsource.kernels import constraints as strips
from emsource.kernels.constraints import adm_constraints_grid
from emsource.kernels.stencils import (d1_column, d2_column, d11_column, first_derivative_weights,
                                       second_derivative_weights, value_column)
from numba import prange


@grid_kernel
def _triad(a, b, c, s):
    for n in prange(a.shape[0]):
        a[n] = b[n] + s * c[n]


@grid_kernel
def _multiply_adds(rows, a, b, repeats):
    """16 dependent x = a x + b per element and repeat (2 flops each), one row per thread."""
    for t in prange(rows.shape[0]):
        for _ in range(repeats):
            for n in range(rows.shape[1]):
                x = rows[t, n]
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                x = x * a + b
                rows[t, n] = x


def measured_peak(threads, repeats, seconds=0.1):
    """GFLOP/s of :func:`_multiply_adds` on ``threads`` rows of 512 (median of ``repeats``),
    each run about ``seconds`` long (as long as a kernel call here, so that a shared machine's
    load falls on both alike)."""
    rows = np.ones((threads, 512))
    _multiply_adds(rows, 0.999999, 1e-6, 1)
    t0 = time.perf_counter()
    _multiply_adds(rows, 0.999999, 1e-6, 1000)
    count = max(1000, int(1000 * seconds / (time.perf_counter() - t0)))
    t = median_time(lambda: _multiply_adds(rows, 0.999999, 1e-6, count), repeats)
    return 2 * 16 * rows.size * count / t / 1e9


@grid_kernel
def _stencil_probe(gamma, K, rho, S, interior, w1, w2, inv_h, H, M, H_scale, M_scale):
    """The strip kernel's memory traffic and stencils without its algebra: the same 72
    derivatives and 16 values into the same buffer, then 8 of its rows to the outputs (the
    loop nest of ``adm_constraints_grid``; edges of the grid are not written)."""
    u = np.uint64
    nx, ny, nz = rho.shape
    r = w1.shape[0]
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        if (i < r) | (i >= nx - r) | (j < r) | (j >= ny - r):
            continue
        buf = np.empty((strips._ROWS, strips._STRIP))
        for start in range(r, nz - r, strips._STRIP):
            count = min(strips._STRIP, nz - r - start)
            base = u(start)
            for p in range(6):
                value_column(gamma, p, i, j, start, count, buf, p)
                value_column(K, p, i, j, start, count, buf, 6 + p)
            for q in range(3):
                for p in range(6):
                    d1_column(gamma, p, i, j, start, count, q, r, w1, inv_h[q], buf, 12 + 6 * q + p)
                    d1_column(K, p, i, j, start, count, q, r, w1, inv_h[q], buf, 30 + 6 * q + p)
                    d2_column(gamma, p, i, j, start, count, q, r, w2, inv_h[q] * inv_h[q], buf,
                              48 + 6 * q + p)
            for q in range(2):
                for s in range(q + 1, 3):
                    for p in range(6):
                        d11_column(gamma, p, i, j, start, count, q, s, r, w1, inv_h[q],
                                   inv_h[s], buf, 66 + 6 * (q + s - 1) + p)
            for n in range(count):
                buf[84, n] = rho[i, j, base + u(n)]
            for a in range(3):
                value_column(S, a, i, j, start, count, buf, 85 + a)
            for n in range(count):
                k = base + u(n)
                inside = interior[i, j, k] != 0
                H[i, j, k] = buf[12, n] if inside else np.nan
                H_scale[i, j, k] = buf[48, n] if inside else np.nan
            for a in range(3):
                for n in range(count):
                    k = base + u(n)
                    inside = interior[i, j, k] != 0
                    M[a, i, j, k] = buf[30 + a, n] if inside else np.nan
                    M_scale[a, i, j, k] = buf[66 + a, n] if inside else np.nan


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
        return np.stack([np.stack([p[_SYM[i, j]] for j in range(3)]) for i in range(3)])

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


def main():
    import argparse

    import numba

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("points", nargs="?", type=int, default=64, help="points per axis (64)")
    parser.add_argument("repeats", nargs="?", type=int, default=5,
                        help="repetitions per median (5)")
    options = parser.parse_args()
    n, repeats = options.points, options.repeats

    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (n, n, n))
    d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    h = grid.spacing[0]
    features = numba.config.CPU_FEATURES or ""
    width = "512-bit allowed" if "-prefer-256-bit" in features else "LLVM's default width"
    print(f"Kerr-Newman box, {n}^3 points, float64, {numba.get_num_threads()} threads, "
          f"median of {repeats}; vector instructions: {width} (512-bit: run with "
          f"NUMBA_CPU_FEATURES set to the host's features plus ',-prefer-256-bit')")

    # Triad over as many points as the kernel touches arrays: 24 arrays of n^3.
    m = 24 * n**3
    a, b, c = np.zeros(m), np.ones(m), np.full(m, 2.0)
    _triad(a, b, c, 3.0)
    t_triad = median_time(lambda: _triad(a, b, c, 3.0), repeats)
    triad_bw = 3 * 8 * m / t_triad
    peaks = [measured_peak(numba.get_num_threads(), repeats)]
    print(f"triad: {triad_bw / 1e9:.2f} GB/s (3 arrays counted); multiply-add peak: "
          f"{peaks[0]:.1f} GFLOP/s (measured again beside each order; the median so far is used)")

    src_rho = np.zeros(grid.shape)
    src_S = np.zeros((3,) + grid.shape)
    from emsource import adm_sources

    s = adm_sources(d.gamma, d.E, d.B, units="gaussian")
    src_rho[...] = s.rho
    src_S[...] = s.S_i
    # Bytes per point: 16 float64 inputs, 8 float64 outputs, the uint8 interior mask.
    bytes_per_point = 24 * 8 + 1
    for order in (2, 4, 6):
        ev = interior_points(np.ones(grid.shape, dtype=bool), order).view(np.uint8)
        outs = (np.empty(grid.shape), np.empty((3,) + grid.shape), np.empty(grid.shape),
                np.empty((3,) + grid.shape))
        before = tuple(np.empty_like(o) for o in outs)
        w1, w2 = first_derivative_weights(order), second_derivative_weights(order)
        inv_h = np.full(3, 1.0 / h)

        def bare():
            adm_constraints_grid(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h,
                                 16 * math.pi, 8 * math.pi, *outs)

        def point_at_a_time():
            point_at_a_time_constraints(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, _SYM,
                                        16 * math.pi, 8 * math.pi, *before)

        def probe():
            _stencil_probe(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, *before)

        bare()
        point_at_a_time()
        probe()
        peaks.append(measured_peak(numba.get_num_threads(), repeats))
        t_bare = median_time(bare, repeats)
        t_probe = median_time(probe, repeats)
        peaks.append(measured_peak(numba.get_num_threads(), repeats))
        peak = statistics.median(peaks)
        t_before = median_time(point_at_a_time, repeats)
        t_public = median_time(lambda: adm_constraints(d.gamma, d.K, d.E, d.B, spacing=h,
                                                       order=order), repeats)
        npts = n**3
        bw = 24 * 8 * npts / t_bare
        flops, _ = flops_per_point(order)
        flops_before, _ = flops_per_point(order, point_kernel=True)
        rate = flops * npts / t_bare / 1e9
        rate_before = flops_before * npts / t_before / 1e9
        roof = triad_bw * flops / bytes_per_point / 1e9
        agree = max(float(np.nanmax(np.abs(x - y))) for x, y in zip(outs[:2], before[:2]))
        print(f"order {order}: kernel {npts / t_bare / 1e6:7.2f} Mpoint/s "
              f"({t_bare * 1e3:7.1f} ms; effective bandwidth {100 * bw / triad_bw:5.1f} % of "
              f"triad), public call with EM sources and checks {npts / t_public / 1e6:7.2f} "
              f"Mpoint/s")
        print(f"         point-at-a-time kernel {npts / t_before / 1e6:7.2f} Mpoint/s: the strips "
              f"are {t_before / t_bare:4.2f}x faster (max |difference| {agree:.1e})")
        print(f"         multiply-add peak beside this order: {peaks[-2]:.1f} and {peaks[-1]:.1f} "
              f"GFLOP/s, median of all so far {peak:.1f}")
        print(f"         {flops:.0f} flops/point as written: {rate:6.1f} GFLOP/s = "
              f"{100 * rate / peak:4.1f} % of the measured peak (point-at-a-time: "
              f"{flops_before:.0f} "
              f"flops/point, {rate_before:5.1f} GFLOP/s = {100 * rate_before / peak:4.1f} %); "
              f"its {flops_before:.0f} flops at the strip kernel's speed "
              f"{100 * flops_before * npts / t_bare / 1e9 / peak:4.1f} %")
        print(f"         stencils and traffic alone (same buffer, no algebra): "
              f"{t_probe / t_bare:4.2f} of the kernel's time, "
              f"{100 * 24 * 8 * npts / t_probe / triad_bw:5.1f} "
              f"% of the triad")
        print(f"         roofline: {flops / bytes_per_point:5.2f} flops/byte x triad = "
              f"{roof:6.1f} GFLOP/s if memory-bound ({roof / peak:4.1f}x the peak: "
              f"{'compute' if roof > peak else 'memory'}-bound)")
        if order == 4:
            t_np = median_time(lambda: numpy_constraints(d.gamma, d.K, src_rho, src_S, h),
                               max(1, repeats // 2))
            H_np, M_np = numpy_constraints(d.gamma, d.K, src_rho, src_S, h)
            core = (slice(2, -2),) * 3
            diff = max(np.abs(H_np - outs[0][core]).max(),
                       np.abs(M_np - outs[1][(slice(None),) + core]).max())
            print(f"         plain NumPy (order 4): {npts / t_np / 1e6:7.2f} Mpoint/s; "
                  f"kernel is {t_np / t_bare:5.1f}x faster; max |difference| {diff:.1e}")


if __name__ == "__main__":
    main()
