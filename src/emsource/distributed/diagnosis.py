r"""The source diagnosis (:func:`emsource.diagnosis.diagnose_sources`) of one time level on Dask.

The single-process diagnosis stacks every stored value of the level in memory. Here the level
stays in the file: every number the verdict depends on is a whole-grid sum, computed as the
:class:`emsource.reductions.Sum` of each block of whole stored chunks (:mod:`.arrays`) and merged
in a tree (:func:`.cluster.compute_reductions`), in passes:

1. per block, the checks and the float64 state of :func:`emsource.diagnosis.checked_inputs`
   (errors relocated to the grid index of the whole level); the tolerance's sums
   ||s||^2 and ||A||^2 and the largest condition number of gamma_ij; the facts (identity metric,
   lapse range, zero shift); and for every candidate p.p and p.d, against the user's data and
   against the package's own sources (the untestable candidates);
2. with the amplitudes a = p.d / p.p known, ||d - a p||^2 per block (a second pass: expanding
   the square as d.d - 2 a p.d + a^2 p.p cancels to the round-off the verdict is measured
   against);
3. and 4. the same two passes for the ordered pairs, only when no single candidate fits.

Block-crossing candidates. Every STORAGE-stage candidate is a permutation Pi of the stored
entries (a packing order of S_ij permutes components at a point; ``grid_axes_reversed`` and
``components_last_reshaped`` move values between points, hence between blocks), and the stages
put them last in a chain: a chain is a pointwise head H followed by a tail Pi. A permutation is
orthogonal, so

    (Pi q) . d = q . (Pi^-1 d),   ||Pi q|| = ||q||,   ||d - a Pi q|| = ||Pi^-1 d - a q||,

with q = H(s) evaluated blockwise. Pi^-1 d is built from Dask's own views of the stored data
(``transpose`` for the reversed axes; ``reshape`` in whole-array passes and ``.T`` for the
component-last reshape; an index along the component axis for a packing) and rechunked to the
blocks of the inputs, so each block sees the data its points are compared with. The probe
(:func:`emsource.diagnosis.probe_inputs`) is drawn per global point index, so its blocks are
the single-process probe's; comparing two explanations on it applies their tails forward with
the same Dask views.

Agreement with the single-process numbers: both sum the same products, each with
:func:`emsource.reductions.accurate_sum`; n blocks differ from one piece by about (n + 1) eps
of each sum's magnitude (:mod:`emsource.reductions`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import dask.array as da
import numpy as np
from dask import delayed

from .. import diagnosis as D
from ..errors import GridPointError
from ..quantities import COMPONENTS
from ..reductions import Sum, combine_all
from ..snapshot.slabs import slab_error
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["diagnose_level"]

#: snapshot quantity -> keyword of :func:`emsource.diagnosis.diagnose_sources`
INPUTS = {"lapse": "alpha", "shift": "beta", "spatial_metric": "gamma",
          "electric_field": "E", "magnetic_field": "B"}
USER_OUTPUTS = {"energy_density": "rho", "momentum_density": "S_i", "spatial_stress": "S_ij"}
_QUANTITY = {v: k for k, v in USER_OUTPUTS.items()}
#: Candidates that move values between grid points (the tail of a chain; module docstring).
GLOBAL = ("grid_axes_reversed", "components_last_reshaped")
#: Values per grid point a block holds: inputs (1 + 3 + 6 + 3 + 3), user outputs (10), the mask,
#: the state's derived arrays (9 + 9 + 1 + 10) and a candidate's prediction and terms (30).
VALUES_PER_POINT = 90


# ----------------------------------------------------------------------------- partials
@dataclass(frozen=True)
class DiagnosisPartial:
    """Named sums (:class:`emsource.reductions.Sum`), maxima, minima and all-flags of blocks."""

    sums: dict = field(default_factory=dict)
    maxima: dict = field(default_factory=dict)
    minima: dict = field(default_factory=dict)
    flags: dict = field(default_factory=dict)

    def combine(self, other: "DiagnosisPartial") -> "DiagnosisPartial":
        return DiagnosisPartial(
            {k: v.combine(other.sums[k]) for k, v in self.sums.items()},
            {k: max(v, other.maxima[k]) for k, v in self.maxima.items()},
            {k: min(v, other.minima[k]) for k, v in self.minima.items()},
            {k: v and other.flags[k] for k, v in self.flags.items()})


def _squares(values) -> Sum:
    return Sum.of(values * values)


# ----------------------------------------------------------------------------- chains
def _split(names):
    """(pointwise head, tail of storage permutations) of a chain of candidate names."""
    for k, name in enumerate(names):
        if name in GLOBAL:
            return tuple(names[:k]), tuple(names[k:])
    return tuple(names), ()


def _component_index(name):
    """The component order of a pointwise STORAGE candidate (a packing of S_ij)."""
    coded = D.SourceSet(np.zeros(1), np.arange(3.0).reshape(3, 1), np.arange(6.0).reshape(6, 1))
    out = D.BY_NAME[name].transform(coded, None)
    index = out.S_ij[:, 0].astype(int)
    if (not np.array_equal(out.rho, coded.rho) or not np.array_equal(out.S_i, coded.S_i)
            or sorted(index) != list(range(6))):  # pragma: no cover - a new kind of candidate
        raise RuntimeError(f"diagnosis on Dask: storage candidate {name!r} is not a component "
                           "permutation of S_ij; add its Dask view to emsource.distributed.diagnosis")
    return index


def _tail_shape(tail, shape, lead):
    """The shape of an output after the permutations ``tail``."""
    for name in tail:
        if name == "grid_axes_reversed":
            shape = shape[:lead] + shape[lead:][::-1]
    return shape


def _view(x, name, lead, inverse):
    """One storage permutation (or its inverse) of an (x, y, z)-order Dask array."""
    if name == "grid_axes_reversed":   # an involution on the axes
        return x.transpose(tuple(range(lead)) + tuple(range(x.ndim - 1, lead - 1, -1)))
    if name == "components_last_reshaped":
        if lead == 0:
            return x
        n, grid = x.shape[0], x.shape[1:]
        points = int(np.prod(grid))
        # Dask reshapes only by merging or splitting axes evenly: flatten first.
        if inverse:   # b -> moveaxis(b.reshape(*grid, n), -1, 0)
            return x.reshape(-1).reshape(points, n).T.reshape(x.shape)
        return x.reshape(n, points).T.reshape(-1).reshape(x.shape)  # moveaxis(a, 0, -1) re-read
    if lead == 0 or x.shape[0] != 6:
        return x
    index = _component_index(name)
    return x[np.argsort(index) if inverse else index]


def _apply_tail(x, tail, lead, inverse):
    for name in (reversed(tail) if inverse else tail):
        x = _view(x, name, lead, inverse)
    return x


# ----------------------------------------------------------------------------- blocks
@dataclass(frozen=True)
class _Level:
    """What a block task needs to know of the level (picklable)."""

    level: object
    layout: dict
    given: tuple

    def xyz(self, stacked, quantity):
        c = self.layout[quantity]
        return self.level.to_xyz(stacked[c] if COMPONENTS[quantity] else stacked[c.start])


def _block_state(stacked, info: _Level, start):
    """(InputState, user outputs) of one block, checked like the whole level."""
    get = {key: info.xyz(stacked, q) if q in info.layout else None
           for q, key in {**INPUTS, **USER_OUTPUTS}.items()}
    mask = info.xyz(stacked, "valid_mask") != 0 if "valid_mask" in info.layout else None
    try:
        state, user, *_ = D.checked_inputs(
            get["alpha"], get["beta"], get["gamma"], get["E"], get["B"], rho=get["rho"],
            S_i=get["S_i"], S_ij=get["S_ij"], units=info.level.units, valid_mask=mask)
    except GridPointError as error:
        raise slab_error(error, info.level, start, start + stacked.shape[1]) from None
    return state, user


def _values(sources, given):
    return np.concatenate([np.ravel(getattr(sources, n)) for n in given])


def _view_values(views, given, level):
    return np.concatenate([np.ravel(level.to_xyz(views[n])) for n in given])


def _heads(chains, state):
    """Prediction values q = H(s) of each chain's head, heads of one name cached."""
    cache = {}
    for names in chains:
        head, _ = _split(names)
        if len(head) == 2:
            if head[:1] not in cache:
                cache[head[:1]] = D.apply_candidates(head[:1], state)
            yield names, D.BY_NAME[head[1]].transform(cache[head[:1]], state)
        else:
            if head not in cache:
                cache[head] = D.apply_candidates(head, state)
            yield names, cache[head]


