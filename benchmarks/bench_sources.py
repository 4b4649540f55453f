"""Speed of the source kernels, measured side by side with a memory-bandwidth yardstick.

Run:  python benchmarks/bench_sources.py [--quick] [--repeat N] [--sizes 128 256 ...]

In one run and on the same threads it measures, per grid size (default 128^3, 134^3 = 2^7 + 6,
256^3, 262^3 = 2^8 + 6; float64, checks on, into preallocated ``out``):
  (a) a STREAM-style triad a = b + s c (bandwidth counted as 3 arrays moved, the usual way),
  (b) emsource.adm_sources on C-contiguous arrays and on padded grid functions
      (``emsource.grid_arrays``), the ghost-zone view of a 2^k + 6 grid (interior 2^k),
      float32 on both layouts, and checks off; where the call takes the streaming-store
      driver (``emsource.kernels.streaming_stores``: rows of 2 MiB or more whose output rows
      share their offset in a cache line), the driver it would take otherwise (line steps on
      contiguous 2^k grids, else the default 256-bit driver) on the same views, timed beside it;
      the same-traffic copy kernel (12 rows read, 11 written, no physics, ordinary stores) on
      both layouts, the ceiling of the ordinary access pattern, and its streaming-store form
      where the call streams, the ceiling of that one; and a hand-written C + OpenMP kernel on
      the same arrays
      (``c_reference.py``, built now where a C compiler is found), with the time ratio
      emsource / C of each pair;
  (c) a plain-NumPy implementation of the same formulas (einsum, linalg.det), 128^3 float64,
  (d) the per-call time on an 8^3 grid, through the public API with ``out``, with and without
      the stored plan of the call's signature (``emsource._call_plans``), and its stages timed
      one by one (``--small-call`` runs only this part).
Every timing is taken right after a triad timing, and the cases of one size run interleaved
(triad, case 1, triad, case 2, ..., then again): load that comes and goes on this shared machine
affects the members of a pair alike. It prints medians: points per second, the effective
bandwidth counting each input and output array once (12 in, 11 out), that bandwidth as a
share of the triad. Read ratios, not absolute figures.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import time

import numba
import numpy as np

import emsource
from emsource import _arguments as arg
from emsource.grid_arrays import grid_function_like
from emsource.kernels import sources as kernels
from emsource.kernels.streaming_stores import (STREAMING_BUFFER_LANES, line_extent, line_offset,
                                               rows_at_offset, store_fence, stream_line)
from emsource.kernels.strip_buffers import strip_buffer
from emsource.kernels.vector_loops import STRIP_POINTS

import c_reference

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


@numba.njit(parallel=True, cache=True)
def _same_traffic_streaming_copy(gamma, E, B, rho, S_i, S_ij, S):
    """The same traffic with the outputs' whole cache lines written by streaming stores, as the
    streaming source driver writes them (``emsource.kernels.streaming_stores``): the ceiling of
    that driver's access pattern. Returns False, writing nothing, where the output rows do not
    share their offset within a line (the driver then declines too)."""
    npoints = rho.shape[0]
    rho_row = rho.reshape((1, npoints))
    S_row = S.reshape((1, npoints))
    offset = line_offset(rho_row, 0)
    if not (rows_at_offset(rho_row, offset) and rows_at_offset(S_row, offset)
            and rows_at_offset(S_i, offset) and rows_at_offset(S_ij, offset)):
        return False
    head, lines, lanes = line_extent(offset, rho.itemsize, npoints)
    for n in list(range(head)) + list(range(head + lines * lanes, npoints)):
        rho[n] = S[n] = gamma[0, n] + E[0, n] + B[0, n]
        for c in range(3):
            S_i[c, n] = rho[n]
        for c in range(6):
            S_ij[c, n] = rho[n]
    per_task = STRIP_POINTS // lanes  # the tasks of the streaming driver
    for task in numba.prange((lines + per_task - 1) // per_task):
        values = strip_buffer(2, STREAMING_BUFFER_LANES, rho)
        for line in range(task * per_task, min(lines, task * per_task + per_task)):
            start = np.uint64(head + line * lanes)
            for n in range(start, start + np.uint64(lanes)):  # unsigned: vectorises
                m = n - start
                values[0, m] = (gamma[0, n] + gamma[1, n] + gamma[2, n] + gamma[3, n]
                                + gamma[4, n] + gamma[5, n])
                values[1, m] = E[0, n] + E[1, n] + E[2, n] + B[0, n] + B[1, n] + B[2, n]
            stream_line(rho_row, 0, start, values, 0)
            stream_line(S_row, 0, start, values, 1)
            for c in range(3):
                stream_line(S_i, c, start, values, 0)
            for c in range(6):
                stream_line(S_ij, c, start, values, 1)
        store_fence()
    return True


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


def padded_copy(a):
    """The same values in a padded grid function (``emsource.grid_arrays``)."""
    p = grid_function_like(a)
    p[...] = a
    return p


class SizeCases:
    """The arrays of one grid size and the calls timed on them (each a function of no argument)."""

    def __init__(self, n, dtype, c_kernel):
        shape = self.shape = (n, n, n)
        self.points = n ** 3
        self.bytes = ARRAYS_MOVED * np.dtype(dtype).itemsize * self.points
        gamma, E, B = flat_space_fields(shape, dtype)
        out = emsource.adm_sources(gamma, E, B)
        padded_in = [padded_copy(a) for a in (gamma, E, B)]
        padded_out = emsource.AdmSources(*(padded_copy(a) for a in out))
        self.layouts = {"contiguous": ((gamma, E, B), out), "padded": (padded_in, padded_out)}
        self.dtype = np.dtype(dtype)
        self.c_kernel = c_kernel if self.dtype == np.float64 else None

    def api(self, layout, check=True):
        inputs, out = self.layouts[layout]
        return lambda: emsource.adm_sources(*inputs, out=out, check=check)

    def flat(self, layout, whole_grids=False):
        """The flat kernel views of the layout's arrays (``whole_grids`` as ``adm_sources``
        passes them to its drivers; without, (ncomp, stride) blocks for the C kernel)."""
        views, flat = arg.kernel_views(self.arrays(layout), self.shape, whole_grids=whole_grids)
        assert flat, layout
        return views

    def driver_tables(self, layout):
        """The flat driver tables ``adm_sources`` tries in turn on this layout
        (``emsource._arguments.flat_driver_tables``)."""
        return arg.flat_driver_tables(self.flat(layout, whole_grids=True), self.shape,
                                      kernels.ADM_SOURCES_FLAT, kernels.ADM_SOURCES_FLAT_LINE_STEPS,
                                      kernels.ADM_SOURCES_FLAT_STREAMING)

    def streams(self, layout):
        """Whether ``adm_sources`` writes through the streaming driver on this layout (tried
        first on large grids, declined where the output rows are not aligned alike)."""
        if kernels.ADM_SOURCES_FLAT_STREAMING not in self.driver_tables(layout):
            return False
        return self.driver(layout, kernels.ADM_SOURCES_FLAT_STREAMING)()[0] >= 0

    def driver(self, layout, table):
        """A call of the form-0 driver of ``table`` on the views ``adm_sources`` passes."""
        views = self.flat(layout, whole_grids=True)
        constants = arg.kernel_constants(0, self.dtype, 1 / (4 * math.pi))
        return lambda: table[0](views[0], arg.PACKED_METRIC_INDEX, *views[1:], *constants[1:],
                                True)

    def ordinary_driver(self, layout):
        """The driver ``adm_sources`` takes where it does not stream (line steps or the
        default 256-bit driver): timed beside the public call where that call streams."""
        return self.driver(layout, self.driver_tables(layout)[-1])

    def arrays(self, layout):
        inputs, out = self.layouts[layout]
        return list(inputs) + list(out)

    def copy(self, layout):
        views = self.flat(layout)
        return lambda: _same_traffic_copy(*views)

    def streaming_copy(self, layout):
        views = self.flat(layout)
        return lambda: _same_traffic_streaming_copy(*views)

    def c(self, layout):
        views = self.flat(layout)
        tiny, floor = arg.smallest_normal(self.dtype), arg.pivot_floor(self.dtype)
        return lambda: self.c_kernel(*views, 1 / (4 * math.pi), float(tiny), float(floor))


def interleaved(cases, triad, repeat):
    """{name: (seconds of each repetition, median share of the paired triad)} of ``cases``
    {name: (function, bytes moved)}, run in turn, each right after a triad, ``repeat`` times.

    Repetition r starts at case r (mod the number of cases): with a fixed order, a case always
    follows the same one, and a case's time depends on what ran before it (the call right after
    the C kernel was the slowest of a round whatever it was, measured); rotating spreads that
    over every case alike."""
    for function, _ in cases.values():
        function()  # warm-up: compilation, page faults
    seconds = {name: [] for name in cases}
    shares = {name: [] for name in cases}
    names = list(cases)
    for repetition in range(repeat):
        first = repetition % len(names)
        for name in names[first:] + names[:first]:
            function, bytes_moved = cases[name]
            reference = triad.bandwidth_once()
            start = time.perf_counter()
            function()
            elapsed = time.perf_counter() - start
            seconds[name].append(elapsed)
            shares[name].append(bytes_moved / elapsed / reference)
    return {name: (seconds[name], statistics.median(shares[name])) for name in cases}


def paired_ratio(numerators, denominators):
    """Median of the ratios of timings taken in the same repetition."""
    return statistics.median(a / b for a, b in zip(numerators, denominators))


def paired_quartiles(numerators, denominators):
    """First and third quartiles of the same ratios (the spread a median comes from)."""
    low, _, high = statistics.quantiles([a / b for a, b in zip(numerators, denominators)], n=4)
    return low, high


def ghost_cases(n, dtype):
    """The adm_sources call on the interior n^3 of an (n + 6)^3 grid (3 ghost points a side),
    arrays contiguous and padded: strided views, the column loop."""
    full = (n + 6,) * 3
    gamma, E, B = flat_space_fields(full, dtype)
    inner = (slice(None),) + (slice(3, -3),) * 3
    cases = {}
    for layout, arrays in (("contiguous", (gamma, E, B)),
                           ("padded", [padded_copy(a) for a in (gamma, E, B)])):
        views = [a[inner] for a in arrays]
        out = emsource.adm_sources(*views)
        cases[layout] = (lambda views=views, out=out: emsource.adm_sources(*views, out=out))
    return cases


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=9, help="repetitions per median (default 9)")
    parser.add_argument("--quick", action="store_true", help="only 128^3 and 134^3")
    parser.add_argument("--sizes", type=int, nargs="+", help="grid sizes n (n^3 points)")
    parser.add_argument("--calls", type=int, default=20000,
                        help="timed calls per stage of the 8^3 per-call figure (default 20000)")
    parser.add_argument("--small-call", action="store_true",
                        help="only the 8^3 per-call figure and its stages (d)")
    args = parser.parse_args(argv)
    if args.small_call:
        small_call_breakdown(args.calls)
        return
    sizes = args.sizes or ((128, 134) if args.quick else (128, 134, 256, 262))
    print(f"emsource {emsource.__version__}, numba {numba.__version__}, numpy {np.__version__}, "
          f"{numba.get_num_threads()} threads, medians of {args.repeat}")
    c_kernel, c_description = c_reference.build()
    print(f"C reference: {c_description}")

    triad = Triad()
    triad_rates = [triad.bandwidth_once() for _ in range(args.repeat)]
    print(f"\n(a) triad bandwidth: {statistics.median(triad_rates) / 1e9:.1f} GB/s "
          f"(median; range {min(triad_rates) / 1e9:.1f}-{max(triad_rates) / 1e9:.1f})")

    print("\n(b) adm_sources into preallocated out arrays (checks on unless said), share of the "
          "paired triad; copy = same traffic, no physics; C = hand-written C + OpenMP")
    print(f"{'grid':>6} {'dtype':>8} {'what':>28} {'Mpoints/s':>10} {'% triad':>8}")
    for n in sizes:
        results, shares = {}, {}
        for dtype in (np.float64, np.float32):
            size = SizeCases(n, dtype, c_kernel)
            cases = {}
            for layout in ("contiguous", "padded"):
                cases[("api", layout)] = (size.api(layout), size.bytes)
                streams = size.streams(layout)
                if size.dtype == np.float64:
                    cases[("copy", layout)] = (size.copy(layout), size.bytes)
                    if streams:
                        cases[("streaming copy", layout)] = (size.streaming_copy(layout),
                                                             size.bytes)
                    if size.c_kernel is not None:
                        cases[("C", layout)] = (size.c(layout), size.bytes)
                    cases[("api, checks off", layout)] = (size.api(layout, False), size.bytes)
                if streams:
                    cases[("ordinary driver", layout)] = (size.ordinary_driver(layout),
                                                          size.bytes)
            measured = interleaved(cases, triad, args.repeat)
            for (what, layout), (seconds, share) in measured.items():
                results[(np.dtype(dtype).name, what, layout)] = seconds
                shares[(np.dtype(dtype).name, what, layout)] = share
                print(f"{n:>4}^3 {np.dtype(dtype).name:>8} {what + ', ' + layout:>28} "
                      f"{size.points / statistics.median(seconds) / 1e6:>10.1f} {100 * share:>7.0f}%")
            del size, cases, measured
        for layout in ("contiguous", "padded"):
            api = results[("float64", "api", layout)]
            # float32 and float64 run in separate groups (both sets of arrays at once would not
            # fit beside the rest at 262^3), so their ratio comes from the shares of the paired
            # triads: points per second per triad bandwidth = share / bytes per point.
            float_ratio = 2 * shares[("float32", "api", layout)] / shares[("float64", "api", layout)]
            line = (f"  {layout}: kernel / copy kernel {1 / paired_ratio(api, results[('float64', 'copy', layout)]):.2f} "
                    f"(speed); float32 / float64 points per second {float_ratio:.2f} "
                    "(from the triad shares)")
            if ("float64", "streaming copy", layout) in results:
                streaming_copy = results[("float64", "streaming copy", layout)]
                line += (f"; kernel / streaming copy {1 / paired_ratio(api, streaming_copy):.2f}"
                         " (speed)")
            if ("float64", "C", layout) in results:
                c_time = results[("float64", "C", layout)]
                low, high = paired_quartiles(api, c_time)
                line += (f"; time emsource / C {paired_ratio(api, c_time):.3f} "
                         f"(quartiles {low:.3f}-{high:.3f})")
            for dtype in ("float64", "float32"):
                if (dtype, "ordinary driver", layout) in results:
                    ordinary = results[(dtype, "ordinary driver", layout)]
                    api = results[(dtype, "api", layout)]
                    low, high = paired_quartiles(api, ordinary)
                    line += (f"; {dtype} streaming / ordinary driver "
                             f"{paired_ratio(api, ordinary):.3f} (quartiles {low:.3f}-{high:.3f})")
                    if dtype == "float64" and ("float64", "C", layout) in results:
                        line += (f"; ordinary driver / C "
                                 f"{paired_ratio(ordinary, results[('float64', 'C', layout)]):.3f}")
            print(line)
        print(f"  padded / contiguous time: kernel "
              f"{paired_ratio(results[('float64', 'api', 'padded')], results[('float64', 'api', 'contiguous')]):.2f}, "
              f"copy {paired_ratio(results[('float64', 'copy', 'padded')], results[('float64', 'copy', 'contiguous')]):.2f}")
    for n in sorted({n - 6 for n in sizes if n - 6 in sizes}):
        for dtype in (np.float64, np.float32):
            ghost = ghost_cases(n, dtype)
            nbytes = ARRAYS_MOVED * np.dtype(dtype).itemsize * n ** 3
            measured = interleaved({k: (f, nbytes) for k, f in ghost.items()}, triad, args.repeat)
            for layout, (seconds, share) in measured.items():
                print(f"{n:>4}^3 {np.dtype(dtype).name:>8} {'ghost view of ' + layout:>28} "
                      f"{n ** 3 / statistics.median(seconds) / 1e6:>10.1f} {100 * share:>7.0f}%")
            del ghost, measured
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
    if c_kernel is not None:
        views, _ = arg.kernel_views([gamma, E, B] + list(out), (128, 128, 128))
        c_kernel(*views, 1 / (4 * math.pi), float(arg.smallest_normal(np.dtype(np.float64))),
                 float(arg.pivot_floor(np.float64)))
        worst = max(float(np.max(np.abs(a - b)) / np.max(np.abs(b))) for a, b in zip(out, ours))
        print(f"    largest relative difference kernel vs C: {worst:.1e}")

    small_call_breakdown(args.calls)


@numba.njit(cache=True)
def _thirteen_arguments(a, b, c, d, e, f, g, h, i, j, k, m, n):
    """Does nothing: its call time is Numba's dispatch of the source driver's arguments."""
    return 0, 0


def _median_ns(function, calls, blocks=10):
    """Median in ns of ``calls`` timed calls of ``function`` (after a warm-up), taken in
    ``blocks`` blocks so that stages timed in turn share the machine's load alike."""
    for _ in range(min(calls, 2000)):
        function()
    times = []
    clock = time.perf_counter_ns
    for _ in range(calls):
        start = clock()
        function()
        times.append(clock() - start)
    return statistics.median(times)


