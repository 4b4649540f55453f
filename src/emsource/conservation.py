r"""Energy and momentum conservation of the electromagnetic field in 3+1 form, on a grid.

The field's stress-energy obeys :math:`\nabla_a T^{ab} = -F^b{}_c J^c` (the field loses to the
charges what the Lorentz force gives them). Its 3+1 projections (rho, S_i, S_ij of
:func:`emsource.adm_sources`) then satisfy, in flux-conservative form with sg = sqrt(gamma),

.. math::

    \partial_t(\sqrt\gamma\,\rho) + \partial_i\big[\sqrt\gamma\,(\alpha S^i - \beta^i\rho)\big]
      = \sqrt\gamma\,\big[\alpha K_{ij}S^{ij} - S^i\partial_i\alpha - \alpha\, j^i E_i\big],

    \partial_t(\sqrt\gamma\,S_j) + \partial_i\big[\sqrt\gamma\,(\alpha S^i{}_j - \beta^i S_j)\big]
      = \sqrt\gamma\,\big[\tfrac{\alpha}{2} S^{ik}\partial_j\gamma_{ik} + S_i\partial_j\beta^i
        - \rho\,\partial_j\alpha - \alpha(\rho_e E_j + \epsilon_{jkl}\, j^k B^l)\big].

Derivation (ours, following the sources below). With :math:`\sqrt{-g} = \alpha\sqrt\gamma`,
:math:`T^{ab} = \rho n^a n^b + n^a S^b + S^a n^b + S^{ab}` and :math:`n^a = (1, -\beta^i)/\alpha`:

* energy: contract with :math:`n_b`. :math:`\nabla_a(T^{ab} n_b) = T^{ab}\nabla_a n_b
  + n_b \nabla_a T^{ab}` with :math:`T^{ab}n_b = -(\rho n^a + S^a)`,
  :math:`\nabla_a n_b = -K_{ab} - n_a D_b \ln\alpha` (sign of K as in the package conventions),
  :math:`n_b F^b{}_c J^c = -E_i j^i`, and :math:`\nabla_a V^a = \partial_a(\sqrt{-g}V^a)/\sqrt{-g}`
  with :math:`\sqrt{-g}(\rho n^a + S^a) = \sqrt\gamma\,(\rho,\ \alpha S^i - \beta^i\rho)`.
* momentum: :math:`\nabla_a T^a{}_j = \partial_a(\sqrt{-g}T^a{}_j)/\sqrt{-g}
  - \tfrac12 T^{cd}\partial_j g_{cd}`, with :math:`\sqrt{-g}\,T^t{}_j = \sqrt\gamma S_j`,
  :math:`\sqrt{-g}\,T^i{}_j = \sqrt\gamma(\alpha S^i{}_j - \beta^i S_j)`; the metric term
  :math:`\tfrac12 T^{cd}\partial_j g_{cd}` evaluates to the first three source terms divided by
  :math:`\alpha`, and :math:`F_{jc}J^c = \rho_e E_j + \epsilon_{jkl} j^k B^l`.

The kernels evaluate rho, S_i, S^i_j and S^ij with the formulas of :func:`emsource.adm_sources`
inside their own pass (calling it first would add eleven whole-grid temporaries and a pass);
``tests/test_conservation.py`` checks the residual against a NumPy evaluation built on
:func:`emsource.adm_sources` itself.

No unit factor multiplies the Lorentz-force terms: in Gaussian units both Maxwell's
:math:`\nabla_b F^{ab} = 4\pi J^a` and :math:`T^{ab}` carry the 4 pi, which cancels; in
Heaviside-Lorentz units neither does. The charge density rho_e and current j^i are those
measured by the normal observer, in the unit system of the fields.

References
----------
E. Gourgoulhon, 3+1 Formalism in General Relativity, Lecture Notes in Physics 846 (2012),
sec. 6 (energy and momentum conservation; the equations for (d_t - L_beta) E and p_i) and
ch. 3 (nabla_a n_b in terms of K_ab and the lapse). T. W. Baumgarte and S. L. Shapiro,
Numerical Relativity (2010), sec. 5.2 (3+1 sources) and the flux-conservative form of the
conservation laws in their relativistic-hydrodynamics chapter. J. D. Jackson, Classical
Electrodynamics, 3rd ed. (1999), sec. 6.7-6.8 (Poynting's theorem and the Maxwell stress
tensor, the flat limit). Section numbers are from memory; the equations above were derived
here as shown and are checked by the tests on exact solutions.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from scipy import ndimage

from . import _arguments as arg
from ._deprecated_names import module_aliases, renamed_keywords
from ._threading import kernel_call
from .kernels import conservation as kernels
from .kernels._compile import call_sharing_layouts
from .kernels.stencils import first_derivative_weights, stencil_radius
from .reductions import (BalancePartial, BalanceTerms, GlobalBalance, NormPartial, ResidualNorms,
                         Sum, combine_all)
from .patches import (PatchGrid, embedded, global_partial, local_arrays, patch_of, relocated,
                      require_patch, stencil_partial, without_interior)
from .sources import GridPointError
from .unit_systems import check_unit_system, stress_energy_prefactor

__all__ = [
    "ResidualNorms",
    "ConservationResidual",
    "conservation_residual",
    "new_work_array",
    "level_residual",
    "BalanceTerms",
    "GlobalBalance",
    "balance_partial",
    "global_balance",
]


@dataclass(frozen=True)
class ConservationResidual:
    """Pointwise residuals of the 3+1 energy and momentum equations and their norms.

    Attributes
    ----------
    energy : (*grid) ndarray
        Left side minus right side of the energy equation (the module docstring) at each point;
        NaN within ``radius`` points of a face (no centred stencil fits there).
    momentum : (3, *grid) ndarray
        The same for the three momentum equations (covariant index j); NaN on the boundary.
    energy_scale, momentum_scale : (*grid), (3, *grid) ndarray
        Absolute value of the largest term of each equation at each point (the time term, each
        d_i of the flux, each source term); NaN on the boundary.
    interior : (*grid) bool ndarray
        True where residuals are defined: interior points, whose whole stencil lies on the
        grid and on valid points (``valid_mask``).
    energy_norms, momentum_norms : ResidualNorms
        Norms over the points of ``interior``.
    order : int
        Order of the centred differences in space.
    radius : int
        Width of the boundary layer (stencil radius, order / 2) along every axis with extent.
    time_derivatives : str
        "supplied" (d_t E, d_t B, d_t gamma given: exact in time) or "levels" (centred
        difference of three time levels: second order in time).
    norm_partial : NormPartial
        The mergeable partial of the norms (components: energy, momentum x, y, z); combine it
        with those of other patches (:mod:`emsource.reductions`) for norms over their union.
    """

    energy: np.ndarray
    momentum: np.ndarray
    energy_scale: np.ndarray
    momentum_scale: np.ndarray
    interior: np.ndarray
    energy_norms: ResidualNorms
    momentum_norms: ResidualNorms
    order: int
    radius: int
    time_derivatives: str
    norm_partial: NormPartial = None

    @property
    def normalised_energy(self) -> np.ndarray:
        """energy / energy_scale pointwise (0 where every term vanishes; NaN on the boundary)."""
        return _ratio(self.energy, self.energy_scale)

    @property
    def normalised_momentum(self) -> np.ndarray:
        """momentum / momentum_scale pointwise (0 where every term vanishes; NaN on the boundary)."""
        return _ratio(self.momentum, self.momentum_scale)


def _ratio(residual, scale):
    with np.errstate(invalid="ignore", divide="ignore"):
        r = residual / scale
    return np.where(scale == 0, 0.0, r).astype(residual.dtype, copy=False)


# --------------------------------------------------------------------------- argument handling

def _padded(a, ncomp_axes, grid):
    """(ncomp, nx, ny, nz) view of a component-first array (a scalar gets a length-1 axis)."""
    if ncomp_axes == 0:
        a = a[None]
    return a[(Ellipsis,) + (None,) * (3 - len(grid))]


def _spacing(function, spacing, grid):
    return arg.grid_spacing(function, spacing, len(grid))


def _radii(function, order, grid):
    arg.choice(function, "order", order, arg.DIFFERENCE_ORDERS)
    r = stencil_radius(order)
    radii = []
    for axis, n in enumerate(grid):
        if n == 1:
            radii.append(0)  # no extent: the fields do not depend on this coordinate
        elif n <= 2 * r:
            raise ValueError(
                f"{function}: axis {axis} has {n} points; order {order} needs more than {2 * r} "
                "(a centred stencil of radius order/2 on each side) or exactly 1 (no extent)"
            )
        else:
            radii.append(r)
    return radii + [0] * (3 - len(grid))


def _interior_slices(radii, grid):
    return tuple(slice(r, n - r) for r, n in zip(radii, grid))


def _metric_like(function, name, value, grid):
    """A component-first (6 or 9, *grid) view of a symmetric tensor and its six indices."""
    a = arg.float_array(function, name, value)
    if a.shape == (6,) + grid:
        return a, arg.PACKED_METRIC_INDEX
    if a.shape == (3, 3) + grid:
        try:
            return np.reshape(a, (9,) + grid, copy=False), arg.FULL_METRIC_INDEX
        except ValueError:
            raise ValueError(
                f"{function}: {name} of shape {a.shape} cannot be seen as (9, ...) without a "
                "copy; pass the packed (6, ...) form"
            ) from None
    raise ValueError(
        f"{function}: {name} must have shape {(6,) + grid} (packed xx,xy,xz,yy,yz,zz) or "
        f"{(3, 3) + grid}, found {a.shape}"
    )


def _common_dtype(function, named: dict):
    """The one dtype of all ``named`` arrays (mixed dtypes are an error, nothing is cast)."""
    return arg.common_dtype(function, tuple(named), tuple(named.values()))


def _field(level, name):
    if isinstance(level, dict):
        return level[name]
    return getattr(level, name)


class _Prepared(NamedTuple):
    grid: tuple
    dtype: np.dtype
    views: dict
    gidx: np.ndarray
    kidx: np.ndarray
    radii: list
    inv_h: tuple
    coef: float


def _prepare(function, alpha, beta, gamma, K, E, B, charge_density, current_density,
             spacing, order, units, include_charges):
    check_unit_system(units)
    grid = arg.grid_of(function, "E", E, "component_first")
    named = {"alpha": arg.scalar(function, "alpha", alpha, grid),
             "beta": arg.vector(function, "beta", beta, grid, "component_first"),
             "E": arg.vector(function, "E", E, grid, "component_first"),
             "B": arg.vector(function, "B", B, grid, "component_first")}
    g, gidx = _metric_like(function, "gamma", gamma, grid)
    k, kidx = _metric_like(function, "K", K, grid)
    named["gamma"] = g
    named["K"] = k
    if (charge_density is None) != (current_density is None):
        raise ValueError(f"{function}: give both charge_density and current_density, or neither")
    if charge_density is not None and include_charges:
        named["charge_density"] = arg.scalar(function, "charge_density", charge_density, grid)
        named["current_density"] = arg.vector(function, "current_density", current_density, grid,
                                              "component_first")
    dtype = _common_dtype(function, named)
    if "charge_density" not in named:
        # Zeros in E's memory order, so that data stored z, y, x keep the kernels' fast path.
        named["charge_density"] = np.zeros_like(named["E"][0], dtype)
        named["current_density"] = np.zeros_like(named["E"], dtype)
    h = _spacing(function, spacing, grid)
    radii = _radii(function, order, grid)
    inv_h = tuple(1.0 / x for x in h) + (0.0,) * (3 - len(grid))
    views = {name: _padded(a, 0 if name in ("alpha", "charge_density") else 1, grid)
             for name, a in named.items()}
    return _Prepared(grid, dtype, views, np.array(gidx, np.int64), np.array(kidx, np.int64),
                     radii, inv_h, stress_energy_prefactor(units))


def new_work_array(grid, dtype=np.float64) -> np.ndarray:
    """A (16, *grid) scratch array for :func:`conservation_residual` (its ``work`` argument).

    A plain C-ordered array. The kernels are compiled per memory layout, and only with a layout
    that Numba knows to be C-contiguous do their loops over z vectorise. Padding the component
    stride by one cache line (against cache-set conflicts) does not pay: Numba types a padded
    array as general strided, and the first pass then runs 2x slower on 128^3 (measured, one
    thread: 180 ms padded against 92 ms; 96^3: 71 ms against 26 ms). Any other (16, *grid)
    array works too, through another, slower compiled specialisation.
    """
    grid = tuple(int(n) for n in grid)
    return np.empty((16,) + grid, dtype)


def _work_array(function, work, shape, dtype):
    """The (16, *grid) scratch array: a fresh one, or the caller's ``work`` after checks."""
    if work is None:
        return new_work_array(shape[1:], dtype)
    if not isinstance(work, np.ndarray) or work.shape != shape or work.dtype != dtype:
        found = (f"shape {work.shape} and dtype {work.dtype}" if isinstance(work, np.ndarray)
                 else type(work).__name__)
        raise ValueError(f"{function}: work must be an ndarray of shape {shape} and dtype {dtype}, "
                         f"found {found}")
    if not work.flags.writeable:
        raise ValueError(f"{function}: work is read-only")
    return work


