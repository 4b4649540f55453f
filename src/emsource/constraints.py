"""The ADM Hamiltonian and momentum constraints, with the electromagnetic field as their source.

    H   = R + K^2 - K_ij K^ij - 16 pi rho
    M_i = D_j K^j_i - D_i K - 8 pi S_i

in geometrized units (G = c = 1), with rho and S_i of the electromagnetic field from
:func:`emsource.adm_sources` in the unit system named by ``units``, or zero (vacuum) when no
field is given. R is the Ricci scalar of gamma_ij and D its covariant derivative; both come from
centred finite differences of order 2, 4 or 6 (:mod:`emsource.kernels.stencils`).

References: E. Gourgoulhon, 3+1 Formalism in General Relativity, Lecture Notes in Physics 846
(2012), ch. 4 (constraint equations; section from memory); T. W. Baumgarte and S. L. Shapiro,
Numerical Relativity (2010), ch. 2 (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from scipy import ndimage

from . import _arguments as args
from ._deprecated_names import renamed_attribute, renamed_function, renamed_keywords
from ._threading import kernel_call
from .kernels._compile import call_sharing_layouts
from .kernels.constraints import adm_constraints_grid
from .kernels.norms import masked_norm_columns
from .kernels.stencils import first_derivative_weights, second_derivative_weights, stencil_radius
from .patches import embedded, local_arrays, patch_of, stencil_partial
from .reductions import NormPartial, ResidualNorms
from .sources import adm_sources
from .unit_systems import check_unit_system

__all__ = ["ConstraintResiduals", "ResidualNorms", "adm_constraints", "interior_points",
           "norm_partial", "residual_norms"]


@renamed_keywords(mask="valid_mask")
def interior_points(valid_mask, order):
    """Interior points: those whose whole stencil of ``order`` lies inside the grid and on
    ``valid_mask``.

    The stencils of :mod:`emsource.kernels.stencils` reach (i + m, j, k) for first and second
    derivatives and (i + m, j + q, k) (and the other pairs of axes) for mixed ones, |m|, |q| <= r
    with r = order / 2: the three coordinate planes of the cube of radius r around the point.
    A point is interior when all of them are on the grid and valid (True).

    Parameters
    ----------
    valid_mask : (nx, ny, nz) bool ndarray
        True where the data are valid.
    order : {2, 4, 6}

    Returns
    -------
    (nx, ny, nz) bool ndarray
    """
    r = stencil_radius(order)
    valid_mask = np.asarray(valid_mask, dtype=bool)
    if valid_mask.all():
        # The erosion of an all-valid grid is the box r points in from every face, exactly
        # (scipy's erosion took 12 ms at 64^3, measured, almost the kernel's time).
        interior = np.zeros(valid_mask.shape, dtype=bool)
        interior[tuple(slice(r, n - r) for n in valid_mask.shape)] = True
        return interior
    offsets = np.indices((2 * r + 1,) * 3) - r
    structure = (offsets == 0).any(axis=0)
    return ndimage.binary_erosion(valid_mask, structure=structure, border_value=0)


evaluable_points = renamed_function("evaluable_points", interior_points)


@renamed_keywords(evaluated="interior")
def norm_partial(hamiltonian, momentum, hamiltonian_scale, momentum_scale, interior) -> NormPartial:
    """The mergeable :class:`NormPartial` (components H, M_x, M_y, M_z) over ``interior``.

    One pass of :func:`emsource.kernels.norms.masked_norm_columns` (per-column float64 sums,
    then the columns in extended precision: relative error at most n_z eps of each sum).

    Parameters
    ----------
    hamiltonian, hamiltonian_scale : (nx, ny, nz) arrays
    momentum, momentum_scale : (3, nx, ny, nz) arrays
    interior : (nx, ny, nz) bool array
        The points summed.
    """
    function = "norm_partial"
    mask = np.asarray(interior)
    if mask.ndim != 3 or mask.dtype != np.bool_:
        raise ValueError(f"{function}: interior must be a 3-D bool array, found {mask.dtype} of "
                         f"shape {mask.shape}")
    grid = mask.shape
    fields = []
    for name, value, shape in (("hamiltonian", hamiltonian, grid),
                               ("momentum", momentum, (3,) + grid),
                               ("hamiltonian_scale", hamiltonian_scale, grid),
                               ("momentum_scale", momentum_scale, (3,) + grid)):
        value = np.asarray(value, dtype=np.float64)
        if value.shape != shape:
            raise ValueError(f"{function}: {name} must have shape {shape} (interior's grid), "
                             f"found {value.shape}")
        fields.append(value)
    partials = np.empty((grid[0] * grid[1], 1 + 4 * 4))
    with kernel_call():
        call_sharing_layouts(masked_norm_columns, (*fields, mask.view(np.uint8), partials),
                             inputs=(0, 1, 2, 3, 4))
    return NormPartial.of_column_sums(int(partials[:, 0].sum()), partials[:, 1:5],
                                      partials[:, 5:9], partials[:, 9:13], partials[:, 13:17])


@renamed_keywords(evaluated="interior")
def residual_norms(residual, scale, interior) -> ResidualNorms:
    """:class:`ResidualNorms` of ``residual`` ((*grid) or (3, *grid)) over ``interior``.

    Normalised norms are NaN where the scale is zero, and every norm is NaN without points.
    """
    vector = residual.ndim == interior.ndim + 1
    r = residual[:, interior] if vector else residual[interior][None]
    s = scale[:, interior] if vector else scale[interior][None]
    return NormPartial.of_points(r, s).finalise(slice(None) if vector else 0, zero_scale=math.nan)


@dataclass(frozen=True)
class ConstraintResiduals:
    """Hamiltonian and momentum constraint residuals on a grid.

    Attributes
    ----------
    hamiltonian : (nx, ny, nz) float64 ndarray
        H at interior points, NaN elsewhere.
    momentum : (3, nx, ny, nz) float64 ndarray
        M_i (covariant) at interior points, NaN elsewhere.
    hamiltonian_scale, momentum_scale : ndarray
        max(|R|, K^2, K_ij K^ij, 16 pi |rho|) and max(|D_j K^j_i|, |D_i K|, 8 pi |S_i|): the
        largest term of each equation at each point, NaN where not interior.
    interior : (nx, ny, nz) bool ndarray
        Where the residuals were computed: points whose whole stencil is valid (see
        :func:`interior_points`).
    hamiltonian_norms, momentum_norms : ResidualNorms
        Norms over the interior points (normalised norms NaN where the scale is zero).
    norm_partial : NormPartial
        Their mergeable partial (components H, M_x, M_y, M_z): combine it with those of other
        patches (:mod:`emsource.reductions`) for the norms over the union.
    order : int
    units : str or None
        Unit system of the electromagnetic sources, None for vacuum.
    global_partial : NormPartial or None
        Under MPI, the partial of the whole grid (all ranks) from which the norms and
        ``norm_partial`` are taken; None: this grid's interior points.
    """

    hamiltonian: np.ndarray
    momentum: np.ndarray
    hamiltonian_scale: np.ndarray
    momentum_scale: np.ndarray
    interior: np.ndarray
    order: int
    units: str | None
    global_partial: NormPartial | None = field(default=None, repr=False, compare=False)

    evaluated = renamed_attribute("evaluated", "interior")

    # The norms are computed on first access (a caller that keeps only the fields, such as
    # the Dask blocks, which take the norms of the trimmed block, pays nothing for them).
    @cached_property
    def norm_partial(self) -> NormPartial:
        if self.global_partial is not None:
            return self.global_partial
        return norm_partial(self.hamiltonian, self.momentum, self.hamiltonian_scale,
                            self.momentum_scale, self.interior)

    @cached_property
    def hamiltonian_norms(self) -> ResidualNorms:
        return self.norm_partial.finalise(0, zero_scale=math.nan)

    @cached_property
    def momentum_norms(self) -> ResidualNorms:
        return self.norm_partial.finalise(slice(1, 4), zero_scale=math.nan)


@renamed_keywords(mask="valid_mask")
def adm_constraints(gamma, K, E=None, B=None, *, spacing, order=4, units="gaussian",
                    field_index="upper", valid_mask=None, check=True, patch=None, comm=None,
                    valid_ghosts=None) -> ConstraintResiduals:
    """Hamiltonian and momentum constraints with electromagnetic sources, by finite differences.

    Implements H = R + K^2 - K_ij K^ij - 16 pi rho and M_i = D_j K^j_i - D_i K - 8 pi S_i
    (Gourgoulhon 2012, ch. 4, from memory), rho and S_i from :func:`emsource.adm_sources` (zero when
    ``E`` and ``B`` are None), on interior points (whole stencil on valid points).

    Parameters
    ----------
    gamma : (6, nx, ny, nz) ndarray
        Spatial metric gamma_ij, packed (xx, xy, xz, yy, yz, zz). float32 or float64; the
        residuals are computed in float64 (second differences in float32 carry a round-off
        of ~1e-7 / h^2, which would hide any truncation error).
    K : (6, nx, ny, nz) ndarray
        Extrinsic curvature K_ij, packed, sign convention K = -nabla_a n^a.
    E, B : (3, nx, ny, nz) ndarray or None
        Electric and magnetic field of the normal observer; both None for vacuum.
    spacing : float or sequence of 3 floats
        Grid spacing along (x, y, z), code units.
    order : {2, 4, 6}
        Order of the centred differences.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of E and B.
    field_index : {"upper", "lower", "densitized"}
        What E and B hold (:mod:`emsource.input_forms`).
    valid_mask : (nx, ny, nz) bool or integer ndarray or None
        True (nonzero) where the data are valid (False inside an excised region). None: all
        valid. Points outside it are neither checked nor used.
    check : bool
        Check that the data are finite and gamma positive definite wherever ``valid_mask`` is
        True.
    patch, comm : emsource.patches.PatchGrid and mpi4py communicator, optional
        Under MPI: the arrays cover the rank's local array (ghosts included); the norms are
        those of the whole grid on every rank, the pointwise residuals stay local (NaN outside
        the owned interior points). An error on any rank is raised on all
        (:class:`emsource.patches.PatchError`).
    valid_ghosts : int, optional
        Ghost layers holding valid data (default all ``patch.ghost``); order / 2 are needed.

    Returns
    -------
    ConstraintResiduals

    Raises
    ------
    TypeError, ValueError
        With the argument, the expected and found shape, dtype or value.
    emsource.GridPointError
        With ``check``: the first valid grid index where an input is not finite or gamma is not
        positive definite, and what is wrong there.

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> from emsource.exact import kerr_newman
    >>> grid = UniformGrid.from_bounds((3, 1, 0.5), (4, 2, 1.5), (12, 12, 12))
    >>> d = kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    >>> res = adm_constraints(d.gamma, d.K, d.E, d.B, spacing=grid.spacing, order=4)
    >>> bool(res.hamiltonian_norms.normalised_l2 < 1e-4)
    True
    """
    function = "adm_constraints"
    if comm is not None:
        return _patch_constraints(patch, comm, valid_ghosts, order, dict(
            gamma=gamma, K=K, E=E, B=B, valid_mask=valid_mask), dict(
            spacing=spacing, units=units, field_index=field_index, check=check))
    patch_of(function, patch, None)
    args.choice(function, "order", order, args.DIFFERENCE_ORDERS)
    args.choice(function, "field_index", field_index, args.FIELD_INDICES)
    gamma = args.float_array(function, "gamma", gamma)
    K = args.float_array(function, "K", K)
    if gamma.ndim != 4 or gamma.shape[0] != 6:
        raise ValueError(f"{function}: gamma must have shape (6, nx, ny, nz) (packed, 3D grid), "
                         f"found {gamma.shape}")
    grid = gamma.shape[1:]
    if K.shape != gamma.shape:
        raise ValueError(f"{function}: K must have shape {gamma.shape}, found {K.shape}")
    if (E is None) != (B is None):
        raise ValueError(f"{function}: give both E and B (electromagnetic sources) or neither "
                         f"(vacuum); found E {'None' if E is None else 'given'}, "
                         f"B {'None' if B is None else 'given'}")
    vacuum = E is None
    if not vacuum:
        check_unit_system(units)
        E = args.vector(function, "E", E, grid, "component_first")
        B = args.vector(function, "B", B, grid, "component_first")
    spacing = np.array(args.grid_spacing(function, spacing, 3))
    radius = stencil_radius(order)
    if min(grid) < 2 * radius + 1:
        raise ValueError(f"{function}: every axis needs at least {2 * radius + 1} points for order "
                         f"{order}, found grid {grid}")
    valid = args.point_mask(function, valid_mask, grid)

    gamma64 = np.ascontiguousarray(gamma, dtype=np.float64)
    K64 = np.ascontiguousarray(K, dtype=np.float64)
    if check:
        named = {"gamma": gamma64, "K": K64}
        if not vacuum:
            named.update(E=E, B=B)
        args.check_points(function, grid, named, valid=valid,
                          metric=("gamma", gamma64, args.PACKED_METRIC_INDEX))

    if vacuum:
        rho = np.zeros(grid)
        S_i = np.zeros((3,) + grid)
    else:
        src = adm_sources(gamma64, np.ascontiguousarray(E, dtype=np.float64),
                          np.ascontiguousarray(B, dtype=np.float64), units=units,
                          field_index=field_index, check=False)
        rho = np.ascontiguousarray(src.rho)
        S_i = np.ascontiguousarray(src.S_i)

    interior = interior_points(valid, order)
    H = np.empty(grid)
    M = np.empty((3,) + grid)
    H_scale = np.empty(grid)
    M_scale = np.empty((3,) + grid)
    with kernel_call():
        adm_constraints_grid(gamma64, K64, rho, S_i, interior.view(np.uint8),
                             first_derivative_weights(order), second_derivative_weights(order),
                             1.0 / spacing, 16.0 * math.pi, 8.0 * math.pi,
                             H, M, H_scale, M_scale)
    return ConstraintResiduals(hamiltonian=H, momentum=M, hamiltonian_scale=H_scale,
                               momentum_scale=M_scale, interior=interior, order=order,
                               units=None if vacuum else units)


def _patch_constraints(patch, comm, valid_ghosts, order, arrays, options):
    """:func:`adm_constraints` on a rank's patch, with the norms of the whole grid.

    Runs on the owned box plus ``order / 2`` ghost layers: the interior points of that extent
    are exactly the owned part of the whole grid's interior points.
    """
    function = "adm_constraints"
    partial, r, extent, grid = stencil_partial(
        function, comm, patch, valid_ghosts, order,
        lambda grid, extent: local_arrays(function, grid, extent, arrays),
        lambda inputs: adm_constraints(**inputs, **options, order=order))
    if r is None:
        nan = np.full((4,) + grid.shape, np.nan)
        return ConstraintResiduals(
            hamiltonian=nan[0], momentum=nan[1:], hamiltonian_scale=nan[0].copy(),
            momentum_scale=nan[1:].copy(), interior=np.zeros(grid.shape, bool), order=order,
            units=None if arrays["E"] is None else options["units"], global_partial=partial)
    return ConstraintResiduals(
        hamiltonian=embedded(r.hamiltonian, grid, extent, np.nan),
        momentum=embedded(r.momentum, grid, extent, np.nan),
        hamiltonian_scale=embedded(r.hamiltonian_scale, grid, extent, np.nan),
        momentum_scale=embedded(r.momentum_scale, grid, extent, np.nan),
        interior=embedded(r.interior, grid, extent, False), order=order, units=r.units,
        global_partial=partial)
