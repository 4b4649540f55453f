"""``emsource diagnose-sources``: which convention difference explains a snapshot's own sources."""

from __future__ import annotations

import json
import sys

from . import EXIT_CHECK_FAILED, EXIT_OK
from ._cluster_options import add_cluster_options, block_bytes
from ._snapshot_level import add_snapshot_arguments, input_errors
from ._snapshot_options import check_new_output, run_guarded

#: snapshot quantity -> keyword of :func:`emsource.diagnosis.diagnose_sources`
INPUTS = {"lapse": "alpha", "shift": "beta", "spatial_metric": "gamma",
          "electric_field": "E", "magnetic_field": "B"}
USER_OUTPUTS = {"energy_density": "rho", "momentum_density": "S_i", "spatial_stress": "S_ij"}


def register(subparsers):
    p = subparsers.add_parser(
        "diagnose-sources",
        help="find which convention difference explains a snapshot's own rho, S_i, S_ij",
        description="Compare the sources stored in a snapshot (datasets energy_density, "
                    "momentum_density, spatial_stress: any of them) with emsource's, computed "
                    "from its spatial_metric, electric_field, magnetic_field (lapse and shift "
                    "if present) in the file's unit system, and fit a catalogue of convention "
                    "differences alone and in pairs. Exit code 0 when the sources agree or one "
                    "candidate explains them to round-off, 1 when none does or several do "
                    "(ambiguous), 3 on bad input.",
    )
    add_snapshot_arguments(p)
    p.add_argument("--no-pairs", action="store_true",
                   help="fit single candidates only (the pair search costs about 10 times more)")
    p.add_argument("--rows", type=int, default=12, metavar="N",
                   help="rows of the verdict table (default 12)")
    p.add_argument("--json", metavar="PATH", help="also write the diagnosis as JSON")
    p.add_argument("--force", action="store_true", help="replace an existing --json file")
    p.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(p, on_cluster=_run_on_cluster)


def read_inputs(path, level, mapping):
    """Keyword arguments of ``diagnose_sources`` from time level ``level`` of ``path``
    (the stored dtypes kept, so that the tolerance uses the data's epsilon)."""
    from ..snapshot import SnapshotError, read_level

    data = read_level(path, level, mapping)
    needed = ("spatial_metric", "electric_field", "magnetic_field")
    missing = [q for q in needed if q not in data]
    present = [q for q in USER_OUTPUTS if q in data]
    if missing or not present:
        found = sorted(k for k in data if k not in ("time", "grid", "units", "label"))
        what = (", ".join(missing) if missing else
                "at least one of " + ", ".join(USER_OUTPUTS) + " (the sources to diagnose)")
        raise SnapshotError(f"snapshot {path!r}, time level {level}: diagnose-sources needs "
                            f"{what} (found {', '.join(found) or 'nothing'})")
    kwargs = {key: data.get(q) for q, key in INPUTS.items()}
    kwargs.update({key: data[q] for q, key in USER_OUTPUTS.items() if q in data})
    kwargs["units"] = data["units"]
    kwargs["valid_mask"] = data.get("valid_mask")
    return kwargs


def _run(args) -> int:
    from ..diagnosis import diagnose_sources

    if args.json:
        check_new_output(args.json, args.force, inputs=(args.snapshot,))
    kwargs = read_inputs(args.snapshot, args.level, args.mapping)
    with input_errors(args.snapshot, args.level):
        alpha, beta, gamma, E, B = (kwargs.pop(k) for k in ("alpha", "beta", "gamma", "E", "B"))
        try:
            diagnosis = diagnose_sources(alpha, beta, gamma, E, B, pairs=not args.no_pairs,
                                         **kwargs)
        except ValueError as error:   # the API's names, with the datasets they were read from
            names = ", ".join(f"{k} = {q}" for q, k in {**INPUTS, **USER_OUTPUTS}.items())
            raise ValueError(f"{error} (datasets: {names})") from None
    return _report(args, diagnosis, kwargs["units"])


def _run_on_cluster(args) -> int:
    """The same diagnosis on Dask (emsource.distributed.diagnosis): the level stays in the file."""
    from ..distributed.diagnosis import diagnose_level
    from ..distributed.series import open_series

    if args.json:
        check_new_output(args.json, args.force, inputs=(args.snapshot,))
    units = open_series(args.snapshot, args.mapping, [args.level])[0].units
    with input_errors(args.snapshot, args.level):
        try:
            diagnosis = diagnose_level(args.snapshot, mapping=args.mapping, level=args.level,
                                       pairs=not args.no_pairs, block_bytes=block_bytes(args),
                                       progress=sys.stderr.isatty())
        except ValueError as error:
            names = ", ".join(f"{k} = {q}" for q, k in {**INPUTS, **USER_OUTPUTS}.items())
            raise ValueError(f"{error} (datasets: {names})") from None
    return _report(args, diagnosis, units)


def _report(args, diagnosis, units) -> int:
    """The JSON (complete or absent), the table, and the exit code."""
    from ..snapshot import atomic_output

    if args.json:
        with atomic_output(args.json, force=args.force, inputs=(args.snapshot,)) as temporary:
            with open(temporary, "w") as f:
                json.dump(diagnosis.to_dict(), f, indent=2)
    print(f"{args.snapshot}, time level {args.level} (units: {units})")
    print(diagnosis.table(rows=max(args.rows, 1)))
    return EXIT_OK if diagnosis.explained else EXIT_CHECK_FAILED
