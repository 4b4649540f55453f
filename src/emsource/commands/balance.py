"""``emsource balance``: local and global energy-momentum conservation check of a file's time levels."""

from __future__ import annotations


from .._arguments import DIFFERENCE_ORDERS
from . import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK, EXIT_USAGE
from ._cluster_options import add_cluster_options, block_bytes
from ._physical_scale import add_scale_options, chosen_scale
from ._snapshot_options import check_new_output, fail, run_guarded, show_progress, tolerance

HELP = "energy and momentum conservation of a snapshot's time levels (local residual, global balance)"

#: Default of --tolerance: relative mismatch of the global balance.
DEFAULT_TOLERANCE = 1e-3


def register(subparsers):
    p = subparsers.add_parser(
        "balance", help=HELP,
        description=HELP + ". Local: at each level with an equally spaced level on either side, "
        "the residual of the flux-conservative 3+1 energy and momentum equations (centred "
        "differences, time derivative from the two neighbours), as norms. Global: the change of "
        "the total energy and momentum in the box of interior points from the first to the last "
        "level, against the time-integrated outflow through the box faces and the volume "
        "sources (trapezoid rules: the mismatch of smooth data falls as h^2 and dt^2). Absent "
        "lapse, shift, extrinsic curvature and charges take their empty flat-space values.",
        epilog="Exit codes: 0 the balance closes: the relative mismatch (|change + outflow - "
               "source| / largest box energy) of the energy and of every momentum component is "
               "at most --tolerance, and, if --residual-tolerance is given, every normalised l2 "
               "residual is at most that; 1 it does not close; 2 usage; 3 bad input (a missing "
               "or malformed file, mapping or dataset, fewer than two levels, a bad grid point); "
               "4 the CSV exists (use --force) or cannot be written.")
    p.add_argument("snapshot", help="HDF5 snapshot (native layout, or any with --mapping)")
    p.add_argument("--mapping", metavar="TOML",
                   help="layout mapping file for a snapshot in another code's layout")
    p.add_argument("--levels", metavar="I", type=int, nargs="+",
                   help="indices of the time levels to use (default: all), at least two")
    p.add_argument("--order", type=int, choices=DIFFERENCE_ORDERS, default=2,
                   help="order of the centred space differences (default 2)")
    p.add_argument("--tolerance", type=tolerance, default=DEFAULT_TOLERANCE,
                   help="largest relative mismatch of the global balance that passes "
                        f"(default {DEFAULT_TOLERANCE:g})")
    p.add_argument("--residual-tolerance", type=tolerance, default=None,
                   help="also fail if a normalised l2 residual of a level exceeds this")
    add_scale_options(p, "the times, energies, momenta and rates in cgs and SI")
    p.add_argument("--csv", metavar="FILE",
                   help="write one row per level (time, box totals, outflow, residual norms; "
                        "with a scale also <column>_<unit> columns in cgs and SI)")
    p.add_argument("--force", action="store_true", help="replace an existing CSV")
    p.add_argument("--quiet", action="store_true", help="no table, only the exit status")
    p.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(p, on_cluster=lambda args: _run(args, on_cluster=True))


