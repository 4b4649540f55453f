r"""Which convention difference explains a mismatch between a user's sources and emsource's?

Given the inputs (lapse, shift, spatial metric, E, B and the unit system) and a user's own energy
density rho, momentum density S_i and stress S_ij (any of the three), :func:`diagnose_sources`
computes the package's sources (:func:`emsource.adm_sources`) and fits every entry of a catalogue
of convention differences (:data:`CATALOGUE`), alone and in pairs, to the user's data. Each entry
is a named, documented transformation of the package's correct sources and of the inputs; the
``unit_factor`` entry carries a free scalar amplitude, fitted by least squares and then matched
against the usual unit-system factors (4 pi, 8 pi, sqrt(4 pi), 2 and their inverses).

The correct formulas (Gaussian units; Heaviside-Lorentz drops the 1/(4 pi)) are those of
E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2, and T. W. Baumgarte and
S. L. Shapiro, Numerical Relativity (2010), sec. 5.2 (as restated in the project's conventions):

    rho = (E^2 + B^2) / (8 pi),   S_i = epsilon_ijk E^j B^k / (4 pi),   epsilon_ijk = sqrt(gamma) [ijk],
    S_ij = (-E_i E_j - B_i B_j + (1/2) gamma_ij (E^2 + B^2)) / (4 pi),
    T_tt = alpha^2 rho - 2 alpha beta^i S_i + beta^i beta^j S_ij,   T_ti = beta^j S_ij - alpha S_i.

Residual. For a prediction p (the package's sources transformed by a candidate, times its
fitted amplitude) and the user's data u, both restricted to the outputs the user gave, every
stored component at every grid point stacked into one vector,

    r = ||u - p||_2 / ||p||_2                                        (relative l2 residual).

Round-off tolerance. Two correct evaluations of the same formula in floating point differ by
rounding only. A sum of products computed in any order is within gamma_n sum |x_i y_i| of the
exact value, gamma_n = n u / (1 - n u), u = eps / 2 (N. J. Higham, Accuracy and Stability of
Numerical Algorithms, 2nd ed. (2002), sec. 3.1; from memory). The longest chain of the sources is
S_ij with its trace term: lowering E (n = 3), E^2 = E_i E^i (3 more), the sum E^2 + B^2, the
product with gamma_ij / 2, the three-term sum and the prefactor: about 12 roundings, so two
independent correct routes differ by at most 24 u = 12 eps times the sum of the absolute values
of the terms. A candidate's own transformation adds up to 6 eps (a contraction with gamma^ij,
n = 3, twice for S^ij) and moving an index through gamma^ij amplifies relative errors by up to the
condition number kappa(gamma) (first-order perturbation of a linear system; Higham ch. 7, from
memory). (12 + 6) eps with a margin of 1.5 for the order in which a user's code rounds is 27 eps,
rounded up to 32; the tolerance is

    tau = N eps kappa chi,   N = 32 (:data:`ROUNDINGS`),

where eps is the machine epsilon of the coarsest dtype among the inputs and the user's arrays,
kappa the largest condition number of gamma_ij over the grid, and chi = ||A||_2 / ||s||_2 >= 1 the
cancellation factor of the package's sources s: A evaluates the same formulas with every term
replaced by its absolute value (Higham's running bound). A candidate *explains* the data when
r <= tau.

Verdicts (:class:`Diagnosis`): "agree" (the data are the package's sources to round-off),
"explained" (one explanation fits: the single candidates are tried first, pairs only when no single
one fits), "ambiguous" (several explanations fit that are not the same transformation), "not
explained" (nothing fits; the closest candidate is reported with its residual). Whether two
fitting explanations are the same transformation (two orders of commuting steps) or only
coincide on the user's data (a flat metric hides index placement, a constant lapse looks like a
unit factor) is decided on an independent, seeded random curved state on the same grid (the
*probe*): equal there to round-off means equal; else the data cannot tell them apart. Candidates
that leave the package's sources unchanged on the user's data but not on the probe are listed as
*not testable on these data*, with the reason where it is a plain property of the inputs.

The transformations act on the (possibly already transformed) sources with NumPy, so that two of
them compose; that is why T_tt and T_ti are written here again from rho, S_i, S_ij instead of being
taken from :func:`emsource.stress_energy_4d`, which starts from the fields.

Adding a candidate: one row of :data:`CATALOGUE` (a :class:`Candidate`: name, description,
transformation, stage, and whether it has a free amplitude); the tests run over the catalogue.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Callable, NamedTuple

import numpy as np

from . import _arguments as arg
from .reductions import accurate_sum
from .sources import adm_sources
from .unit_systems import UNIT_SYSTEMS, stress_energy_prefactor

__all__ = ["SourceSet", "InputState", "Candidate", "CATALOGUE", "BY_NAME", "NAMED_FACTORS",
           "ROUNDINGS", "Explanation", "Diagnosis", "diagnose_sources", "apply_candidates",
           "round_off_tolerance", "VERDICTS", "named_factor", "factor_name"]

FUNCTION = "diagnose_sources"
#: Roundings (in units of eps) two correct routes and a candidate's transformation may differ by
#: (module docstring: derivation).
ROUNDINGS = 32
#: The verdicts, in the order of the search.
VERDICTS = ("agree", "explained", "ambiguous", "not explained")
#: Output names in the order of :class:`SourceSet` (the API names of :mod:`emsource.quantities`).
OUTPUTS = ("rho", "S_i", "S_ij")
#: Seed of the probe state (any fixed value; it only has to be independent of the user's data).
PROBE_SEED = 142026
#: Indices of the packed (xx, xy, xz, yy, yz, zz) components in a full 3x3 matrix.
_PACKED = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])
_ROWS, _COLS = np.array([0, 0, 0, 1, 1, 2]), np.array([0, 1, 2, 1, 2, 2])


class SourceSet(NamedTuple):
    """rho (grid), S_i (3, *grid) and S_ij (6, *grid, packed xx, xy, xz, yy, yz, zz)."""

    rho: np.ndarray
    S_i: np.ndarray
    S_ij: np.ndarray


def _full(packed):
    """(6, ...) packed symmetric -> (3, 3, ...)."""
    return packed[_PACKED]


def _pack(full):
    """(3, 3, ...) -> (6, ...) packed (xx, xy, xz, yy, yz, zz)."""
    return full[_ROWS, _COLS]


def _contract(matrix, vector):
    """M_ij v^j for (3, 3, *grid) and (3, *grid)."""
    return np.einsum("ij...,j...->i...", matrix, vector)


@dataclass(frozen=True)
class InputState:
    """The inputs of a diagnosis in float64, with the derived metric quantities.

    ``gamma_full`` and ``gamma_inverse`` are (3, 3, *grid); ``sqrt_det`` is sqrt(det gamma_ij).
    ``correct`` are the package's sources (:func:`emsource.adm_sources`) of these inputs.
    """

    alpha: np.ndarray
    beta: np.ndarray
    gamma: np.ndarray
    E: np.ndarray
    B: np.ndarray
    units: str
    gamma_full: np.ndarray = field(repr=False)
    gamma_inverse: np.ndarray = field(repr=False)
    sqrt_det: np.ndarray = field(repr=False)
    correct: SourceSet = field(repr=False)

    @classmethod
    def of(cls, alpha, beta, gamma, E, B, units):
        """Build from float64 arrays already checked (gamma packed)."""
        full = _full(gamma)
        moved = np.moveaxis(full, (0, 1), (-2, -1))
        inverse = np.moveaxis(np.linalg.inv(moved), (-2, -1), (0, 1))
        sqrt_det = np.sqrt(np.linalg.det(moved))
        correct = SourceSet(*adm_sources(gamma, E, B, units=units)[:3])
        return cls(alpha, beta, gamma, E, B, units, full, inverse, sqrt_det, correct)

    @property
    def grid(self) -> tuple:
        return self.alpha.shape

    def sources_of_lower_fields(self) -> SourceSet:
        """The sources with the given components read as covariant E_i, B_i."""
        return SourceSet(*adm_sources(self.gamma, self.E, self.B, units=self.units,
                                      field_index="lower")[:3])

    def condition_number(self) -> float:
        """Largest 2-norm condition number of gamma_ij over the grid (1 on an empty grid)."""
        if self.alpha.size == 0:
            return 1.0
        eig = np.linalg.eigvalsh(np.moveaxis(self.gamma_full, (0, 1), (-2, -1)))
        return float(np.max(eig[..., -1] / eig[..., 0]))

    def absolute_bound(self) -> SourceSet:
        """The sources' formulas with every term replaced by its absolute value (Higham's
        running error bound, module docstring)."""
        p = stress_energy_prefactor(self.units)
        g = np.abs(self.gamma_full)
        e, b = np.abs(self.E), np.abs(self.B)
        e_low, b_low = _contract(g, e), _contract(g, b)
        square = np.sum(e * e_low, axis=0) + np.sum(b * b_low, axis=0)
        rho = 0.5 * p * square
        cross = np.stack([e[1] * b[2] + e[2] * b[1], e[2] * b[0] + e[0] * b[2],
                          e[0] * b[1] + e[1] * b[0]])
        s_i = p * self.sqrt_det * cross
        s_ij = p * (e_low[_ROWS] * e_low[_COLS] + b_low[_ROWS] * b_low[_COLS]
                    + 0.5 * np.abs(self.gamma) * square)
        return SourceSet(rho, s_i, s_ij)


# ----------------------------------------------------------------------------- the catalogue
# Stages order the steps of a pair: 0 recomputes the sources from the fields (so it comes first),
# 1 changes the physics of an output at each point, 2 changes how the outputs are stored (last).
FIELDS, POINT, STORAGE = 0, 1, 2


@dataclass(frozen=True)
class Candidate:
    """One convention difference: ``transform(sources, state) -> SourceSet``.

    ``sources`` are the package's sources after the earlier step of a pair (the correct ones for a
    single candidate); ``state`` the :class:`InputState`. ``amplitude``: the prediction is scaled by
    a fitted constant. ``stage``: FIELDS, POINT or STORAGE (the order of the steps of a pair).
    """

    name: str
    description: str
    transform: Callable
    stage: int = POINT
    amplitude: bool = False


def _same(s, state):
    return s


def _lapse_power(power, outputs):
    def transform(s, state):
        factor = state.alpha ** power
        return SourceSet(*(a * factor if name in outputs else a
                           for name, a in zip(OUTPUTS, s)))
    return transform


def _stress_packing(order):
    """The user's S_ij packed in ``order`` (component names), read in ours."""
    names = ("xx", "xy", "xz", "yy", "yz", "zz")
    lookup = {n: k for k, n in enumerate(names)}
    lookup.update({n[::-1]: k for k, n in enumerate(names)})
    index = [lookup[n] for n in order]
    return lambda s, state: SourceSet(s.rho, s.S_i, s.S_ij[index])


