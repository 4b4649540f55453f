"""``emsource audit-units``: which unit system makes a snapshot satisfy the constraints."""

from __future__ import annotations

from .._arguments import DIFFERENCE_ORDERS
from . import EXIT_CHECK_FAILED, EXIT_OK
from ._snapshot_level import add_snapshot_arguments, input_errors, read_slice
from ._snapshot_options import run_guarded


def register(subparsers):
    p = subparsers.add_parser(
        "audit-units",
        help="find the EM unit system under which a snapshot satisfies the constraints",
        description="Evaluate the Hamiltonian and momentum constraints of a snapshot with the "
                    "electromagnetic sources in Gaussian units, in Heaviside-Lorentz units and "
                    "without them (vacuum), at the file's spacing h and at 2h, and report which "
                    "makes them converge. Exit code 0 when exactly one fits, 1 otherwise.",
    )
    add_snapshot_arguments(p)
    p.add_argument("--order", type=int, choices=DIFFERENCE_ORDERS, default=4,
                   help="finite-difference order (default 4)")
    p.set_defaults(run=lambda args: run_guarded(_run, args))


def _run(args) -> int:
    from ..unit_audit import audit_units

    d = read_slice(args.snapshot, args.level, args.mapping)
    with input_errors(args.snapshot, args.level):
        audit = audit_units(d["gamma"], d["K"], d["E"], d["B"], spacing=d["spacing"],
                            order=args.order, valid_mask=d["mask"])
    print(f"{args.snapshot} (units attribute: {d['units']})")
    print(audit.table())
    return EXIT_OK if audit.verdict not in ("none fits", "ambiguous") else EXIT_CHECK_FAILED
