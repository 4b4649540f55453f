"""An evolution loop that calls the source kernels every step: their share of the step time,
and the drift of the field's energy and momentum over many wave periods.

Run:  python benchmarks/bench_evolution.py [--points 48] [--periods 10] [--courant 0.3]

Maxwell's equations in vacuum, flat space, Gaussian units (c = 1),
    d_t E = curl B,    d_t B = -curl E
(J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 6.1 with rho = j = 0), evolved by
the method of lines: fourth-order centred differences on a periodic box (a simple Numba
right-hand side written here), classical fourth-order Runge-Kutta in time (common practice).
Initial data: the plane wave of ``emsource.exact.plane_wave`` with a wave vector that fits the
box (``periodic_wave_vector``, modes (1, 1, 1): oblique to every axis). After every step the
loop calls ``emsource.adm_sources(gamma, E, B, out=...)`` into preallocated arrays, as a
coupled Einstein-Maxwell code would to source its metric equations.

Printed: medians of the step time, the time in adm_sources and its share; the relative drift
of the total energy sum(rho) h^3 and of the total momentum sum(S_i) h^3 (exact quadratures
for periodic data) from the start to the end; and the error of E against the exact wave at
the final time (the drift is a property of the scheme, RK4 with fourth-order differences, not
of the sources; expected to fall as h^4 at fixed Courant number).
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numba
import numpy as np

import emsource
from emsource.exact import periodic_wave_vector, plane_wave
from emsource.grid import UniformGrid
from emsource.kernels._compile import grid_kernel, point_function

W1, W2 = 2.0 / 3.0, -1.0 / 12.0  # fourth-order centred first derivative


@point_function
def _curl(f, i, j, k, ip1, im1, ip2, im2, jp1, jm1, jp2, jm2, kp1, km1, kp2, km2, inv_h):
    """Periodic fourth-order curl of f at (i, j, k), neighbour indices precomputed."""
    dyz = W1 * (f[2, i, jp1, k] - f[2, i, jm1, k]) + W2 * (f[2, i, jp2, k] - f[2, i, jm2, k])
    dzy = W1 * (f[1, i, j, kp1] - f[1, i, j, km1]) + W2 * (f[1, i, j, kp2] - f[1, i, j, km2])
    dzx = W1 * (f[0, i, j, kp1] - f[0, i, j, km1]) + W2 * (f[0, i, j, kp2] - f[0, i, j, km2])
    dxz = W1 * (f[2, ip1, j, k] - f[2, im1, j, k]) + W2 * (f[2, ip2, j, k] - f[2, im2, j, k])
    dxy = W1 * (f[1, ip1, j, k] - f[1, im1, j, k]) + W2 * (f[1, ip2, j, k] - f[1, im2, j, k])
    dyx = W1 * (f[0, i, jp1, k] - f[0, i, jm1, k]) + W2 * (f[0, i, jp2, k] - f[0, i, jm2, k])
    return inv_h * (dyz - dzy), inv_h * (dzx - dxz), inv_h * (dxy - dyx)


@grid_kernel
def maxwell_rhs(E, B, dE, dB, inv_h):
    """dE = curl B, dB = -curl E with periodic fourth-order centred differences."""
    n = E.shape[1]
    for column in numba.prange(n * n):
        i = column // n
        j = column - i * n
        ip1, im1, ip2, im2 = (i + 1) % n, (i - 1) % n, (i + 2) % n, (i - 2) % n
        jp1, jm1, jp2, jm2 = (j + 1) % n, (j - 1) % n, (j + 2) % n, (j - 2) % n
        for k in range(n):
            kp1, km1, kp2, km2 = (k + 1) % n, (k - 1) % n, (k + 2) % n, (k - 2) % n
            cx, cy, cz = _curl(B, i, j, k, ip1, im1, ip2, im2, jp1, jm1, jp2, jm2,
                               kp1, km1, kp2, km2, inv_h)
            dE[0, i, j, k] = cx
            dE[1, i, j, k] = cy
            dE[2, i, j, k] = cz
            cx, cy, cz = _curl(E, i, j, k, ip1, im1, ip2, im2, jp1, jm1, jp2, jm2,
                               kp1, km1, kp2, km2, inv_h)
            dB[0, i, j, k] = -cx
            dB[1, i, j, k] = -cy
            dB[2, i, j, k] = -cz


@grid_kernel
def axpy(out, a, scale, b):
    """out = a + scale * b over flat arrays."""
    for n in numba.prange(out.shape[0]):
        out[n] = a[n] + scale * b[n]


@grid_kernel
def rk4_combine(y, k1, k2, k3, k4, dt6):
    """y += dt/6 (k1 + 2 k2 + 2 k3 + k4) over flat arrays."""
    for n in numba.prange(y.shape[0]):
        y[n] += dt6 * (k1[n] + 2.0 * (k2[n] + k3[n]) + k4[n])


def totals(src, cell):
    return float(np.sum(src.rho)) * cell, src.S_i.reshape(3, -1).sum(axis=1) * cell


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=48, help="points per axis (default 48)")
    parser.add_argument("--periods", type=float, default=10.0, help="wave periods (default 10)")
    parser.add_argument("--courant", type=float, default=0.3, help="dt / h (default 0.3)")
    args = parser.parse_args(argv)
    n = args.points
    h = 1.0 / n
    grid = UniformGrid((n, n, n), (0.0, 0.0, 0.0), (h, h, h))  # periodic: point n is point 0
    k = periodic_wave_vector(grid, (1, 1, 1))
    wave = dict(wave_vector=k, polarization=(1.0, -1.0, 0.0))
    initial = plane_wave(grid, 0.0, **wave)
    period = 2 * math.pi / np.linalg.norm(k)
    steps = int(math.ceil(args.periods * period / (args.courant * h)))
    dt = args.periods * period / steps
    print(f"numba {numba.__version__}, {numba.get_num_threads()} threads; {n}^3 periodic box, "
          f"RK4 + 4th-order differences, {steps} steps of dt = {dt:.3e} ({dt / h:.2f} h), "
          f"{args.periods:g} periods")

    y = np.concatenate([initial.E, initial.B])  # (6, n, n, n): E then B
    stages = [np.empty_like(y) for _ in range(4)]
    tmp = np.empty_like(y)
    gamma = np.ascontiguousarray(initial.gamma)
    src = emsource.adm_sources(gamma, y[:3], y[3:])
    cell = h ** 3
    energy0, momentum0 = totals(src, cell)
    flat = lambda a: a.reshape(-1)  # noqa: E731

    def rhs(state, out):
        maxwell_rhs(state[:3], state[3:], out[:3], out[3:], 1.0 / h)

    def step():
        rhs(y, stages[0])
        axpy(flat(tmp), flat(y), 0.5 * dt, flat(stages[0]))
        rhs(tmp, stages[1])
        axpy(flat(tmp), flat(y), 0.5 * dt, flat(stages[1]))
        rhs(tmp, stages[2])
        axpy(flat(tmp), flat(y), dt, flat(stages[2]))
        rhs(tmp, stages[3])
        rk4_combine(flat(y), *(flat(s) for s in stages), dt / 6.0)

    step_times, source_times = [], []
    for _ in range(steps):
        start = time.perf_counter()
        step()
        middle = time.perf_counter()
        emsource.adm_sources(gamma, y[:3], y[3:], out=src)
        end = time.perf_counter()
        step_times.append(end - start)
        source_times.append(end - middle)
    energy1, momentum1 = totals(src, cell)
    exact_end = plane_wave(grid, steps * dt, **wave)
    error = float(np.sqrt(np.mean((y[:3] - exact_end.E) ** 2)) / np.sqrt(np.mean(exact_end.E ** 2)))

    step_median = statistics.median(step_times)
    source_median = statistics.median(source_times)
    print(f"\nmedian step (RK4 + sources): {step_median * 1e3:.2f} ms; in adm_sources: "
          f"{source_median * 1e3:.3f} ms = {100 * source_median / step_median:.1f} % of the step "
          f"(one source call per step, four right-hand sides)")
    print(f"total wall time {sum(step_times):.1f} s, of which sources {sum(source_times):.2f} s")
    print(f"energy drift   (E_end - E_0) / E_0       = {(energy1 - energy0) / energy0:+.3e}")
    drift_p = np.linalg.norm(momentum1 - momentum0) / np.linalg.norm(momentum0)
    print(f"momentum drift |P_end - P_0| / |P_0|      = {drift_p:.3e}")
    print(f"momentum direction vs k_hat: cos = {momentum1 @ k / np.linalg.norm(momentum1) / np.linalg.norm(k):.12f}")
    print(f"E error vs the exact wave at the end (RMS relative) = {error:.3e}")


if __name__ == "__main__":
    main()
