"""The electromagnetic point physics shared by every kernel (inlined where called).

One place computes, at one grid point, what the source, flux, conservation and constraint
kernels need (signature -+++, normal observer n^a, coef = 1/(4 pi) in Gaussian units, 1 in
Heaviside-Lorentz units, sg = sqrt(gamma) = sqrt(det gamma_ij)):

    E^i, E_i, B^i, B_i          from the input form (:func:`fields_both_indices`)
    rho  = coef/2 (E^2 + B^2),  E^2 = E^i E_i
    S_i  = coef sg [ijk] E^j B^k              (epsilon_ijk = sg [ijk])
    S^i  = coef [ijk] E_j B_k / sg            (epsilon^ijk = [ijk] / sg)
    S_ij = coef ( -E_i E_j - B_i B_j + 1/2 gamma_ij (E^2 + B^2) )
    F^i   = sg (alpha S^i   - beta^i rho)      energy flux density
    M^i_j = sg (alpha S^i_j - beta^i S_j)      momentum flux density,
    S^i_j = coef ( -E^i E_j - B^i B_j + 1/2 delta^i_j (E^2 + B^2) )

References: E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2 and 6.1-6.3;
T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 5.2.

Input forms. A form is a way a code stores the fields; each has an integer code, a converter
in :func:`fields_both_indices` that turns the stored components into E^i, E_i, B^i, B_i, and a
row in :mod:`emsource.input_forms` (the public names and the arguments it takes). Adding a form
costs one code here, one branch and point function there, one table row, one reference test.

Scalars are passed in the data's dtype (``one``, ``half``, ``coef``) so that float32 stays
float32. Every function here is a :func:`~emsource.kernels._compile.point_function`: LLVM sees
one straight-line body per point, and what a caller does not use is removed.
"""

from __future__ import annotations

import math

from ._compile import point_function
from .metric import contract_index, inverse_metric
from .point_checks import is_finite

__all__ = [
    "FORM_CONTRAVARIANT", "FORM_COVARIANT", "FORM_DENSITIZED", "fields_both_indices", "sqrt_determinant",
    "projections", "momentum_upper", "energy_momentum_fluxes", "point_is_valid", "sources_bound",
    "point_underflows",
]

#: E^i, B^i: the fields measured by the normal observer, contravariant (the default form).
FORM_CONTRAVARIANT = 0
#: E_i, B_i: the same fields with the index lowered by gamma_ij.
FORM_COVARIANT = 1
#: sqrt(gamma) E^i, sqrt(gamma) B^i: the contravariant fields densitized with the physical metric.
FORM_DENSITIZED = 2


@point_function
def fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                        f1, f2, f3, f4, f5, f6, one):
    """(E^i, E_i, B^i, B_i) from the stored components ``f1..f6`` of input form ``form``.

    FORM_CONTRAVARIANT: f = (E^x, E^y, E^z, B^x, B^y, B^z), lowered with gamma_ij.
    FORM_COVARIANT: f = (E_x, E_y, E_z, B_x, B_y, B_z), raised with gamma^ij (from the factors).
    FORM_DENSITIZED: f = sg (E^x, E^y, E^z, B^x, B^y, B^z), divided by sg = sqrt(det gamma_ij)
    (the caller's sg from the same pivots, so LLVM computes it once), then lowered.
    One assignment per branch and one return. LLVM does not unswitch a vectorised loop on a
    run-time ``form`` (it computed part of the densitized branch in every form's loop): the
    vectorised drivers pass it as a constant (:mod:`~emsource.kernels.sources`, one driver
    per form).
    """
    if form == FORM_COVARIANT:
        ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
        exl, eyl, ezl = f1, f2, f3
        bxl, byl, bzl = f4, f5, f6
        ex, ey, ez = contract_index(ixx, ixy, ixz, iyy, iyz, izz, f1, f2, f3)
        bx, by, bz = contract_index(ixx, ixy, ixz, iyy, iyz, izz, f4, f5, f6)
    elif form == FORM_DENSITIZED:
        undensitize = one / sqrt_determinant(d1, d2, d3)
        ex, ey, ez = f1 * undensitize, f2 * undensitize, f3 * undensitize
        bx, by, bz = f4 * undensitize, f5 * undensitize, f6 * undensitize
        exl, eyl, ezl = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, ex, ey, ez)
        bxl, byl, bzl = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, bx, by, bz)
    else:
        ex, ey, ez = f1, f2, f3
        bx, by, bz = f4, f5, f6
        exl, eyl, ezl = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3)
        bxl, byl, bzl = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, f4, f5, f6)
    return ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl


@point_function
def sqrt_determinant(d1, d2, d3):
    """sg = sqrt(det gamma) from the pivots of :func:`~emsource.kernels.metric.metric_factors`.

    Two square roots: the product d1 d2 d3 ~ s^3 of a metric of scale s leaves the
    floating-point range long before sg ~ s^1.5 and the outputs do (float32: s = 2^43), while
    d1 d2 ~ s^2 stays inside it wherever the outputs do; a third root would cost a few percent
    of the source kernel in float64 (measured), for no range gained.
    """
    return math.sqrt(d1 * d2) * math.sqrt(d3)