#: Argument positions of the caller's arrays (fields, metric, lapse, shift, curvature, charges,
#: the time levels or supplied derivatives) in kernels.fluxes_and_rates and kernels.residuals.
_PASS_1_INPUTS = (0, 1, 2, 4, 5, 7, 9, 10, 11, 13, 14)
_PASS_2_INPUTS = (0, 1, 2, 4, 6, 7, 8, 9)


def _run_kernels(p: _Prepared, order, rate_mode, rate_arrays, inv_2dt, write_sources, work=None,
                 function="conservation_residual"):
    """The two kernel passes; returns (residual, scale, sources, partials, work).

    residual, scale, sources: (4, *grid); partials: per-row sums and maxima, see
    :func:`emsource.kernels.conservation.residuals`; work: the (16, nx, ny, nz) view of the
    scratch array.

    Data stored z, y, x (every input of pass 2, and ``work`` if given, C-ordered with the grid
    axes reversed, as a snapshot stored in that order and seen through transposed views) go to
    the kernels with the grid axes reversed, so that their strips run along x, the axis
    adjacent in memory; the outputs and a new ``work`` are then allocated in that order too
    (returned as (4, *grid) views). Anything else goes as it is.
    """
    v = p.views
    dt = p.dtype.type
    grid4 = v["alpha"].shape[1:]
    pass2_inputs = [v[k] for k in ("alpha", "beta", "gamma", "K", "E", "B", "charge_density",
                                   "current_density")]
    given = [] if work is None else [_work_array(function, work, (16,) + p.grid, p.dtype)]
    pad = (Ellipsis,) + (None,) * (3 - len(p.grid))
    reverse = (not _all_plane_lines(pass2_inputs + [w[pad] for w in given])
               and _all_plane_lines([_reversed(a) for a in pass2_inputs]
                                    + [_reversed(w[pad]) for w in given]))
    order_of = _reversed if reverse else (lambda a: a)
    stored = grid4[::-1] if reverse else grid4

    def new(ncomp):
        """A (ncomp, *grid) array, allocated in the order the kernels walk (4D view, result)."""
        a4 = order_of(np.empty((ncomp,) + stored, p.dtype))
        return a4, a4[(slice(None),) + tuple(slice(None) if n < len(p.grid) else 0
                                             for n in range(3))]

    work4 = given[0][pad] if given else new(16)[0]
    residual4, residual = new(4)
    scale4, scale = new(4)
    sources4, sources = new(4) if write_sources else (residual4, residual)
    rx, ry, rz = p.radii
    n0, rows, row_length = stored
    partials = np.empty((n0 * rows, 16), p.dtype)
    g_a, gidx_a, e_a, b_a, g_b, gidx_b, e_b, b_b = rate_arrays
    lines = _plane_lines(*(order_of(a) for a in pass2_inputs + [work4, residual4, scale4,
                                                                sources4]))
    # Array index step (i, j, k) to the next point along x, y, z in the arrays pass 2 gets
    # (0 along a direction without extent); the stencil radius along each array axis.
    along_line = lines[0].shape[2] == 1 and rows > 1
    step_y = (0, 0, row_length) if along_line else (0, 1, 0)
    steps = np.array([(0, 0, 1), step_y, (1, 0, 0)] if reverse
                     else [(1, 0, 0), step_y, (0, 0, 1)], dtype=np.int64)
    steps[[r == 0 for r in (rx, ry, rz)]] = 0
    r0, r1, r2 = (rz, ry, rx) if reverse else (rx, ry, rz)
    # The caller's arrays (positions _PASS_1_INPUTS, _PASS_2_INPUTS) are typed by dtype alone:
    # every mix of strided and contiguous inputs shares one compiled specialisation per pass.
    with kernel_call():
        call_sharing_layouts(kernels.fluxes_and_rates, tuple(
            order_of(a) if isinstance(a, np.ndarray) and a.ndim == 4 else a for a in (
                v["alpha"], v["beta"], v["gamma"], p.gidx, v["E"], v["B"], rate_mode, g_a,
                gidx_a, e_a, b_a, g_b, gidx_b, e_b, b_b, dt(inv_2dt), dt(p.coef), dt(0.5),
                work4)), _PASS_1_INPUTS)
        call_sharing_layouts(kernels.residuals, (
            *lines[:3], p.gidx, lines[3], p.kidx, *lines[4:9],
            first_derivative_weights(order, p.dtype), dt(p.inv_h[0]), dt(p.inv_h[1]),
            dt(p.inv_h[2]), steps, r0, r1, r2, dt(p.coef), dt(0.5), *lines[9:],
            bool(write_sources), partials, rows, row_length), _PASS_2_INPUTS)
    return residual, scale, (sources if write_sources else None), partials, work4


