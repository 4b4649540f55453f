"""Speed of the conservation residual (emsource.conservation), with a bandwidth yardstick.

Run:  python benchmarks/bench_conservation.py [--points 128] [--repeat 7] [--rev 51d4f41]

In one run and on the same Numba threads it measures
  (a) a STREAM-style triad a = b + s c (bandwidth counted as 3 arrays moved, the usual way),
  (b) the residual of the energy and momentum equations at order 4 on a points^3 grid
      (default 128^3, float64), with supplied time derivatives and every metric term switched
      on: the two kernel passes alone (preallocated work and outputs), and the public call
      ``conservation_residual`` (which allocates its outputs and computes the norms);
  (b0) each of the two passes alone, each next to a kernel with the same memory traffic and no
      physics (pass 1: 28 rows read, 16 written, flat; pass 2: the same 42 first derivatives
      through the same stencil functions into the same stack strip buffer, along the same
      x-plane lines, 20 more rows read, 8 written), so that the share of the triad each pass
      loses to its access pattern and to its arithmetic can be read apart;
  (c) a plain-NumPy implementation of the same residual (slicing for the differences, whole-
      grid temporaries), written here, and the speed-up of (b) over it.
The kernels of an earlier revision (``kernels/conservation.py`` at git revision ``--rev``,
default 51d4f41: pass 2 in strips along single grid columns; loaded by ``kernel_revision.py``)
are timed in the same run, each right after the current ones, at orders 2, 4, 6.
It prints medians: points per second, the effective bandwidth counting each array the two
passes read or write once (94 per point), its share of the triad, and the ratios.
The machine is shared and noisy: read ratios, not absolute figures.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import sys
import time

import numba
import numpy as np
from numba import prange

from emsource.conservation import conservation_residual, new_work_array
from emsource.kernels import conservation as kernels
from emsource.kernels._compile import grid_kernel
from emsource.kernels.stencils import (d1_directions_column, divergence_column,
                                        first_derivative_weights)
from emsource.kernels.strip_buffers import strip_buffer

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from kernel_revision import revision_module  # noqa: E402  (the "before", see docstring)

# Pass 1 reads alpha, beta 3, gamma 6, E 3, B 3, dt_gamma 6, dt_E 3, dt_B 3 and writes 16;
# pass 2 reads alpha, beta 3, gamma 6, K 6, E 3, B 3, rho_e, j 3, work 16 and writes 8.
PASS1_ARRAYS = 28 + 16
PASS2_ARRAYS = 42 + 8
ARRAYS_MOVED = PASS1_ARRAYS + PASS2_ARRAYS


@grid_kernel
def _pass1_traffic(inputs, work):
    """Pass 1's traffic without its physics: 28 rows read, 16 written, per grid point.

    ``inputs`` (28, npoints), ``work`` (16, npoints): work[c] = sum of inputs[c] and
    inputs[c + 12 if c < 16] (every input read once), the same flat (ncomp, npoints) shape.
    """
    for n in prange(work.shape[1]):
        total = inputs[16, n] + inputs[17, n] + inputs[18, n] + inputs[19, n] + inputs[20, n] \
            + inputs[21, n] + inputs[22, n] + inputs[23, n] + inputs[24, n] + inputs[25, n] \
            + inputs[26, n] + inputs[27, n]
        for c in range(16):
            work[c, n] = inputs[c, n] + total


@grid_kernel
def _pass2_traffic(fields, points, weights, inv_h, out, ny, nz):
    """Pass 2's traffic without its physics, in its loop shape: each x-plane of the C-ordered
    arrays as one line ((ncomp, nx, 1, ny * nz) views), strips of 512 points through its
    interior columns, the same stencils into the same (50, 520) stack buffer: the three first
    derivatives of 10 rows of ``fields`` (22, ...) and the divergences of the other 12 taken
    three at a time (42 derivatives), 20 more point values read from ``points``, and 8 outputs
    ``out`` (8, ...) written as sums of buffer rows, at radius 2.
    """
    u = np.uint64
    nx = fields.shape[1]
    step_x = (1, 0, u(0))
    step_y = (0, 0, u(nz))
    step_z = (0, 0, u(1))
    for i in prange(2, nx - 2):
        buf = strip_buffer(50, 520, fields)
        for start in range(2 * nz + 2, (ny - 2) * nz - 2, 512):
            count = min(512, (ny - 2) * nz - 2 - start)
            base = u(start)
            for c in range(10):
                d1_directions_column(fields, c, i, 0, start, count, 2, step_x, step_y, step_z,
                                     weights, inv_h, inv_h, inv_h, buf, 3 * c, 3 * c + 1,
                                     3 * c + 2)
            for q in range(4):
                divergence_column(fields, 10 + 3 * q, 11 + 3 * q, 12 + 3 * q, i, 0, start, count,
                                  2, step_x, step_y, step_z, weights, inv_h, inv_h, inv_h, buf,
                                  30 + q, 34 + q)
            for n in range(count):
                k = base + u(n)
                s = buf[0, n]
                for r in range(1, 38):
                    s += buf[r, n]
                for c in range(20):
                    s += points[c, i, 0, k]
                buf[38, n] = s
            for c in range(8):
                for n in range(count):
                    out[c, i, 0, base + u(n)] = buf[38, n] + c


@grid_kernel
def _triad(a, b, c, scalar):
    for i in numba.prange(a.shape[0]):
        a[i] = b[i] + scalar * c[i]


def median_seconds(function, repeat):
    function()  # warm-up: compilation or cache load, page faults
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def triad_bandwidth(repeat):
    n = 2**25
    a, b, c = np.zeros(n), np.ones(n), np.full(n, 2.0)
    return 3 * a.itemsize * n / median_seconds(lambda: _triad(a, b, c, 3.0), repeat)


def smooth_curved_data(n, seed=7):
    """Smooth fields with every term of the equations active (lapse, shift, metric, K, charges)."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 1.0, n)
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij", sparse=True)

    def smooth(amplitude, offset=0.0):
        kx, ky, kz, phase = rng.uniform(1.0, 4.0, 4)
        return offset + amplitude * np.sin(kx * X + ky * Y + kz * Z + phase)

    d = {
        "alpha": smooth(0.1, 1.0),
        "beta": np.array([smooth(0.2) for _ in range(3)]),
        "gamma": np.array([smooth(0.1, 1.0), smooth(0.05), smooth(0.05), smooth(0.1, 1.1),
                           smooth(0.05), smooth(0.1, 0.9)]),
        "K": np.array([smooth(0.3) for _ in range(6)]),
        "E": np.array([smooth(1.0) for _ in range(3)]),
        "B": np.array([smooth(1.0) for _ in range(3)]),
        "charge_density": smooth(0.5),
        "current_density": np.array([smooth(0.5) for _ in range(3)]),
        "dt_E": np.array([smooth(1.0) for _ in range(3)]),
        "dt_B": np.array([smooth(1.0) for _ in range(3)]),
        "dt_gamma": np.array([smooth(0.2) for _ in range(6)]),
    }
    # Plain writeable C arrays, as a solver holds them (read-only broadcast views compiled to a
    # kernel specialisation three times slower here: measured).
    return {k: np.array(np.broadcast_to(v, v.shape[:-3] + (n, n, n))) for k, v in d.items()}, 1.0 / (n - 1)


