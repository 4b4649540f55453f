"""Speed of the other forms (densitized fields, conformal variables, Faraday tensor, ideal MHD)
beside the physical source kernel, measured in the same run.

Run:  python benchmarks/bench_forms.py [--points N] [--repeat N]
      python benchmarks/bench_forms.py --conformal [--ideal-mhd] [--points N] [--repeat N]
      python benchmarks/bench_forms.py --small-call [--calls N]
      python benchmarks/bench_forms.py --line-steps [--points N] [--repeat N]
      python benchmarks/bench_forms.py --streaming [--points N] [--repeat N]

For a float64 grid of N^3 points (default 96) it prints, as medians of interleaved runs (each
kernel timing right after a STREAM-style triad, read as a share of it; the machine is shared):
  - emsource.adm_sources on E^i, B^i (the reference pipeline) and on densitized fields,
  - emsource.conformal.conformal_sources (chi), the same outputs plus A_ij,
  - a plain-NumPy route to the conformal outputs (gamma = tilde-gamma / chi, then the formulas),
  - emsource.faraday.faraday_tensor and emsource.ideal_mhd.ideal_mhd_fields,
with bandwidth counted once per array read or written.

``--conformal`` measures instead the conformal sources against ``adm_sources`` on the same grid
(default 128^3; each call into preallocated ``out``, checks on), float64 and float32: contiguous
arrays, padded grid functions and the ghost-zone window of an (N + 6)^3 grid, with the triad,
the same-traffic copy kernels of both calls (12 + 11 and 13 + 11 rows, no physics), the column
loop that served every layout before the vectorised drivers, and plain NumPy (float64,
contiguous). Each row is timed right after a triad, the rows of a group interleaved; the
machine's load averages (``os.getloadavg``, what ``uptime`` prints) are printed beside each
group. Read ratios within one group. ``--ideal-mhd`` does the same for ideal_mhd_fields
(Eulerian velocity, into ``out``; contiguous and ghost-zone window) beside adm_sources and its
column loop.

``--line-steps`` measures instead, at 128^3 and 256^3 (or N^3), the flat drivers of adm_sources,
stress_energy_4d (T_ab) and conformal_sources (chi) that a call on large C-contiguous float64
grids takes (compiled for 512-bit vectors, ``emsource._arguments.takes_line_steps``) against the
default 256-bit drivers on the same views, interleaved, each right after a triad.

``--streaming`` measures instead, at 128^3 and 200^3 (or N^3), each public call that has a
streaming-store driver (adm_sources, stress_energy_4d, conformal_sources, ideal_mhd_fields) into
padded grid functions and into C-contiguous arrays, against the same call with the streaming
size threshold out of reach (the driver it takes otherwise), interleaved, each right after a
triad. The "streams" column says whether the call tries the streaming driver (rows of 2 MiB
that do not alias; contiguous 128^3 float64 rows alias, so there both columns are the same
driver).

``--small-call`` measures instead the per-call time of each public source call an evolution loop
makes at every right-hand side (adm_sources, the reference; conformal_sources; stress_energy_4d;
ideal_mhd_fields) on an 8^3 float64 grid, into ``out``, checks on, on one thread: C-contiguous
arrays and padded grid functions with the stored plan of the call's signature
(``emsource._call_plans``), and C-contiguous with every plan dropped before each call (the full
validation, which then also makes and stores the plan: the cost of a first call); and each
call's compiled driver alone on its plan's views (Numba's dispatch and the work on 512 points,
no Python around it; its ratio is to adm_sources' driver). Beside them, in the same run: a
one-thread triad over the same 8^3 points (a compiled call on this many points: the floor of any
call) and plain NumPy computing the conformal outputs. The figure is CPU time per call
(``time.process_time`` over a block of calls, divided), since the machine is shared: wall time
would count time spent waiting for a core. Blocks of the cases run interleaved, the median over
the blocks is printed, with the load averages before and after.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import emsource  # noqa: E402
import numba  # noqa: E402
from bench_sources import (Triad, _same_traffic_copy, flat_space_fields, interleaved,  # noqa: E402
                           numpy_sources, padded_copy, paired_quartiles, paired_ratio)
from emsource import _arguments as arg  # noqa: E402
from emsource.conformal import ConformalSources  # noqa: E402
from emsource.kernels import conformal as conformal_kernels  # noqa: E402
from emsource.kernels import ideal_mhd as ideal_mhd_kernels  # noqa: E402
from emsource.conformal import conformal_sources  # noqa: E402
from emsource.faraday import faraday_tensor  # noqa: E402
from emsource.ideal_mhd import ideal_mhd_fields  # noqa: E402


def numpy_conformal(chi, gamma_tilde, E, B):
    """The conformal outputs in plain NumPy: physical metric, sources,
    c S_ij - tilde-gamma S / 3."""
    rho, S_i, S_ij, S = numpy_sources(gamma_tilde / chi, E, B)
    return rho, S_i, S, chi * S_ij - gamma_tilde * S / 3


#: Rows moved per point: adm_sources reads gamma 6, E 3, B 3 and writes rho, S_i 3, S_ij 6, S;
#: conformal_sources reads the factor too and writes A_ij 6 in place of S_ij.
ADM_ROWS = 12 + 11
CONFORMAL_ROWS = 13 + 11


@numba.njit(parallel=True, cache=True)
def _conformal_traffic_copy(factor, gamma_tilde, E, B, rho, S_i, S, A):
    """Reads the conformal call's 13 input rows and writes its 11 output rows, no physics."""
    for n in numba.prange(rho.shape[0]):
        a = (factor[n] + gamma_tilde[0, n] + gamma_tilde[1, n] + gamma_tilde[2, n]
             + gamma_tilde[3, n] + gamma_tilde[4, n] + gamma_tilde[5, n])
        b = E[0, n] + E[1, n] + E[2, n] + B[0, n] + B[1, n] + B[2, n]
        rho[n] = a
        S[n] = b
        for c in range(3):
            S_i[c, n] = a
        for c in range(6):
            A[c, n] = b