def _reversed(a):
    """(ncomp, nx, ny, nz) array seen as (ncomp, nz, ny, nx), or back (a view)."""
    return a.transpose(0, 3, 2, 1)


def _all_plane_lines(arrays):
    """Whether every (ncomp, n0, n1, n2) array can be seen as (ncomp, n0, 1, n1 * n2)."""
    return all(_plane_line(a) is not None for a in arrays)


def _plane_line(a):
    try:
        return np.reshape(a, a.shape[:2] + (1, a.shape[2] * a.shape[3]), copy=False)
    except ValueError:
        return None


def _plane_lines(*arrays):
    """The (ncomp, n0, n1, n2) ``arrays`` as (ncomp, n0, 1, n1 * n2) views when every one of
    them allows it (the last two axes C-ordered, as in any C-contiguous array), else as they
    are.

    Pass 2 (:func:`emsource.kernels.conservation.residuals`) then runs its strips along whole
    planes instead of single rows: 0.8 of the two passes' time at 128^3 (README "Speed"). The
    views share the arrays' memory (``copy=False``: a reshape that needs a copy raises).
    """
    lines = [_plane_line(a) for a in arrays]
    return arrays if any(line is None for line in lines) else tuple(lines)


def _norm_partial_of_columns(partials, count):
    """NormPartial (energy, momentum x, y, z) from the kernel's per-column sums and maxima."""
    return NormPartial.of_column_sums(count, partials[:, :4], partials[:, 8:12],
                                      partials[:, 4:8], partials[:, 12:16])


