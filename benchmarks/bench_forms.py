"""Speed of the other forms (densitized fields, conformal variables, Faraday tensor, ideal MHD)
beside the physical source kernel, measured in the same run.

Run:  python benchmarks/bench_forms.py [--points N] [--repeat N]

For a float64 grid of N^3 points (default 96) it prints, as medians of paired runs (each kernel
timing right after a STREAM-style triad, read as a share of it; the machine is shared):
  - emsource.adm_sources on E^i, B^i (the reference pipeline) and on densitized fields,
  - emsource.conformal.conformal_sources (chi), the same outputs plus A_ij,
  - a plain-NumPy route to the conformal outputs (gamma = tilde-gamma / chi, then the formulas),
  - emsource.faraday.faraday_tensor and emsource.ideal_mhd.ideal_mhd_fields,
with bandwidth counted once per array read or written.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import emsource  # noqa: E402
from bench_sources import Triad, flat_space_fields, numpy_sources, paired_rates  # noqa: E402
from emsource.conformal import conformal_sources  # noqa: E402
from emsource.faraday import faraday_tensor  # noqa: E402
from emsource.ideal_mhd import ideal_mhd_fields  # noqa: E402


def numpy_conformal(chi, gamma_tilde, E, B):
    """The conformal outputs in plain NumPy: physical metric, sources, c S_ij - tilde-gamma S / 3."""
    rho, S_i, S_ij, S = numpy_sources(gamma_tilde / chi, E, B)
    return rho, S_i, S, chi * S_ij - gamma_tilde * S / 3


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=96)
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args(argv)
    shape = (args.points,) * 3
    points = math.prod(shape)
    gamma, E, B = flat_space_fields(shape, np.float64)
    rng = np.random.default_rng(3)
    chi = rng.uniform(0.5, 1.5, shape)
    gamma_tilde = gamma * chi
    alpha = rng.uniform(0.8, 1.2, shape)
    beta = 0.1 * rng.standard_normal((3,) + shape)
    velocity = 0.3 * rng.standard_normal((3,) + shape) / 3
    sg = np.sqrt(np.linalg.det(np.moveaxis(gamma[[[0, 1, 2], [1, 3, 4], [2, 4, 5]]], (0, 1),
                                           (-2, -1))))
    dE, dB = sg * E, sg * B
    out = emsource.adm_sources(gamma, E, B)
    triad = Triad()
    cases = [
        ("adm_sources, E^i B^i (reference)", 23, lambda: emsource.adm_sources(gamma, E, B, out=out)),
        ("adm_sources, allocating its outputs", 23, lambda: emsource.adm_sources(gamma, E, B)),
        ("adm_sources, densitized", 23,
         lambda: emsource.adm_sources(gamma, dE, dB, out=out, field_index="densitized")),
        ("conformal_sources (chi)", 1 + 6 + 3 + 3 + 1 + 3 + 1 + 6,
         lambda: conformal_sources(chi, gamma_tilde, E, B, decomposition="chi")),
        ("plain NumPy, conformal outputs", 24,
         lambda: numpy_conformal(chi, gamma_tilde, E, B)),
        ("faraday_tensor (lower)", 1 + 3 + 6 + 6 + 6,
         lambda: faraday_tensor(alpha, beta, gamma, E, B)),
        ("ideal_mhd_fields (eulerian)", 1 + 3 + 6 + 3 + 3 + 3 + 4 + 4,
         lambda: ideal_mhd_fields(alpha, beta, gamma, B, velocity)),
    ]
    print(f"emsource {emsource.__version__}, {args.points}^3 float64, medians of {args.repeat}")
    print(f"{'kernel':36s} {'Mpoints/s':>10s} {'% triad':>8s} {'time / reference':>17s}")
    reference = None
    for name, arrays, function in cases:
        rate, _, share = paired_rates(function, points, arrays * 8 * points, triad, args.repeat)
        reference = reference or rate
        print(f"{name:36s} {rate / 1e6:10.1f} {100 * share:7.0f}% {reference / rate:17.2f}")


if __name__ == "__main__":
    main()
