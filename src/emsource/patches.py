r"""Rank-local patches of a domain decomposition, and global results from their partials.

An evolution code that runs on many MPI ranks gives each rank a *patch*: a box of the global
vertex-centred grid that the rank owns, surrounded by ``ghost`` layers of points copied from its
neighbours (on the sides where it has neighbours; a face of the global grid has none).
:class:`PatchGrid` describes the rank's local array: it *is* a
:class:`emsource.grid.UniformGrid` (shape, origin and spacing of the local array, ghosts
included, so exact data and the pointwise sources run on it unchanged) and knows its place in the
global grid (``global_shape``, ``global_origin``, ``owned_start``, ``owned_shape``, ``ghost``).

Global quantities (energy, momentum, face fluxes, luminosity, residual and constraint norms,
``global_balance``, convergence studies) take ``comm=`` (an ``mpi4py`` communicator). Each rank
computes the mergeable partial (:mod:`emsource.reductions`) of the points it *owns*, and
:func:`global_partial` merges the partials of all ranks with the same ``combine`` that merges the
slabs of a snapshot: a reduction to rank 0 in rank order followed by a broadcast, so that every
rank holds the same bits (2 log2(P) message latencies in binomial trees: common practice for
reduce and broadcast, from memory). Owned boxes tile the global grid,
so every point is summed once. A luminosity quadrature node at fractional grid index s belongs to
the rank with ``owned_start <= floor(s) < owned_start + owned_shape`` on every axis (half-open
intervals: exactly one rank).

Collective errors. A local failure (bad input on one rank, a ghost width too small for a stencil)
is caught, sent along with the partials, and raised on *every* rank as :class:`PatchError` naming
the failing rank(s); nobody waits for a rank that has left. The first time a patch is used on a
communicator its consistency with the other ranks' patches is checked collectively (the same
global grid: shape, origin and spacing; owned boxes that neither overlap nor leave gaps). An
exception outside these functions (in the caller's own loop) on one rank would leave the others
waiting in their next collective call: run the loop inside :func:`abort_on_error`, which reports
the rank and aborts every rank.

``mpi4py`` is optional: this module never imports it. ``comm`` is any object with the mpi4py
communicator methods ``Get_rank``, ``Get_size``, ``reduce``, ``bcast`` and ``allgather``.
"""

from __future__ import annotations

import math
import os
import sys
import traceback
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from ._arguments import DIFFERENCE_ORDERS, choice
from .errors import GridPointError
from .grid import UniformGrid
from .kernels.stencils import stencil_radius
from .reductions import NormPartial

__all__ = ["PatchGrid", "PatchError", "decompose", "process_grid", "global_partial",
           "check_patches", "patch_of", "require_patch", "local_arrays", "relocated", "embedded",
           "without_interior", "abort_on_error", "mpi_available"]


def mpi_available() -> bool:
    """True if ``mpi4py`` can be imported (the ``mpi`` extra is installed)."""
    try:
        import mpi4py  # noqa: F401
    except ImportError:
        return False
    return True


