"""Which electromagnetic unit system makes a user's data satisfy the Einstein constraints?

A metric solver in geometrized units couples to the field through G_ab = 8 pi T_ab. If the
Maxwell solver works in Heaviside-Lorentz units and the stress-energy is built with the Gaussian
1/(4 pi) (or the other way round), the energy density is off by 4 pi and the Hamiltonian
constraint then fails to converge to zero. This module evaluates

    H = R + K^2 - K_ij K^ij - 16 pi rho,   M_i = D_j K^j_i - D_i K - 8 pi S_i

(:func:`emsource.constraints.adm_constraints`) with rho, S_i from the data's E and B in each
supported unit system, and with no electromagnetic source at all, on the given grid (spacing h)
and on every second point of it (spacing 2 h), and reports for each hypothesis the residuals
and their observed order of convergence p = log2(|res(2h)| / |res(h)|) on the points interior
to both grids.

A hypothesis *fits* when both H and M_i either converge at the design order p (observed order
within :data:`ORDER_TOLERANCE` = 1 of p, see below) or already sit at round-off (normalised
residual below 1e-12). A wrong source term leaves a residual that does not shrink (observed
order near 0); an observed order far above p means the two grids are not h and 2 h (a coarse
spacing that was not doubled inflates the coarse residual by a spacing-ratio error), which is
no evidence for any hypothesis.

Why 1. For smooth data the error of a centred difference of even order p expands in even
powers, e(h) = C h^p (1 + x + O(h^4)) with x = (C'/C) h^2 (common practice: Richardson
extrapolation rests on it), so the observed order is p + log2((1 + 4x) / (1 + x)). Calling the
regime asymptotic when the h^{p+2} term is at most half the leading one on the coarse grid,
|4x| <= 1/2, bounds the observed order to [p - 0.81, p + 0.42]; the tolerance 1 covers that
with a margin for the points next to an excised region. One fitting hypothesis is named;
several fit when the field is too weak to matter at this resolution ("ambiguous"); none fits
when the data are inconsistent with every system ("none fits": other matter, a different
rescaling of the fields, or wrong data).

Reference: the constraints as in E. Gourgoulhon, 3+1 Formalism in General Relativity (2012),
ch. 4 (from memory); unit systems as in J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), appendix
on units and dimensions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import _arguments as args
from ._deprecated_names import module_aliases, renamed_keywords, warn_renamed
from .constraints import adm_constraints
from .kernels.stencils import stencil_radius
from .reductions import NormPartial
from .unit_systems import UNIT_SYSTEMS

__all__ = ["HYPOTHESES", "VACUUM", "ORDER_TOLERANCE", "ROUND_OFF", "HypothesisResult",
           "UnitAudit", "audit_units", "hypothesis_result", "order_fits"]

#: Name of the hypothesis "the metric does not feel the field": the vacuum constraints, without
#: electromagnetic sources (the same word as ``emsource constraints --sources vacuum``).
VACUUM = "vacuum"
HYPOTHESES = UNIT_SYSTEMS + (VACUUM,)
#: The hypothesis name that ``UnitAudit.result`` also accepts for VACUUM (deprecated spelling).
_OLD_VACUUM_NAME = "no_sources"
__getattr__ = module_aliases(__name__, {"NO_SOURCES": ("VACUUM", VACUUM)})
#: Normalised residual below which a constraint counts as satisfied to round-off.
ROUND_OFF = 1e-12
#: Largest distance of an observed order from the design order that counts as converging
#: (module docstring: derivation from the even-power error expansion).
ORDER_TOLERANCE = 1.0


@dataclass(frozen=True)
class HypothesisResult:
    """Residuals under one hypothesis, on the points interior to both the h and the 2 h grid.

    ``*_fine`` and ``*_coarse`` are normalised l2 norms (residual over its largest term; for
    M_i, sum_i M_i^2 over the same for the scales) at spacing h and 2 h; ``*_order`` the
    observed order log2(l2(2h) / l2(h)) of the raw residuals.
    """

    name: str
    hamiltonian_fine: float
    hamiltonian_coarse: float
    hamiltonian_order: float
    momentum_fine: float
    momentum_coarse: float
    momentum_order: float
    fits: bool


@dataclass(frozen=True)
class UnitAudit:
    """Outcome of :func:`audit_units`.

    Attributes
    ----------
    results : tuple of HypothesisResult
        One per name of :data:`HYPOTHESES`, in that order.
    verdict : str
        The one fitting hypothesis, ``"ambiguous"`` (several fit) or ``"none fits"``.
    smallest : str
        The hypothesis with the smallest fine-grid normalised Hamiltonian residual.
    order : int
        Finite-difference order used.
    points : int
        Number of points the comparison used.
    message : str
        One-line diagnosis in words.
    """

    results: tuple
    verdict: str
    smallest: str
    order: int
    points: int
    message: str

    def result(self, name: str) -> HypothesisResult:
        """The result of hypothesis ``name`` (one of :data:`HYPOTHESES`)."""
        if name == _OLD_VACUUM_NAME:
            warn_renamed("UnitAudit.result", _OLD_VACUUM_NAME, VACUUM)
            name = VACUUM
        try:
            return next(r for r in self.results if r.name == name)
        except StopIteration:
            raise KeyError(f"UnitAudit.result: name must be one of {HYPOTHESES}, "
                           f"found {name!r}") from None

    def table(self) -> str:
        """A plain-text table of the numbers, then the diagnosis."""
        lines = [f"unit-system audit: order {self.order}, {self.points} points compared at h and 2h",
                 f"{'hypothesis':<18} {'H(h)':>10} {'H(2h)':>10} {'p_H':>6} "
                 f"{'M(h)':>10} {'M(2h)':>10} {'p_M':>6}  fits"]
        for r in self.results:
            lines.append(
                f"{r.name:<18} {r.hamiltonian_fine:10.3e} {r.hamiltonian_coarse:10.3e} "
                f"{r.hamiltonian_order:6.2f} {r.momentum_fine:10.3e} {r.momentum_coarse:10.3e} "
                f"{r.momentum_order:6.2f}  {'yes' if r.fits else 'no'}")
        lines.append("(H, M: l2 norm of the residual over the l2 norm of its largest term; "
                     "p: observed order)")
        lines.append(self.message)
        return "\n".join(lines)


def _norm(residual, terms, points):
    """(RMS of |R|, RMS of |R| over RMS of |scale|) on ``points``; |.| the Euclidean norm over
    the components of a vector residual."""
    if residual.ndim == 3:
        residual = residual[None]
        terms = terms[None]
    res, scale = NormPartial.of_points(residual[:, points], terms[:, points]).total_l2()
    return res, (res / scale if scale > 0 else math.nan)


def _order(coarse, fine):
    if fine == 0.0:
        return math.inf if coarse > 0 else math.nan
    return math.log2(coarse / fine) if coarse > 0 else -math.inf


def order_fits(observed, normalised, order) -> bool:
    """A constraint converges at design ``order`` (|observed - order| <= ORDER_TOLERANCE) or
    sits at round-off (normalised residual below ROUND_OFF)."""
    return bool(normalised < ROUND_OFF or abs(observed - order) <= ORDER_TOLERANCE)


def hypothesis_result(name, fine, coarse, *, order) -> HypothesisResult:
    """Compare the constraint residuals of one hypothesis on the h and the 2 h grid.

    ``fine`` and ``coarse`` are :class:`emsource.constraints.ConstraintResiduals` of the same
    data at spacing h and on every second point of it at spacing 2 h. Norms are taken on the
    points interior to both; the observed order is log2 of their ratio.
    """
    sub = (slice(None, None, 2),) * 3
    common = coarse.interior & fine.interior[sub]
    if not common.any():
        raise ValueError("audit_units: no point is interior on both the h and the 2h grid "
                         "(too few valid points for this grid)")
    fh, fhn = _norm(fine.hamiltonian[sub], fine.hamiltonian_scale[sub], common)
    ch, chn = _norm(coarse.hamiltonian, coarse.hamiltonian_scale, common)
    every_other = (slice(None),) + sub
    fm, fmn = _norm(fine.momentum[every_other], fine.momentum_scale[every_other], common)
    cm, cmn = _norm(coarse.momentum, coarse.momentum_scale, common)
    p_h, p_m = _order(ch, fh), _order(cm, fm)
    return HypothesisResult(name, fhn, chn, p_h, fmn, cmn, p_m,
                            order_fits(p_h, fhn, order) and order_fits(p_m, fmn, order))


@renamed_keywords(mask="valid_mask")
def audit_units(gamma, K, E, B, *, spacing, order=4, field_index="upper", valid_mask=None,
                check=True) -> UnitAudit:
    """Evaluate the constraints under each unit system and without sources; name what fits.

    Parameters
    ----------
    gamma, K : (6, nx, ny, nz) ndarray
        Spatial metric and extrinsic curvature, packed (xx, xy, xz, yy, yz, zz).
    E, B : (3, nx, ny, nz) ndarray
        The data's electric and magnetic field (normal observer), in an unknown unit system.
    spacing : float or sequence of 3 floats
        Grid spacing h, code units. Every axis needs at least 4 order + 2 points so that the
        2 h grid has interior points.
    order : {2, 4, 6}
    field_index : {"upper", "lower", "densitized"}
    valid_mask : (nx, ny, nz) bool ndarray or None
        True where the data are valid.
    check : bool
        Passed to :func:`emsource.constraints.adm_constraints`.

    Returns
    -------
    UnitAudit

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> from emsource.exact import kerr_newman
    >>> grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (21, 21, 21))
    >>> d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5, units="heaviside_lorentz")
    >>> audit_units(d.gamma, d.K, d.E, d.B, spacing=grid.spacing).verdict
    'heaviside_lorentz'
    """
    args.choice("audit_units", "order", order, args.DIFFERENCE_ORDERS)
    gamma = args.float_array("audit_units", "gamma", gamma)
    spacing = np.array(args.grid_spacing("audit_units", spacing, 3))
    grid = gamma.shape[1:]
    need = 2 * (2 * stencil_radius(order) + 1)
    if len(grid) != 3 or min(grid) < need:
        raise ValueError(f"audit_units: every axis needs at least {need} points for order "
                         f"{order} (the 2h grid must have interior points), found grid {grid}")
    mask = args.point_mask("audit_units", valid_mask, grid)
    # The coarse grid is every second point of the fine one, at exactly twice its spacing.
    every_other = (slice(None), slice(None, None, 2), slice(None, None, 2), slice(None, None, 2))
    grids = {"fine": ((gamma, K, E, B), spacing, mask),
              "coarse": (tuple(np.asarray(a)[every_other] for a in (gamma, K, E, B)),
                         2.0 * spacing, mask[every_other[1:]])}
    outcome = {}
    for name in HYPOTHESES:
        per_grid = []
        for which in ("fine", "coarse"):
            (g, k, e, b), h, m = grids[which]
            if name == VACUUM:
                res = adm_constraints(g, k, spacing=h, order=order, valid_mask=m, check=check)
            else:
                res = adm_constraints(g, k, e, b, spacing=h, order=order, units=name,
                                      field_index=field_index, valid_mask=m, check=check)
            per_grid.append(res)
        outcome[name] = hypothesis_result(name, *per_grid, order=order)
    sub = every_other[1:]
    points = int((per_grid[1].interior & per_grid[0].interior[sub]).sum())
    results = tuple(outcome[n] for n in HYPOTHESES)
    fitting = [r.name for r in results if r.fits]
    smallest = min(results, key=lambda r: (r.hamiltonian_fine, r.momentum_fine)).name
    if len(fitting) == 1:
        verdict = fitting[0]
        if verdict == VACUUM:
            message = ("vacuum fits: the constraints converge without electromagnetic "
                       "sources, so the metric does not feel this field (a test field, or the "
                       "coupling is missing in the code that wrote the data)")
        else:
            message = (f"{verdict} fits: the constraints converge at order {order} only with the "
                       f"sources computed in {verdict} units")
    elif fitting:
        verdict = "ambiguous"
        field_is_zero = not (np.any(np.asarray(E)[:, mask] != 0) or np.any(np.asarray(B)[:, mask] != 0))
        reason = ("the field is zero at every valid point" if field_is_zero else
                  "the electromagnetic sources are below the truncation error at this resolution")
        message = f"ambiguous: {', '.join(fitting)} all fit; {reason}"
    else:
        verdict = "none fits"
        message = (f"none fits: no unit system (nor the vacuum constraints) makes the constraints converge; "
                   f"the smallest residual is with {smallest}. The field may be rescaled by "
                   "another factor, other matter may be present, or the data are inconsistent")
    return UnitAudit(results=results, verdict=verdict, smallest=smallest, order=order,
                     points=points, message=message)