def _run(args, on_cluster=False) -> int:
    from ..snapshot import open_snapshot
    from ..snapshot_balance import balance_open_snapshot

    if args.mass is not None and args.code_scale is not None:
        return fail(EXIT_USAGE, "give --mass or --code-scale, not both")  # before any work
    if args.csv:
        check_new_output(args.csv, args.force)
    if on_cluster:
        from ..distributed.balance import balance_series
        from ..distributed.series import open_series

        # Checks and the scale from the series' first file, before any work on the cluster.
        series = open_series(args.snapshot, args.mapping)
        inputs = tuple(sorted({level.path for level in series})) + (
            (series[0].mapping,) if series[0].mapping else ())
        if args.csv:
            check_new_output(args.csv, args.force, inputs)
        with open_snapshot(series[0].path, series[0].mapping) as snap:
            scale, origin, error = chosen_scale(args, snap.units, snap.physical_scale)
        if error:
            return fail(EXIT_USAGE, error)
        result = balance_series(args.snapshot, mapping=args.mapping, levels=args.levels,
                                order=args.order, block_bytes=block_bytes(args),
                                progress=show_progress(args))
    else:
        with open_snapshot(args.snapshot, args.mapping) as snap:
            if args.csv:
                check_new_output(args.csv, args.force, snap.inputs)
            scale, origin, error = chosen_scale(args, snap.units, snap.physical_scale)
            if error:
                return fail(EXIT_USAGE, error)
            result = balance_open_snapshot(snap, levels=args.levels, order=args.order)
            inputs = snap.inputs
    rows = _rows(result)
    if args.csv:
        _write_csv(args.csv, rows, scale, args.force, inputs)
    energy, momentum = result.balance.energy, result.balance.momentum
    worst = max([energy.relative_mismatch] + [float(m) for m in momentum.relative_mismatch])
    residual = [r["energy_norm_l2"] for r in rows if r["energy_norm_l2"] != ""]
    residual += [r[f"momentum_{a}_norm_l2"] for r in rows for a in "xyz"
                 if r[f"momentum_{a}_norm_l2"] != ""]
    worst_residual = max(residual) if residual else None
    closes = worst <= args.tolerance
    if args.residual_tolerance is not None:
        if worst_residual is None:
            return fail(EXIT_BAD_INPUT, f"{args.snapshot}: --residual-tolerance needs three equally spaced "
                           "time levels; none has a neighbour on both sides")
        closes = closes and worst_residual <= args.residual_tolerance
    if not args.quiet:
        print(_summary(args, result, rows, worst, worst_residual, closes, scale, origin))
    return EXIT_OK if closes else EXIT_CHECK_FAILED


def _rows(result) -> list:
    b = result.balance
    rows = []
    for k, r in enumerate(result.residuals):
        row = {"level": r.label, "t": r.time, "energy": b.totals[k, 0],
               "momentum_x": b.totals[k, 1], "momentum_y": b.totals[k, 2],
               "momentum_z": b.totals[k, 3], "energy_outflow_rate": b.outflow_rates[k, 0],
               "energy_source_rate": b.source_rates[k, 0]}
        row["energy_norm_l2"] = "" if r.energy is None else float(r.energy.normalised_l2)
        for i, a in enumerate("xyz"):
            row[f"momentum_{a}_norm_l2"] = ("" if r.momentum is None
                                            else float(r.momentum.normalised_l2[i]))
        row["energy_residual_l2"] = "" if r.energy is None else float(r.energy.l2)
        rows.append(row)
    return rows


#: Balance CSV column -> its kind in :data:`emsource.time_series.PHYSICAL_COLUMNS` (the
#: normalised residuals are ratios: no unit; energy_residual_l2 is an rms rate of energy density).
_KINDS = {"t": "time", "energy": "energy", "momentum_x": "momentum_", "momentum_y": "momentum_",
          "momentum_z": "momentum_", "energy_outflow_rate": "power",
          "energy_source_rate": "power", "energy_residual_l2": "power_density"}


def _write_csv(path, rows, scale, force, inputs):
    from ..time_series import add_physical_columns, write_csv

    table = {column: [row[column] for row in rows] for column in rows[0]}
    write_csv(path, add_physical_columns(table, scale, _KINDS.get), force=force, inputs=inputs)