def _component_last_reshaped(s, state):
    def reread(a):
        return np.ascontiguousarray(np.moveaxis(a, 0, -1)).reshape(a.shape)
    return SourceSet(s.rho, reread(s.S_i), reread(s.S_ij))


def _grid_reversed(s, state):
    def reverse(a, lead):
        axes = tuple(range(lead)) + tuple(range(a.ndim - 1, lead - 1, -1))
        return np.ascontiguousarray(np.transpose(a, axes))
    return SourceSet(reverse(s.rho, 0), reverse(s.S_i, 1), reverse(s.S_ij, 1))


def _stress_trace(s, state):
    """gamma^ij S_ij of the incoming stress (= rho for the correct sources)."""
    return np.einsum("ij...,ij...->...", state.gamma_inverse, _full(s.S_ij))


_LAPSE_POWERS = ((1, "alpha"), (-1, "alpha^-1"), (2, "alpha^2"))
_SUBSETS = tuple(c for k in (1, 2, 3) for c in itertools.combinations(OUTPUTS, k))

#: The catalogue: one row per candidate convention difference. A new candidate is one row.
CATALOGUE = (
    Candidate("unit_factor", "every output times a constant (a unit-system factor: 4 pi, 8 pi, "
              "sqrt(4 pi), 2 or an inverse; the constant is fitted)", _same, POINT, True),
    Candidate("momentum_sign", "S_i with the opposite sign, -S_i (E x B in the other order, or a "
              "left-handed epsilon)", lambda s, st: SourceSet(s.rho, -s.S_i, s.S_ij)),
    Candidate("momentum_upper", "S^i = gamma^ij S_j given for S_i",
              lambda s, st: SourceSet(s.rho, _contract(st.gamma_inverse, s.S_i), s.S_ij)),
    Candidate("levi_civita_without_sqrt_det", "epsilon_ijk = [ijk] without sqrt(gamma): "
              "S_i / sqrt(gamma)", lambda s, st: SourceSet(s.rho, s.S_i / st.sqrt_det, s.S_ij)),
    Candidate("levi_civita_upper", "epsilon^ijk = [ijk] / sqrt(gamma) used for epsilon_ijk: "
              "S_i / gamma", lambda s, st: SourceSet(s.rho, s.S_i / st.sqrt_det**2, s.S_ij)),
    Candidate("fields_covariant", "the given E, B are covariant E_i, B_i (or were read as such): "
              "the sources of E^i = gamma^ij E_j", lambda s, st: st.sources_of_lower_fields(),
              FIELDS),
    Candidate("stress_upper", "S^ij = gamma^ik gamma^jl S_kl given for S_ij",
              lambda s, st: SourceSet(s.rho, s.S_i, _pack(np.einsum(
                  "ik...,kl...,jl...->ij...", st.gamma_inverse, _full(s.S_ij),
                  st.gamma_inverse, optimize=True)))),
    Candidate("stress_without_trace_term", "S_ij without (1/2) gamma_ij (E^2 + B^2): "
              "S_ij - gamma_ij S", lambda s, st: SourceSet(
                  s.rho, s.S_i, s.S_ij - st.gamma * _stress_trace(s, st))),
    Candidate("stress_trace_term_flat", "(1/2) delta_ij (E^2 + B^2) in place of the gamma_ij "
              "term: S_ij - (gamma_ij - delta_ij) S", lambda s, st: SourceSet(
                  s.rho, s.S_i, s.S_ij - (st.gamma - np.array([1.0, 0, 0, 1, 0, 1]).reshape(
                      (6,) + (1,) * st.alpha.ndim)) * _stress_trace(s, st))),
    Candidate("energy_as_T_tt", "the 4D component T_tt = alpha^2 rho - 2 alpha beta^i S_i + "
              "beta^i beta^j S_ij given for rho", lambda s, st: SourceSet(
                  st.alpha**2 * s.rho - 2 * st.alpha * np.sum(st.beta * s.S_i, axis=0)
                  + np.einsum("i...,ij...,j...->...", st.beta, _full(s.S_ij), st.beta, optimize=True),
                  s.S_i, s.S_ij)),
    Candidate("momentum_as_T_ti", "the 4D components T_ti = beta^j S_ij - alpha S_i given for S_i",
              lambda s, st: SourceSet(s.rho, _contract(_full(s.S_ij), st.beta) - st.alpha * s.S_i,
                                      s.S_ij)),
) + tuple(
    Candidate(f"{label}*{','.join(subset)}", f"{label} times {', '.join(subset)} (a lapse "
              "factor: a densitised or coordinate-time quantity given for the normal observer's)",
              _lapse_power(power, subset))
    for power, label in _LAPSE_POWERS for subset in _SUBSETS
) + (
    Candidate("stress_packing_diagonal_first", "S_ij packed (xx, yy, zz, xy, xz, yz)",
              _stress_packing(("xx", "yy", "zz", "xy", "xz", "yz")), STORAGE),
    Candidate("stress_packing_voigt", "S_ij packed in Voigt order (xx, yy, zz, yz, xz, xy)",
              _stress_packing(("xx", "yy", "zz", "yz", "xz", "xy")), STORAGE),
    Candidate("stress_packing_cyclic", "S_ij packed (xx, yy, zz, xy, yz, zx)",
              _stress_packing(("xx", "yy", "zz", "xy", "yz", "zx")), STORAGE),
    Candidate("stress_packing_lower_triangle", "S_ij packed by rows of the lower triangle "
              "(xx, yx, yy, zx, zy, zz)", _stress_packing(("xx", "yx", "yy", "zx", "zy", "zz")),
              STORAGE),
    Candidate("components_last_reshaped", "S_i and S_ij written component-last (*grid, n) and "
              "read back component-first by a reshape (not a transpose)",
              _component_last_reshaped, STORAGE),
    Candidate("grid_axes_reversed", "every output stored with its grid axes reversed "
              "(z, y, x storage read as x, y, z)", _grid_reversed, STORAGE),
)