def _load():
    return "load {:.2f} {:.2f} {:.2f}".format(*os.getloadavg())


def _conformal_group(n, dtype, layout):
    """{name: (call, bytes moved)} for one grid size, dtype and layout ("contiguous",
    "padded", "ghost"), all on the same data."""
    itemsize = np.dtype(dtype).itemsize
    full = (n + 6,) * 3 if layout == "ghost" else (n,) * 3
    gamma, E, B = flat_space_fields(full, dtype)
    chi = np.random.default_rng(3).uniform(0.5, 1.5, full).astype(dtype)
    gamma_tilde = (gamma * chi).astype(dtype)
    phi = (-np.log(chi) / 4).astype(dtype)  # the same metric: e^{-4 phi} = chi
    arrays = [chi, phi, gamma_tilde, gamma, E, B]
    if layout == "padded":
        arrays = [padded_copy(a) for a in arrays]
    if layout == "ghost":
        inner = (slice(3, -3),) * 3
        arrays = [a[inner] if a.ndim == 3 else a[(slice(None),) + inner] for a in arrays]
    chi, phi, gamma_tilde, gamma, E, B = arrays
    adm_out = emsource.adm_sources(gamma, E, B)
    conformal_out = conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")
    if layout == "padded":
        adm_out = emsource.AdmSources(*(padded_copy(a) for a in adm_out))
        conformal_out = ConformalSources(*(padded_copy(a) for a in conformal_out))
    grid = (n,) * 3
    adm_bytes, conformal_bytes = (rows * itemsize * n ** 3 for rows in (ADM_ROWS, CONFORMAL_ROWS))
    cases = {
        "adm_sources": (lambda: emsource.adm_sources(gamma, E, B, out=adm_out), adm_bytes),
        "conformal_sources chi": (lambda: conformal_sources(
            chi, gamma_tilde, E, B, decomposition="chi", out=conformal_out), conformal_bytes),
        "conformal_sources phi": (lambda: conformal_sources(
            phi, gamma_tilde, E, B, decomposition="phi",
            out=conformal_out), conformal_bytes),
    }
    # The column loop that served every layout before (run-time decomposition and form).
    column = arg.three_axis_views([chi, gamma_tilde, E, B, *conformal_out], grid)
    one = dtype(1)
    cases["column loop (before), chi"] = (lambda: conformal_kernels.conformal_sources_grid(
        column[0], column[1], np.arange(6), *column[2:], conformal_kernels.DECOMPOSITION_CHI, 0,
        dtype(1 / (4 * math.pi)), dtype(arg.pivot_floor(dtype)), one), conformal_bytes)
    if layout != "ghost":
        adm_views, flat = arg.kernel_views([gamma, E, B, *adm_out], grid)
        conformal_views, flat2 = arg.kernel_views([chi, gamma_tilde, E, B, *conformal_out], grid)
        assert flat and flat2
        cases["copy, adm traffic"] = (lambda: _same_traffic_copy(*adm_views), adm_bytes)
        cases["copy, conformal traffic"] = (
            lambda: _conformal_traffic_copy(*conformal_views), conformal_bytes)
    return cases