def _split_norms(partial):
    """(energy, momentum) ResidualNorms of a four-component NormPartial."""
    return partial.finalise(0), partial.finalise(slice(1, 4))


def _interior_points(valid, radii, grid):
    """Interior points whose centred first-derivative stencils (the cross of radius r along
    every axis with extent) lie on valid points."""
    radii = radii[: len(grid)]
    inner = _interior_slices(radii, grid)
    interior = np.zeros(grid, bool)
    interior[inner] = True
    if valid is None or valid.all():
        return interior
    shape = tuple(2 * r + 1 for r in radii)
    structure = np.zeros(shape, bool)
    centre = tuple(radii)
    for axis, r in enumerate(radii):
        line = list(centre)
        line[axis] = slice(None)
        structure[tuple(line)] = True
    return interior & ndimage.binary_erosion(valid, structure=structure, border_value=1)


def _raise_bad_points(function, grid, named_inputs, valid, metric, gidx, residual=None,
                      interior=None):
    """GridPointError at the first valid point with a non-finite input, a lapse that is not
    positive or a metric that is not positive definite; failing those, at the first interior
    point whose residual is not finite (an overflow). Runs only on the error path."""
    arg.check_points(function, grid, named_inputs, valid=valid, lapse="alpha",
                     metric=("gamma", metric, gidx))
    bad = interior & ~np.isfinite(residual).all(axis=0)
    first = tuple(int(i) for i in np.unravel_index(int(np.argmax(bad)), grid))
    raise GridPointError(function, int(bad.sum()), int(interior.sum()), first,
                         "the residual is not finite although the inputs there are (an overflow "
                         "of very large values?)")


# --------------------------------------------------------------------------- public functions