BY_NAME = {c.name: c for c in CATALOGUE}
if len(BY_NAME) != len(CATALOGUE):  # pragma: no cover - a programming error in the table
    raise RuntimeError("diagnosis: candidate names must be unique")

#: Unit-system factors an amplitude is matched against, name -> value.
NAMED_FACTORS = {
    "1": 1.0, "4 pi": 4 * math.pi, "1/(4 pi)": 1 / (4 * math.pi), "8 pi": 8 * math.pi,
    "1/(8 pi)": 1 / (8 * math.pi), "sqrt(4 pi)": math.sqrt(4 * math.pi),
    "1/sqrt(4 pi)": 1 / math.sqrt(4 * math.pi), "2": 2.0, "1/2": 0.5,
}


def apply_candidates(names, state: InputState, amplitude: float = 1.0) -> SourceSet:
    """The package's sources of ``state`` transformed by the candidates ``names`` in order,
    times ``amplitude``."""
    s = state.correct
    for name in names:
        s = BY_NAME[name].transform(s, state)
    return SourceSet(*(a * amplitude for a in s)) if amplitude != 1.0 else s


# ----------------------------------------------------------------------------- fitting
@dataclass(frozen=True)
class Explanation:
    """A candidate or a pair applied to the package's sources, fitted to the data.

    ``names`` is () for "the sources agree", one name or two (applied in order); ``amplitude``
    the fitted constant (1 without a free amplitude); ``residual`` the relative l2 residual.
    """

    names: tuple
    amplitude: float
    residual: float

    @property
    def label(self) -> str:
        return " + ".join(self.names) if self.names else "(none: the package's sources)"

    @property
    def has_amplitude(self) -> bool:
        return any(BY_NAME[n].amplitude for n in self.names)

    def factor_name(self, tolerance: float) -> str:
        """The named unit factor the amplitude matches, or its value."""
        if not self.has_amplitude:
            return ""
        return factor_name(self.amplitude, tolerance)

    def describe(self, tolerance: float) -> str:
        parts = [BY_NAME[n].description for n in self.names] or ["the package's sources"]
        text = "; then ".join(parts)
        if self.has_amplitude:
            text += f" [amplitude {self.factor_name(tolerance)}]"
        return text

    def to_dict(self, tolerance: float) -> dict:
        return {"candidates": list(self.names), "amplitude": self.amplitude,
                "named_factor": self.factor_name(tolerance) or None,
                "residual": _json_number(self.residual), "explains": self.residual <= tolerance}


