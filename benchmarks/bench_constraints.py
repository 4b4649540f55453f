"""Speed of the ADM constraint kernel (emsource.constraints), stand-alone.

Prints medians of repeated runs on a Kerr-Newman box for orders 2, 4, 6:
- points per second of the compiled kernel (the public call, EM sources included, and the bare
  kernel call);
- the same constraints written in plain NumPy (slices for the order-4 differences, einsum for
  the contractions), and the ratio;
- a STREAM-style triad a = b + s c measured in the same run, and the kernel's effective
  bandwidth (its 16 input and 8 output arrays counted once per point) as a share of it.

Usage: python benchmarks/bench_constraints.py [N] [repeats]    (default N = 64, 5 repeats)
"""

import math
import statistics
import time

import numpy as np

from emsource.constraints import _SYM, adm_constraints, interior_points
from emsource.exact import kerr_newman
from emsource.grid import UniformGrid
from emsource.kernels._compile import grid_kernel
from emsource.kernels.constraints import adm_constraints_grid
from emsource.kernels.stencils import first_derivative_weights, second_derivative_weights
from numba import prange


@grid_kernel
def _triad(a, b, c, s):
    for n in prange(a.shape[0]):
        a[n] = b[n] + s * c[n]


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
    print(f"Kerr-Newman box, {n}^3 points, float64, {numba.get_num_threads()} threads, "
          f"median of {repeats}")

    # Triad over as many points as the kernel touches arrays: 24 arrays of n^3.
    m = 24 * n**3
    a, b, c = np.zeros(m), np.ones(m), np.full(m, 2.0)
    _triad(a, b, c, 3.0)
    t_triad = median_time(lambda: _triad(a, b, c, 3.0), repeats)
    triad_bw = 3 * 8 * m / t_triad
    print(f"triad: {triad_bw / 1e9:.2f} GB/s (3 arrays counted)")

    src_rho = np.zeros(grid.shape)
    src_S = np.zeros((3,) + grid.shape)
    from emsource import adm_sources

    s = adm_sources(d.gamma, d.E, d.B, units="gaussian")
    src_rho[...] = s.rho
    src_S[...] = s.S_i
    for order in (2, 4, 6):
        ev = interior_points(np.ones(grid.shape, dtype=bool), order).view(np.uint8)
        outs = (np.empty(grid.shape), np.empty((3,) + grid.shape), np.empty(grid.shape),
                np.empty((3,) + grid.shape))
        w1, w2 = first_derivative_weights(order), second_derivative_weights(order)
        inv_h = np.full(3, 1.0 / h)

        def bare():
            adm_constraints_grid(d.gamma, d.K, src_rho, src_S, ev, w1, w2, inv_h, _SYM,
                                 16 * math.pi, 8 * math.pi, *outs)

        bare()
        t_bare = median_time(bare, repeats)
        t_public = median_time(lambda: adm_constraints(d.gamma, d.K, d.E, d.B, spacing=h,
                                                       order=order), repeats)
        npts = n**3
        bw = 24 * 8 * npts / t_bare
        print(f"order {order}: kernel {npts / t_bare / 1e6:7.2f} Mpoint/s "
              f"({t_bare * 1e3:7.1f} ms; effective bandwidth {100 * bw / triad_bw:5.1f} % of "
              f"triad), public call with EM sources and checks {npts / t_public / 1e6:7.2f} "
              f"Mpoint/s")
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