IDEAL_MHD_ROWS = 1 + 3 + 6 + 3 + 3 + 3 + 4 + 4  # alpha, beta, gamma, B, v in; E, u, b out


def _ideal_mhd_group(n, dtype, layout):
    """{name: (call, bytes moved)}: ideal_mhd_fields (Eulerian v^i, into ``out``) beside
    adm_sources and the column loop on the same grid, ``layout`` "contiguous" or "ghost"."""
    itemsize = np.dtype(dtype).itemsize
    full = (n + 6,) * 3 if layout == "ghost" else (n,) * 3
    gamma, E, B = flat_space_fields(full, dtype)
    rng = np.random.default_rng(4)
    alpha = rng.uniform(0.8, 1.2, full).astype(dtype)
    beta = (0.1 * rng.standard_normal((3,) + full)).astype(dtype)
    velocity = (0.1 * rng.standard_normal((3,) + full)).astype(dtype)
    arrays = [alpha, beta, gamma, E, B, velocity]
    if layout == "ghost":
        inner = (slice(3, -3),) * 3
        arrays = [a[inner] if a.ndim == 3 else a[(slice(None),) + inner] for a in arrays]
    alpha, beta, gamma, E, B, velocity = arrays
    adm_out = emsource.adm_sources(gamma, E, B)
    mhd_out = ideal_mhd_fields(alpha, beta, gamma, B, velocity)
    grid = (n,) * 3
    column = arg.three_axis_views([alpha, beta, gamma, B, velocity, *mhd_out], grid)
    return {
        "adm_sources": (lambda: emsource.adm_sources(gamma, E, B, out=adm_out),
                        ADM_ROWS * itemsize * n ** 3),
        "ideal_mhd_fields": (lambda: ideal_mhd_fields(alpha, beta, gamma, B, velocity,
                                                      out=mhd_out),
                             IDEAL_MHD_ROWS * itemsize * n ** 3),
        "column loop (before)": (lambda: ideal_mhd_kernels.ideal_mhd_grid(
            *column[:3], np.arange(6), *column[3:], 0, ideal_mhd_kernels.VELOCITY_EULERIAN,
            dtype(arg.pivot_floor(dtype)), dtype(1)), IDEAL_MHD_ROWS * itemsize * n ** 3),
    }


def ideal_mhd_section(n, repeat):
    """ideal_mhd_fields against adm_sources and its column loop, per dtype and layout."""
    print(f"\nideal MHD, {n}^3, medians of {repeat}; rows moved: ideal MHD {IDEAL_MHD_ROWS}, "
          f"adm_sources {ADM_ROWS} (ratio {IDEAL_MHD_ROWS / ADM_ROWS:.3f})")
    triad = Triad()
    for dtype in (np.float64, np.float32):
        for layout in ("contiguous", "ghost"):
            cases = _ideal_mhd_group(n, dtype, layout)
            before = _load()
            measured = interleaved(cases, triad, repeat)
            print(f"\n{np.dtype(dtype).name}, {layout} ({before} before, {_load()} after)")
            print(f"{'call':30s} {'Mpoints/s':>10s} {'% triad':>8s} {'time / adm':>11s}")
            adm = measured["adm_sources"][0]
            for name, (seconds, share) in measured.items():
                print(f"{name:30s} {n ** 3 / statistics.median(seconds) / 1e6:10.1f} "
                      f"{100 * share:7.0f}% {paired_ratio(seconds, adm):11.3f}")
            del cases, measured