def _first_pass(stacked, views, info, start, chains, own_chains):
    """Sums of the tolerance, the facts, and q.q, q.d of every chain (and own chain)."""
    state, user = _block_state(stacked, info, start)
    given = info.given
    sums = {"size": _squares(_values(state.correct, given)),
            "bound": _squares(_values(state.absolute_bound(), given))}
    for names, q in _heads(set(chains) | set(own_chains), state):
        qv = _values(q, given)
        sums[("qq", names)] = _squares(qv)
        _, tail = _split(names)
        if names in chains:
            sums[("qd", "user", names)] = Sum.of(qv * _view_values(views[("user", tail)], given,
                                                                   info.level))
        if names in own_chains:
            sums[("qd", "own", names)] = Sum.of(qv * _view_values(views[("own", tail)], given,
                                                                  info.level))
    identity = np.array([1.0, 0, 0, 1, 0, 1]).reshape((6, 1, 1, 1))
    alpha = state.alpha
    return DiagnosisPartial(
        sums, {"kappa": state.condition_number() if alpha.size else 1.0,
               "alpha": float(alpha.max()) if alpha.size else -math.inf},
        {"alpha": float(alpha.min()) if alpha.size else math.inf},
        {"flat": bool(np.array_equal(state.gamma, np.broadcast_to(identity, state.gamma.shape))),
         "unit_lapse": bool(np.all(alpha == 1.0)), "zero_shift": not np.any(state.beta)})


