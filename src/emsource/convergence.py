"""Convergence studies: errors at several resolutions, observed orders, a table and a plot.

The observed order between two resolutions with spacings h1 > h2 and errors e1, e2 is

    p_obs = log(e1 / e2) / log(h1 / h2),

which tends to the design order p of a method with error C h^p (common practice; e.g.
P. J. Roache, Verification and Validation in Computational Science and Engineering (1998),
ch. 5, chapter from memory). An order means something only where the error is well above
round-off, so every table also carries the residual relative to the largest term of the
equation (``normalised``).

Two levels of use:

- :func:`convergence_study` takes any ``compute(resolution) -> (spacing, {name: error})``;
- :func:`residual_convergence` and :func:`run_case` run the conservation residual of
  :mod:`emsource.conservation` on exact data (a callable or a named case of :data:`CASES`).

Plots need matplotlib (the optional ``plot`` extra), imported only when a plot is asked for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields, replace
from typing import Callable

import numpy as np

from ._deprecated_names import renamed_fields, renamed_keywords
from .conservation import level_residual
from .kernels.stencils import stencil_radius
from .patches import decompose, global_partial

__all__ = [
    "ConvergenceTable",
    "observed_orders",
    "convergence_study",
    "residual_convergence",
    "significant_normalised_l2",
    "Case",
    "CASES",
    "register_case",
    "register_builtin_cases",
    "run_case",
]


def observed_orders(errors, spacings) -> np.ndarray:
    """p_obs between successive resolutions (one fewer than the inputs); NaN where an error is 0."""
    e = np.asarray(errors, dtype=float)
    h = np.asarray(spacings, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = np.log(e[:-1] / e[1:]) / np.log(h[:-1] / h[1:])
    return np.where(np.isfinite(p), p, np.nan)


@dataclass(frozen=True)
class ConvergenceTable:
    """Errors and observed orders of one study.

    Attributes
    ----------
    case : str
        What was run.
    design_order : int or None
        The order the method should show (a reference slope in the plot, the target of
        :meth:`within`).
    resolutions : tuple of int
        Points per axis of each run, coarsest first.
    spacings : (n,) ndarray
        Grid spacing of each run (the first axis).
    errors : dict of str to (n,) ndarray
        Each error measure per resolution.
    orders : dict of str to (n - 1,) ndarray
        Observed order of each measure between successive resolutions.
    extra : dict of str to (n,) ndarray
        Columns shown but not converged (such as the normalised residual).
    """

    case: str
    design_order: int | None
    resolutions: tuple
    spacings: np.ndarray
    errors: dict
    orders: dict
    extra: dict = field(default_factory=dict)

    def within(self, tolerance: float = 0.3, expected: float | None = None) -> bool:
        """True if the finest observed order of every error is within ``tolerance`` of
        ``expected`` (default: the design order)."""
        target = self.design_order if expected is None else expected
        if target is None:
            raise ValueError("ConvergenceTable.within: no design order; pass expected=")
        return all(abs(p[-1] - target) <= tolerance for p in self.orders.values())

    def format(self) -> str:
        """The table as fixed-width text: one row per resolution, an order column per error."""
        names = list(self.errors)
        head = ["points", "spacing"]
        for n in names:
            head += [n, "order"]
        head += list(self.extra)
        rows = []
        for r in range(len(self.resolutions)):
            row = [str(self.resolutions[r]), f"{self.spacings[r]:.4e}"]
            for n in names:
                row.append(f"{self.errors[n][r]:.4e}")
                row.append("" if r == 0 else f"{self.orders[n][r - 1]:.2f}")
            row += [f"{self.extra[n][r]:.3e}" for n in self.extra]
            rows.append(row)
        widths = [max(len(h), *(len(row[c]) for row in rows)) for c, h in enumerate(head)]
        title = f"convergence of {self.case}"
        if self.design_order is not None:
            title += f" (design order {self.design_order})"
        lines = [title, "  ".join(h.rjust(w) for h, w in zip(head, widths))]
        lines += ["  ".join(v.rjust(w) for v, w in zip(row, widths)) for row in rows]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain Python data (lists and floats), ready for JSON."""
        return {
            "case": self.case,
            "design_order": self.design_order,
            "resolutions": list(self.resolutions),
            "spacings": self.spacings.tolist(),
            "errors": {k: np.asarray(v).tolist() for k, v in self.errors.items()},
            "orders": {k: np.asarray(v).tolist() for k, v in self.orders.items()},
            "extra": {k: np.asarray(v).tolist() for k, v in self.extra.items()},
        }

    def plot(self, path, *, reference_orders=None, title=None):
        """Save a log-log plot of every error against spacing, with reference slopes.

        ``reference_orders`` defaults to (design order,) or (1, 2, 4) without one; each slope is
        drawn through the finest point of the first error. Returns ``path``.
        """
        try:
            import matplotlib

            matplotlib.use("Agg")
            import matplotlib.pyplot as plt
        except ImportError as error:  # pragma: no cover - depends on the environment
            raise ImportError("plotting needs matplotlib: pip install 'emsource[plot]'") from error
        if reference_orders is None:
            reference_orders = (self.design_order,) if self.design_order else (1, 2, 4)
        h = self.spacings
        fig, ax = plt.subplots(figsize=(5.5, 4.2))
        for name, e in self.errors.items():
            ax.loglog(h, e, "o-", label=name)
        anchor = next(iter(self.errors.values()))[-1]
        for p in reference_orders:
            ax.loglog(h, anchor * (h / h[-1]) ** p, "k--", lw=0.8, alpha=0.6, label=f"slope {p}")
        ax.set_xlabel("grid spacing h")
        ax.set_ylabel("error")
        ax.set_title(title or self.format().splitlines()[0])
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=8)
        fig.tight_layout()
        fig.savefig(path, dpi=120)
        plt.close(fig)
        return path