def named_factor(amplitude: float, tolerance: float):
    """'4 pi', '-(1/2)', ... when |amplitude| is a named factor to ``tolerance``, else None."""
    size = abs(amplitude)
    for name, value in NAMED_FACTORS.items():
        if abs(size / value - 1.0) <= max(tolerance, 4 * np.finfo(float).eps):
            return name if amplitude > 0 else f"-({name})"
    return None


def factor_name(amplitude: float, tolerance: float) -> str:
    """The named factor the amplitude matches, or its value marked as not a named one."""
    return (named_factor(amplitude, tolerance)
            or f"{amplitude:.6g} (not a named unit factor)")


def _json_number(x):
    return x if math.isfinite(x) else None


class Stacked(NamedTuple):
    """The outputs ``given`` of a SourceSet: their shapes, and every value in one contiguous
    float64 vector (the vector of the relative l2 residual)."""

    shapes: tuple
    values: np.ndarray


def _stack(sources: SourceSet, given: tuple) -> Stacked:
    arrays = [getattr(sources, name) for name in given]
    return Stacked(tuple(a.shape for a in arrays),
                   np.concatenate([np.ravel(a) for a in arrays]))


def _dot(a, b) -> float:
    # An accurate sum (emsource.reductions: the exact sum to about 0.5 eps of the sum of |terms|)
    # rather than einsum or BLAS: the Dask path sums the same products block by block, and both
    # must give the same number to (n + 1) eps for n blocks.
    return float(accurate_sum(a * b))


def _norm(v) -> float:
    return math.sqrt(_dot(v, v))


def _fit(prediction: Stacked, data: Stacked, free_amplitude: bool):
    """(amplitude, relative residual) of ``prediction`` against ``data``; inf when a shape
    differs (the candidate cannot produce these arrays)."""
    if prediction.shapes != data.shapes:
        return 1.0, math.inf
    p, d = prediction.values, data.values
    pp = _dot(p, p)
    amplitude = 1.0
    if free_amplitude and pp > 0:
        amplitude = _dot(p, d) / pp
        if amplitude == 0.0:
            return 1.0, math.inf
    scale = abs(amplitude) * math.sqrt(pp)
    misfit = _norm(d - amplitude * p)
    if scale == 0.0:
        return amplitude, 0.0 if misfit == 0.0 else math.inf
    return amplitude, misfit / scale