def _misfit_pass(stacked, views, info, start, fits):
    """||Pi^-1 d - a q||^2 of each (target, chain) -> amplitude in ``fits``."""
    state, _ = _block_state(stacked, info, start)
    heads = dict(_heads({names for _, names in fits}, state))
    sums = {}
    for (target, names), amplitude in fits.items():
        _, tail = _split(names)
        e = _view_values(views[(target, tail)], info.given, info.level) - amplitude * _values(
            heads[names], info.given)
        sums[(target, names)] = _squares(e)
    return DiagnosisPartial(sums)


def _user_block(stacked, info, start):
    """The user's outputs of a block in storage order (zero at excised points), stacked."""
    _, user = _block_state(stacked, info, start)
    back = info.level.to_xyz
    return np.concatenate([back(user[n]).reshape((-1,) + stacked.shape[1:]) for n in info.given])


def _target_block(stacked, *, function, info, starts, block_info=None):
    return function(stacked, info, starts[block_info[None]["chunk-location"][1]])


def _own_block(stacked, info, start):
    state, _ = _block_state(stacked, info, start)
    back = info.level.to_xyz
    return np.concatenate([back(getattr(state.correct, n)).reshape((-1,) + stacked.shape[1:])
                           for n in info.given])


# ----------------------------------------------------------------------------- the level
class _DaskFit:
    def __init__(self, level, heights, progress):
        self.level, self.heights, self.progress = level, heights, progress
        self.starts = block_starts(heights)
        read = [q for q in (*INPUTS, *USER_OUTPUTS, "valid_mask") if level.has(q)]
        self.stack, layout = level_stack(level, read, heights, np.float64)
        self.given = tuple(USER_OUTPUTS[q] for q in USER_OUTPUTS if level.has(q))
        self.info = _Level(level, layout, self.given)
        self.blocks = self.stack.to_delayed().ravel()
        self.grid = tuple(level.grid.shape)
        self.channels = {n: max(COMPONENTS[_QUANTITY[n]], 1) for n in self.given}
        self._targets = {}
        self._views = {}

    def shapes_match(self, names) -> bool:
        _, tail = _split(names)
        for n in self.given:
            lead = 1 if COMPONENTS[_QUANTITY[n]] else 0
            shape = (self.channels[n],) * lead + self.grid
            if _tail_shape(tail, shape, lead) != shape:
                return False
        return True

    def _target(self, target):
        """The user's data or the package's sources as one Dask array in storage order."""
        if target not in self._targets:
            function = _user_block if target == "user" else _own_block
            channels = sum(self.channels.values())
            n1, n2 = self.level.storage_shape[1:]
            self._targets[target] = self.stack.map_blocks(
                _target_block, function=function, info=self.info, starts=tuple(self.starts),
                chunks=((channels,), tuple(self.heights), (n1,), (n2,)), dtype=np.float64,
                meta=np.empty((0, 0, 0, 0)))
        return self._targets[target]

    def views(self, target, tail) -> dict:
        """Pi^-1 of ``target``, per output, in storage order in the inputs' blocks (delayed)."""
        key = (target, tail)
        if key not in self._views:
            whole, first, out = self._target(target), 0, {}
            xyz = self.level.to_xyz
            for n in self.given:
                count = self.channels[n]
                lead = 1 if COMPONENTS[_QUANTITY[n]] else 0
                part = whole[first:first + count] if lead else whole[first]
                first += count
                viewed = xyz(_apply_tail(xyz(part), tail, lead, inverse=True))
                rechunked = viewed.rechunk({lead: tuple(self.heights)} | {
                    a: -1 for a in range(viewed.ndim) if a != lead})
                out[n] = list(rechunked.to_delayed().ravel())
            self._views[key] = out
        return self._views[key]

    def block_views(self, keys, k):
        return {key: {n: blocks[k] for n, blocks in self.views(*key).items()} for key in keys}

    def reduce(self, function, keys, *args):
        task = delayed(function, pure=True)
        leaves = [task(block, self.block_views(keys, k), self.info, start, *args)
                  for k, (block, start) in enumerate(zip(self.blocks, self.starts))]
        partial, = compute_reductions([leaves], progress=self.progress,
                                      description="diagnose-sources")
        return partial