def numpy_residual(d, h, coef=1.0 / (4.0 * math.pi)):
    """The same residual in plain NumPy: whole-grid temporaries, slicing for the differences."""
    w1, w2 = 2.0 / 3.0, -1.0 / 12.0  # fourth-order centred first derivative
    n = d["alpha"].shape[0]
    inner = (slice(2, n - 2),) * 3

    def D(f, axis):
        def sl(shift):
            s = [slice(2, n - 2)] * 3
            s[axis] = slice(2 + shift, n - 2 + shift)
            return f[tuple(s)]
        return (w1 * (sl(1) - sl(-1)) + w2 * (sl(2) - sl(-2))) / h

    pairs = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    index = {p: c for c, p in enumerate(pairs)}
    index.update({(b, a): c for (a, b), c in list(index.items())})
    g = lambda a, b: d["gamma"][index[(a, b)]]  # noqa: E731
    Kc = lambda a, b: d["K"][index[(a, b)]]  # noqa: E731
    dg = lambda a, b: d["dt_gamma"][index[(a, b)]]  # noqa: E731
    E, B, alpha, beta = d["E"], d["B"], d["alpha"], d["beta"]
    cof = [[g(1, 1) * g(2, 2) - g(1, 2) ** 2, g(0, 2) * g(1, 2) - g(0, 1) * g(2, 2),
            g(0, 1) * g(1, 2) - g(0, 2) * g(1, 1)]]
    cof.append([cof[0][1], g(0, 0) * g(2, 2) - g(0, 2) ** 2, g(0, 1) * g(0, 2) - g(0, 0) * g(1, 2)])
    cof.append([cof[0][2], cof[1][2], g(0, 0) * g(1, 1) - g(0, 1) ** 2])
    det = g(0, 0) * cof[0][0] + g(0, 1) * cof[0][1] + g(0, 2) * cof[0][2]
    inv = [[cof[a][b] / det for b in range(3)] for a in range(3)]
    sg = np.sqrt(det)
    El = [sum(g(a, b) * E[b] for b in range(3)) for a in range(3)]
    Bl = [sum(g(a, b) * B[b] for b in range(3)) for a in range(3)]
    e2 = sum(E[a] * El[a] + B[a] * Bl[a] for a in range(3))
    rho = coef * 0.5 * e2
    cross = lambda u, v: [u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]]  # noqa: E731
    S = [coef * sg * c for c in cross(E, B)]
    Su = [coef / sg * c for c in cross(El, Bl)]
    Smix = [[coef * ((0.5 * e2 if i == j else 0.0) - E[i] * El[j] - B[i] * Bl[j]) for j in range(3)]
            for i in range(3)]
    Fe = [sg * (alpha * Su[i] - beta[i] * rho) for i in range(3)]
    Fm = [[sg * (alpha * Smix[i][j] - beta[i] * S[j]) for j in range(3)] for i in range(3)]
    dlndet = sum(inv[a][b] * dg(a, b) for a in range(3) for b in range(3))
    drho = coef * (0.5 * sum(dg(a, b) * (E[a] * E[b] + B[a] * B[b]) for a in range(3) for b in range(3))
                   + sum(El[a] * d["dt_E"][a] + Bl[a] * d["dt_B"][a] for a in range(3)))
    dt_e = sg * (0.5 * dlndet * rho + drho)
    c1, c2 = cross(d["dt_E"], B), cross(E, d["dt_B"])
    dt_m = [dlndet * sg * S[j] + coef * det * (c1[j] + c2[j]) for j in range(3)]
    Suu = [[coef * (0.5 * e2 * inv[a][b] - E[a] * E[b] - B[a] * B[b]) for b in range(3)] for a in range(3)]
    KS = sum(Kc(a, b) * Suu[a][b] for a in range(3) for b in range(3))
    da = [D(alpha, q) for q in range(3)]
    I = inner
    rho_e, j = d["charge_density"], d["current_density"]
    src_e = sg[I] * (alpha[I] * KS[I] - sum(Su[i][I] * da[i] for i in range(3))
                     - alpha[I] * sum(j[i][I] * El[i][I] for i in range(3)))
    res = [dt_e[I] + sum(D(Fe[i], i) for i in range(3)) - src_e]
    jxB = cross(j, B)
    for q in range(3):
        metric = 0.5 * alpha[I] * sum(Suu[a][b][I] * D(g(a, b), q) for a in range(3) for b in range(3))
        shift = sum(S[i][I] * D(beta[i], q) for i in range(3))
        src = sg[I] * (metric + shift - rho[I] * da[q]
                       - alpha[I] * (rho_e[I] * El[q][I] + sg[I] * jxB[q][I]))
        res.append(dt_m[q][I] + sum(D(Fm[i][q], i) for i in range(3)) - src)
    return np.array(res)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=128, help="points per axis (default 128)")
    parser.add_argument("--repeat", type=int, default=7, help="repetitions per median (default 7)")
    parser.add_argument("--rev", default="51d4f41",
                        help="git revision of the old kernels (default 51d4f41, strips along "
                             "single columns)")
    args = parser.parse_args(argv)
    n = args.points
    old_kernels = revision_module(args.rev, "conservation")
    print(f"numba {numba.__version__}, numpy {np.__version__}, {numba.get_num_threads()} threads, "
          f"{n}^3 float64, medians of {args.repeat}; load average {os.getloadavg()} at "
          f"{time.strftime('%H:%M:%S', time.gmtime())} UTC")
    triad = triad_bandwidth(args.repeat)
    print(f"\n(a) triad bandwidth: {triad / 1e9:.1f} GB/s")

    d, h = smooth_curved_data(n)
    points = n ** 3
    # (b1) the two kernel passes with preallocated buffers.
    v = {k: (a[None] if a.ndim == 3 else a) for k, a in d.items()}
    gidx = np.arange(6, dtype=np.int64)
    work = new_work_array((n, n, n))  # the layout the public call uses
    residual = np.empty((4, n, n, n))
    scale = np.empty_like(residual)
    partials = np.empty((n * n, 16))
    weights = first_derivative_weights(4)
    coef = 1.0 / (4.0 * math.pi)

    lines = {k: a.reshape(a.shape[:2] + (1, n * n)) for k, a in v.items()}
    work_lines, residual_lines, scale_lines = (a.reshape(a.shape[:2] + (1, n * n))
                                               for a in (work, residual, scale))

    # Index steps to the next point along x, y, z on those lines (see conservation._run_kernels).
    plane_steps = np.array([(1, 0, 0), (0, 0, n), (0, 0, 1)], dtype=np.int64)

    def residuals_of(module, weights, r):
        """Pass 2 as the public wrapper calls it: the current kernel on x-plane lines (the
        views ``conservation._plane_lines`` makes), an old one (no grid extent arguments) on
        the (ncomp, nx, ny, nz) arrays."""
        if module.residuals.py_func.__code__.co_argcount == 28:
            a = lines
            module.residuals(a["alpha"], a["beta"], a["gamma"], gidx, a["K"], gidx, a["E"],
                             a["B"], a["charge_density"], a["current_density"], work_lines,
                             weights, 1 / h, 1 / h, 1 / h, plane_steps, r, r, r, coef, 0.5,
                             residual_lines, scale_lines, residual_lines, False, partials, n, n)
        else:
            module.residuals(v["alpha"], v["beta"], v["gamma"], gidx, v["K"], gidx, v["E"],
                             v["B"], v["charge_density"], v["current_density"], work, weights,
                             1 / h, 1 / h, 1 / h, r, r, r, coef, 0.5, residual, scale, residual,
                             False, partials)

    def two_passes(module=kernels, order=4):
        r = order // 2
        module.fluxes_and_rates(v["alpha"], v["beta"], v["gamma"], gidx, v["E"], v["B"], 2,
                                v["dt_gamma"], gidx, v["dt_E"], v["dt_B"],
                                v["gamma"], gidx, v["E"], v["B"], 0.0, coef, 0.5, work)
        residuals_of(module, first_derivative_weights(order), r)

    def pass1(module=kernels):
        module.fluxes_and_rates(v["alpha"], v["beta"], v["gamma"], gidx, v["E"], v["B"], 2,
                                v["dt_gamma"], gidx, v["dt_E"], v["dt_B"],
                                v["gamma"], gidx, v["E"], v["B"], 0.0, coef, 0.5, work)

    def pass2(module=kernels):
        residuals_of(module, weights, 2)

    # Same-traffic probes (no physics), each timed next to the pass it mirrors.
    flat_in = np.random.default_rng(1).random((PASS1_ARRAYS - 16, points))
    flat_in = np.concatenate([flat_in, flat_in[:16]])  # (28, npoints)
    flat_work = np.empty((16, points))
    fields = np.random.default_rng(2).random((22, n, 1, n * n))
    point_rows = np.random.default_rng(3).random((20, n, 1, n * n))
    probe_out = np.empty((8, n, 1, n * n))
    probes = {
        "pass 1 (fluxes and rates)": (pass1, lambda: _pass1_traffic(flat_in, flat_work),
                                      PASS1_ARRAYS),
        "pass 2 (residuals)": (pass2, lambda: _pass2_traffic(fields, point_rows, weights, 1 / h,
                                                             probe_out, n, n), PASS2_ARRAYS),
    }
    print("\n(b0) each pass (current kernels, the old ones, and a kernel with the same traffic and "
          "no physics; arrays counted once)")
    for name, (real, probe, arrays) in probes.items():
        t_real = median_seconds(real, args.repeat)
        t_old = median_seconds(lambda: real(old_kernels), args.repeat)
        t_probe = median_seconds(probe, args.repeat)
        t_triad = 3 * 8 * 2**25 / triad_bandwidth(3)
        share = lambda t: 100 * arrays * 8 * points / t / (3 * 8 * 2**25 / t_triad)  # noqa: E731
        print(f"    {name:28s} {t_real * 1e3:7.1f} ms  {share(t_real):4.0f}% of triad;  old kernel "
              f"{t_old * 1e3:7.1f} ms {share(t_old):4.0f}% (new / old time {t_real / t_old:4.2f});  "
              f"same traffic, no physics {t_probe * 1e3:7.1f} ms  {share(t_probe):4.0f}%")

    print("\n(b) residual, supplied time derivatives, all metric terms: the two kernel passes, "
          "buffers preallocated (old kernels timed right after)")
    kernel_seconds = None
    for order in (4, 2, 6):
        triad_now = triad_bandwidth(3)
        t_new = median_seconds(lambda: two_passes(kernels, order), args.repeat)
        t_old = median_seconds(lambda: two_passes(old_kernels, order), args.repeat)
        if order == 4:
            kernel_seconds = t_new
        for label, t in (("current", t_new), ("old", t_old)):
            bandwidth = ARRAYS_MOVED * 8 * points / t
            print(f"    order {order} {label:8s} {t * 1e3:8.1f} ms  {points / t / 1e6:6.1f} Mpoints/s  "
                  f"{bandwidth / 1e9:5.1f} GB/s  {100 * bandwidth / triad_now:4.0f}% of the triad "
                  f"measured just before ({triad_now / 1e9:.1f} GB/s)")
        print(f"    order {order} current / old time {t_new / t_old:.2f}")

    def public(work=None):
        return conservation_residual(d["alpha"], d["beta"], d["gamma"], d["K"], d["E"], d["B"],
                                     spacing=h, order=4, charge_density=d["charge_density"],
                                     current_density=d["current_density"], dt_E=d["dt_E"],
                                     dt_B=d["dt_B"], dt_gamma=d["dt_gamma"], work=work)

    public_seconds = median_seconds(public, args.repeat)
    print(f"    public conservation_residual (allocates):     {public_seconds * 1e3:8.1f} ms  "
          f"{points / public_seconds / 1e6:6.1f} Mpoints/s")
    reused = new_work_array((n, n, n))
    reuse_seconds = median_seconds(lambda: public(reused), args.repeat)
    print(f"    public call, work array reused (work=):       {reuse_seconds * 1e3:8.1f} ms  "
          f"{points / reuse_seconds / 1e6:6.1f} Mpoints/s")

    numpy_seconds = median_seconds(lambda: numpy_residual(d, h), max(2, args.repeat // 3))
    print(f"\n(c) plain NumPy, same residual: {numpy_seconds * 1e3:8.1f} ms  "
          f"{points / numpy_seconds / 1e6:6.2f} Mpoints/s")
    print(f"    speed-up: kernels {numpy_seconds / kernel_seconds:.1f}x, public call "
          f"{numpy_seconds / public_seconds:.1f}x, with work= {numpy_seconds / reuse_seconds:.1f}x "
          "(issue goal: >= 20x)")
    ours = public()
    theirs = numpy_residual(d, h)
    inner = (slice(2, n - 2),) * 3
    mine = np.concatenate([ours.energy[None], ours.momentum])[(slice(None),) + inner]
    big = np.concatenate([ours.energy_scale[None], ours.momentum_scale])[(slice(None),) + inner]
    print(f"    largest |kernel - NumPy| / largest term: {np.max(np.abs(mine - theirs)) / np.max(big):.1e}")

    # (d) data stored z, y, x (x fastest), seen through transposed views: the strips then walk
    # across planes (a stride of n^2 points); the public call against the contiguous one.
    stored_zyx = {k: np.moveaxis(np.ascontiguousarray(np.moveaxis(a, (-3, -1), (-1, -3))),
                                 (-3, -1), (-1, -3)) for k, a in d.items()}

    def public_zyx():
        z = stored_zyx
        return conservation_residual(z["alpha"], z["beta"], z["gamma"], z["K"], z["E"], z["B"],
                                     spacing=h, order=4, charge_density=z["charge_density"],
                                     current_density=z["current_density"], dt_E=z["dt_E"],
                                     dt_B=z["dt_B"], dt_gamma=z["dt_gamma"])

    zyx_seconds = median_seconds(public_zyx, max(3, args.repeat // 2))
    contiguous_seconds = median_seconds(public, max(3, args.repeat // 2))
    print(f"\n(d) public call on data stored z, y, x (transposed views): {zyx_seconds * 1e3:8.1f} ms "
          f"against {contiguous_seconds * 1e3:8.1f} ms contiguous ({zyx_seconds / contiguous_seconds:.1f}x)")
    print(f"\nload average {os.getloadavg()} at {time.strftime('%H:%M:%S', time.gmtime())} UTC")


if __name__ == "__main__":
    main()
