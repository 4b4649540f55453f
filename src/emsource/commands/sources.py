"""``emsource sources``: the electromagnetic sources of every time level of a snapshot file."""

from __future__ import annotations

from ..quantities import FORM_OUTPUTS, OUTPUTS
from . import EXIT_OK
from ._cluster_options import add_cluster_options, block_bytes
from ._snapshot_options import add_input_options, run_guarded, show_progress, size_text

HELP = "compute rho, S_i, S_ij and S for every time level of a snapshot file"


def register(subparsers):
    parser = subparsers.add_parser(
        "sources", help=HELP, description=HELP + ", streamed in slabs along the slowest storage "
        "axis so that memory stays under --memory-limit. The output is a native-layout file "
        "(datasets energy_density, momentum_density, spatial_stress, stress_trace) written to a "
        "temporary file and renamed when complete.",
        epilog="Exit codes: 0 done, 3 bad input (message says what the file holds), "
               "4 output exists (use --force), is an input, or cannot be written, "
               "130 interrupted (Ctrl-C), 128 + N stopped by signal N (SIGTERM 143, SIGHUP 129).")
    add_input_options(parser)
    parser.add_argument("-o", "--output", required=True, help="output HDF5 file")
    parser.add_argument("--force", action="store_true", help="replace an existing output")
    parser.add_argument("--compress", action="store_true", help="gzip-compress the output datasets")
    parser.add_argument("--outputs", metavar="NAME", nargs="+",
                        choices=OUTPUTS + FORM_OUTPUTS, default=list(OUTPUTS),
                        help="datasets to write (default the four sources; also the conformal "
                             "trace-free stress, F_ab, F^ab and the invariants); writing "
                             "dominates the time")
    parser.add_argument("--no-check", action="store_true",
                        help="skip the point checks (finite values, positive-definite metric)")
    parser.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(parser, on_cluster=_run_on_cluster)


def _run(args) -> int:
    from ..snapshot.sources_pipeline import compute_sources

    report = compute_sources(
        args.snapshot, args.output, mapping=args.mapping, memory_limit=args.memory_limit,
        force=args.force, compression="gzip" if args.compress else None, levels=args.levels,
        check=not args.no_check, outputs=args.outputs, progress=show_progress(args))
    if not args.quiet:
        print(summary(report, args))
    return EXIT_OK


def _run_on_cluster(args) -> int:
    from ..distributed.sources import compute_sources_dask

    report = compute_sources_dask(
        args.snapshot, args.output, mapping=args.mapping, block_bytes=block_bytes(args),
        force=args.force, compression="gzip" if args.compress else None, levels=args.levels,
        check=not args.no_check, outputs=args.outputs, progress=show_progress(args))
    if not args.quiet:
        print(summary(report, args))
    return EXIT_OK


def summary(report, args) -> str:
    nx, ny, nz = report.grid_shape
    low, high = report.energy_density_range
    rate = report.bytes_read / report.seconds / 1e6 if report.seconds > 0 else float("nan")
    times = report.times
    lines = [
        "emsource sources: done",
        f"  input           {report.input_file}"
        + (f"  (mapping {args.mapping})" if args.mapping else "  (native layout)"),
        f"  output          {report.output_file}  ({size_text(report.bytes_written)}: "
        f"{', '.join(args.outputs)})",
        f"  time levels     {report.levels}  (t = {min(times):g} ... {max(times):g})",
        f"  grid            {nx} x {ny} x {nz} points, {report.axis_order} storage, "
        f"{report.dtype}, {report.units} units",
        f"  slabs           {report.slabs}, up to {report.rows_per_slab} planes each; slab "
        f"buffers {size_text(report.planned_bytes)} (limit {size_text(args.memory_limit)})",
        f"  energy density  min {low:.6g}, max {high:.6g} (code units)",
        f"  wall time       {report.seconds:.3g} s, {rate:.3g} MB/s of input",
    ]
    return "\n".join(lines)