def _amplitude(pp, pd, free):
    """The fitted amplitude of :func:`emsource.diagnosis._fit` (None: no fit possible)."""
    amplitude = 1.0
    if free and pp > 0:
        amplitude = pd / pp
        if amplitude == 0.0:
            return None
    return amplitude


def _residual(amplitude, pp, misfit_square):
    scale = abs(amplitude) * math.sqrt(pp)
    misfit = math.sqrt(misfit_square)
    if scale == 0.0:
        return 0.0 if misfit == 0.0 else math.inf
    return misfit / scale


def _fits(fit, chains, targets):
    """Explanations of ``chains`` against each of ``targets`` ("user", "own")."""
    matching = [c for c in chains if fit.shapes_match(c)]
    keys = {(t, _split(c)[1]) for t in targets for c in matching}
    first = fit.reduce(_first_pass, keys, tuple(matching) if "user" in targets else (),
                       tuple(matching) if "own" in targets else ())
    amplitudes, results = {}, {t: {} for t in targets}
    for t in targets:
        for names in chains:
            if names not in matching:
                results[t][names] = D.Explanation(tuple(names), 1.0, math.inf)
                continue
            free = any(D.BY_NAME[n].amplitude for n in names)
            pp = float(first.sums[("qq", names)].finalise())
            a = _amplitude(pp, float(first.sums[("qd", t, names)].finalise()), free)
            if a is None:
                results[t][names] = D.Explanation(tuple(names), 1.0, math.inf)
            else:
                amplitudes[(t, names)] = a
    if amplitudes:
        second = fit.reduce(_misfit_pass, {(t, _split(c)[1]) for t, c in amplitudes}, amplitudes)
        for (t, names), a in amplitudes.items():
            pp = float(first.sums[("qq", names)].finalise())
            results[t][names] = D.Explanation(
                tuple(names), a, _residual(a, pp, float(second.sums[(t, names)].finalise())))
    return first, {t: [results[t][c] for c in chains] for t in targets}


