"""``emsource constraints``: Hamiltonian and momentum constraint norms of a snapshot."""

from __future__ import annotations

import sys

from .._arguments import DIFFERENCE_ORDERS
from . import EXIT_CHECK_FAILED, EXIT_OK
from ._snapshot_level import add_snapshot_arguments, input_errors, read_slice
from ._cluster_options import add_cluster_options
from ._snapshot_options import run_guarded, tolerance


#: Values of --sources: the file's units, a named unit system, or the vacuum constraints.
SOURCES = ("file", "gaussian", "heaviside_lorentz", "vacuum")


def register(subparsers):
    p = subparsers.add_parser(
        "constraints",
        help="ADM Hamiltonian and momentum constraints of a snapshot, with EM sources",
        description="Evaluate H = R + K^2 - K_ij K^ij - 16 pi rho and "
                    "M_i = D_j K^j_i - D_i K - 8 pi S_i by centred differences on a snapshot "
                    "(datasets spatial_metric, extrinsic_curvature, electric_field, "
                    "magnetic_field, optional valid_mask) and print their norms.",
    )
    add_snapshot_arguments(p)
    p.add_argument("--order", type=int, choices=DIFFERENCE_ORDERS, default=4,
                   help="finite-difference order (default 4)")
    # "none" is the deprecated spelling of "vacuum": accepted, not listed.
    p.add_argument("--sources", choices=SOURCES + ("none",), default="file",
                   metavar="{" + ",".join(SOURCES) + "}",
                   help="unit system of the EM sources: the file's 'units' attribute (default), "
                        "a named one, or vacuum (no EM sources)")
    p.add_argument("--tolerance", type=tolerance, default=None,
                   help="exit with code 1 if a normalised l2 residual exceeds this")
    p.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(p, on_cluster=_run_on_cluster)


def _run(args) -> int:
    from ..constraints import adm_constraints

    if args.sources == "none":
        print("emsource constraints: --sources none is a deprecated spelling of --sources vacuum",
              file=sys.stderr)
        args.sources = "vacuum"
    d = read_slice(args.snapshot, args.level, args.mapping)
    units = d["units"] if args.sources == "file" else args.sources
    with input_errors(args.snapshot, args.level):
        if units == "vacuum":
            res = adm_constraints(d["gamma"], d["K"], spacing=d["spacing"], order=args.order,
                                  valid_mask=d["mask"])
        else:
            res = adm_constraints(d["gamma"], d["K"], d["E"], d["B"], spacing=d["spacing"],
                                  order=args.order, units=units, valid_mask=d["mask"])
    return _report(args, units, int(res.interior.sum()), res.hamiltonian_norms,
                   res.momentum_norms)


def _run_on_cluster(args) -> int:
    from ..distributed.constraints import constraint_norms

    if args.sources == "none":
        args.sources = "vacuum"
    norms, = constraint_norms(args.snapshot, mapping=args.mapping, levels=[args.level],
                              order=args.order, units=args.sources)
    return _report(args, norms.units or "vacuum", norms.interior_points,
                   norms.hamiltonian_norms, norms.momentum_norms)


def _report(args, units, interior, h, m) -> int:
    """The table of norms, and the exit code of the --tolerance check."""
    print(f"{args.snapshot}: order {args.order}, sources {units}, "
          f"{interior} interior points evaluated")
    print(f"{'constraint':<12} {'l2':>11} {'max':>11} {'norm. l2':>11} {'norm. max':>11}")
    rows = [("hamiltonian", h.l2, h.max, h.normalised_l2, h.normalised_max)]
    rows += [(f"momentum_{'xyz'[i]}", m.l2[i], m.max[i], m.normalised_l2[i], m.normalised_max[i])
             for i in range(3)]
    worst = 0.0
    for name, l2, mx, nl2, nmx in rows:
        print(f"{name:<12} {l2:11.4e} {mx:11.4e} {nl2:11.4e} {nmx:11.4e}")
        worst = max(worst, nl2)
    if args.tolerance is not None and not worst <= args.tolerance:
        print(f"a normalised l2 residual exceeds the tolerance {args.tolerance:g}")
        return EXIT_CHECK_FAILED
    return EXIT_OK
