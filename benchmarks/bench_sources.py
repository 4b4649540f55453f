"""Speed of the source kernels, measured side by side with a memory-bandwidth yardstick.

Run:  python benchmarks/bench_sources.py [--quick] [--repeat N]

In one run and on the same Numba threads it measures
  (a) a STREAM-style triad a = b + s c (bandwidth counted as 3 arrays moved, the usual way),
  (b) emsource.adm_sources on 128^3 and 256^3 grids, float64 and float32, into preallocated
      ``out`` arrays, with the point checks on and off, and on a strided ghost-zone view,
  (c) a plain-NumPy implementation of the same formulas (einsum, linalg.det), 128^3 float64,
  (d) the per-call time on an 8^3 grid, through the public API with ``out``.
It prints medians of several repetitions: points per second, the effective bandwidth counting
each input and output array once (12 in, 11 out), that bandwidth as a share of the triad, and
ratios. The machine is shared and noisy, so every kernel timing is taken right after a triad
timing and the share of the triad is the median of those paired ratios: load that comes and
goes affects both members of a pair alike. Read ratios, not absolute figures.
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numba
import numpy as np

import emsource

ARRAYS_MOVED = 12 + 11  # gamma 6, E 3, B 3 in; rho, S_i 3, S_ij 6, S out


@numba.njit(parallel=True, cache=True)
def _triad(a, b, c, scalar):
    for i in numba.prange(a.shape[0]):
        a[i] = b[i] + scalar * c[i]


@numba.njit(parallel=True, cache=True)
def _same_traffic_copy(gamma, E, B, rho, S_i, S_ij, S):
    """Reads the kernel's 12 input arrays and writes its 11 outputs, with no physics: the
    attainable bandwidth for this pattern of 23 streams (the kernel cannot beat it)."""
    for n in numba.prange(rho.shape[0]):
        a = gamma[0, n] + gamma[1, n] + gamma[2, n] + gamma[3, n] + gamma[4, n] + gamma[5, n]
        b = E[0, n] + E[1, n] + E[2, n] + B[0, n] + B[1, n] + B[2, n]
        rho[n] = a
        S[n] = b
        for c in range(3):
            S_i[c, n] = a
        for c in range(6):
            S_ij[c, n] = b


def median_seconds(function, repeat):
    function()  # warm-up (compilation, page faults)
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


class Triad:
    """STREAM-style triad on 256 MiB arrays (far beyond the last-level cache)."""

    def __init__(self, n=2**25):
        self.a, self.b, self.c = np.zeros(n), np.ones(n), np.full(n, 2.0)
        _triad(self.a, self.b, self.c, 3.0)

    def bandwidth_once(self):
        start = time.perf_counter()
        _triad(self.a, self.b, self.c, 3.0)
        return 3 * self.a.itemsize * self.a.size / (time.perf_counter() - start)


def paired_rates(function, points, bytes_moved, triad, repeat):
    """Median points/s, bytes/s and share of a triad timed just before each repetition."""
    function()
    rates, shares = [], []
    for _ in range(repeat):
        reference = triad.bandwidth_once()
        start = time.perf_counter()
        function()
        seconds = time.perf_counter() - start
        rates.append(points / seconds)
        shares.append(bytes_moved / seconds / reference)
    rate = statistics.median(rates)
    return rate, rate * bytes_moved / points, statistics.median(shares)


def flat_space_fields(shape, dtype, seed=1):
    rng = np.random.default_rng(seed)
    gamma = np.zeros((6,) + shape, dtype)
    gamma[[0, 3, 5]] = 1.0
    gamma += (0.05 * rng.standard_normal((6,) + shape)).astype(dtype)
    gamma[[0, 3, 5]] += 0.5
    E = rng.standard_normal((3,) + shape).astype(dtype)
    B = rng.standard_normal((3,) + shape).astype(dtype)
    return gamma, E, B


def numpy_sources(gamma, E, B):
    """The same formulas in plain NumPy (what a user would write without the package)."""
    idx = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])
    full = gamma[idx]
    E_low = np.einsum("ij...,j...->i...", full, E)
    B_low = np.einsum("ij...,j...->i...", full, B)
    energy2 = np.einsum("i...,i...->...", E, E_low) + np.einsum("i...,i...->...", B, B_low)
    rho = energy2 / (8 * math.pi)
    sqrt_det = np.sqrt(np.linalg.det(np.moveaxis(full, (0, 1), (-2, -1))))
    S_i = sqrt_det * np.cross(E, B, axis=0) / (4 * math.pi)
    S_ij = np.stack([
        (0.5 * energy2 * gamma[c] - E_low[a] * E_low[b] - B_low[a] * B_low[b]) / (4 * math.pi)
        for c, (a, b) in enumerate([(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)])
    ])
    return rho, S_i, S_ij, rho.copy()


def measure_kernel(shape, dtype, triad, repeat, check=True, ghost=0):
    full_shape = tuple(n + 2 * ghost for n in shape)
    gamma, E, B = flat_space_fields(full_shape, dtype)
    if ghost:
        inner = (slice(None),) + (slice(ghost, -ghost),) * len(shape)
        gamma, E, B = gamma[inner], E[inner], B[inner]
    out = emsource.adm_sources(gamma, E, B)  # allocates once; the loop below reuses it
    points = math.prod(shape)
    return paired_rates(lambda: emsource.adm_sources(gamma, E, B, out=out, check=check),
                        points, ARRAYS_MOVED * np.dtype(dtype).itemsize * points, triad, repeat)


def measure_copy(shape, dtype, triad, repeat):
    gamma, E, B = flat_space_fields(shape, dtype)
    points = math.prod(shape)
    out = [a.reshape(a.shape[0], points) if a.ndim > len(shape) else a.reshape(points)
           for a in emsource.adm_sources(gamma, E, B)]
    flat = [a.reshape(a.shape[0], points) for a in (gamma, E, B)]
    return paired_rates(lambda: _same_traffic_copy(*flat, *out), points,
                        ARRAYS_MOVED * np.dtype(dtype).itemsize * points, triad, repeat)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=11, help="repetitions per median (default 11)")
    parser.add_argument("--quick", action="store_true", help="skip the 256^3 grids")
    args = parser.parse_args(argv)
    print(f"emsource {emsource.__version__}, numba {numba.__version__}, numpy {np.__version__}, "
          f"{numba.get_num_threads()} threads, medians of {args.repeat}")

    triad = Triad()
    triad_rates = [triad.bandwidth_once() for _ in range(args.repeat)]
    print(f"\n(a) triad bandwidth: {statistics.median(triad_rates) / 1e9:.1f} GB/s "
          f"(median; range {min(triad_rates) / 1e9:.1f}-{max(triad_rates) / 1e9:.1f})")

    print("\n(b) adm_sources into preallocated out arrays")
    print(f"{'grid':>8} {'dtype':>8} {'checks':>7} {'layout':>10} {'Mpoints/s':>10} {'GB/s':>6} {'% triad':>8}")
    rates = {}
    sizes = (128,) if args.quick else (128, 256)
    for n in sizes:
        for dtype in (np.float64, np.float32):
            for check in (True, False):
                rate, bandwidth, share = measure_kernel((n, n, n), dtype, triad, args.repeat, check)
                rates[(n, np.dtype(dtype).name, check)] = rate
                print(f"{n:>6}^3 {np.dtype(dtype).name:>8} {str(check):>7} {'contiguous':>10} "
                      f"{rate / 1e6:>10.1f} {bandwidth / 1e9:>6.1f} {100 * share:>7.0f}%")
    for dtype in (np.float64, np.float32):
        rate, bandwidth, share = measure_kernel((128, 128, 128), dtype, triad, args.repeat, True, ghost=3)
        print(f"{128:>6}^3 {np.dtype(dtype).name:>8} {'True':>7} {'ghost view':>10} "
              f"{rate / 1e6:>10.1f} {bandwidth / 1e9:>6.1f} {100 * share:>7.0f}%")
    print("  same traffic, no physics (12 arrays read, 11 written): the ceiling of this access pattern")
    for n in sizes:
        rate, bandwidth, share = measure_copy((n, n, n), np.float64, triad, args.repeat)
        print(f"{n:>6}^3 {'float64':>8} {'-':>7} {'copy only':>10} "
              f"{rate / 1e6:>10.1f} {bandwidth / 1e9:>6.1f} {100 * share:>7.0f}%")
    del triad

    gamma, E, B = flat_space_fields((128, 128, 128), np.float64)
    out = emsource.adm_sources(gamma, E, B)
    ratios = []
    for _ in range(max(3, args.repeat // 2)):  # paired, like the triad shares
        numpy_seconds = median_seconds(lambda: numpy_sources(gamma, E, B), 1)
        kernel_seconds = median_seconds(lambda: emsource.adm_sources(gamma, E, B, out=out), 3)
        ratios.append(numpy_seconds / kernel_seconds)
    numpy_rate = 128**3 / numpy_seconds
    print(f"\n(c) plain NumPy, 128^3 float64: {numpy_rate / 1e6:.2f} Mpoints/s; "
          f"kernel speed-up {statistics.median(ratios):.0f}x (checks on, median of paired runs)")
    reference = numpy_sources(gamma, E, B)
    ours = emsource.adm_sources(gamma, E, B)
    worst = max(float(np.max(np.abs(a - b)) / np.max(np.abs(b))) for a, b in zip(ours, reference))
    print(f"    largest relative difference kernel vs NumPy: {worst:.1e}")

    for n in sizes:
        print(f"    float32 / float64 points per second at {n}^3: "
              f"{rates[(n, 'float32', True)] / rates[(n, 'float64', True)]:.2f} (checks on)")

    small = flat_space_fields((8, 8, 8), np.float64)
    out = emsource.adm_sources(*small)
    call = median_seconds(lambda: emsource.adm_sources(*small, out=out), 20 * args.repeat * 50)
    print(f"\n(d) per-call time on an 8^3 grid (public API, out given): {call * 1e6:.1f} us")


if __name__ == "__main__":
    main()