# ----------------------------------------------------------------------------- the probe
def _probe_block(start, stop, level, given, units, chain, amplitude):
    """The chain's head on the probe over storage rows start:stop, (x, y, z) order, stacked."""
    grid = tuple(level.grid.shape)
    ranges = [np.arange(n) for n in grid]
    ranges[level.slab_axis] = np.arange(start, stop)
    i, j, k = np.ix_(*ranges)
    points = (i * grid[1] + j) * grid[2] + k
    state = D.InputState.of(*D.probe_inputs(points), units)
    head, _ = _split(chain)
    q = D.apply_candidates(head, state, amplitude)
    return np.concatenate([getattr(q, n).reshape((-1,) + points.shape) for n in given])


def _probe_tolerance_block(start, stop, level, given, units):
    grid = tuple(level.grid.shape)
    ranges = [np.arange(n) for n in grid]
    ranges[level.slab_axis] = np.arange(start, stop)
    i, j, k = np.ix_(*ranges)
    state = D.InputState.of(*D.probe_inputs((i * grid[1] + j) * grid[2] + k), units)
    return DiagnosisPartial({"size": _squares(_values(state.correct, given)),
                             "bound": _squares(_values(state.absolute_bound(), given))},
                            {"kappa": state.condition_number()})


class _Probe:
    """``same(x, y)`` of :func:`emsource.diagnosis.conclude` on the block-drawn probe."""

    def __init__(self, fit: _DaskFit):
        self.fit = fit
        self._tolerance = None

    def _rows(self):
        return [(s, s + h) for s, h in zip(self.fit.starts, self.fit.heights)]

    def tolerance(self):
        if self._tolerance is None:
            f = self.fit
            task = delayed(_probe_tolerance_block, pure=True)
            p, = compute_reductions([[task(a, b, f.level, f.given, f.level.units)
                                      for a, b in self._rows()]])
            size = math.sqrt(float(p.sums["size"].finalise()))
            chi = math.sqrt(float(p.sums["bound"].finalise())) / size if size > 0 else 1.0
            self._tolerance = (D.ROUNDINGS * float(np.finfo(np.float64).eps) * p.maxima["kappa"]
                               * max(chi, 1.0))
        return self._tolerance

    def _outputs(self, explanation):
        """The probe's prediction of ``explanation`` per output, (x, y, z) order (Dask)."""
        f = self.fit
        task = delayed(_probe_block, pure=True)
        axis = f.level.slab_axis
        channels = sum(f.channels.values())
        pieces = []
        for a, b in self._rows():
            shape = list(f.grid)
            shape[axis] = b - a
            pieces.append(da.from_delayed(
                task(a, b, f.level, f.given, f.level.units, explanation.names,
                     explanation.amplitude), (channels, *shape), np.float64))
        whole = da.concatenate(pieces, axis=1 + axis)
        out, first = {}, 0
        for n in f.given:
            count, lead = f.channels[n], 1 if COMPONENTS[_QUANTITY[n]] else 0
            part = whole[first:first + count] if lead else whole[first]
            first += count
            out[n] = _apply_tail(part, _split(explanation.names)[1], lead, inverse=False)
        return out

    def __call__(self, x, y) -> bool:
        px, py = self._outputs(x), self._outputs(y)
        if any(px[n].shape != py[n].shape for n in px):
            return False
        leaves = []
        task = delayed(_difference_sums, pure=True)
        for n in px:
            a, b = px[n], py[n].rechunk(px[n].chunks)
            leaves += [task(u, v) for u, v in zip(a.to_delayed().ravel(), b.to_delayed().ravel())]
        total, = compute_reductions([leaves])
        norms = [math.sqrt(float(total.sums[k].finalise())) for k in ("x", "y", "difference")]
        return norms[2] <= self.tolerance() * max(norms[0], norms[1])