def conformal_section(n, repeat):
    """conformal_sources against adm_sources and the yardsticks, per dtype and layout."""
    print(f"emsource {emsource.__version__}, {numba.get_num_threads()} threads, {n}^3 "
          f"(ghost: the interior {n}^3 of ({n} + 6)^3), medians of {repeat}, each run right "
          "after a triad; time ratios paired within a group")
    print(f"traffic ratio conformal / adm: {CONFORMAL_ROWS} / {ADM_ROWS} rows = "
          f"{CONFORMAL_ROWS / ADM_ROWS:.3f}")
    triad = Triad()
    for dtype in (np.float64, np.float32):
        for layout in ("contiguous", "padded", "ghost"):
            cases = _conformal_group(n, dtype, layout)
            before = _load()
            measured = interleaved(cases, triad, repeat)
            print(f"\n{np.dtype(dtype).name}, {layout} ({before} before, {_load()} after)")
            print(f"{'call':30s} {'Mpoints/s':>10s} {'% triad':>8s} {'time / adm':>11s}")
            adm = measured["adm_sources"][0]
            for name, (seconds, share) in measured.items():
                print(f"{name:30s} {n ** 3 / statistics.median(seconds) / 1e6:10.1f} "
                      f"{100 * share:7.0f}% {paired_ratio(seconds, adm):11.3f}")
            del cases, measured
    gamma, E, B = flat_space_fields((n,) * 3, np.float64)
    chi = np.random.default_rng(3).uniform(0.5, 1.5, (n,) * 3)
    gamma_tilde = gamma * chi
    out = conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")
    ratios = []
    for _ in range(3):
        start = time.perf_counter()
        numpy_conformal(chi, gamma_tilde, E, B)
        numpy_seconds = time.perf_counter() - start
        start = time.perf_counter()
        conformal_sources(chi, gamma_tilde, E, B, decomposition="chi", out=out)
        ratios.append(numpy_seconds / (time.perf_counter() - start))
    print(f"\nplain NumPy, conformal outputs, float64 contiguous: conformal_sources is "
          f"{statistics.median(ratios):.0f}x faster (median of 3 paired runs; {_load()})")


@numba.njit(cache=True)
def _serial_triad(a, b, c, scalar):
    for i in range(a.shape[0]):
        a[i] = b[i] + scalar * c[i]


def _plan_caches():
    """Every plan cache of the public source calls (found by type: the benchmark runs on
    revisions with and without plans per call)."""
    from emsource import _call_plans, conformal, ideal_mhd, sources

    return [value for module in (sources, conformal, ideal_mhd)
            for value in vars(module).values() if isinstance(value, _call_plans.PlanCache)]


def _dropping_plans(call, caches):
    """``call`` made after emptying ``caches``, so that it validates in full."""
    def full_validation():
        for cache in caches:
            cache.clear()
        call()
    return full_validation


def state_fields(shape):
    """float64 (gamma, E, B, chi, tilde-gamma = chi gamma, alpha, beta, v^i) on ``shape``: the
    inputs of every call this script times (a near-flat metric, chi in [0.5, 1.5], a lapse near
    1, a small shift, Eulerian speeds of about 0.1 c)."""
    gamma, E, B = flat_space_fields(shape, np.float64)
    rng = np.random.default_rng(3)
    chi = rng.uniform(0.5, 1.5, shape)
    alpha = rng.uniform(0.8, 1.2, shape)
    beta = 0.1 * rng.standard_normal((3,) + shape)
    velocity = 0.1 * rng.standard_normal((3,) + shape)
    return gamma, E, B, chi, gamma * chi, alpha, beta, velocity


