"""``emsource black-hole``: write a Kerr-Newman time level (Kerr-Schild coordinates) as a snapshot."""

from __future__ import annotations

import argparse
import sys

import numpy as np

from . import EXIT_BAD_INPUT, EXIT_OK, EXIT_OUTPUT_ERROR


def register(subparsers):
    p = subparsers.add_parser(
        "black-hole",
        help="write a charged, spinning black hole (Kerr-Newman, Kerr-Schild slicing) to HDF5",
        description="Sample the exact Kerr-Newman data (lapse, shift, spatial metric, extrinsic "
                    "curvature, Eulerian E and B, valid_mask) on a uniform Cartesian grid and "
                    "write them as one time level of a native snapshot. Code units, G = c = 1.",
        epilog="Exit codes: 0 written, 3 bad parameters, 4 the output exists (use --force), is "
               "not writable or a write failed (nothing is left behind), 130 interrupted.",
    )
    p.add_argument("output", help="snapshot file to write (HDF5, native layout)")
    p.add_argument("--mass", type=float, default=1.0, help="mass M (default 1)")
    p.add_argument("--spin", type=float, default=0.0, help="spin parameter a = J/M along +z")
    p.add_argument("--charge", type=float, default=0.0, help="charge Q (Gaussian, geometrized)")
    p.add_argument("--points", type=int, nargs="+", default=[32], metavar="N",
                   help="points per axis: one number or three (default 32)")
    p.add_argument("--lower", type=float, nargs=3, default=[-4.0, -4.0, -4.0], metavar="X",
                   help="lower corner of the box (default -4 -4 -4)")
    p.add_argument("--upper", type=float, nargs=3, default=[4.0, 4.0, 4.0], metavar="X",
                   help="upper corner of the box (default 4 4 4)")
    p.add_argument("--excision-radius", type=float, default=None,
                   help="excise the points with spheroidal radius below this: valid_mask = 0 "
                        "(default r+, the outer horizon)")
    # Deprecated spelling of --excision-radius, still accepted.
    p.add_argument("--mask-radius", dest="excision_radius", type=float,
                   default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    p.add_argument("--units", choices=("gaussian", "heaviside_lorentz"), default="gaussian",
                   help="unit system of E and B (default gaussian)")
    p.add_argument("--float32", action="store_true", help="store single precision")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(run=run)


def run(args) -> int:
    from ..exact import kerr_newman
    from ..grid import UniformGrid
    from ..snapshot import OutputError, check_output, write_snapshot

    try:
        check_output(args.output, force=args.force)
    except OutputError as exc:
        print(f"emsource black-hole: error: {exc}", file=sys.stderr)
        return EXIT_OUTPUT_ERROR
    points = args.points * 3 if len(args.points) == 1 else args.points
    try:
        if len(points) != 3 or min(points) < 2:
            raise ValueError(f"--points needs one or three numbers >= 2, found {args.points}")
        grid = UniformGrid.from_bounds(args.lower, args.upper, points)
        data = kerr_newman(grid, mass=args.mass, spin=args.spin, charge=args.charge,
                           excision_radius=args.excision_radius, units=args.units,
                           dtype=np.float32 if args.float32 else np.float64)
    except ValueError as exc:
        print(f"emsource black-hole: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    attributes = {
        "description": "Kerr-Newman black hole, Kerr-Schild Cartesian coordinates, t = 0 slice "
                       "(stationary); written by emsource black-hole",
        "mass": args.mass, "spin": args.spin, "charge": args.charge,
        "excision_radius": -1.0 if args.excision_radius is None else args.excision_radius,
    }
    try:
        write_snapshot(args.output, [data], force=args.force, compression="gzip",
                       attributes=attributes)
    except OutputError as exc:
        print(f"emsource black-hole: error: {exc}", file=sys.stderr)
        return EXIT_OUTPUT_ERROR
    print(f"wrote {args.output}: grid {grid.shape}, spacing {grid.spacing}, "
          f"{int(data.valid_mask.sum())} valid points, units {args.units}")
    return EXIT_OK