@point_function
def projections(gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half):
    """rho, S_i, S_ij (packed) and E^2 + B^2 at one point (see the module docstring)."""
    ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl = fields
    energy2 = ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl
    rho = coef * half * energy2
    poynting = coef * sg
    sx = poynting * (ey * bz - ez * by)
    sy = poynting * (ez * bx - ex * bz)
    sz = poynting * (ex * by - ey * bx)
    pressure = half * energy2
    sxx = coef * (pressure * gxx - exl * exl - bxl * bxl)
    sxy = coef * (pressure * gxy - exl * eyl - bxl * byl)
    sxz = coef * (pressure * gxz - exl * ezl - bxl * bzl)
    syy = coef * (pressure * gyy - eyl * eyl - byl * byl)
    syz = coef * (pressure * gyz - eyl * ezl - byl * bzl)
    szz = coef * (pressure * gzz - ezl * ezl - bzl * bzl)
    return rho, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, energy2


@point_function
def momentum_upper(sg, fields, coef):
    """S^i = coef [ijk] E_j B_k / sg (contravariant momentum density)."""
    _ex, _ey, _ez, exl, eyl, ezl, _bx, _by, _bz, bxl, byl, bzl = fields
    c = coef / sg
    return (c * (eyl * bzl - ezl * byl),
            c * (ezl * bxl - exl * bzl),
            c * (exl * byl - eyl * bxl))


@point_function
def energy_momentum_fluxes(alpha, b1, b2, b3, sg, rho, sx, sy, sz, ux, uy, uz, fields, energy2,
                           coef, half):
    """F^i (3) and M^i_j (9, row i, column j) at one point.

    F^i = sg (alpha S^i - beta^i rho),  M^i_j = sg (alpha S^i_j - beta^i S_j); ``ux..uz`` is
    S^i from :func:`momentum_upper`, ``sx..sz`` is S_i.
    """
    ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl = fields
    pressure = half * energy2
    asg = alpha * sg
    ac = asg * coef
    return (sg * (alpha * ux - b1 * rho),
            sg * (alpha * uy - b2 * rho),
            sg * (alpha * uz - b3 * rho),
            ac * (pressure - ex * exl - bx * bxl) - sg * b1 * sx,
            ac * (-ex * eyl - bx * byl) - sg * b1 * sy,
            ac * (-ex * ezl - bx * bzl) - sg * b1 * sz,
            ac * (-ey * exl - by * bxl) - sg * b2 * sx,
            ac * (pressure - ey * eyl - by * byl) - sg * b2 * sy,
            ac * (-ey * ezl - by * bzl) - sg * b2 * sz,
            ac * (-ez * exl - bz * bxl) - sg * b3 * sx,
            ac * (-ez * eyl - bz * byl) - sg * b3 * sy,
            ac * (pressure - ez * ezl - bz * bzl) - sg * b3 * sz)


@point_function
def point_is_valid(d1, d2, d3, least_pivot, outputs_size):
    """The folded point check: gamma positive definite and the outputs finite.

    Positive definite: all three pivots of gamma = L D L^T above ``least_pivot`` (NaN fails).
    The caller passes ``pivot_floor * tr(gamma)`` (see :func:`emsource._arguments.pivot_floor`):
    0 accepts every metric whose rounded pivots are positive; a floor of c eps tr(gamma) also
    rejects exactly singular metrics whose last pivot rounds to a tiny positive number, and
    no metric with a condition number below 1 / (3 c eps), since every pivot of a positive
    definite gamma is at least its smallest eigenvalue, tr(gamma) / (3 kappa) or more.

    ``outputs_size`` is the sum of the outputs written at the point, or a bound of them
    (:func:`sources_bound`). A NaN or Inf anywhere in gamma, E or B reaches rho (each metric
    component multiplies a field component in E_i, B_i; 0 * Inf = NaN), so it is not finite
    for every non-finite input, and also when a finite input overflows (fields above ~1e154
    in float64, ~1e19 in float32). Bitwise & keeps the loop branch-free.
    """
    return ((d1 > least_pivot) & (d2 > least_pivot) & (d3 > least_pivot)
            & is_finite(outputs_size))


@point_function
def sources_bound(rho, trace, one):
    """rho (1 + tr gamma): finite exactly where rho is, and above every |S_i| and |S_ij| / 3.

    |E_i|^2 <= lambda_max E^2 (E_i = gamma_ij E^j), so |S_ij| <= 3 lambda_max rho and
    |S_i| <= sqrt(lambda_max) |S|_gamma <= sqrt(lambda_max) rho, with lambda_max <= tr gamma:
    one product stands for the ten outputs in the check (reading them back costs 12-15 % of
    the source kernel on strided views, measured). It errs on the safe side: outputs within
    a factor 3 tr(gamma) of the largest finite number count as overflowing.
    """
    return rho * (one + trace)


@point_function
def point_underflows(rho, fields, tiny):
    """True where rho is below the smallest normal number although a field is not zero.

    Fields of about 1e-19 in float32 (1e-154 in float64) square to subnormal numbers or zero:
    the energy density loses its digits without a sign. Whether that matters depends on the
    rest of the grid (a Gaussian tail is harmless): the caller decides from the count.
    """
    ex, ey, ez, _exl, _eyl, _ezl, bx, by, bz, _bxl, _byl, _bzl = fields
    size = abs(ex) + abs(ey) + abs(ez) + abs(bx) + abs(by) + abs(bz)
    return (rho < tiny) & (size > 0)