def _small_call_cases(n=8):
    """{name: call} on an n^3 float64 grid, every call into preallocated ``out``."""
    from emsource.conformal import ConformalSources
    from emsource.ideal_mhd import IdealMhdFields

    contiguous = state_fields((n,) * 3)
    padded = tuple(padded_copy(a) for a in contiguous)
    cases = {}
    caches = _plan_caches()
    for layout, arrays in (("contiguous", contiguous), ("padded", padded)):
        gamma, E, B, chi, gamma_tilde, alpha, beta, velocity = arrays
        wrap = (lambda a: a) if layout == "contiguous" else padded_copy
        adm_out = emsource.AdmSources(*map(wrap, emsource.adm_sources(gamma, E, B)))
        conformal_out = ConformalSources(*map(wrap, conformal_sources(
            chi, gamma_tilde, E, B, decomposition="chi")))
        t_out = wrap(emsource.stress_energy_4d(alpha, beta, gamma, E, B))
        mhd_out = IdealMhdFields(*map(wrap, ideal_mhd_fields(alpha, beta, gamma, B, velocity)))
        calls = {
            "adm_sources": lambda g=gamma, e=E, b=B, o=adm_out: emsource.adm_sources(
                g, e, b, out=o),
            "conformal_sources (chi)": lambda c=chi, g=gamma_tilde, e=E, b=B, o=conformal_out:
                conformal_sources(c, g, e, b, decomposition="chi", out=o),
            "stress_energy_4d (T_ab)": lambda a=alpha, s=beta, g=gamma, e=E, b=B, o=t_out:
                emsource.stress_energy_4d(a, s, g, e, b, out=o),
            "ideal_mhd_fields (eulerian)": lambda a=alpha, s=beta, g=gamma, b=B, v=velocity,
                o=mhd_out: ideal_mhd_fields(a, s, g, b, v, out=o),
        }
        for name, call in calls.items():
            cases[f"{name}, {layout}"] = call
            if layout == "contiguous":
                cases[f"{name}, contiguous, full validation"] = _dropping_plans(call, caches)
        if layout == "contiguous":
            arguments = {"adm_sources": ((gamma, E, B), adm_out),
                         "conformal_sources (chi)": ((chi, gamma_tilde, E, B), conformal_out),
                         "stress_energy_4d (T_ab)": ((alpha, beta, gamma, E, B), (t_out,)),
                         "ideal_mhd_fields (eulerian)": ((alpha, beta, gamma, B, velocity),
                                                         mhd_out)}
            for name, call in calls.items():
                call()  # stores the plan
                cases[f"{name}, contiguous, its kernel alone"] = _kernel_alone(
                    name, *arguments[name])
    a, b, c = np.zeros(n ** 3), np.ones(n ** 3), np.full(n ** 3, 2.0)
    cases["yardstick: compiled triad, 8^3 points"] = lambda: _serial_triad(a, b, c, 3.0)
    gamma, E, B, chi, gamma_tilde = contiguous[:5]
    cases["yardstick: plain NumPy, conformal outputs"] = lambda: numpy_conformal(
        chi, gamma_tilde, E, B)
    return cases


def _kernel_alone(name, inputs, outputs, default_width=False):
    """The compiled driver of a public call on the views its stored plan gives: Numba's
    dispatch and the work on the grid's points, no Python around them (the plans' internals:
    ``emsource._call_plans``; what each function keeps in a plan's ``extra``). With
    ``default_width``, the default (256-bit) driver where the plan holds a line-step one."""
    from emsource import _call_plans, conformal, ideal_mhd, sources
    from emsource.kernels._compile import shared_dispatcher

    caches = {"adm_sources": (sources._ADM_PLANS, ("gaussian", "upper", "component_first")),
              "conformal_sources (chi)": (conformal._CONFORMAL_PLANS,
                                          ("chi", "gaussian", "upper")),
              "stress_energy_4d (T_ab)": (sources._STRESS_ENERGY_PLANS,
                                          ("gaussian", "lower", "upper", "component_first")),
              "ideal_mhd_fields (eulerian)": (ideal_mhd._IDEAL_MHD_PLANS, ("eulerian", "upper"))}
    cache, options = caches[name]
    arrays = tuple(inputs) + tuple(outputs)
    plan = cache.get(_call_plans.signature(arrays, options))
    v = plan.views(arrays)
    if name == "adm_sources":
        gidx, constants, drivers = plan.extra
        kernel = (sources.kernels.ADM_SOURCES_FLAT if default_width else drivers)[constants[0]]
        return lambda: kernel(v[0], gidx, *v[1:], *constants[1:], True)
    if name.startswith("stress_energy_4d"):
        gidx, constants, drivers = plan.extra
        drivers = sources.kernels.STRESS_ENERGY_FLAT if default_width else drivers
        kernel = drivers[constants[0], constants[-1]]
        return lambda: kernel(*v[:3], gidx, *v[3:], *constants[1:-1], True)
    driver, gidx, tail = plan.extra
    first = 2 if name.startswith("conformal") else 3  # arrays before the metric indices
    arguments = (*v[:first], gidx, *v[first:], *tail, True)
    if default_width and name.startswith("conformal"):
        for key, line_steps in conformal_kernels.CONFORMAL_SOURCES_LINE_STEPS.items():
            if line_steps.py_func is driver.py_func:
                driver = shared_dispatcher(conformal_kernels.CONFORMAL_SOURCES[key], arguments,
                                           conformal._DRIVER_INPUTS)
    return lambda: driver(*arguments)