def _difference_sums(u, v):
    return DiagnosisPartial({"x": _squares(np.ravel(u)), "y": _squares(np.ravel(v)),
                             "difference": _squares(np.ravel(u - v))})


# ----------------------------------------------------------------------------- entry point
def diagnose_level(inputs, *, mapping=None, level=0, pairs=True, block_bytes=DEFAULT_BLOCK_BYTES,
                   progress=False) -> D.Diagnosis:
    """:func:`emsource.diagnosis.diagnose_sources` of a stored time level, on Dask.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    level : int
        Position of the level in the time-ordered series.
    mapping, pairs, progress
        As for the single-process command (``pairs``: search pairs when no single fits).
    block_bytes : int
        Bound on the values one task holds (:func:`.arrays.block_rows`).

    Returns
    -------
    Diagnosis
        The single-process verdict; its sums equal to (n + 1) eps of their magnitude for n
        blocks (module docstring).
    """
    chosen, = open_series(inputs, mapping, [level])
    chosen.require(("spatial_metric", "electric_field", "magnetic_field"), "diagnose-sources")
    if not any(chosen.has(q) for q in USER_OUTPUTS):
        chosen.require(("energy_density",), "diagnose-sources (at least one of energy_density, "
                       "momentum_density, spatial_stress)")
    read = [q for q in (*INPUTS, *USER_OUTPUTS, "valid_mask") if chosen.has(q)]
    heights = block_rows(chosen, read, VALUES_PER_POINT, 8, block_bytes)
    fit = _DaskFit(chosen, heights, progress)
    given = fit.given
    singles = [(c.name,) for c in D.CATALOGUE]
    first, found = _fits(fit, [()] + singles, ("user", "own"))
    identity = found["user"][0]
    size = math.sqrt(float(first.sums["size"].finalise()))
    chi = math.sqrt(float(first.sums["bound"].finalise())) / size if size > 0 else 1.0
    stored = [chosen.dtype(q) for q in (*INPUTS, *USER_OUTPUTS) if chosen.has(q)]
    eps = max(float(np.finfo(d).eps) for d in stored)
    tau = D.ROUNDINGS * eps * first.maxima["kappa"] * max(chi, 1.0)
    facts = _facts(first, chosen.has("lapse"), chosen.has("shift"))

    def search_pairs():
        return _fits(fit, [tuple(p) for p in D.PAIRS], ("user",))[1]["user"]

    return D.conclude(given=given, tolerance=tau, identity=identity, singles=found["user"][1:],
                      own=found["own"][1:], facts=facts,
                      search_pairs=search_pairs if pairs else None, same=_Probe(fit))


def _facts(first, lapse_given, shift_given) -> list:
    """:func:`emsource.diagnosis.facts_of` from the blocks' flags and lapse range."""
    low, high = first.minima["alpha"], first.maxima["alpha"]
    return D.facts_of(flat=first.flags["flat"], lapse_given=lapse_given,
                      unit_lapse=first.flags["unit_lapse"],
                      constant_lapse=low if low == high else None, shift_given=shift_given,
                      zero_shift=first.flags["zero_shift"])
