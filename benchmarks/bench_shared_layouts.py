"""Run time of the conservation kernels through one shared specialisation per layout class.

Run:  python benchmarks/bench_shared_layouts.py [--points 96] [--repeat 9]

The public wrappers type the caller's arrays by dtype alone (``kernels._compile.
call_sharing_layouts``: read-only "C" when all are C-contiguous, else read-only "A"), so that
every mix of strided inputs shares one compiled specialisation. This script times, interleaved
in one process (one call of each variant per round, medians over the rounds), the two kernel
passes (order 4, supplied time derivatives, every metric term on) called
  exact   with each argument's own type (the kernel's lazily compiled dispatcher: how the
          wrappers called the kernels before, one specialisation per mix of layouts), and
  shared  through ``call_sharing_layouts``,
on C-ordered inputs and on inputs stored z-fastest and seen through transposed views (strided),
and prints shared / exact per layout. The same at 8^3 measures what the shared route adds per
call (its argument key and Numba's conversion of C or writable arrays to the declared type),
and the shared dispatchers called directly with writable arrays (converted) and with read-only
views (exact match) isolate the conversion.
For scale, a STREAM-style triad and the plain-NumPy residual of ``bench_conservation.py`` run in
the same process. The first run compiles four specialisations per pass (minutes).
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

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_conservation import (ARRAYS_MOVED, numpy_residual, smooth_curved_data,  # noqa: E402
                                triad_bandwidth)

from emsource.conservation import _PASS_1_INPUTS, _PASS_2_INPUTS  # noqa: E402
from emsource.kernels import conservation as kernels  # noqa: E402
from emsource.kernels._compile import call_sharing_layouts, shared_dispatcher  # noqa: E402
from emsource.kernels.stencils import first_derivative_weights  # noqa: E402


def z_fastest(a):
    """``a`` (components first, axes x, y, z) stored as (components, z, y, x), seen transposed."""
    lead = a.ndim - 3
    stored = np.ascontiguousarray(np.moveaxis(a, (lead, lead + 2), (lead + 2, lead)))
    return np.moveaxis(stored, (lead, lead + 2), (lead + 2, lead))


def pass_arguments(d, h, n):
    """The argument tuples of the two passes as ``conservation._run_kernels`` builds them."""
    v = {k: (a[None] if a.ndim == 3 else a) for k, a in d.items()}
    f = np.float64
    gidx = np.arange(6, dtype=np.int64)
    work = np.empty((16, n, n, n))
    residual = np.empty((4, n, n, n))
    scale = np.empty_like(residual)
    partials = np.empty((n * n, 16))
    coef = f(1.0 / (4.0 * math.pi))
    first = (v["alpha"], v["beta"], v["gamma"], gidx, v["E"], v["B"], 2, v["dt_gamma"], gidx,
             v["dt_E"], v["dt_B"], v["gamma"], gidx, v["E"], v["B"], f(0.0), coef, f(0.5), work)
    second = (v["alpha"], v["beta"], v["gamma"], gidx, v["K"], gidx, v["E"], v["B"],
              v["charge_density"], v["current_density"], work, first_derivative_weights(4),
              f(1 / h), f(1 / h), f(1 / h), np.eye(3, dtype=np.int64), 2, 2, 2, coef, f(0.5),
              residual, scale, residual, False, partials, n, n)
    return first, second


def variants(n):
    d, h = smooth_curved_data(n)
    strided = {k: z_fastest(a) for k, a in d.items()}
    found = {}
    for layout, data in (("contiguous", d), ("z-fastest", strided)):
        first, second = pass_arguments(data, h, n)
        found[(layout, "exact")] = (
            lambda first=first, second=second: (kernels.fluxes_and_rates(*first),
                                                kernels.residuals(*second)))
        found[(layout, "shared")] = (
            lambda first=first, second=second: (
                call_sharing_layouts(kernels.fluxes_and_rates, first, _PASS_1_INPUTS),
                call_sharing_layouts(kernels.residuals, second, _PASS_2_INPUTS)))
        if layout == "contiguous":
            # What Numba's conversion costs, without the key: the shared dispatchers called
            # directly with the writable arrays (converted to read-only) and with read-only
            # views of them (the declared types exactly).
            one = shared_dispatcher(kernels.fluxes_and_rates, first, _PASS_1_INPUTS)
            two = shared_dispatcher(kernels.residuals, second, _PASS_2_INPUTS)
            fixed = [tuple(_read_only(a) if p in inputs else a for p, a in enumerate(args))
                     for args, inputs in ((first, _PASS_1_INPUTS), (second, _PASS_2_INPUTS))]
            found[(layout, "converted")] = (
                lambda first=first, second=second, one=one, two=two: (one(*first), two(*second)))
            found[(layout, "declared")] = (
                lambda one=one, two=two, fixed=fixed: (one(*fixed[0]), two(*fixed[1])))
    return found, d, h


def _read_only(a):
    view = a.view()
    view.flags.writeable = False
    return view


def interleaved_medians(calls, repeat):
    for call in calls.values():
        call()  # compilation or cache load, page faults
    times = {key: [] for key in calls}
    for _ in range(repeat):
        for key, call in calls.items():
            start = time.perf_counter()
            call()
            times[key].append(time.perf_counter() - start)
    return {key: statistics.median(t) for key, t in times.items()}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=96, help="points per axis (default 96)")
    parser.add_argument("--repeat", type=int, default=9, help="rounds per median (default 9)")
    args = parser.parse_args(argv)
    n = args.points
    load = lambda: " ".join(f"{x:.2f}" for x in os.getloadavg())  # noqa: E731
    print(f"numba {numba.__version__}, numpy {np.__version__}, {numba.get_num_threads()} threads, "
          f"float64, order 4, medians of {args.repeat} interleaved rounds; load average {load()}")
    triad = triad_bandwidth(args.repeat)
    print(f"triad bandwidth: {triad / 1e9:.1f} GB/s")
    for size, repeat in ((n, args.repeat), (8, 20 * args.repeat)):
        calls, d, h = variants(size)
        medians = interleaved_medians(calls, repeat)
        points = size ** 3
        print(f"\n{size}^3, two passes:")
        converted, declared = medians[("contiguous", "converted")], medians[("contiguous", "declared")]
        print(f"    shared dispatchers called directly: writable C inputs (converted) "
              f"{converted * 1e3:8.3f} ms, read-only (declared types) {declared * 1e3:8.3f} ms, "
              f"ratio {converted / declared:5.3f}")
        for layout in ("contiguous", "z-fastest"):
            exact, shared = medians[(layout, "exact")], medians[(layout, "shared")]
            share = lambda t: 100 * ARRAYS_MOVED * 8 * points / t / triad  # noqa: E731
            print(f"    {layout:10s}  exact {exact * 1e3:9.3f} ms ({share(exact):3.0f}% of triad)"
                  f"   shared {shared * 1e3:9.3f} ms ({share(shared):3.0f}%)"
                  f"   shared / exact {shared / exact:5.3f}")
        if size == n:
            numpy_seconds = statistics.median(
                [_timed(lambda: numpy_residual(d, h)) for _ in range(3)])
            print(f"    plain NumPy residual {numpy_seconds * 1e3:9.1f} ms: shared contiguous is "
                  f"{numpy_seconds / medians[('contiguous', 'shared')]:4.1f}x faster, "
                  f"shared z-fastest {numpy_seconds / medians[('z-fastest', 'shared')]:4.1f}x")
    print(f"\nload average after: {load()} ({os.cpu_count()} CPUs)")
    return 0


def _timed(function):
    start = time.perf_counter()
    function()
    return time.perf_counter() - start


if __name__ == "__main__":
    sys.exit(main())