def round_off_tolerance(state: InputState, given: tuple, eps: float) -> float:
    """tau = ROUNDINGS eps kappa(gamma) chi (module docstring)."""
    size = _norm(_stack(state.correct, given).values)
    chi = _norm(_stack(state.absolute_bound(), given).values) / size if size > 0 else 1.0
    return ROUNDINGS * eps * state.condition_number() * max(chi, 1.0)


def _pairs():
    """Ordered pairs (first, second) of distinct candidates with stage(first) <= stage(second)."""
    return [(a.name, b.name) for a in CATALOGUE for b in CATALOGUE
            if a is not b and a.stage <= b.stage and not (a.stage == FIELDS == b.stage)]


PAIRS = _pairs()


def _search(data, given, state, names_list, cache=None):
    """Fit every tuple of names in ``names_list``; a list of Explanation."""
    results = []
    for names in names_list:
        if cache is not None and len(names) == 2:
            s = BY_NAME[names[1]].transform(cache[names[0]], state)
        else:
            s = apply_candidates(names, state)
        free = any(BY_NAME[n].amplitude for n in names)
        amplitude, residual = _fit(_stack(s, given), data, free)
        results.append(Explanation(tuple(names), amplitude, residual))
    return results


#: When nothing fits, a pair is named the closest only if it at least halves the best single
#: candidate's residual: a pair with a free amplitude always absorbs a little of any misfit.
PAIR_PREFERENCE = 0.5


def _closest(singles, pairs):
    single = min(singles, key=lambda x: x.residual)
    if pairs:
        pair = min(pairs, key=lambda x: x.residual)
        if pair.residual < PAIR_PREFERENCE * single.residual:
            return pair
    return single


#: Uniform draws per grid point of the probe (18 normals by Box-Muller, the lapse, one spare).
PROBE_DRAWS = 40
_MASK64 = (1 << 64) - 1


def _splitmix64(counter):
    """The SplitMix64 output function of a uint64 counter array (G. L. Steele, D. Lea,
    C. H. Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014; constants
    from memory). A counter-based draw: the value at a counter depends on nothing else."""
    with np.errstate(over="ignore"):
        z = counter + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def probe_inputs(points):
    """alpha, beta, gamma (packed), E, B of the probe at the flat (x, y, z) C-order point
    indices ``points`` (an int array of any shape ``s``): (s), (3, *s), (6, *s), (3, *s), (3, *s).

    Each point's values come from its own counters, ``PROBE_SEED`` mixed with
    ``point * PROBE_DRAWS + j``: the probe at a point does not depend on how the grid is cut
    into blocks, so the Dask path draws the same state block by block. gamma = A A^T with
    A = I + 0.3 noise (condition number of a few), lapse in [0.5, 2], shift and fields of order
    one; normals by the Box-Muller transform (G. E. P. Box and M. E. Muller, Ann. Math. Stat. 29,
    610 (1958)).
    """
    points = np.asarray(points, dtype=np.uint64)
    base = points[None] * np.uint64(PROBE_DRAWS) + np.arange(
        PROBE_DRAWS, dtype=np.uint64).reshape((-1,) + (1,) * points.ndim)
    bits = _splitmix64(base + np.uint64((PROBE_SEED * 0x5851F42D4C957F2D) & _MASK64))
    uniform = ((bits >> np.uint64(11)).astype(np.float64) + 1.0) * 2.0**-53   # in (0, 1]
    normal = (np.sqrt(-2.0 * np.log(uniform[0:36:2])) * np.cos(2 * np.pi * uniform[1:36:2]))
    a = np.eye(3).reshape((3, 3) + (1,) * points.ndim) + 0.3 * normal[:9].reshape(
        (3, 3) + points.shape)
    full = np.einsum("ik...,jk...->ij...", a, a)
    alpha = 0.5 + 1.5 * uniform[36]
    return (alpha, 0.5 * normal[9:12], np.ascontiguousarray(_pack(full)), normal[12:15],
            normal[15:18])


def _probe_state(state: InputState) -> InputState:
    """The probe (:func:`probe_inputs`) on the grid of ``state``: an independent random
    curved state."""
    points = np.arange(int(np.prod(state.grid)), dtype=np.int64).reshape(state.grid)
    return InputState.of(*probe_inputs(points), state.units)


def _same_transformation(x: Explanation, y: Explanation, probe, given, tolerance) -> bool:
    px = _stack(apply_candidates(x.names, probe, x.amplitude), given)
    py = _stack(apply_candidates(y.names, probe, y.amplitude), given)
    if px.shapes != py.shapes:
        return False
    return _norm(px.values - py.values) <= tolerance * max(_norm(px.values), _norm(py.values))


def _state_facts(state: InputState, lapse_given: bool, shift_given: bool) -> list:
    identity = np.array([1.0, 0, 0, 1, 0, 1]).reshape((6,) + (1,) * len(state.grid))
    alpha = state.alpha
    constant = alpha.size and np.all(alpha == alpha.flat[0])
    return facts_of(flat=np.array_equal(state.gamma, np.broadcast_to(identity, state.gamma.shape)),
                    lapse_given=lapse_given, unit_lapse=bool(np.all(alpha == 1.0)),
                    constant_lapse=float(alpha.flat[0]) if constant else None,
                    shift_given=shift_given, zero_shift=not np.any(state.beta))


