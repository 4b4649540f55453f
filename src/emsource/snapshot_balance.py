r"""Conservation check of a snapshot file's time levels: local residuals and the global balance.

Two views of the same law, the 3+1 energy and momentum conservation of the electromagnetic
field (:mod:`emsource.conservation`, which derives it):

- local: at every time level with an equally spaced level on either side, the pointwise
  residual of the flux-conservative equations, its time derivative a centred difference of the
  two neighbours (second order in the time step) and its space derivatives centred differences
  of ``order`` (:func:`emsource.conservation.level_residual`); reported as norms.
- global: the change of the total energy and momentum in the box of interior points between
  the first and the last level, against the time-integrated outflow through the box faces and
  the volume sources (:func:`emsource.conservation.balance_partial`, finalised as
  :func:`emsource.conservation.global_balance` does; trapezoid rules in space and time, so
  the mismatch of a smooth solution falls as h^2 and dt^2).

Each level is read whole into memory (float64), at most three at a time: the residual of level
k needs levels k - 1 and k + 1, and the balance is summed level by level. Staggered quantities
of a mapping arrive at the vertices and at the level's time (:mod:`emsource.snapshot.staggered`).
Absent quantities take their flat, empty-space values: lapse 1, shift 0, extrinsic curvature 0,
no charges (the report lists which were absent). Excised points are not supported here: a
level whose valid_mask holds a 0 is an error.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .conservation import balance_partial, level_residual
from .exact import TimeLevelFields
from .kernels.stencils import stencil_radius
from .reductions import combine_all
from .snapshot import SnapshotError, SnapshotFile

__all__ = ["LevelResidual", "SnapshotBalance", "level_fields", "balance_open_snapshot",
           "ABSENT_DEFAULTS", "REQUIRED", "API_NAMES", "equally_spaced", "excised_points_message"]

#: Quantities a level may leave out, and the value they then take.
ABSENT_DEFAULTS = {"lapse": "1", "shift": "0", "extrinsic_curvature": "0",
                   "charge_density": "0", "current_density": "0"}
#: Quantities every level must hold.
REQUIRED = ("spatial_metric", "electric_field", "magnetic_field")
#: Quantity name -> the name of the time-level field (:class:`emsource.exact.TimeLevelFields`).
API_NAMES = {"lapse": "alpha", "shift": "beta", "spatial_metric": "gamma",
        "extrinsic_curvature": "K", "electric_field": "E", "magnetic_field": "B",
        "charge_density": "charge_density", "current_density": "current_density"}


@dataclass
class LevelResidual:
    """Norms of the local conservation residual at one time level (see the module docstring).

    ``energy`` and ``momentum`` are :class:`emsource.reductions.ResidualNorms` (momentum: one
    entry per covariant component), or None where the level has no equally spaced neighbour on
    both sides (the first and last levels, or a change of time step).
    """

    label: str
    time: float
    energy: object = None
    momentum: object = None
    interior_points: int = 0


@dataclass
class SnapshotBalance:
    """The conservation check of a file's time levels.

    Attributes
    ----------
    residuals : list of LevelResidual
        One per chosen level, in time order.
    balance : emsource.reductions.GlobalBalance
        Over the chosen levels (first to last).
    absent : list of str
        Quantities the file does not hold, taken as in :data:`ABSENT_DEFAULTS`.
    order : int
        Order of the centred space differences.
    """

    residuals: list
    balance: object
    absent: list = field(default_factory=list)
    order: int = 2


def level_fields(level) -> TimeLevelFields:
    """A time level of a snapshot as :class:`emsource.exact.TimeLevelFields` (float64, in memory).

    Absent lapse, shift, extrinsic curvature, charge and current take the values of
    :data:`ABSENT_DEFAULTS`. Raises :class:`SnapshotError` for a missing metric or field, or
    a valid_mask with excised points.
    """
    for q in REQUIRED:
        level.source(q)  # raises, listing the file, if missing
    if level.has("valid_mask") and not level.read("valid_mask").all():
        raise SnapshotError(excised_points_message(level))
    shape = level.grid.shape
    values = {}
    for q, api in API_NAMES.items():
        if level.has(q):
            values[api] = level.read(q, dtype=np.float64)
    if "charge_density" in values or "current_density" in values:
        values.setdefault("charge_density", np.zeros(shape))
        values.setdefault("current_density", np.zeros((3,) + shape))
    return TimeLevelFields(
        level.grid, level.time,
        values.get("alpha", np.ones(shape)), values.get("beta", np.zeros((3,) + shape)),
        values["gamma"], values.get("K", np.zeros((6,) + shape)), values["E"], values["B"],
        values.get("charge_density"), values.get("current_density"), units=level.units)


def excised_points_message(level) -> str:
    """The error for a level whose valid_mask holds a 0 (the balance has no excision)."""
    return (f"{level.where}, time level {level.label!r}: the conservation balance does not "
            "support excised points (valid_mask holds 0)")


def equally_spaced(before, now, after) -> bool:
    """True when the three levels are equally spaced in time (relative 1e-9) and increasing."""
    step = now.time - before.time
    return step > 0 and bool(np.isclose(after.time - now.time, step, rtol=1e-9, atol=0.0))


def balance_open_snapshot(snap: SnapshotFile, *, levels=None, order: int = 2,
                          include_charges: bool = True) -> SnapshotBalance:
    """Local residual norms and the global energy and momentum balance of a snapshot's levels.

    Parameters
    ----------
    snap : emsource.snapshot.SnapshotFile
        An open snapshot (it stays open).
    levels : sequence of int, optional
        Indices of the time levels to use (default all), in increasing time; at least two.
    order : {2, 4, 6}
        Order of the centred space differences of the residual (and of the metric derivatives
        in the balance's volume sources).
    include_charges : bool
        Include the Lorentz-force terms where the file holds charges.

    Returns
    -------
    SnapshotBalance

    Raises
    ------
    SnapshotError
        Fewer than two levels, times that do not increase, levels on different grids, missing
        metric or fields, excised points. A bad grid point raises
        :class:`emsource.GridPointError` (a ValueError) naming it.
    """
    chosen = snap.select(levels)
    if len(chosen) < 2:
        raise SnapshotError(f"{snap.path}: the balance needs at least two time levels, found "
                            f"{len(chosen)}")
    times = np.array([lv.time for lv in chosen])
    if not np.all(np.diff(times) > 0):
        raise SnapshotError(f"{snap.path}: the times of the chosen levels must increase, found "
                            f"{times.tolist()}")
    grids = {(lv.grid.shape, lv.grid.spacing) for lv in chosen}
    if len(grids) > 1:
        raise SnapshotError(f"{snap.path}: the balance needs one grid for all chosen levels, "
                            f"found {sorted(grids)}")
    absent = [q for q in ABSENT_DEFAULTS if not chosen[0].has(q)]
    residuals, partials = [], []
    window = [None, None, None]  # fields of levels k - 1, k, k + 1
    for k in range(len(chosen) + 1):
        window = [window[1], window[2], level_fields(chosen[k]) if k < len(chosen) else None]
        if k < len(chosen):
            partials.append(balance_partial(window[2], times, k, order=order,
                                            include_charges=include_charges))
        now = k - 1
        if now < 0:
            continue
        entry = LevelResidual(chosen[now].label, chosen[now].time)
        if None not in window and equally_spaced(*(chosen[i] for i in (now - 1, now, now + 1))):
            res = level_residual(window[1], before=window[0], after=window[2], order=order,
                                 include_charges=include_charges)
            entry.energy, entry.momentum = res.energy_norms, res.momentum_norms
            entry.interior_points = int(res.interior.sum())
        residuals.append(entry)
    grid = chosen[0].grid.shape
    r = stencil_radius(order)
    box = tuple(slice(r, n - r) if n > 1 else slice(0, 1) for n in grid)
    return SnapshotBalance(residuals, combine_all(partials).finalise(box), absent, order)