@dataclass(frozen=True)
class PatchGrid(UniformGrid):
    """The local array of one rank: its owned box of a global grid plus ghost layers.

    ``shape``, ``origin`` and ``spacing`` are those of the local array (ghosts included), as
    for any :class:`UniformGrid`; build one with :meth:`from_owned` or :func:`decompose`.

    Parameters
    ----------
    global_shape : tuple of int
        Points per axis of the whole grid.
    global_origin : tuple of float
        Coordinates of global point (0, 0, 0), code units.
    owned_start, owned_shape : tuple of int
        Global index of the first owned point and the owned points per axis.
    ghost : int
        Ghost layers on each side that has a neighbouring patch (none beyond a face of the
        global grid, and at most as many as the global grid has there).
    """

    global_shape: tuple[int, ...]
    global_origin: tuple[float, ...]
    owned_start: tuple[int, ...]
    owned_shape: tuple[int, ...]
    ghost: int

    def __post_init__(self):
        super().__post_init__()
        ints = {name: tuple(int(v) for v in getattr(self, name))
                for name in ("global_shape", "owned_start", "owned_shape")}
        for name, value in ints.items():
            object.__setattr__(self, name, value)
        object.__setattr__(self, "global_origin", tuple(float(o) for o in self.global_origin))
        object.__setattr__(self, "ghost", int(self.ghost))
        n = self.ndim
        for name in ("global_shape", "global_origin", "owned_start", "owned_shape"):
            if len(getattr(self, name)) != n:
                raise ValueError(f"PatchGrid: {name} {getattr(self, name)} must have {n} axes "
                                 f"like shape {self.shape}")
        if self.ghost < 0:
            raise ValueError(f"PatchGrid: ghost must be >= 0, found {self.ghost}")
        for a in range(n):
            if not (0 <= self.owned_start[a] and self.owned_shape[a] >= 1
                    and self.owned_start[a] + self.owned_shape[a] <= self.global_shape[a]):
                raise ValueError(
                    f"PatchGrid: owned box start {self.owned_start}, shape {self.owned_shape} "
                    f"does not lie in the global grid of shape {self.global_shape} (axis {a})")
        expected = tuple(o + lo + hi for o, lo, hi in
                         zip(self.owned_shape, self.lower_ghost, self.upper_ghost))
        if self.shape != expected:
            raise ValueError(f"PatchGrid: local shape {self.shape} must be the owned shape "
                             f"{self.owned_shape} plus the ghost layers, {expected}")
        for a in range(n):
            x0 = self.global_origin[a] + self.offset[a] * self.spacing[a]
            # 4 eps of the largest coordinate involved: the rounding of one multiply-add.
            bound = 4 * np.finfo(float).eps * (abs(self.global_origin[a]) + abs(x0))
            if abs(self.origin[a] - x0) > bound:
                raise ValueError(f"PatchGrid: origin {self.origin} must be the coordinates of "
                                 f"global index {self.offset}, found {x0} along axis {a}")

    @classmethod
    def from_owned(cls, global_grid: UniformGrid, owned_start, owned_shape, ghost: int) -> "PatchGrid":
        """The patch that owns ``owned_shape`` points from ``owned_start`` of ``global_grid``."""
        n = global_grid.ndim
        start = tuple(int(s) for s in np.atleast_1d(owned_start))
        shape = tuple(int(s) for s in np.atleast_1d(owned_shape))
        if len(start) != n or len(shape) != n:
            raise ValueError(f"PatchGrid.from_owned: owned_start {start} and owned_shape {shape} "
                             f"must have {n} axes like the global grid")
        ghost = int(ghost)
        lower = tuple(min(ghost, max(s, 0)) for s in start)
        upper = tuple(min(ghost, max(N - s - m, 0))
                      for N, s, m in zip(global_grid.shape, start, shape))
        origin = tuple(o + (s - lo) * h for o, s, lo, h in
                       zip(global_grid.origin, start, lower, global_grid.spacing))
        local = tuple(m + lo + hi for m, lo, hi in zip(shape, lower, upper))
        return cls(local, origin, global_grid.spacing, global_grid.shape, global_grid.origin,
                   start, shape, ghost)

    def axis(self, i: int) -> np.ndarray:
        """Coordinates of the local points along axis ``i``, computed from the global origin
        as the global grid computes them: the same bits as the whole grid's coordinates, so
        data evaluated on a patch equal those evaluated on the whole grid."""
        index = np.arange(self.offset[i], self.offset[i] + self.shape[i], dtype=float)
        return self.global_origin[i] + self.spacing[i] * index

    @property
    def lower_ghost(self) -> tuple:
        """Ghost layers below the owned box per axis (0 at the global lower face)."""
        return tuple(min(self.ghost, s) for s in self.owned_start)

    @property
    def upper_ghost(self) -> tuple:
        """Ghost layers above the owned box per axis (0 at the global upper face)."""
        return tuple(min(self.ghost, N - s - m) for N, s, m in
                     zip(self.global_shape, self.owned_start, self.owned_shape))

    @property
    def offset(self) -> tuple:
        """Global index of the local array's point (0, 0, 0)."""
        return tuple(s - lo for s, lo in zip(self.owned_start, self.lower_ghost))

    @property
    def owned_stop(self) -> tuple:
        """Global index one past the last owned point per axis."""
        return tuple(s + m for s, m in zip(self.owned_start, self.owned_shape))

    @property
    def owned(self) -> tuple:
        """Slices of the owned points in the local array."""
        return tuple(slice(lo, lo + m) for lo, m in zip(self.lower_ghost, self.owned_shape))

    @property
    def global_grid(self) -> UniformGrid:
        """The whole grid (the same object's values on every rank)."""
        return UniformGrid(self.global_shape, self.global_origin, self.spacing)

    @property
    def is_whole(self) -> bool:
        """True if the patch owns the whole global grid (a single rank)."""
        return self.owned_shape == self.global_shape

    def valid_extent(self, valid_ghosts=None) -> tuple:
        """Slices of the local array holding valid data: the owned box plus ``valid_ghosts``
        layers (default: all ``ghost`` layers) where the patch has ghosts."""
        v = self.ghost if valid_ghosts is None else int(valid_ghosts)
        return tuple(slice(lo - min(lo, v), lo + m + min(hi, v)) for lo, m, hi in
                     zip(self.lower_ghost, self.owned_shape, self.upper_ghost))

    def require_ghosts(self, function: str, valid_ghosts, needed: int, what: str) -> int:
        """Check that the valid ghost layers cover a stencil reaching ``needed`` points beyond
        the owned box (``what`` names the stencil); returns the valid layers."""
        v = self.ghost if valid_ghosts is None else valid_ghosts
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 0 <= v <= self.ghost:
            raise ValueError(f"{function}: valid_ghosts must be an integer in [0, ghost = "
                             f"{self.ghost}], found {valid_ghosts!r}")
        # Next to a face of the global grid a stencil needs no more than the grid has there.
        short = [a for a in range(self.ndim)
                 if min(v, self.lower_ghost[a]) < min(needed, self.owned_start[a])
                 or min(v, self.upper_ghost[a]) < min(needed, self.global_shape[a]
                                                      - self.owned_stop[a])]
        if short:
            a = short[0]
            raise ValueError(
                f"{function}: {what} needs {needed} valid ghost layers next to a neighbouring "
                f"patch, found {min(v, self.ghost)} (ghost = {self.ghost}"
                + ("" if valid_ghosts is None else f", valid_ghosts = {valid_ghosts}")
                + f") along {'xyz'[a]} of the patch owning global indices "
                f"{self.owned_start} to {tuple(s - 1 for s in self.owned_stop)}")
        return int(v)

    def describe(self) -> tuple:
        """The values the collective consistency check compares (plain Python data)."""
        return (self.global_shape, self.global_origin, self.spacing, self.owned_start,
                self.owned_shape)