def _summary(args, result, rows, worst, worst_residual, closes, scale=None, origin="") -> str:
    b = result.balance
    lines = [f"emsource balance: {args.snapshot}"
             + (f"  (mapping {args.mapping})" if args.mapping else "  (native layout)"),
             f"  {len(rows)} time levels, t = {rows[0]['t']:.6g} to {rows[-1]['t']:.6g}; "
             f"centred differences of order {result.order}; code units (G = c = 1)"]
    if result.absent:
        lines.append(f"  absent, taken as empty flat space: {', '.join(result.absent)}")
    lines.append(f"  {'level':>6} {'t':>11} {'energy':>13} {'outflow rate':>13} "
                 f"{'res. energy':>11} {'res. mom. x':>11} {'res. mom. y':>11} "
                 f"{'res. mom. z':>11}")
    for row in rows:
        def cell(value):
            return f"{'-':>11}" if value == "" else f"{value:11.3e}"
        lines.append(f"  {row['level']:>6} {row['t']:11.5g} {row['energy']:13.6g} "
                     f"{row['energy_outflow_rate']:13.6g} {cell(row['energy_norm_l2'])} "
                     + " ".join(cell(row[f'momentum_{a}_norm_l2']) for a in "xyz"))
    lines.append("  res. = normalised l2 of the local residual (residual / largest term); "
                 "'-': no equally spaced level on both sides")
    e, m = b.energy, b.momentum
    lines.append(f"  global balance over t = {b.times[0]:.6g} to {b.times[-1]:.6g}:")
    lines.append(f"    {'':<10} {'change':>13} {'outflow':>13} {'source':>13} {'mismatch':>13} "
                 f"{'relative':>10}")
    lines.append(f"    {'energy':<10} {e.change:13.6g} {e.outflow:13.6g} {e.source:13.6g} "
                 f"{e.mismatch:13.4e} {e.relative_mismatch:10.3e}")
    for i, a in enumerate("xyz"):
        lines.append(f"    {'momentum ' + a:<10} {m.change[i]:13.6g} {m.outflow[i]:13.6g} "
                     f"{m.source[i]:13.6g} {m.mismatch[i]:13.4e} {m.relative_mismatch[i]:10.3e}")
    if scale is not None:
        lines.extend(_physical_lines(result, rows, scale, origin))
    verdict = "closes" if closes else "does NOT close"
    detail = f"largest relative mismatch {worst:.3e}, tolerance {args.tolerance:g}"
    if args.residual_tolerance is not None:
        detail += (f"; largest normalised residual {worst_residual:.3e}, tolerance "
                   f"{args.residual_tolerance:g}")
    lines.append(f"  the balance {verdict} ({detail})")
    if args.csv:
        lines.append(f"  wrote        {args.csv}")
    return "\n".join(lines)


def _physical_lines(result, rows, scale, origin) -> list:
    """The summary's SI and cgs values: per level time, energy and outflow rate; the balance's
    change, outflow, source and mismatch (factors of :class:`emsource.physical_units.PhysicalScale`,
    the same as ``integrate`` reports with)."""
    b = result.balance
    lines = [f"  physical units ({origin}): M = {scale.mass_solar:.6g} M_sun, code length "
             f"{scale.length_m:.6g} m, code time {scale.time_s:.6g} s"]
    for system, energy, momentum, power in (
            ("SI", ("J", scale.energy_J), ("kg m/s", scale.momentum_kg_m_s), ("W", scale.power_W)),
            ("cgs", ("erg", scale.energy_erg), ("g cm/s", scale.momentum_g_cm_s),
             ("erg/s", scale.power_erg_s))):
        lines.append(f"  {system}: {'level':>6} {'t [s]':>13} {'energy [' + energy[0] + ']':>15} "
                     f"{'outflow rate [' + power[0] + ']':>22}")
        for row in rows:
            lines.append(f"      {row['level']:>6} {row['t'] * scale.time_s:13.6g} "
                         f"{row['energy'] * energy[1]:15.6g} "
                         f"{row['energy_outflow_rate'] * power[1]:22.6g}")
        e, m = b.energy, b.momentum
        parts = [f"energy [{energy[0]}] change {e.change * energy[1]:.6g}, outflow "
                 f"{e.outflow * energy[1]:.6g}, source {e.source * energy[1]:.6g}, mismatch "
                 f"{e.mismatch * energy[1]:.4e}"]
        for i, a in enumerate("xyz"):
            parts.append(f"momentum {a} [{momentum[0]}] change {m.change[i] * momentum[1]:.6g}, "
                         f"outflow {m.outflow[i] * momentum[1]:.6g}, source "
                         f"{m.source[i] * momentum[1]:.6g}, mismatch "
                         f"{m.mismatch[i] * momentum[1]:.4e}")
        lines.extend(f"      {part}" for part in parts)
    return lines