def small_call_breakdown(calls):
    """(d) The public call on an 8^3 grid with ``out`` and its stages, each the median of
    ``calls`` timed calls; the stages are run in turn in 10 rounds and each figure is the
    median over the rounds."""
    from emsource import _call_plans, sources
    from emsource._threading import kernel_call

    gamma, E, B = small = flat_space_fields((8, 8, 8), np.float64)
    out = emsource.adm_sources(*small)
    emsource.adm_sources(*small, out=out)  # stores the plan
    arrays = small + tuple(out)
    options = ("gaussian", "upper", "component_first")
    plan = sources._ADM_PLANS.get(_call_plans.signature(arrays, options))
    gidx, constants, _ = plan.extra
    views = plan.views(arrays)
    names, inputs = emsource.AdmSources._fields, ("gamma", "E", "B")

    def full_path():
        sources._ADM_PLANS.clear()  # every call validates in full (as before the plans)
        emsource.adm_sources(*small, out=out)

    padded = [padded_copy(a) for a in small]
    padded_out = emsource.AdmSources(*(padded_copy(a) for a in out))

    stages = {
        "public call, out given (plan stored)": lambda: emsource.adm_sources(*small, out=out),
        "public call, full validation (no plan)": full_path,
        "public call, padded grid functions (plan stored)": lambda: emsource.adm_sources(
            *padded, out=padded_out),
        "  signature (shapes, dtypes, layout), look-up": lambda: sources._ADM_PLANS.get(
            _call_plans.signature(arrays, options)),
        "  out checks (writeable, overlap)": lambda: arg.output_memory(
            "adm_sources", names, out, inputs, small),
        "  kernel views": lambda: plan.views(arrays),
        "  kernel call (threads, 512 points, counts)": lambda: kernels.ADM_SOURCES_FLAT[0](
            views[0], gidx, *views[1:], *constants[1:], True),
        "    of which Numba dispatch (empty function)": lambda: _thirteen_arguments(
            views[0], gidx, *views[1:], *constants[1:], True),
        "  kernel_call() guard": lambda: kernel_call(),
    }
    rounds = 10
    medians = {name: [] for name in stages}
    for _ in range(rounds):
        for name, function in stages.items():
            medians[name].append(_median_ns(function, max(1, calls // rounds)))
    print(f"\n(d) per-call time on an 8^3 grid, float64, checks on (medians of {calls} calls "
          f"per line, in {rounds} interleaved rounds); load average {os.getloadavg()[0]:.1f}")
    figures = {name: statistics.median(values) / 1e3 for name, values in medians.items()}
    for name, us in figures.items():
        print(f"    {name:<48} {us:6.2f} us")
    parts = [name for name in figures if name.startswith("  ") and not name.startswith("    ")]
    rest = figures["public call, out given (plan stored)"] - sum(figures[n] for n in parts)
    print(f"    {'  rest (argument passing, entry, result)':<48} {rest:6.2f} us")


if __name__ == "__main__":
    main()