def facts_of(*, flat, lapse_given, unit_lapse, constant_lapse, shift_given, zero_shift) -> list:
    """The plain properties of the inputs that hide candidates, in words (``constant_lapse``:
    the lapse's value where it is the same at every point, else None)."""
    facts = []
    if flat:
        facts.append("the metric is the identity (flat, Cartesian) at every point, so index "
                     "placement and sqrt(gamma) are invisible")
    if not lapse_given:
        facts.append("no lapse was given (alpha = 1 assumed), so lapse factors are invisible")
    elif unit_lapse:
        facts.append("the lapse is 1 at every point, so lapse factors are invisible")
    elif constant_lapse is not None:
        facts.append(f"the lapse is constant (alpha = {constant_lapse:.6g}), so a lapse "
                     "factor looks like a unit factor")
    if not shift_given:
        facts.append("no shift was given (beta = 0 assumed)")
    elif zero_shift:
        facts.append("the shift is zero")
    return facts


@dataclass(frozen=True)
class Diagnosis:
    """Outcome of :func:`diagnose_sources`.

    Attributes
    ----------
    verdict : str
        One of :data:`VERDICTS`.
    explanations : tuple of Explanation
        The fitting explanations, one per distinct transformation (one for "explained", several
        for "ambiguous", the identity for "agree", none for "not explained").
    best : Explanation
        The smallest residual searched (the closest candidate when nothing fits).
    equivalent : tuple of str
        Other labels of the same transformation as ``explanations[0]`` (commuting steps).
    untestable : tuple of str
        Candidates that leave the package's sources unchanged on these data (not on the probe).
    facts : tuple of str
        Plain properties of the inputs that hide candidates (flat metric, unit lapse, ...).
    tolerance : float
        The round-off tolerance tau of the relative l2 residual.
    agreement : float
        Relative l2 residual of the data against the package's sources.
    singles, pairs : tuple of Explanation
        Every single candidate, and the pairs searched (empty when a single fits), best first.
    given : tuple of str
        The outputs compared ("rho", "S_i", "S_ij").
    message : str
        The verdict in words.
    """

    verdict: str
    explanations: tuple
    best: Explanation
    equivalent: tuple
    untestable: tuple
    facts: tuple
    tolerance: float
    agreement: float
    singles: tuple
    pairs: tuple
    given: tuple
    message: str

    @property
    def explained(self) -> bool:
        """True for "agree" and "explained": one transformation fits to round-off."""
        return self.verdict in ("agree", "explained")

    def table(self, rows: int = 12) -> str:
        """The verdict table: the best explanations (singles, then pairs), then the verdict."""
        tau = self.tolerance
        lines = [f"source diagnosis: compared {', '.join(self.given)}; relative l2 residual "
                 f"||data - prediction|| / ||prediction||, round-off tolerance {tau:.3e}",
                 f"{'candidate(s)':<58} {'amplitude':>22} {'residual':>10}  explains",
                 f"{'(none: the package sources)':<58} {'':>22} {self.agreement:10.3e}  "
                 f"{'yes' if self.agreement <= tau else 'no'}"]
        shown, seen = [], set()
        for e in sorted(self.singles + self.pairs, key=lambda e: e.residual):
            # Two orders of commuting steps give the same numbers: show the pair once.
            key = (frozenset(e.names), float(f"{e.residual:.6e}"), float(f"{e.amplitude:.6e}"))
            if key not in seen and len(shown) < rows:
                seen.add(key)
                shown.append(e)
        for e in shown:
            amp = ""
            if e.has_amplitude:
                named = named_factor(e.amplitude, tau)
                amp = f"{e.amplitude:.6g}" + (f" = {named}" if named else "")
            lines.append(f"{e.label:<58} {amp:>22} {e.residual:10.3e}  "
                         f"{'yes' if e.residual <= tau else 'no'}")
        lines.append(f"({len(self.singles)} single candidates and {len(self.pairs)} ordered pairs "
                     f"searched; the {len(shown)} best shown, commuting pairs once)")
        lines.append(self.message)
        return "\n".join(lines)

    def to_dict(self) -> dict:
        tau = self.tolerance
        return {"verdict": self.verdict, "message": self.message, "tolerance": tau,
                "compared": list(self.given), "agreement_residual": _json_number(self.agreement),
                "explanations": [e.to_dict(tau) for e in self.explanations],
                "best": self.best.to_dict(tau), "equivalent": list(self.equivalent),
                "untestable": list(self.untestable), "facts": list(self.facts),
                "singles": [e.to_dict(tau) for e in self.singles],
                "pairs": [e.to_dict(tau) for e in self.pairs[:50]]}


# ----------------------------------------------------------------------------- checks
def _user_array(name, value, grid, components, valid):
    """A user output as float64, with its shape on ``grid`` or on the reversed grid; zero at
    the excised points (``valid`` False, reversed with the array)."""
    a = arg.float_array(FUNCTION, name, value)
    lead = (components,) if components else ()
    allowed = [lead + tuple(grid), lead + tuple(grid)[::-1]]
    if a.shape not in allowed:
        expected = " or ".join(str(s) for s in dict.fromkeys(allowed))
        raise ValueError(f"{FUNCTION}: {name} must have shape {expected}, found {a.shape}")
    reversed_grid = a.shape[len(lead):] != tuple(grid)
    where = valid.T if reversed_grid else valid
    arg.check_points(FUNCTION, a.shape[len(lead):], {name: a}, valid=where)
    out = a.astype(np.float64)
    out[..., ~where] = 0.0
    return out


