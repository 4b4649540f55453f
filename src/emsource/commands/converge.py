"""``emsource converge``: convergence of the energy-momentum conservation residual on exact data.

Runs a named case at three or more resolutions, prints the errors and observed orders as a
table, with ``--plot`` writes a log-log plot with reference slopes (needs matplotlib), and
optionally the table as JSON. The exit code is 0 if the finest observed order of every error is within the tolerance
of the design order (the stencil order with supplied time derivatives, min(order, 2) with three
time levels), 1 if not.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .._arguments import DIFFERENCE_ORDERS
from . import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK, EXIT_OUTPUT_ERROR
from ._snapshot_options import tolerance


def register(subparsers):
    parser = subparsers.add_parser(
        "converge",
        help="convergence table and plot of the conservation residual for an exact case",
        description=__doc__,
    )
    parser.add_argument("--case", help="name of the case (required unless --list)")
    parser.add_argument("--order", type=int, choices=DIFFERENCE_ORDERS, default=4,
                        help="order of the centred differences (default 4)")
    parser.add_argument("--points", type=int, nargs="+", metavar="N",
                        help="points per axis, one run each, coarsest first (default: the "
                             "case's own)")
    # Deprecated spelling of --points, still accepted.
    parser.add_argument("--resolutions", dest="points", type=int, nargs="+",
                        default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    parser.add_argument("--time-levels", action="store_true",
                        help="take time derivatives from three time levels instead of the exact ones")
    parser.add_argument("--plot", metavar="PATH", nargs="?", const="",
                        help="write a log-log plot (needs matplotlib), to PATH or by default "
                             "to converge-<case>-order<p>.png")
    parser.add_argument("--no-plot", action="store_true",
                        help="write no plot (also the default without --plot)")
    parser.add_argument("--json", metavar="PATH", help="also write the table as JSON")
    parser.add_argument("--tolerance", type=tolerance, default=0.3,
                        help="allowed distance of the observed from the design order (default 0.3)")
    parser.add_argument("--list", action="store_true", help="list the cases and exit")
    parser.set_defaults(run=run)


def run(args) -> int:
    from .. import convergence

    convergence.register_builtin_cases()
    if args.list:
        for name, case in sorted(convergence.CASES.items()):
            print(f"{name:24s} {case.description}")
        return EXIT_OK
    if args.case is None:
        print("emsource converge: --case is required (see --list)", file=sys.stderr)
        return EXIT_BAD_INPUT
    if args.case not in convergence.CASES:
        print(f"emsource converge: unknown case {args.case!r}; known: "
              f"{', '.join(sorted(convergence.CASES)) or '(none)'}", file=sys.stderr)
        return EXIT_BAD_INPUT
    if args.points is not None and (len(args.points) < 2 or
                                    any(b <= a for a, b in zip(args.points, args.points[1:]))):
        print("emsource converge: --points needs two or more increasing point counts, found "
              f"{args.points}", file=sys.stderr)
        return EXIT_BAD_INPUT
    try:
        table = convergence.run_case(args.case, order=args.order, resolutions=args.points,
                                     time_derivatives="levels" if args.time_levels else "supplied")
    except ValueError as error:
        print(f"emsource converge: {error}", file=sys.stderr)
        return EXIT_BAD_INPUT
    print(table.format())
    if args.plot is not None and not args.no_plot:
        path = Path(args.plot or f"converge-{args.case}-order{args.order}.png")
        try:
            table.plot(path)
        except ImportError as error:
            print(f"emsource converge: {error}", file=sys.stderr)
            return EXIT_OUTPUT_ERROR
        except OSError as error:
            print(f"emsource converge: cannot write the plot {path}: {error}", file=sys.stderr)
            return EXIT_OUTPUT_ERROR
        print(f"plot written to {path}")
    if args.json:
        try:
            Path(args.json).write_text(json.dumps(table.to_dict(), indent=2))
        except OSError as error:
            print(f"emsource converge: cannot write {args.json}: {error}", file=sys.stderr)
            return EXIT_OUTPUT_ERROR
    ok = table.within(args.tolerance)
    finest = ", ".join(f"{k} {v[-1]:.2f}" for k, v in table.orders.items())
    print(f"finest observed orders: {finest}; design {table.design_order}: "
          f"{'ok' if ok else 'NOT within'} +-{args.tolerance}")
    return EXIT_OK if ok else EXIT_CHECK_FAILED
