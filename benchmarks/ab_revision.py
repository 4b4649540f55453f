"""The source and T_ab drivers of an earlier revision against the current ones, in one process.

Run:  python benchmarks/ab_revision.py [--rev b89a3b2] [--size 128] [--repeat 7]

``kernels/sources.py`` of the revision is read with ``git show`` and loaded beside the current
module (``kernel_revision.py``; its relative imports resolve to the current point-physics
layer, unchanged since), so
both drivers run on the same arrays, interleaved, each right after a triad (see
``bench_sources.py``). Cases: the flat source driver, the flat T_ab driver (lower and upper),
float64 and float32 on contiguous arrays; and a ghost-zone view of the (size + 6)^3 grid, where
the revision's column loop meets the current windowed driver. Prints points per second, the
share of the triad and the median of the paired time ratios new / old.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import sys

import numpy as np

import emsource
from emsource import _arguments as arg
from emsource.kernels import sources as current
from emsource.kernels._compile import call_sharing_layouts

from bench_sources import Triad, flat_space_fields, interleaved, paired_ratio
from kernel_revision import revision_module


def _sources_flat(module, constants):
    """A call of ``module``'s flat source driver for the contravariant form, in the calling
    convention of its revision (one driver per form since 22ffbb0, form an argument before)."""
    if hasattr(module, "ADM_SOURCES_FLAT"):
        return lambda *arrays: module.ADM_SOURCES_FLAT[0](*arrays, *constants[1:], True)
    return lambda *arrays: module.adm_sources_flat(*arrays, *constants, True)


def _stress_energy_flat(module, constants, upper):
    """As :func:`_sources_flat`, for the T_ab (``upper`` False) or T^ab driver."""
    if hasattr(module, "STRESS_ENERGY_FLAT"):
        return lambda *arrays: module.STRESS_ENERGY_FLAT[0, upper](*arrays, *constants[1:], True)
    return lambda *arrays: module.stress_energy_flat(*arrays, *constants, upper, True)


def cases_of(n, old):
    cases = {}
    ghost = (slice(None),) + (slice(3, -3),) * 3
    for dtype in (np.float64, np.float32):
        name = np.dtype(dtype).name
        rng = np.random.default_rng(1)
        gamma, E, B = flat_space_fields((n, n, n), dtype)
        alpha = (1 + 0.1 * rng.random((n, n, n))).astype(dtype)
        beta = (0.1 * rng.standard_normal((3, n, n, n))).astype(dtype)
        constants = arg.kernel_constants(0, dtype, 1 / (4 * math.pi))
        gidx = np.arange(6)
        out = [np.empty(s, dtype) for s in ((n,) * 3, (3,) + (n,) * 3, (6,) + (n,) * 3, (n,) * 3)]
        flat_in = (gamma.reshape(6, -1), gidx, E.reshape(3, -1), B.reshape(3, -1))
        flat_out = (out[0].reshape(-1), out[1].reshape(3, -1), out[2].reshape(6, -1),
                    out[3].reshape(-1))
        size = np.dtype(dtype).itemsize * n ** 3
        for label, module in (("old", old), ("new", current)):
            cases[(name, "sources, flat", label)] = (
                lambda m=module, a=flat_in + flat_out: _sources_flat(m, constants)(*a), 23 * size)
        T = np.empty((10,) + (n,) * 3, dtype)
        t_args = (alpha.reshape(-1), beta.reshape(3, -1), gamma.reshape(6, -1), gidx,
                  E.reshape(3, -1), B.reshape(3, -1), T.reshape(10, -1))
        for upper in (False, True):
            what = "T^ab, flat" if upper else "T_ab, flat"
            for label, module in (("old", old), ("new", current)):
                cases[(name, what, label)] = (
                    lambda m=module, a=t_args, u=upper: _stress_energy_flat(m, constants, u)(*a),
                    26 * size)
        # Ghost-zone view of an (n + 6)^3 grid: the revision's column loop, the current route.
        big = flat_space_fields((n + 6,) * 3, dtype)
        views = [a[ghost] for a in big]
        column_args = (views[0], gidx, views[1], views[2], *out, *constants, True)
        cases[(name, "sources, ghost view", "old")] = (
            lambda a=column_args: call_sharing_layouts(old.adm_sources_grid, a, (0, 2, 3)),
            23 * size)
        cases[(name, "sources, ghost view", "new")] = (
            lambda v=views, o=emsource.AdmSources(*out): emsource.adm_sources(*v, out=o),
            23 * size)
    return cases


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rev", default="b89a3b2", help="git revision of the old kernels")
    parser.add_argument("--size", type=int, default=128, help="grid points per axis")
    parser.add_argument("--repeat", type=int, default=7, help="repetitions per median")
    args = parser.parse_args(argv)
    load = os.getloadavg()[0]
    old = revision_module(args.rev, "sources")
    triad = Triad()
    results = interleaved(cases_of(args.size, old), triad, args.repeat)
    n = args.size
    print(f"revision {args.rev} (old) against the working tree (new), {n}^3, medians of "
          f"{args.repeat}, load average {load:.1f} -> {os.getloadavg()[0]:.1f}")
    print(f"{'dtype':8s} {'case':22s} {'old Mpts/s':>10s} {'% triad':>8s} {'new Mpts/s':>10s} "
          f"{'% triad':>8s} {'time new/old':>12s}")
    keys = sorted({(d, c) for d, c, _ in results}, key=lambda k: (k[0] != "float64", k[1]))
    for dtype, case in keys:
        old_s, old_share = results[(dtype, case, "old")]
        new_s, new_share = results[(dtype, case, "new")]
        print(f"{dtype:8s} {case:22s} {n ** 3 / statistics.median(old_s) / 1e6:10.1f} "
              f"{100 * old_share:7.0f}% {n ** 3 / statistics.median(new_s) / 1e6:10.1f} "
              f"{100 * new_share:7.0f}% {paired_ratio(new_s, old_s):12.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