@renamed_keywords(mask="valid_mask")
def conservation_residual(alpha, beta, gamma, K, E, B, *, spacing, order=4, units="gaussian",
                          charge_density=None, current_density=None,
                          dt_E=None, dt_B=None, dt_gamma=None,
                          before=None, after=None, time_step=None,
                          valid_mask=None, check=True, work=None, patch=None, comm=None,
                          valid_ghosts=None) -> ConservationResidual:
    r"""Pointwise residuals of the 3+1 energy and momentum equations, with norms.

    Evaluates left minus right side of the two equations in the module docstring at every
    interior point, with centred differences of ``order`` in space for every d_i. The time
    terms come either from caller-supplied time derivatives (``dt_E``, ``dt_B``, ``dt_gamma``,
    exact in time, by the chain rule
    :math:`\partial_t(\sqrt\gamma\rho) = \sqrt\gamma(\tfrac12\gamma^{ij}\dot\gamma_{ij}\rho
    + \dot\rho)` and likewise for :math:`\sqrt\gamma S_j`), or from two more time levels
    (``before`` at t - time_step, ``after`` at t + time_step: a centred difference, second order
    in time). Exactly one of the two must be given.

    Parameters
    ----------
    alpha : (*grid) ndarray
        Lapse at time t.
    beta : (3, *grid) ndarray
        Shift beta^i.
    gamma, K : (6, *grid) or (3, 3, *grid) ndarray
        Spatial metric gamma_ij and extrinsic curvature K_ij (package sign convention).
    E, B : (3, *grid) ndarray
        Contravariant fields E^i, B^i measured by the normal observer.
    spacing : float or sequence of float
        Grid spacing, one value or one per axis, in code units.
    order : {2, 4, 6}
        Order of the centred differences. The boundary layer is order/2 points wide.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of the fields and charges.
    charge_density, current_density : (*grid), (3, *grid) ndarray, optional
        rho_e and j^i measured by the normal observer; both or neither (then zero).
    dt_E, dt_B : (3, *grid) ndarray, optional
        d_t E^i and d_t B^i at time t (for instance the caller's Maxwell right-hand sides).
    dt_gamma : (6, *grid) or (3, 3, *grid) ndarray, optional
        d_t gamma_ij at time t (zeros for a static metric).
    before, after : TimeLevelFields or mapping, optional
        Objects with ``gamma``, ``E`` and ``B`` at t - time_step and t + time_step.
    time_step : float, optional
        The step between the levels.
    valid_mask : (*grid) bool or integer ndarray, optional
        True (nonzero) where the data are valid. Residuals are evaluated only at interior
        points, whose whole stencil is valid (NaN elsewhere, ``interior`` False), and the norms
        are taken over those points; points outside ``valid_mask`` are never checked.
    check : bool
        Raise :class:`emsource.GridPointError` with the first bad valid grid index and what is
        wrong there (a non-finite input, a lapse that is not positive, a metric that is not
        positive definite) when a residual is not finite or a valid lapse is not positive.
    work : (16, *grid) ndarray, optional
        Scratch array in the inputs' dtype, reused between calls (an evolution loop then
        allocates only the outputs); it holds the fluxes and time terms afterwards. Make it with
        :func:`new_work_array` (C-ordered; any (16, *grid) array works, more slowly). For inputs
        stored z, y, x (transposed views), which the kernels walk with the axes reversed, give it
        the same order, ``np.empty((16, nz, ny, nx)).transpose(0, 3, 2, 1)``: a C-ordered one
        sends the call down the slower strided path.
    patch : emsource.patches.PatchGrid, optional
        Under MPI: the rank's patch; the arrays cover its local array, ghosts included.
    comm : mpi4py communicator, optional
        With ``patch``: the norms (and ``norm_partial``) are those of the whole grid, the same
        on every rank; the pointwise arrays stay local, and ``interior`` marks the owned
        interior points. An error on any rank is raised on all
        (:class:`emsource.patches.PatchError`).
    valid_ghosts : int, optional
        How many ghost layers hold valid data (default: all ``patch.ghost``); the stencils need
        order / 2. The layers beyond are not read.

    Returns
    -------
    ConservationResidual
        Residual and scale on the full grid (NaN outside the interior), ``interior``, norms.
        Grid axes of length 1 have no extent: no derivative is taken along them and they have
        no boundary layer, so 1D and 2D problems run on (n,), (nx, ny) or (nx, ny, 1) grids.

    References
    ----------
    See the module docstring (Gourgoulhon 2012, sec. 6; Baumgarte & Shapiro 2010).

    Examples
    --------
    A static uniform field in flat space conserves everything:

    >>> import numpy as np
    >>> from emsource.conservation import conservation_residual
    >>> n = (9, 9)
    >>> alpha = np.ones(n); beta = np.zeros((3,) + n); K = np.zeros((6,) + n)
    >>> gamma = np.zeros((6,) + n); gamma[[0, 3, 5]] = 1.0
    >>> E = np.zeros((3,) + n); E[0] = 2.0; B = np.zeros((3,) + n); B[2] = 1.0
    >>> zero = np.zeros((3,) + n)
    >>> r = conservation_residual(alpha, beta, gamma, K, E, B, spacing=0.1, order=4,
    ...                           dt_E=zero, dt_B=zero, dt_gamma=np.zeros((6,) + n))
    >>> r.energy_norms.max, float(r.momentum_norms.max.max())
    (0.0, 0.0)
    """
    function = "conservation_residual"
    if comm is not None:
        return _patch_residual(patch, comm, valid_ghosts, order, dict(
            alpha=alpha, beta=beta, gamma=gamma, K=K, E=E, B=B, charge_density=charge_density,
            current_density=current_density, dt_E=dt_E, dt_B=dt_B, dt_gamma=dt_gamma,
            valid_mask=valid_mask), dict(before=before, after=after), dict(
            spacing=spacing, units=units, time_step=time_step, check=check))
    patch_of(function, patch, None)
    p = _prepare(function, alpha, beta, gamma, K, E, B, charge_density, current_density,
                 spacing, order, units, True)
    supplied = [x is not None for x in (dt_E, dt_B, dt_gamma)]
    levels = [x is not None for x in (before, after, time_step)]
    if any(supplied) and any(levels):
        raise ValueError(f"{function}: give either dt_E, dt_B, dt_gamma or before, after, "
                         "time_step, not both")
    v = p.views
    if all(supplied):
        rate_mode = 2
        de = _padded(arg.vector(function, "dt_E", dt_E, p.grid, "component_first"), 1, p.grid)
        db = _padded(arg.vector(function, "dt_B", dt_B, p.grid, "component_first"), 1, p.grid)
        dg, dgidx = _metric_like(function, "dt_gamma", dt_gamma, p.grid)
        _common_dtype(function, {"E": E, "dt_E": dt_E, "dt_B": dt_B, "dt_gamma": dt_gamma})
        rates = (_padded(dg, 1, p.grid), np.array(dgidx, np.int64), de, db,
                 v["gamma"], p.gidx, v["E"], v["B"])
        inv_2dt = 0.0
        mode_name = "supplied"
    elif all(levels):
        rate_mode = 1
        if not (np.isfinite(time_step) and time_step > 0):
            raise ValueError(f"{function}: time_step must be positive and finite, found {time_step!r}")
        level_views = []
        for which, level in (("before", before), ("after", after)):
            g_l, gidx_l = _metric_like(function, f"{which}.gamma", _field(level, "gamma"), p.grid)
            e_l = arg.vector(function, f"{which}.E", _field(level, "E"), p.grid, "component_first")
            b_l = arg.vector(function, f"{which}.B", _field(level, "B"), p.grid, "component_first")
            _common_dtype(function, {"E": E, f"{which}.gamma": g_l, f"{which}.E": e_l,
                                        f"{which}.B": b_l})
            level_views += [_padded(g_l, 1, p.grid), np.array(gidx_l, np.int64),
                            _padded(e_l, 1, p.grid), _padded(b_l, 1, p.grid)]
        rates = tuple(level_views)
        inv_2dt = 0.5 / float(time_step)
        mode_name = "levels"
    else:
        raise ValueError(f"{function}: time derivatives needed: give all of dt_E, dt_B, dt_gamma "
                         "(exact in time) or all of before, after, time_step (three levels)")
    valid = None if valid_mask is None else arg.point_mask(function, valid_mask, p.grid)
    named_inputs = {"alpha": alpha, "beta": beta, "gamma": gamma, "K": K, "E": E, "B": B,
                    "charge_density": charge_density, "current_density": current_density,
                    "dt_E": dt_E, "dt_B": dt_B, "dt_gamma": dt_gamma}
    if check:
        with np.errstate(invalid="ignore"):
            lapse_ok = alpha > 0 if valid is None else (alpha > 0) | ~valid
        if not lapse_ok.all():
            _raise_bad_points(function, p.grid, named_inputs, valid, v["gamma"], p.gidx)
    residual, scale, _, partials, _ = _run_kernels(p, order, rate_mode, rates, inv_2dt, False, work)
    interior = _interior_points(valid, p.radii, p.grid)
    if valid is None or valid.all():
        inner = _interior_slices(p.radii, p.grid)
        count = int(np.prod([sl.stop - sl.start for sl in inner]))
        partial = _norm_partial_of_columns(partials, count)
    else:
        # Residuals next to invalid points would read invalid values in their stencils.
        residual[:, ~interior] = np.nan
        scale[:, ~interior] = np.nan
        partial = NormPartial.of_points(residual[:, interior], scale[:, interior])
    if check and not partial.finite:
        _raise_bad_points(function, p.grid, named_inputs, valid, v["gamma"], p.gidx,
                          residual, interior)
    energy_norms, momentum_norms = _split_norms(partial)
    return ConservationResidual(
        energy=residual[0], momentum=residual[1:], energy_scale=scale[0], momentum_scale=scale[1:],
        interior=interior,
        energy_norms=energy_norms, momentum_norms=momentum_norms,
        order=order, radius=stencil_radius(order), time_derivatives=mode_name,
        norm_partial=partial)