def line_steps_section(sizes, repeat):
    """The flat drivers in their line-step form (512-bit vectors on large grids whose rows share
    cache sets) against their default form, on the views of the same public call's plan:
    adm_sources, stress_energy_4d (T_ab), conformal_sources (chi); float64, contiguous."""
    print(f"emsource {emsource.__version__}, {numba.get_num_threads()} threads, float64, "
          f"contiguous arrays, medians of {repeat}, each run right after a triad; time ratios "
          "paired within a group")
    triad = Triad()
    rows = {"adm_sources": ADM_ROWS, "stress_energy_4d (T_ab)": 16 + 10,
            "conformal_sources (chi)": CONFORMAL_ROWS}
    for n in sizes:
        shape = (n,) * 3
        gamma, E, B, chi, gamma_tilde, alpha, beta, _ = state_fields(shape)
        adm_out = emsource.adm_sources(gamma, E, B)
        t_out = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
        conformal_out = conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")
        calls = {
            "adm_sources": ((gamma, E, B), adm_out,
                            lambda: emsource.adm_sources(gamma, E, B, out=adm_out)),
            "stress_energy_4d (T_ab)": ((alpha, beta, gamma, E, B), (t_out,),
                                        lambda: emsource.stress_energy_4d(
                                            alpha, beta, gamma, E, B, out=t_out)),
            "conformal_sources (chi)": ((chi, gamma_tilde, E, B), conformal_out,
                                        lambda: conformal_sources(chi, gamma_tilde, E, B,
                                                                  decomposition="chi",
                                                                  out=conformal_out)),
        }
        print(f"\n{n}^3 ({_load()} before)")
        print(f"{'call':30s} {'line steps':>10s} {'% triad':>8s} {'256-bit':>8s} "
              f"{'% triad':>8s} {'time line / 256':>16s} {'quartiles':>12s}")
        for name, (inputs, outputs, call) in calls.items():
            call()  # stores the plan
            nbytes = rows[name] * 8 * n ** 3
            cases = {"lines": (_kernel_alone(name, inputs, outputs), nbytes),
                     "256-bit": (_kernel_alone(name, inputs, outputs, default_width=True),
                                 nbytes)}
            measured = interleaved(cases, triad, repeat)
            lines, default = measured["lines"][0], measured["256-bit"][0]
            low, high = paired_quartiles(lines, default)
            print(f"{name:30s} {n ** 3 / statistics.median(lines) / 1e6:10.1f} "
                  f"{100 * measured['lines'][1]:7.0f}% "
                  f"{n ** 3 / statistics.median(default) / 1e6:8.1f} "
                  f"{100 * measured['256-bit'][1]:7.0f}% {paired_ratio(lines, default):16.3f} "
                  f"{low:5.3f}-{high:5.3f}")
        print(f"({_load()} after)")
        del gamma, E, B, chi, gamma_tilde, alpha, beta, adm_out, t_out, conformal_out, calls


def _without_streaming(call):
    """``call`` made with the streaming drivers' size threshold out of reach: the driver the
    call takes otherwise (plans dropped before each call: a streamed call stores none, an
    ordinary one would be found by the next streamed call)."""
    caches = _plan_caches()

    def ordinary():
        saved = arg.STREAMING_ROW_BYTES
        arg.STREAMING_ROW_BYTES = 1 << 62
        try:
            _dropping_plans(call, caches)()
        finally:
            arg.STREAMING_ROW_BYTES = saved
    return ordinary