@dataclass(frozen=True)
class _SameOnEveryRank:
    """A result every rank computed on its own and that must agree: combine checks equality."""

    value: tuple

    def combine(self, other: "_SameOnEveryRank") -> "_SameOnEveryRank":
        (h, errors), (h2, errors2) = self.value, other.value
        same = (np.array_equal(h, h2, equal_nan=True) and list(errors) == list(errors2)
                and all(np.array_equal(errors[k], errors2[k], equal_nan=True) for k in errors))
        if not same:
            raise ValueError(f"its (spacing, errors) {other.value} differ from {self.value}: "
                             "compute must return global values (pass comm= to the quantities)")
        return self


def convergence_study(compute: Callable, resolutions, *, case="custom", design_order=None,
                      extra_names=(), comm=None) -> ConvergenceTable:
    """Run ``compute(resolution)`` at each resolution and tabulate errors and orders.

    ``compute`` returns ``(spacing, errors)`` with ``errors`` a dict of name to float; names in
    ``extra_names`` are shown in the table but get no order. Under MPI (``comm``) every rank
    runs ``compute``, which computes global quantities (with ``comm=``); the results must be
    the same on every rank, and an error or a disagreement on any rank is raised on all
    (:class:`emsource.patches.PatchError`).
    """
    resolutions = tuple(int(n) for n in resolutions)
    if len(resolutions) < 2:
        raise ValueError(f"convergence_study: need at least two resolutions, found {resolutions}")
    spacings, columns = [], {}
    for n in resolutions:
        if comm is None:
            h, errors = compute(n)
        else:
            h, errors = global_partial("convergence_study", comm, None,
                                       lambda: _SameOnEveryRank(_plain(compute(n)))).value
        spacings.append(float(h))
        for name, value in errors.items():
            columns.setdefault(name, []).append(float(value))
    spacings = np.array(spacings)
    if not np.all(np.diff(spacings) < 0):
        raise ValueError(f"convergence_study: spacings must decrease with resolution, found {spacings}")
    errors = {k: np.array(v) for k, v in columns.items() if k not in extra_names}
    extra = {k: np.array(v) for k, v in columns.items() if k in extra_names}
    orders = {k: observed_orders(v, spacings) for k, v in errors.items()}
    return ConvergenceTable(case, design_order, resolutions, spacings, errors, orders, extra)


def _plain(result):
    """(spacing, errors) of a compute function as floats, ready to compare and to send."""
    h, errors = result
    return float(h), {str(k): float(v) for k, v in errors.items()}