def _patch_residual(patch, comm, valid_ghosts, order, arrays, levels, options):
    """:func:`conservation_residual` on a rank's patch, with the norms of the whole grid.

    The kernels run on the owned box plus ``order / 2`` ghost layers (no more): the interior
    of that extent is then exactly the owned part of the whole grid's interior, so the
    kernels' own per-column partial sums are this rank's partial. With more ghost layers than
    that, the inputs are first copied without the extra layers.
    """
    function = "conservation_residual"

    def prepare(grid, extent):
        inputs = local_arrays(function, grid, extent, arrays)
        for which, level in levels.items():
            if level is not None:
                named = local_arrays(function, grid, extent,
                                     {f"{which}.{q}": _field(level, q) for q in ("gamma", "E", "B")})
                inputs[which] = {q: named[f"{which}.{q}"] for q in ("gamma", "E", "B")}
        return inputs

    partial, r, extent, grid = stencil_partial(
        function, comm, patch, valid_ghosts, order, prepare,
        lambda inputs: conservation_residual(**inputs, **options, order=order))
    energy_norms, momentum_norms = _split_norms(partial)
    if r is None:
        dtype = arrays["E"].dtype
        nan = np.full((4,) + grid.shape, np.nan, dtype)
        return ConservationResidual(
            energy=nan[0], momentum=nan[1:], energy_scale=nan[0].copy(),
            momentum_scale=nan[1:].copy(), interior=np.zeros(grid.shape, bool),
            energy_norms=energy_norms, momentum_norms=momentum_norms, order=order,
            radius=stencil_radius(order),
            time_derivatives="supplied" if arrays["dt_E"] is not None else "levels",
            norm_partial=partial)
    return ConservationResidual(
        energy=embedded(r.energy, grid, extent, np.nan),
        momentum=embedded(r.momentum, grid, extent, np.nan),
        energy_scale=embedded(r.energy_scale, grid, extent, np.nan),
        momentum_scale=embedded(r.momentum_scale, grid, extent, np.nan),
        interior=embedded(r.interior, grid, extent, False),
        energy_norms=energy_norms, momentum_norms=momentum_norms,
        order=order, radius=r.radius, time_derivatives=r.time_derivatives, norm_partial=partial)