def streaming_section(sizes, repeat):
    """Each public call that has a streaming-store driver (``emsource.kernels.streaming_stores``)
    against the same call with streaming out of reach: adm_sources, stress_energy_4d (T_ab),
    conformal_sources (chi), ideal_mhd_fields (Eulerian velocity); float64, into padded grid
    functions and into C-contiguous arrays, plans dropped before every call of either kind."""
    print(f"emsource {emsource.__version__}, {numba.get_num_threads()} threads, float64, "
          f"medians of {repeat}, each run right after a triad; time ratios paired within a group")
    triad = Triad()
    caches = _plan_caches()
    for n in sizes:
        shape = (n,) * 3
        gamma, E, B, chi, gamma_tilde, alpha, beta, velocity = state_fields(shape)
        print(f"\n{n}^3 ({_load()} before)")
        print(f"{'call':30s} {'layout':>10s} {'streams':>8s} {'% triad':>8s} {'ordinary':>9s} "
              f"{'time streaming / ordinary':>26s} {'quartiles':>12s}")
        for layout in ("padded", "contiguous"):
            arrays = {"gamma": gamma, "E": E, "B": B, "chi": chi, "gamma_tilde": gamma_tilde,
                      "alpha": alpha, "beta": beta, "velocity": velocity}
            if layout == "padded":
                arrays = {name: padded_copy(a) for name, a in arrays.items()}
            a = arrays
            adm_out = emsource.adm_sources(a["gamma"], a["E"], a["B"])
            t_out = emsource.stress_energy_4d(a["alpha"], a["beta"], a["gamma"], a["E"], a["B"])
            c_out = conformal_sources(a["chi"], a["gamma_tilde"], a["E"], a["B"],
                                      decomposition="chi")
            m_out = ideal_mhd_fields(a["alpha"], a["beta"], a["gamma"], a["B"], a["velocity"])
            if layout == "padded":
                adm_out = type(adm_out)(*(padded_copy(x) for x in adm_out))
                t_out = padded_copy(t_out)
                c_out = type(c_out)(*(padded_copy(x) for x in c_out))
                m_out = type(m_out)(*(padded_copy(x) for x in m_out))
            calls = {
                "adm_sources": (ADM_ROWS, lambda: emsource.adm_sources(
                    a["gamma"], a["E"], a["B"], out=adm_out)),
                "stress_energy_4d (T_ab)": (16 + 10, lambda: emsource.stress_energy_4d(
                    a["alpha"], a["beta"], a["gamma"], a["E"], a["B"], out=t_out)),
                "conformal_sources (chi)": (CONFORMAL_ROWS, lambda: conformal_sources(
                    a["chi"], a["gamma_tilde"], a["E"], a["B"], decomposition="chi",
                    out=c_out)),
                "ideal_mhd_fields (eulerian)": (16 + 11, lambda: ideal_mhd_fields(
                    a["alpha"], a["beta"], a["gamma"], a["B"], a["velocity"], out=m_out)),
            }
            for name, (rows, call) in calls.items():
                nbytes = rows * 8 * n ** 3
                cases = {"streaming": (_dropping_plans(call, caches), nbytes),
                         "ordinary": (_without_streaming(call), nbytes)}
                measured = interleaved(cases, triad, repeat)
                streamed, ordinary = measured["streaming"][0], measured["ordinary"][0]
                low, high = paired_quartiles(streamed, ordinary)
                views, _ = arg.kernel_views([a["gamma"]], shape)
                print(f"{name:30s} {layout:>10s} {str(arg.tries_streaming(views, shape)):>8s} "
                      f"{100 * measured['streaming'][1]:7.0f}% "
                      f"{100 * measured['ordinary'][1]:8.0f}% "
                      f"{paired_ratio(streamed, ordinary):26.3f} {low:5.3f}-{high:5.3f}")
            del adm_out, t_out, c_out, m_out, calls, arrays, a
        print(f"({_load()} after)")
        del gamma, E, B, chi, gamma_tilde, alpha, beta, velocity


