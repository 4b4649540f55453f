"""Compile the kernels for this machine ahead of their first use (Numba's on-disk cache).

Each kernel is compiled once per argument signature (dtype, memory layout) and cached; a later
run, of any command or of the Python API, loads it. This command calls every public function
on tiny grids in the common signatures: float64 and float32, contiguous, padded grid
functions (the sources' flat driver takes contiguous 3-D arrays whole and padded ones as rows:
two signatures), ghost zones sliced off (the windowed drivers of the sources and T_ab; the
column loops of the others) and component-last data (the column loops of the sources and T_ab);
the streaming-store drivers that large grids take (sources on contiguous and padded arrays, T_ab on
contiguous ones); and the conformal sources of chi and E^i in float64 (one driver for contiguous
data and windows).
With ``--diagnostics`` also the conservation and constraint kernels (float64, the difference
orders share one signature), which take minutes.
"""

from __future__ import annotations

import time

import numpy as np

from . import EXIT_OK

__all__ = ["register", "run", "common_signatures"]


def register(subparsers):
    parser = subparsers.add_parser(
        "compile",
        help="compile the kernels for this machine ahead of first use (cached on disk)",
        description=__doc__,
    )
    parser.add_argument("--diagnostics", action="store_true",
                        help="also the conservation and constraint kernels (minutes)")
    parser.set_defaults(run=run)


def _flat_space(grid, dtype):
    """alpha = 1, beta = 0, gamma = delta, E and B of order one: valid data on ``grid``."""
    rng = np.random.default_rng(0)
    gamma = np.zeros((6,) + grid, dtype)
    gamma[[0, 3, 5]] = 1
    return (np.ones(grid, dtype), np.zeros((3,) + grid, dtype), gamma,
            rng.standard_normal((3,) + grid).astype(dtype),
            rng.standard_normal((3,) + grid).astype(dtype))


def common_signatures():
    """(name, call) pairs that together compile the sources, T_ab and flux kernels in their
    common signatures."""
    import emsource
    from emsource.conformal import conformal_sources
    from emsource.energy_flux import energy_fluxes
    from emsource.grid_arrays import grid_function_like

    calls = []
    for dtype in (np.float64, np.float32):
        alpha, beta, gamma, E, B = _flat_space((6, 6, 6), dtype)
        inner = (slice(None),) + (slice(1, -1),) * 3
        strided = [a[inner[1:]] if a.ndim == 3 else a[inner] for a in (alpha, beta, gamma, E, B)]
        name = np.dtype(dtype).name
        for layout, (al, be, ga, e, b) in (("contiguous", (alpha, beta, gamma, E, B)),
                                           ("strided", strided)):
            calls.append((f"sources, {name}, {layout}",
                          lambda ga=ga, e=e, b=b: emsource.adm_sources(ga, e, b)))
            calls.append((f"T_ab, {name}, {layout}",
                          lambda al=al, be=be, ga=ga, e=e, b=b:
                          emsource.stress_energy_4d(al, be, ga, e, b)))
        padded = [grid_function_like(a) for a in (gamma, E, B)]
        for p, a in zip(padded, (gamma, E, B)):
            p[...] = a
        calls.append((f"sources, {name}, padded",
                      lambda ga=padded[0], e=padded[1], b=padded[2]: emsource.adm_sources(
                          ga, e, b, out=emsource.AdmSources(*(
                              grid_function_like(a) for a in emsource.adm_sources(ga, e, b))))))
        calls.append((f"sources, {name}, component-last",
                      lambda ga=gamma, e=E, b=B: emsource.adm_sources(
                          *(np.moveaxis(a, 0, -1) for a in (ga, e, b)), layout="component_last")))
        calls.append((f"T_ab, {name}, component-last",
                      lambda al=alpha, be=beta, ga=gamma, e=E, b=B: emsource.stress_energy_4d(
                          al, *(np.moveaxis(a, 0, -1) for a in (be, ga, e, b)),
                          layout="component_last")))
        calls.append((f"energy fluxes, {name}",
                      lambda al=alpha, be=beta, ga=gamma, e=E, b=B: energy_fluxes(al, be, ga, e, b)))
        calls.append((f"streaming drivers, {name}",
                      lambda ga=gamma, e=E, b=B, p=padded, al=alpha, be=beta:
                      _streaming_drivers(al, be, ga, e, b, p)))
    # The conformal sources of chi and E^i, float64: contiguous data and ghost-zone windows share
    # one compiled driver (emsource.kernels.conformal.CONFORMAL_SOURCES).
    _, _, gamma, E, B = _flat_space((6, 6, 6), np.float64)
    calls.append(("conformal sources, chi, float64",
                  lambda: conformal_sources(np.ones((6, 6, 6)), gamma, E, B, decomposition="chi")))
    return calls


def _streaming_drivers(alpha, beta, gamma, E, B, padded):
    """The streaming-store drivers that large grids take (from 2 MiB rows), called directly on
    the kernel views the public calls would pass (a tiny grid never takes them itself):
    sources on contiguous arrays and padded grid functions, T_ab on contiguous arrays."""
    import emsource
    from emsource import _arguments as arg
    from emsource.grid_arrays import grid_function_like
    from emsource.kernels import sources as kernels

    grid = gamma.shape[1:]
    constants = arg.kernel_constants(0, gamma.dtype, 1.0)[1:]
    for inputs in ((gamma, E, B), padded):
        outputs = list(emsource.adm_sources(*inputs))
        if inputs is padded:
            outputs = [grid_function_like(a) for a in outputs]
        views, _ = arg.kernel_views(list(inputs) + outputs, grid, whole_grids=True)
        kernels.ADM_SOURCES_FLAT_STREAMING[0](views[0], arg.PACKED_METRIC_INDEX, *views[1:],
                                              *constants, True)
    T = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    views, _ = arg.kernel_views([alpha, beta, gamma, E, B, T], grid, whole_grids=True)
    kernels.STRESS_ENERGY_FLAT_STREAMING[0, False](*views[:3], arg.PACKED_METRIC_INDEX,
                                                   *views[3:], *constants, True)


def _diagnostic_signatures():
    from emsource.constraints import adm_constraints
    from emsource.convergence import run_case

    grid = (12, 12, 12)
    _, _, gamma, E, B = _flat_space(grid, np.float64)
    K = np.zeros((6,) + grid)
    return [("constraints, float64", lambda: adm_constraints(gamma, K, E, B, spacing=0.1)),
            ("conservation, float64", lambda: run_case("plane_wave", resolutions=(12, 16)))]


def run(args) -> int:
    calls = common_signatures() + (_diagnostic_signatures() if args.diagnostics else [])
    start = time.perf_counter()
    for name, call in calls:
        began = time.perf_counter()
        call()
        print(f"{name:32s} {time.perf_counter() - began:7.1f} s", flush=True)
    print(f"{'total':32s} {time.perf_counter() - start:7.1f} s (compiled or loaded from the cache)")
    return EXIT_OK