def _as_float64(function, name, value):
    return arg.float_array(function, name, value).astype(np.float64)


def diagnose_sources(alpha, beta, gamma, E, B, *, rho=None, S_i=None, S_ij=None,
                     units="gaussian", valid_mask=None, pairs=True) -> Diagnosis:
    r"""Find which convention difference explains a user's rho, S_i, S_ij.

    Parameters
    ----------
    alpha : (*grid) ndarray or None
        Lapse (positive). None: alpha = 1 is assumed and lapse factors cannot be tested.
    beta : (3, *grid) ndarray or None
        Shift beta^i. None: beta = 0 is assumed.
    gamma : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij, positive definite.
    E, B : (3, *grid) ndarray
        Contravariant fields E^i, B^i of the normal observer in ``units``.
    rho, S_i, S_ij : ndarray, optional
        The user's energy density (*grid), momentum density (3, *grid) and stress (6, *grid),
        packed (xx, xy, xz, yy, yz, zz), component first; at least one. Each may also be stored on
        the reversed grid (nz, ny, nx) (the ``grid_axes_reversed`` candidate).
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of E and B; the package's sources are computed in it.
    valid_mask : (*grid) bool ndarray, optional
        False at excised points: they are not checked, and they are compared as zero fields
        against zero data (every candidate maps zero sources to zero).
    pairs : bool
        Search pairs of candidates when no single one fits (the default).

    Inputs may be float32 or float64 (mixed too); everything is computed in float64 and the
    tolerance uses the epsilon of the coarsest dtype given. Inputs are not modified.

    Returns
    -------
    Diagnosis

    Raises
    ------
    TypeError, ValueError
        Non-array or integer input, a wrong shape (named with the expected and the found shape),
        no user output given, an unknown unit system.
    GridPointError
        A non-finite value, a lapse that is not positive or a metric that is not positive
        definite, with the grid index of the first such point.

    References
    ----------
    E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2; T. W. Baumgarte and
    S. L. Shapiro, Numerical Relativity (2010), sec. 5.2; N. J. Higham, Accuracy and Stability of
    Numerical Algorithms, 2nd ed. (2002), sec. 3.1 (the round-off bound).

    Examples
    --------
    >>> import numpy as np, emsource
    >>> from emsource.diagnosis import diagnose_sources
    >>> rng = np.random.default_rng(1)
    >>> gamma = np.zeros((6, 3, 4, 5)); gamma[[0, 3, 5]] = 1.0; gamma[1] = 0.2
    >>> alpha = rng.uniform(0.5, 2, (3, 4, 5)); beta = rng.normal(size=(3, 3, 4, 5))
    >>> E, B = rng.normal(size=(3, 3, 4, 5)), rng.normal(size=(3, 3, 4, 5))
    >>> s = emsource.adm_sources(gamma, E, B)
    >>> d = diagnose_sources(alpha, beta, gamma, E, B, rho=4 * np.pi * s.rho,
    ...                      S_i=4 * np.pi * s.S_i, S_ij=4 * np.pi * s.S_ij)
    >>> d.verdict, d.explanations[0].names, d.explanations[0].factor_name(d.tolerance)
    ('explained', ('unit_factor',), '4 pi')
    """
    state, user, eps, lapse_given, shift_given = checked_inputs(
        alpha, beta, gamma, E, B, rho=rho, S_i=S_i, S_ij=S_ij, units=units,
        valid_mask=valid_mask)
    given = tuple(user)
    tau = round_off_tolerance(state, given, eps)
    data = _stack(SourceSet(**{n: user.get(n) for n in OUTPUTS}), given)
    identity = Explanation((), 1.0, _fit(_stack(state.correct, given), data, False)[1])
    singles = _search(data, given, state, [(c.name,) for c in CATALOGUE])
    # Candidates invisible on these data: they reproduce the package's own sources here.
    own = _search(_stack(state.correct, given), given, state, [(c.name,) for c in CATALOGUE])
    probe = []

    def same(x, y):
        if not probe:
            p = _probe_state(state)
            probe.append((p, round_off_tolerance(p, given, float(np.finfo(np.float64).eps))))
        return _same_transformation(x, y, probe[0][0], given, probe[0][1])

    def search_pairs():
        cache = {c.name: apply_candidates((c.name,), state) for c in CATALOGUE}
        return _search(data, given, state, PAIRS, cache)

    return conclude(given=given, tolerance=tau, identity=identity, singles=singles, own=own,
                    facts=_state_facts(state, lapse_given, shift_given),
                    search_pairs=search_pairs if pairs else None, same=same)