@renamed_keywords(make_slice="make_level")
def residual_convergence(make_level: Callable, resolutions, *, order=4, time_derivatives="supplied",
                         t=0.37, time_step_factor=0.4, case="custom",
                         include_charges=True, comm=None, valid_ghosts=None) -> ConvergenceTable:
    """Convergence of the conservation residual on exact data.

    Parameters
    ----------
    make_level : callable
        ``make_level(resolution, t) -> TimeLevelFields`` (exact data at time t on a grid with
        ``resolution`` points per axis).
    resolutions : sequence of int
        Points per axis of each run, coarsest first, at least two (three or more to see the
        order settle).
    order : {2, 4, 6}
        Order of the centred differences.
    time_derivatives : {"supplied", "levels"}
        "supplied": the levels' exact d_t E, d_t B, d_t gamma (design order ``order``);
        "levels": time levels at t -+ dt with dt = time_step_factor * h (design order
        min(order, 2)).
        Keep ``time_step_factor`` away from 1: for fields of x - t only, dt = h makes the time and
        space differences cancel exactly.
    include_charges : bool
        Passed to :func:`emsource.conservation.level_residual`.
    comm, valid_ghosts : optional
        Under MPI: ``make_level`` returns the rank's patch of the level (its ``grid`` an
        :class:`emsource.patches.PatchGrid`, e.g. ``exact.plane_wave(decompose(...), t)``);
        passed to :func:`emsource.conservation.level_residual`, so every rank gets the table
        of the whole grid.

    Returns
    -------
    ConvergenceTable
        Errors "energy L2" (RMS of the energy residual), "momentum L2" (RMS of the Euclidean norm
        of the three momentum residuals) and the column "normalised"
        (:func:`significant_normalised_l2`).
    """
    if time_derivatives not in ("supplied", "levels"):
        raise ValueError("residual_convergence: time_derivatives must be 'supplied' or 'levels', "
                         f"found {time_derivatives!r}")

    def compute(n):
        now = make_level(n, t)
        on_patch = {"comm": comm, "valid_ghosts": valid_ghosts}
        if time_derivatives == "supplied":
            r = level_residual(now, order=order, include_charges=include_charges, **on_patch)
        else:
            dt = time_step_factor * now.grid.spacing[0]
            r = level_residual(now, order=order, before=make_level(n, t - dt),
                               after=make_level(n, t + dt), include_charges=include_charges,
                               **on_patch)
        momentum = math.sqrt(float(np.sum(np.square(r.momentum_norms.l2))))
        normalised = significant_normalised_l2(r)
        return now.grid.spacing[0], {"energy L2": r.energy_norms.l2, "momentum L2": momentum,
                                     "normalised": normalised}

    design = order if time_derivatives == "supplied" else min(order, 2)
    return convergence_study(compute, resolutions, case=case, design_order=design,
                             extra_names=("normalised",), comm=comm)


def significant_normalised_l2(residual, floor=1e-12) -> float:
    """Largest normalised L2 residual over the equations whose terms are not all round-off.

    An equation counts if its RMS scale exceeds ``floor`` times the largest RMS scale of the
    four; the others (every term zero by symmetry) give round-off over round-off (about 1).
    """
    scales = np.concatenate([[residual.energy_norms.scale_l2], residual.momentum_norms.scale_l2])
    values = np.concatenate([[residual.energy_norms.normalised_l2],
                             residual.momentum_norms.normalised_l2])
    keep = scales > floor * scales.max()
    return float(values[keep].max()) if keep.any() else 0.0


# --------------------------------------------------------------------------- named cases

@renamed_fields(make_slice="make_level")
@dataclass(frozen=True)
class Case:
    """A named convergence case: exact data on a box at a given number of points per axis.

    ``make_level(resolution, t) -> TimeLevelFields``; ``resolutions``: the points per axis of
    each run, coarsest first.
    """

    name: str
    description: str
    make_level: Callable
    resolutions: tuple


#: Named cases for :func:`run_case` and ``emsource converge``. Filled by :func:`register_case`;
#: the built-in ones use the exact flat-spacetime data of :mod:`emsource.exact`.
CASES: dict = {}


def register_case(case: Case) -> Case:
    """Add ``case`` to :data:`CASES` (replacing one of the same name) and return it."""
    CASES[case.name] = case
    return case