def small_call_section(calls, rounds=15):
    """Per-call CPU time of the public calls on 8^3 (module docstring, ``--small-call``)."""
    numba.set_num_threads(1)
    cases = _small_call_cases()
    for call in cases.values():
        for _ in range(200):  # warm-up: compilation, the plans stored
            call()
    block = max(1, calls // rounds)
    before = _load()
    seconds = {name: [] for name in cases}
    clock = time.process_time
    for _ in range(rounds):
        for name, call in cases.items():
            start = clock()
            for _ in range(block):
                call()
            seconds[name].append((clock() - start) / block)
    print(f"emsource {emsource.__version__}, numba {numba.__version__}, 8^3 float64, out given, "
          f"checks on, {numba.get_num_threads()} thread; CPU time per call, median of {rounds} "
          f"interleaved blocks of {block} calls ({before} before, {_load()} after)")
    print(f"{'call':58s} {'us per call':>11s} {'/ adm_sources':>14s}")
    for name, values in seconds.items():
        layout = "padded" if name.endswith("padded") else "contiguous"
        reference = seconds[f"adm_sources, {layout}"]
        if name.endswith("kernel alone"):
            reference = seconds["adm_sources, contiguous, its kernel alone"]
        print(f"{name:58s} {1e6 * statistics.median(values):11.2f} "
              f"{paired_ratio(values, reference):14.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=None,
                        help="grid size N (default 96, 128 with --conformal)")
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--conformal", action="store_true",
                        help="conformal_sources against adm_sources and the yardsticks")
    parser.add_argument("--ideal-mhd", action="store_true",
                        help="ideal_mhd_fields against adm_sources and its column loop")
    parser.add_argument("--small-call", action="store_true",
                        help="per-call CPU time of the public source calls on 8^3, one thread")
    parser.add_argument("--calls", type=int, default=30000,
                        help="timed calls per case with --small-call (default 30000)")
    parser.add_argument("--line-steps", action="store_true",
                        help="line-step against default drivers at 128^3 and 256^3 (or N^3)")
    parser.add_argument("--streaming", action="store_true",
                        help="each call with and without its streaming-store driver, 128^3 "
                             "and 200^3 (or N^3)")
    args = parser.parse_args(argv)
    if args.streaming:
        streaming_section((args.points,) if args.points else (128, 200), args.repeat)
        return
    if args.small_call:
        small_call_section(args.calls)
        return
    if args.line_steps:
        line_steps_section((args.points,) if args.points else (128, 256), args.repeat)
        return
    if args.conformal or args.ideal_mhd:
        if args.conformal:
            conformal_section(args.points or 128, args.repeat)
        if args.ideal_mhd:
            ideal_mhd_section(args.points or 128, args.repeat)
        return
    args.points = args.points or 96
    shape = (args.points,) * 3
    points = math.prod(shape)
    gamma, E, B, chi, gamma_tilde, alpha, beta, velocity = state_fields(shape)
    sg = np.sqrt(np.linalg.det(np.moveaxis(gamma[[[0, 1, 2], [1, 3, 4], [2, 4, 5]]], (0, 1),
                                           (-2, -1))))
    dE, dB = sg * E, sg * B
    out = emsource.adm_sources(gamma, E, B)
    conformal_out = conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")
    triad = Triad()
    cases = [
        ("adm_sources, E^i B^i (reference)", ADM_ROWS,
         lambda: emsource.adm_sources(gamma, E, B, out=out)),
        ("adm_sources, allocating its outputs", ADM_ROWS,
         lambda: emsource.adm_sources(gamma, E, B)),
        ("adm_sources, densitized", ADM_ROWS,
         lambda: emsource.adm_sources(gamma, dE, dB, out=out, field_index="densitized")),
        ("conformal_sources (chi), out=", CONFORMAL_ROWS,
         lambda: conformal_sources(chi, gamma_tilde, E, B, decomposition="chi",
                                   out=conformal_out)),
        ("conformal_sources (chi), allocating", CONFORMAL_ROWS,
         lambda: conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")),
        ("plain NumPy, conformal outputs", CONFORMAL_ROWS,
         lambda: numpy_conformal(chi, gamma_tilde, E, B)),
        ("faraday_tensor (lower)", 1 + 3 + 6 + 6 + 6,
         lambda: faraday_tensor(alpha, beta, gamma, E, B)),
        ("ideal_mhd_fields (eulerian)", 1 + 3 + 6 + 3 + 3 + 3 + 4 + 4,
         lambda: ideal_mhd_fields(alpha, beta, gamma, B, velocity)),
    ]
    print(f"emsource {emsource.__version__}, {args.points}^3 float64, medians of {args.repeat} "
          f"({_load()})")
    print(f"{'kernel':36s} {'Mpoints/s':>10s} {'% triad':>8s} {'time / reference':>17s}")
    measured = interleaved({name: (function, rows * 8 * points)
                            for name, rows, function in cases}, triad, args.repeat)
    reference = measured[cases[0][0]][0]
    for name, (seconds, share) in measured.items():
        print(f"{name:36s} {points / statistics.median(seconds) / 1e6:10.1f} "
              f"{100 * share:7.0f}% {paired_ratio(seconds, reference):17.2f}")
    print(_load())

if __name__ == "__main__":
    main()