@renamed_keywords(mask="valid_mask")
def level_residual(now, *, order=4, before=None, after=None, spacing=None, units=None,
                   include_charges=True, valid_mask=None, check=True, comm=None,
                   valid_ghosts=None) -> ConservationResidual:
    """:func:`conservation_residual` for :class:`emsource.exact.TimeLevelFields` objects.

    With ``before`` and ``after`` (time levels at now.t -+ the same step) the time terms come
    from the three levels; otherwise from ``now.dt_E``, ``now.dt_B``, ``now.dt_gamma``.
    ``spacing`` and ``units`` default to ``now.grid.spacing`` and ``now.units``.
    ``include_charges=False`` drops the charge and current terms (a diagnostic of their effect,
    not a physical option). ``valid_mask`` and ``check`` are passed on
    (``valid_mask=now.valid_mask`` skips an excised region). Under MPI ``now.grid`` is the
    rank's :class:`emsource.patches.PatchGrid` and ``comm``, ``valid_ghosts`` are passed on.
    """
    function = "level_residual"
    on_patch = {"comm": comm, "valid_ghosts": valid_ghosts,
                "patch": now.grid if isinstance(now.grid, PatchGrid) else None}
    spacing = now.grid.spacing if spacing is None else spacing
    units = now.units if units is None else units
    charges = {}
    if include_charges and now.charge_density is not None:
        charges = {"charge_density": now.charge_density, "current_density": now.current_density}
    if (before is None) != (after is None):
        raise ValueError(f"{function}: give both before and after, or neither")
    if before is not None:
        step = now.t - before.t
        if not np.isclose(after.t - now.t, step, rtol=1e-9, atol=0.0):
            raise ValueError(f"{function}: levels must be equally spaced in time, found "
                             f"t = {before.t}, {now.t}, {after.t}")
        return conservation_residual(now.alpha, now.beta, now.gamma, now.K, now.E, now.B,
                                     spacing=spacing, order=order, units=units, **charges,
                                     before=before, after=after, time_step=step,
                                     valid_mask=valid_mask, check=check, **on_patch)
    if now.dt_E is None or now.dt_B is None or now.dt_gamma is None:
        raise ValueError(f"{function}: the time level carries no dt_E/dt_B/dt_gamma; give before "
                         "and after")
    return conservation_residual(now.alpha, now.beta, now.gamma, now.K, now.E, now.B,
                                 spacing=spacing, order=order, units=units, **charges,
                                 dt_E=now.dt_E, dt_B=now.dt_B, dt_gamma=now.dt_gamma,
                                 valid_mask=valid_mask, check=check, **on_patch)


# --------------------------------------------------------------------------- global balance

def _trapezoid_weights(n, h):
    w = np.full(n, h)
    if n > 1:
        w[0] = w[-1] = 0.5 * h
    else:
        w[:] = 1.0  # an axis without extent: integrals are per unit length along it
    return w


def balance_partial(s, times, k, *, order=4, spacing=None, units=None, include_charges=True,
                    rows=None, check=True, valid_ghosts=None) -> BalancePartial:
    """The contribution of time level ``s`` (number ``k`` of the series at ``times``) to a balance.

    Sums the box integrals of the level over the box rows ``rows = (start, stop)`` along the
    first axis (default: the whole box; indices count box rows, 0 is the first interior row),
    with the face fluxes of the faces in those rows. The partials of all levels and of
    disjoint row ranges covering the box combine (:func:`emsource.reductions.combine`) into
    the partial of the whole balance; :meth:`BalancePartial.finalise` takes the time integrals.
    Arguments as for :func:`global_balance`; ``check`` raises :class:`emsource.GridPointError`
    at the first point with a non-finite input, a lapse that is not positive or a metric that is
    not positive definite.

    When ``s.grid`` is a :class:`emsource.patches.PatchGrid`, the level's arrays cover the
    patch's local array and the partial is that of the points the patch owns (``rows`` then
    counts box rows of the whole grid); ``valid_ghosts`` (default all) ghost layers are read.
    """
    function = "global_balance"
    spacing = s.grid.spacing if spacing is None else spacing
    units = s.units if units is None else units
    charges = (s.charge_density, s.current_density) if include_charges else (None, None)
    named = {"alpha": s.alpha, "beta": s.beta, "gamma": s.gamma, "K": s.K, "E": s.E, "B": s.B,
             "charge_density": charges[0], "current_density": charges[1]}
    patch = s.grid if isinstance(s.grid, PatchGrid) else None
    if patch is not None:
        arg.choice(function, "order", order, arg.DIFFERENCE_ORDERS)
        v = patch.require_ghosts(function, valid_ghosts, stencil_radius(order),
                                 f"order {order} (stencil radius {stencil_radius(order)})")
        extent = patch.valid_extent(v)
        named = local_arrays(function, patch, extent, named)
        if without_interior(patch, extent, stencil_radius(order)):
            zero = Sum.zero(4)  # the patch owns points of the boundary layer only
            return BalancePartial.of_level(times, k, zero, zero, zero)
        global_shape = patch.global_shape
        array_start = [o + e.start for o, e in zip(patch.offset, extent)]
        owned = (patch.owned_start, patch.owned_stop)
    p = _prepare(function, named["alpha"], named["beta"], named["gamma"], named["K"], named["E"],
                 named["B"], named["charge_density"], named["current_density"],
                 spacing, order, units, include_charges)
    if patch is None:
        global_shape, array_start, owned = p.grid, (0,) * len(p.grid), ((0,) * 3, p.grid)
    v = p.views
    if check:
        try:
            arg.check_points(function, p.grid, named, lapse="alpha",
                             metric=("gamma", v["gamma"], p.gidx))
        except GridPointError as error:
            raise (relocated(error, patch, extent) if patch is not None else error) from None
    rates = (v["gamma"], p.gidx, v["E"], v["B"], v["gamma"], p.gidx, v["E"], v["B"])
    # Pass 1 in mode 0 leaves fluxes and densities in its work array; pass 2 the sources.
    _, _, src, _, work = _run_kernels(p, order, 0, rates, 0.0, True, function=function)
    src = src[(Ellipsis,) + (None,) * (3 - len(p.grid))]
    h = tuple(1.0 / x if x else 1.0 for x in p.inv_h)
    pad = (1,) * (3 - len(p.grid))
    global_shape, array_start = tuple(global_shape) + pad, tuple(array_start) + (0,) * len(pad)
    # The box of the whole grid (global indices lo..hi) and the part of it this piece sums.
    lo = list(p.radii)
    hi = [n - 1 - r for n, r in zip(global_shape, p.radii)]
    first = [max(lo[a], owned[0][a] if a < len(owned[0]) else 0) for a in range(3)]
    last = [min(hi[a], (owned[1][a] if a < len(owned[1]) else 1) - 1) for a in range(3)]
    nrows = hi[0] - lo[0] + 1
    start, stop = (0, nrows) if rows is None else (int(rows[0]), int(rows[1]))
    if not 0 <= start <= stop <= nrows:
        raise ValueError(f"{function}: rows must satisfy 0 <= start <= stop <= {nrows}, "
                         f"found {rows!r}")
    first[0], last[0] = max(first[0], lo[0] + start), min(last[0], lo[0] + stop - 1)
    last = [max(f - 1, l) for f, l in zip(first, last)]  # an empty range stays empty
    weights = [_trapezoid_weights(hi[a] - lo[a] + 1, h[a])[first[a] - lo[a]:last[a] - lo[a] + 1]
               for a in range(3)]
    box3 = tuple(slice(f - o, l + 1 - o) for f, l, o in zip(first, last, array_start))
    wx, wy, wz = weights
    cell = wx[:, None, None] * wy[None, :, None] * wz[None, None, :]
    density = work[12:16][(slice(None),) + box3].astype(np.float64)
    totals = Sum.of(density * cell, axis=(1, 2, 3))
    source = Sum.of(src[(slice(None),) + box3].astype(np.float64) * cell, axis=(1, 2, 3))
    terms = []
    for axis in range(3):
        if p.radii[axis] == 0:
            continue  # no faces across an axis without extent
        other = [w for a, w in enumerate(weights) if a != axis]
        area = other[0][:, None] * other[1][None, :]
        # Flux components across faces normal to ``axis``: F^axis (energy), M^axis_j.
        comps = [axis] + [3 + 3 * axis + j for j in range(3)]
        for index, sign in ((hi[axis], 1.0), (lo[axis], -1.0)):
            if not first[axis] <= index <= last[axis]:
                continue  # this face lies in another piece
            face = list(box3)
            face[axis] = index - array_start[axis]
            f = work[comps][(slice(None),) + tuple(face)].astype(np.float64)
            terms.append((sign * f * area).reshape(4, -1))
    outflow = Sum.of(np.concatenate(terms, axis=1), axis=1) if terms else Sum.zero(4)
    return BalancePartial.of_level(times, k, totals, outflow, source)


