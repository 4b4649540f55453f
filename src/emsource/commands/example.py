"""``emsource example``: compute the sources of a built-in exact field and check them.

The field is a circularly polarised plane wave in flat space, written in sheared, stretched
Cartesian coordinates x^i = M^i_j X^j (a constant, non-diagonal spatial metric). Its energy
density is uniform, E0^2/(4 pi) in Gaussian units, its momentum density is the energy density
times the unit propagation direction, and |S|_gamma = rho (a null field): the summary prints
each of these against the package's numbers.
"""

from __future__ import annotations

import math
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


def circular_plane_wave(points: int, dtype):
    """gamma, E, B of the sheared-coordinate plane wave, plus the exact energy density and k."""
    M = np.array([[1.0, 0.3, 0.0], [0.0, 1.2, -0.2], [0.1, 0.0, 0.9]])  # x = M X
    M_inv = np.linalg.inv(M)
    gamma_full = M_inv.T @ M_inv                                      # gamma_ij in x coordinates
    x = np.stack(np.meshgrid(*(np.linspace(0.0, 1.0, points),) * 3, indexing="ij"))
    X = np.einsum("ij,j...->i...", M_inv, x)                          # Cartesian positions
    k_hat = np.array([1.0, 2.0, 2.0]) / 3.0
    e1 = np.cross(k_hat, [0.0, 0.0, 1.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(k_hat, e1)
    phase = 2 * math.pi * 3.0 * np.einsum("i,i...->...", k_hat, X)
    E_cart = np.cos(phase) * e1[:, None, None, None] + np.sin(phase) * e2[:, None, None, None]
    B_cart = np.cross(k_hat[:, None, None, None], E_cart, axis=0)
    # Contravariant components transform with M; the covector k_i with M^-T.
    E = np.einsum("ij,j...->i...", M, E_cart)
    B = np.einsum("ij,j...->i...", M, B_cart)
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    gamma = np.broadcast_to(np.array([gamma_full[a, b] for a, b in packed])[:, None, None, None],
                            (6, points, points, points))
    k_low = M_inv.T @ k_hat
    return (np.ascontiguousarray(gamma, dtype=dtype), E.astype(dtype), B.astype(dtype),
            gamma_full, k_low, abs(np.linalg.det(M_inv)))


def run(args) -> int:
    import emsource

    dtype = np.dtype(args.dtype)
    gamma, E, B, gamma_full, k_low, sqrt_det = circular_plane_wave(args.points, dtype)
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
