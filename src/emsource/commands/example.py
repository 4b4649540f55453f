"""``emsource example``: compute the sources of a built-in exact field and check them.

The field is a circularly polarised plane wave in flat space, written in sheared, stretched
Cartesian coordinates x^i = M^i_j X^j (a constant, non-diagonal spatial metric). Its energy
density is uniform, E0^2/(4 pi) in Gaussian units, its momentum density is the energy density
times the unit propagation direction, and |S|_gamma = rho (a null field): the summary prints
each of these against the package's numbers. The field is
:func:`emsource.exact.sheared_circular_wave`.
"""

from __future__ import annotations

import time

import numpy as np

from . import EXIT_CHECK_FAILED, EXIT_OK


def register(subparsers):
    parser = subparsers.add_parser(
        "example",
        help="compute the sources of a built-in exact field and print a checked summary",
        description=__doc__,
    )
    parser.add_argument("--points", type=int, default=64, help="grid points per axis (default 64)")
    parser.add_argument("--dtype", choices=("float64", "float32"), default="float64")
    parser.add_argument("--units", choices=("gaussian", "heaviside_lorentz"), default="gaussian")
    parser.set_defaults(run=run)


def run(args) -> int:
    import emsource
    import emsource.exact

    dtype = np.dtype(args.dtype)
    gamma, E, B, gamma_full, k_low, sqrt_det = emsource.exact.sheared_circular_wave(args.points,
                                                                                     dtype=dtype)
    prefactor = emsource.unit_systems.stress_energy_prefactor(args.units)
    out = emsource.adm_sources(gamma, E, B, units=args.units)      # first call: compile or load
    times = []
    for _ in range(5):
        start = time.perf_counter()
        emsource.adm_sources(gamma, E, B, units=args.units, out=out)
        times.append(time.perf_counter() - start)
    seconds = float(np.median(times))

    rho_exact = prefactor  # E0 = 1: rho = (E^2 + B^2) k / 2 = k
    volume = sqrt_det * 1.0  # coordinate cube [0, 1]^3 times sqrt(gamma)
    cell = (1.0 / (args.points - 1)) ** 3
    energy = float(np.sum(out.rho[:-1, :-1, :-1], dtype=np.float64)) * cell * sqrt_det
    gamma_inv = np.linalg.inv(gamma_full)
    S_norm = np.sqrt(np.einsum("ij,i...,j...->...", gamma_inv, out.S_i.astype(float), out.S_i.astype(float)))
    expected_S = rho_exact * k_low
    tol = 50 * np.finfo(dtype).eps
    checks = [
        ("energy density uniform and = exact", float(np.max(np.abs(out.rho - rho_exact)) / rho_exact)),
        ("momentum density = rho k_i", float(np.max(np.abs(out.S_i - expected_S[:, None, None, None]))) / rho_exact),
        ("null field: |S|_gamma = rho", float(np.max(np.abs(S_norm - out.rho))) / rho_exact),
        ("trace S = rho", float(np.max(np.abs(out.S - out.rho))) / rho_exact),
        ("total energy in the box", abs(energy - rho_exact * volume) / (rho_exact * volume)),
    ]
    n = args.points
    print(f"emsource {emsource.__version__}: circularly polarised plane wave, sheared coordinates")
    print(f"  grid {n}^3 {dtype.name}, {args.units} units, one call {seconds * 1e3:.2f} ms "
          f"({n**3 / seconds / 1e6:.0f} Mpoints/s)")
    print(f"  rho = {float(out.rho.mean()):.6e} (exact {rho_exact:.6e}); total energy "
          f"{energy:.6e} (exact {rho_exact * volume:.6e})")
    failed = False
    for name, error in checks:
        ok = error < tol
        failed |= not ok
        print(f"  {'ok  ' if ok else 'FAIL'} {name:<38} relative error {error:.1e} (tolerance {tol:.0e})")
    return EXIT_CHECK_FAILED if failed else EXIT_OK