@renamed_keywords(slices="levels")
def global_balance(levels, *, order=4, spacing=None, units=None, include_charges=True,
                   check=True, comm=None, valid_ghosts=None) -> GlobalBalance:
    r"""Change of the total energy and momentum in a box against face fluxes and volume sources.

    Integrates the two conservation laws of the module docstring over the box of interior points
    (where the source terms, which contain derivatives of the metric, are defined) and over time:

    .. math::

        Q(t_1) - Q(t_0) + \int_{t_0}^{t_1}\!\oint \mathcal F^i\, dA_i\, dt
          - \int_{t_0}^{t_1}\!\int \Sigma\, d^3x\, dt = 0,

    with :math:`Q = \int\sqrt\gamma\rho\,d^3x` (energy) or :math:`\int\sqrt\gamma S_j\,d^3x`,
    fluxes :math:`\mathcal F^i` and volume sources :math:`\Sigma` (right-hand sides) as in the equations. Space and
    time integrals use the trapezoid rule (common practice), so the mismatch of smooth exact data
    falls as the second power of the spacing and of the time step; on a periodic direction it
    falls much faster. Axes of length 1 count as unit length.

    Parameters
    ----------
    levels : sequence of TimeLevelFields
        At least two time levels in increasing time (any spacing in time), on one grid.
    order : {2, 4, 6}
        Order of the centred differences for the metric derivatives in the sources.
    spacing, units : optional
        Default to the first level's ``grid.spacing`` and ``units``.
    include_charges : bool
        Include the charge and current (Lorentz-force) terms.
    check : bool
        Raise :class:`emsource.GridPointError` at the first point of a level with a non-finite
        input, a lapse that is not positive or a metric that is not positive definite.

    comm : mpi4py communicator, optional
        Under MPI: the levels' grids are the rank's :class:`emsource.patches.PatchGrid` and
        their arrays cover its local array; every rank gets the balance of the whole grid (an
        error on any rank is raised on all, :class:`emsource.patches.PatchError`).
    valid_ghosts : int, optional
        Ghost layers holding valid data (default all); the sources' stencils need order / 2.

    Returns
    -------
    GlobalBalance
        The mismatch of each law is reported absolute and relative to the largest field
        energy in the box over the levels (:class:`emsource.reductions.BalanceTerms`).
        Computed as a sum of :func:`balance_partial` over the levels (and the ranks).

    References
    ----------
    Gauss's theorem applied to the flux-conservative equations (module docstring); Gourgoulhon
    (2012), sec. 6. Trapezoid rule: common practice.
    """
    function = "global_balance"
    levels = list(levels)
    if len(levels) < 2:
        raise ValueError(f"{function}: need at least two time levels, found {len(levels)}")
    times = np.array([s.t for s in levels], dtype=float)
    if not np.all(np.diff(times) > 0):
        raise ValueError(f"{function}: the times of the levels must increase, found {times}")
    first = levels[0]
    spacing = first.grid.spacing if spacing is None else spacing
    units = first.units if units is None else units
    patch = patch_of(function, first.grid, comm)

    def compute():
        if patch is not None:
            for s in levels:
                require_patch(function, s.grid)
                if s.grid != patch:
                    raise ValueError(f"{function}: every level must be on the same patch; "
                                     f"found {s.grid} and {patch}")
        return combine_all(balance_partial(s, times, k, order=order, spacing=spacing,
                                           units=units, include_charges=include_charges,
                                           check=check, valid_ghosts=valid_ghosts)
                           for k, s in enumerate(levels))

    partial = compute() if comm is None else global_partial(function, comm, patch, compute)
    grid = patch.global_shape if patch is not None else first.E.shape[1:]
    r = stencil_radius(order)
    box = tuple(slice(r, n - r) if n > 1 else slice(0, 1) for n in grid)
    return partial.finalise(box)


#: ``slice_residual`` is the deprecated name of :func:`level_residual`.
__getattr__ = module_aliases(__name__, {"slice_residual": ("level_residual", level_residual)})