def run_case(name: str, *, order=4, resolutions=None, time_derivatives="supplied",
             comm=None, dims=None) -> ConvergenceTable:
    """:func:`residual_convergence` of the named case of :data:`CASES`.

    Under MPI (``comm``, an mpi4py communicator) every rank takes its patch of each
    resolution's grid (:func:`emsource.patches.decompose` with order / 2 ghost layers, ranks
    over ``dims``, default :func:`emsource.patches.process_grid`) and every rank gets the table
    of the whole grid. A named case builds its exact data on whole grids: each rank builds them
    and keeps its patch (the named cases are small, at most 64^2 or 32^3 points; a study of
    larger grids passes a ``make_level`` that builds the patch alone to
    :func:`residual_convergence`). A failure on any rank is raised on all
    (:class:`emsource.patches.PatchError`).
    """
    register_builtin_cases()
    if name not in CASES:
        raise ValueError(f"run_case: unknown case {name!r}; known cases: {sorted(CASES)}")
    case = CASES[name]
    make_level = case.make_level
    if comm is not None:
        rank, size, ghost = comm.Get_rank(), comm.Get_size(), stencil_radius(order)

        def make_level(n, t):
            whole = case.make_level(n, t)
            return on_patch(whole, decompose(whole.grid, rank, size, ghost=ghost, dims=dims))

    return residual_convergence(make_level, case.resolutions if resolutions is None else resolutions,
                                order=order, time_derivatives=time_derivatives, case=name,
                                comm=comm)


def on_patch(level, patch):
    """The part of a whole-grid time level (:class:`emsource.exact.TimeLevelFields`) that
    ``patch`` holds (its local array, ghosts included): views of every grid array, with
    ``grid = patch``. The values are the whole grid's, so the patch's results match it."""
    grid = tuple(level.grid.shape)
    local = tuple(slice(o, o + n) for o, n in zip(patch.offset, patch.shape))
    cut = {}
    for f in fields(level):
        value = getattr(level, f.name)
        if isinstance(value, np.ndarray) and value.shape[value.ndim - len(grid):] == grid:
            cut[f.name] = value[(Ellipsis,) + local]
    return replace(level, grid=patch, **cut)


#: Parameters of the built-in cases (all oblique to the grid: trap 1 of the testing notes).
_WAVE = {"wave_vector": (2.0 * math.pi, math.pi, 0.0), "polarization": (0.0, 0.0, 1.0)}
_CHARGE = {"charge": 1.0, "width": 0.35, "velocity": (0.4, 0.3, 0.2), "center": (0.013, -0.021, 0.017)}
_FRAME = {"frame_velocity": (0.3, -0.2, 0.1), **_WAVE}


def register_builtin_cases():
    """Register the cases built on :mod:`emsource.exact` (each once).

    Boxes: the waves on the unit square (x, y) in [0, 1]^2 (fields independent of z, so a 2D
    grid is exact), the charge on the cube [-1.2, 1.2]^3 around its centre (smooth everywhere).
    """
    from . import exact
    from .grid import UniformGrid

    def square(n):
        return UniformGrid.from_bounds((0.0, 0.0), (1.0, 1.0), (n, n))

    def cube(n):
        return UniformGrid.from_bounds((-1.2,) * 3, (1.2,) * 3, (n, n, n))

    builtin = [
        ("plane_wave", "plane wave in flat space, oblique to the grid (a)",
         lambda n, t: exact.plane_wave(square(n), t, **_WAVE), (24, 32, 48)),
        ("boosted_charge", "Gaussian charge moving at constant velocity: charge and current terms (b)",
         lambda n, t: exact.boosted_gaussian_charge(cube(n), t, **_CHARGE), (16, 24, 32)),
        ("moving_frame", "plane wave seen from a uniformly moving frame: shift terms (c)",
         lambda n, t: exact.plane_wave_moving_frame(square(n), t, **_FRAME), (24, 32, 48)),
        ("gauge_wave", "plane wave on the gauge-wave slicing of flat spacetime: lapse, metric, K (d)",
         lambda n, t: exact.plane_wave_gauge_wave(square(n), t), (32, 48, 64)),
    ]
    for name, text, make, resolutions in builtin:
        if name not in CASES:
            register_case(Case(name, text, make, resolutions))