def checked_inputs(alpha, beta, gamma, E, B, *, rho=None, S_i=None, S_ij=None,
                   units="gaussian", valid_mask=None):
    """The checks of :func:`diagnose_sources` and its float64 state.

    Returns (state, user, eps, lapse_given, shift_given): the :class:`InputState` (excised
    points neutralised), the user's outputs by name (float64, zero at excised points), the
    epsilon of the coarsest dtype given. The Dask path calls it per block.
    """
    arg.choice(FUNCTION, "units", units, UNIT_SYSTEMS)
    grid = arg.grid_of(FUNCTION, "E", E, "component_first")
    metric, gidx = arg.spatial_metric(FUNCTION, gamma, grid, "component_first")
    arg.vector(FUNCTION, "E", E, grid, "component_first")
    arg.vector(FUNCTION, "B", B, grid, "component_first")
    lapse_given, shift_given = alpha is not None, beta is not None
    a = (_as_float64(FUNCTION, "alpha", arg.scalar(FUNCTION, "alpha", alpha, grid))
         if lapse_given else np.ones(grid))
    b = (_as_float64(FUNCTION, "beta", arg.vector(FUNCTION, "beta", beta, grid, "component_first"))
         if shift_given else np.zeros((3,) + grid))
    g = np.array(np.asarray(metric)[list(gidx)], dtype=np.float64)
    e, bf = E.astype(np.float64), B.astype(np.float64)
    valid = arg.point_mask(FUNCTION, valid_mask, grid)
    arg.check_points(FUNCTION, grid, {"alpha": a, "beta": b, "gamma": g, "E": e, "B": bf},
                     valid=valid, lapse="alpha", metric=("gamma", g, arg.PACKED_METRIC_INDEX))
    user = {}
    for name, value, components in (("rho", rho, 0), ("S_i", S_i, 3), ("S_ij", S_ij, 6)):
        if value is not None:
            user[name] = _user_array(name, value, grid, components, valid)
    if not valid.all():
        # Excised points hold any fill: a flat metric, unit lapse and zero fields there.
        excised = ~valid
        a[excised], b[:, excised], e[:, excised], bf[:, excised] = 1.0, 0.0, 0.0, 0.0
        g[:, excised] = np.array([1.0, 0, 0, 1, 0, 1])[:, None]
    if not user:
        raise ValueError(f"{FUNCTION}: give at least one of rho, S_i, S_ij (found none)")
    dtypes = [np.asarray(x).dtype for x in (gamma, E, B, rho, S_i, S_ij, alpha, beta)
              if x is not None]
    eps = max(float(np.finfo(d).eps) for d in dtypes)
    return InputState.of(a, b, g, e, bf, units), user, eps, lapse_given, shift_given


def conclude(*, given, tolerance, identity, singles, own, facts, search_pairs, same) -> Diagnosis:
    """The verdict from the fitted explanations (shared by the single-process and Dask paths).

    ``identity``: the data against the package's sources; ``singles``: every catalogue entry
    against the data; ``own``: every entry against the package's own sources (which are then
    untestable when they fit there); ``search_pairs()``: the fitted pairs (None: no pair search);
    ``same(x, y)``: whether two explanations are one transformation (on the probe).
    """
    tau = tolerance
    pairs = search_pairs is not None
    untestable = tuple(x.names[0] for x in own if x.residual <= tau
                       and not same(x, Explanation((), 1.0, 0.0)))
    searched_pairs = []
    if identity.residual <= tau:
        fitting = [identity]
    else:
        fitting = [x for x in singles if x.residual <= tau]
        if not fitting and pairs:
            searched_pairs = search_pairs()
            fitting = [x for x in searched_pairs if x.residual <= tau]
    # One representative per distinct transformation (decided on the probe).
    groups = []
    for x in sorted(fitting, key=lambda x: (len(x.names), x.residual)):
        for group in groups:
            if same(group[0], x):
                group.append(x)
                break
        else:
            groups.append([x])
    best = groups[0][0] if groups else _closest(singles, searched_pairs)
    singles = tuple(sorted(singles, key=lambda x: x.residual))
    searched_pairs = tuple(sorted(searched_pairs, key=lambda x: x.residual))
    hidden = ""
    if untestable:
        hidden = (" Not testable on these data (they leave the package's sources unchanged here): "
                  + ", ".join(untestable) + ".")
    why = (" " + "; ".join(facts) + ".") if facts and (untestable or len(groups) > 1) else ""
    if groups and not groups[0][0].names:
        verdict = "agree"
        message = (f"agree: the data are the package's sources to round-off (relative residual "
                   f"{identity.residual:.3e} <= tolerance {tau:.3e}).")
    elif len(groups) == 1:
        verdict = "explained"
        message = (f"explained: {best.label}: {best.describe(tau)} (relative residual "
                   f"{best.residual:.3e} <= tolerance {tau:.3e}).")
    elif groups:
        verdict = "ambiguous"
        message = ("ambiguous: these explanations all fit to round-off and coincide on these data "
                   "but are different transformations: "
                   + "; ".join(f"{g[0].label} [{g[0].describe(tau)}]" for g in groups) + ".")
    else:
        verdict = "not explained"
        what = "single candidate" + (" or pair" if pairs else "")
        message = (f"not explained: no {what} explains the difference to round-off "
                   f"(tolerance {tau:.3e}); the best is {best.label} ({best.describe(tau)}) with "
                   f"relative residual {best.residual:.3e}, which does not explain the data to "
                   "round-off (noise, another term or a difference outside the catalogue)."
                   if math.isfinite(best.residual) else
                   f"not explained: no {what} produces arrays of the data's shapes.")
    message += hidden + why
    equivalent = tuple(x.label for x in groups[0][1:]) if groups else ()
    return Diagnosis(verdict=verdict, explanations=tuple(g[0] for g in groups), best=best,
                     equivalent=equivalent, untestable=untestable, facts=tuple(facts),
                     tolerance=tau, agreement=identity.residual, singles=singles,
                     pairs=searched_pairs, given=given, message=message)