def _split(n: int, parts: int, index: int) -> tuple:
    """(start, size) of part ``index`` of ``n`` points in ``parts`` nearly equal parts (the
    first n % parts parts one point larger)."""
    size = n // parts + (1 if index < n % parts else 0)
    start = index * (n // parts) + min(index, n % parts)
    return start, size


def process_grid(size: int, shape) -> tuple:
    """Ranks per axis for ``size`` ranks on a grid of ``shape``: each prime factor of ``size``
    (largest first) goes to the axis with the most points per rank so far."""
    size = int(size)
    if size < 1:
        raise ValueError(f"process_grid: size must be >= 1, found {size}")
    factors, m, p = [], size, 2
    while m > 1:
        while m % p == 0:
            factors.append(p)
            m //= p
        p += 1
    dims = [1] * len(shape)
    for f in sorted(factors, reverse=True):
        a = max(range(len(shape)), key=lambda i: (shape[i] / dims[i], -i))
        dims[a] *= f
    return tuple(dims)


def decompose(global_grid: UniformGrid, rank: int, size: int, *, ghost: int,
              dims=None) -> PatchGrid:
    """The patch of ``rank`` of ``size`` ranks: a block of a ``dims`` process grid (default
    :func:`process_grid`), ranks numbered in C order over it; uneven counts give the first
    blocks along an axis one point more.

    Examples
    --------
    The middle of three ranks on a 10 x 9 x 8 grid owns x indices 4 to 6 and holds two ghost
    layers on each side along x:

    >>> from emsource.grid import UniformGrid
    >>> box = UniformGrid.from_bounds((0, 0, 0), (1, 1, 1), (10, 9, 8))
    >>> p = decompose(box, 1, 3, ghost=2)
    >>> p.owned_start, p.owned_shape, p.shape, p.offset
    ((4, 0, 0), (3, 9, 8), (7, 9, 8), (2, 0, 0))
    >>> p.owned
    (slice(2, 5, None), slice(0, 9, None), slice(0, 8, None))
    """
    dims = process_grid(size, global_grid.shape) if dims is None else tuple(int(d) for d in dims)
    if len(dims) != global_grid.ndim or math.prod(dims) != size:
        raise ValueError(f"decompose: dims {dims} must have {global_grid.ndim} axes whose "
                         f"product is the number of ranks {size}")
    if not 0 <= rank < size:
        raise ValueError(f"decompose: rank must be in [0, {size}), found {rank}")
    coords = np.unravel_index(rank, dims)
    for a, (n, d) in enumerate(zip(global_grid.shape, dims)):
        if d > n:
            raise ValueError(f"decompose: {d} ranks along {'xyz'[a]} but only {n} points")
    parts = [_split(n, d, int(c)) for n, d, c in zip(global_grid.shape, dims, coords)]
    return PatchGrid.from_owned(global_grid, [s for s, _ in parts], [m for _, m in parts], ghost)


def patch_of(function: str, grid, comm):
    """The grid of a global computation: None for the single-process path (``comm`` None), else
    ``grid`` unchecked (check it with :func:`require_patch` inside the collective computation,
    so that a wrong grid on one rank is reported on all).

    Without ``comm`` a PatchGrid must own the whole grid: a patch alone would give the patch's
    share, not the global quantity.
    """
    if comm is None:
        if isinstance(grid, PatchGrid) and not grid.is_whole:
            raise ValueError(f"{function}: the grid is a patch owning {grid.owned_shape} of "
                             f"{grid.global_shape} points; pass comm= for the global result")
        return None
    return grid


def require_patch(function: str, grid) -> PatchGrid:
    """``grid`` if it is a :class:`PatchGrid`, else a TypeError naming the function."""
    if not isinstance(grid, PatchGrid):
        raise TypeError(f"{function}: with comm= the grid must be an emsource.patches.PatchGrid "
                        f"(the rank's patch), found {type(grid).__name__}")
    return grid


def local_arrays(function: str, patch: PatchGrid, extent, named: dict) -> dict:
    """The ``named`` arrays (None allowed) restricted to ``extent`` of the local array, after
    checking that their grid axes have the patch's local shape. Copies (C-ordered) when the
    extent is not the whole array, so that the kernels run their contiguous specialisation."""
    whole = all(e.start == 0 and e.stop == n for e, n in zip(extent, patch.shape))
    out = {}
    for name, a in named.items():
        if a is None:
            out[name] = None
            continue
        if not isinstance(a, np.ndarray) or a.shape[a.ndim - patch.ndim:] != patch.shape:
            found = f"shape {a.shape}" if isinstance(a, np.ndarray) else type(a).__name__
            raise ValueError(f"{function}: {name} must cover the patch's local array, grid axes "
                             f"{patch.shape} (ghosts included), found {found}")
        out[name] = a if whole else np.ascontiguousarray(a[(Ellipsis,) + tuple(extent)])
    return out


def without_interior(patch: PatchGrid, extent, radius: int) -> bool:
    """True if ``extent`` is too thin along an axis with extent for a stencil of ``radius``:
    the patch then owns only points of the whole grid's boundary layer (no interior point)."""
    return any(e.stop - e.start <= 2 * radius for e, n in zip(extent, patch.global_shape)
               if n > 1)


def embedded(a, patch: PatchGrid, extent, fill):
    """``a`` (computed on ``extent`` of the local array) on the whole local array, ``fill``
    elsewhere; ``a`` itself when the extent is the whole array."""
    if all(e.start == 0 and e.stop == n for e, n in zip(extent, patch.shape)):
        return a
    out = np.full(a.shape[: a.ndim - patch.ndim] + patch.shape, fill, a.dtype)
    out[(Ellipsis,) + tuple(extent)] = a
    return out


def relocated(error, patch: PatchGrid, extent):
    """A :class:`emsource.GridPointError` of the arrays restricted to ``extent``, with its grid
    index moved into the global grid."""
    for a in range(patch.ndim):
        error = error.relocated(a, patch.offset[a] + extent[a].start)
    return error


class PatchError(ValueError):
    """A global computation failed on some ranks, or the ranks' patches do not fit together.

    Raised on every rank. ``failures`` lists ``(rank, message)``; ``rank`` is this rank.
    """

    def __init__(self, function: str, failures, rank: int, size: int):
        self.function = function
        self.failures = tuple(failures)
        self.rank = rank
        self.size = size
        text = "; ".join(f"rank {r}: {m}" for r, m in self.failures)
        super().__init__(f"{function} (reported on rank {rank} of {size}): {text}")


@dataclass(frozen=True)
class _Outcome:
    """A group of ranks' contribution: failures (rank, message), the partial (None after a
    failure), whether a patch is used for the first time (then all patches are checked) and
    the group's lowest rank."""

    failures: tuple
    partial: object
    unchecked: bool
    first_rank: int


def _merge(a: _Outcome, b: _Outcome) -> _Outcome:
    """The outcome of two groups of ranks (``a`` of the lower ranks): the reduction operator.
    Never raises (an exception here, on the root, would leave the other ranks waiting)."""
    failures = a.failures + b.failures
    partial = None
    if a.partial is not None and b.partial is not None:
        try:
            partial = a.partial.combine(b.partial)
        except Exception as error:
            failures += ((b.first_rank, "its result does not combine with those of the lower "
                                        f"ranks ({type(error).__name__}: {error})"),)
    return _Outcome(tuple(sorted(failures)), partial, a.unchecked or b.unchecked,
                    min(a.first_rank, b.first_rank))


#: (communicator handle, size, rank, patch) whose decomposition has passed check_patches.
_CHECKED: set = set()


def _key(comm, patch):
    handle = comm.py2f() if hasattr(comm, "py2f") else id(comm)
    return (handle, comm.Get_size(), comm.Get_rank(), patch)


def global_partial(function: str, comm, patch, compute):
    """The partial of the whole grid, on every rank, from ``compute()`` on each rank.

    ``compute`` returns this rank's partial (a :mod:`emsource.reductions` type, or any object
    with ``combine``) over the points it owns; ``patch`` is this rank's
    :class:`PatchGrid` (None: no decomposition to check, for results that are already
    global). The partials are reduced in rank order to rank 0
    with their ``combine`` and broadcast, so every rank gets the same bits. An exception in
    ``compute`` on any rank, or (at a patch's first use) patches that do not fit together,
    raises :class:`PatchError` on every rank, naming the ranks and their errors.
    """
    rank, size = comm.Get_rank(), comm.Get_size()
    local_error = None
    try:
        fresh = patch is not None and _key(comm, patch) not in _CHECKED
        outcome = _Outcome((), compute(), fresh, rank)
        if outcome.partial is None:
            raise TypeError("the local computation returned no partial result")
    except PatchError:
        # Raised by a collective call inside ``compute`` on every rank that took part in it:
        # entering another collective here could wait for ranks that have left.
        raise
    except Exception as error:  # every rank must reach the collective call below
        local_error = error
        outcome = _Outcome(((rank, f"{type(error).__name__}: {error}"),), None,
                           patch is not None, rank)
    total = comm.bcast(comm.reduce(outcome, op=_merge, root=0), root=0)
    if total.unchecked:
        check_patches(function, comm, patch if isinstance(patch, PatchGrid) else None)
    if total.failures:
        raise PatchError(function, total.failures, rank, size) from local_error
    return total.partial


def stencil_partial(function: str, comm, patch, valid_ghosts, order, prepare, evaluate):
    """A stencil quantity (residual, constraint) on a rank's patch, with the norms' partial of
    the whole grid on every rank.

    The stencil runs on the owned box plus ``order / 2`` ghost layers (no more): the interior
    of that extent is then exactly the owned part of the whole grid's interior, so the local
    result's own ``norm_partial`` is this rank's partial. ``prepare(grid, extent)`` returns the
    inputs restricted to the extent (:func:`local_arrays`); ``evaluate(inputs)`` computes the
    local result (with a ``norm_partial``). A patch that owns only boundary-layer points
    evaluates nothing and contributes an empty partial.

    Returns
    -------
    (partial, local result or None, extent, grid)
    """
    local = {}

    def compute():
        grid = require_patch(function, patch)
        choice(function, "order", order, DIFFERENCE_ORDERS)
        radius = stencil_radius(order)
        grid.require_ghosts(function, valid_ghosts, radius,
                            f"order {order} (stencil radius {radius})")
        extent = grid.valid_extent(radius)
        local.update(result=None, extent=extent, grid=grid)
        inputs = prepare(grid, extent)
        if without_interior(grid, extent, radius):  # owns boundary-layer points only
            return NormPartial.empty(4)
        try:
            local["result"] = evaluate(inputs)
        except GridPointError as error:
            raise relocated(error, grid, extent) from None
        return local["result"].norm_partial

    partial = global_partial(function, comm, patch, compute)
    return partial, local["result"], local["extent"], local["grid"]


def check_patches(function: str, comm, patch) -> None:
    """Check collectively that the ranks' patches tile one global grid; else raise
    :class:`PatchError` on every rank with the offending ranks.

    Compared: global shape, origin and spacing (exactly: ranks must agree on which rank owns a
    quadrature node), and the owned boxes (no two overlap, together they cover the grid).
    """
    rank, size = comm.Get_rank(), comm.Get_size()
    described = comm.allgather(patch.describe() if isinstance(patch, PatchGrid) else None)
    failures = _tiling_failures(described)
    if failures:
        raise PatchError(function, failures, rank, size)
    _CHECKED.add(_key(comm, patch))


def _tiling_failures(described) -> list:
    """(rank, message) for every inconsistency among the patches ``described`` (per rank)."""
    failures = [(r, "the grid is not an emsource.patches.PatchGrid")
                for r, d in enumerate(described) if d is None]
    if failures:
        return failures
    names = ("global shape", "global origin", "spacing")
    reference = described[0]
    for r, d in enumerate(described[1:], start=1):
        for name, mine, theirs in zip(names, d, reference):
            if tuple(mine) != tuple(theirs):
                failures.append((r, f"{name} {tuple(mine)} differs from rank 0's {tuple(theirs)}"))
    if failures:
        return failures
    shape = reference[0]
    start = np.array([d[3] for d in described], dtype=np.int64)
    stop = start + np.array([d[4] for d in described], dtype=np.int64)
    for r in range(len(described)):  # pairwise overlaps: O(P^2) box tests, vectorised per rank
        meets = np.all((start[r] < stop[r + 1:]) & (start[r + 1:] < stop[r]), axis=1)
        for q in np.nonzero(meets)[0] + r + 1:
            lo = np.maximum(start[r], start[q])
            hi = np.minimum(stop[r], stop[q]) - 1
            failures.append((r, f"owned box overlaps rank {int(q)}'s at global indices "
                                f"{tuple(int(i) for i in lo)} to {tuple(int(i) for i in hi)}"))
    if failures:
        return failures
    owned = int(np.sum(np.prod(stop - start, axis=1)))
    total = math.prod(shape)
    if owned != total:
        point = _first_gap(start, stop, shape)
        if point is None:
            failures.append((0, f"the owned boxes leave {total - owned} of {total} grid "
                                "points unowned (a gap)"))
        else:  # named after the rank whose box is nearest to the gap
            distance = np.sum(np.maximum(start - point, 0) + np.maximum(point - stop + 1, 0),
                              axis=1)
            failures.append((int(np.argmin(distance)), f"the owned boxes leave {total - owned} "
                             f"of {total} grid points unowned (a gap), first at global index "
                             f"{tuple(int(i) for i in point)}, next to this rank's box"))
    return failures


def _first_gap(start, stop, shape):
    """Global index of an unowned point, found on the grid compressed to the boxes'
    boundaries (None when that grid would be too large to mark)."""
    cuts = [np.unique(np.concatenate([[0, n], start[:, a], stop[:, a]]))
            for a, n in enumerate(shape)]
    if math.prod(len(c) - 1 for c in cuts) > 10**7:
        return None
    covered = np.zeros([len(c) - 1 for c in cuts], bool)
    for lo, hi in zip(start, stop):
        covered[tuple(slice(np.searchsorted(c, l), np.searchsorted(c, h))
                      for c, l, h in zip(cuts, lo, hi))] = True
    cell = np.argwhere(~covered)[0]
    return np.array([c[i] for c, i in zip(cuts, cell)], dtype=np.int64)


@contextmanager
def abort_on_error(comm, stream=None):
    """Run a block on every rank; an exception on one rank aborts all ranks (exit code 1).

    Without it, a rank that leaves the loop with an exception leaves the others waiting in
    their next collective call until the job's time limit. The rank number, the exception and
    its traceback go to ``stream`` (default ``sys.stderr``) before ``comm.Abort(1)``. A
    ``SystemExit`` with status 0 passes through.
    """
    try:
        yield
    except SystemExit as error:
        if error.code in (None, 0):
            raise
        _abort(comm, stream, f"exit status {error.code}", "")
    except BaseException as error:
        _abort(comm, stream, f"{type(error).__name__}: {error}",
               "".join(traceback.format_exception(error)))


def _abort(comm, stream, what, trace):
    stream = sys.stderr if stream is None else stream
    rank, size = comm.Get_rank(), comm.Get_size()
    stream.write(f"{trace}emsource: rank {rank} of {size} failed ({what}); aborting all ranks\n")
    stream.flush()
    comm.Abort(1)
    os._exit(1)  # Abort may return before the launcher ends this process: never run on
