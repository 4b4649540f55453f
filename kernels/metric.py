"""Point functions of spatial-metric algebra shared by the kernels (inlined where called)."""

from __future__ import annotations

from ._compile import point_function

__all__ = ["inverse_metric", "lower_index"]


@point_function
def inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, one):
    """Inverse metric gamma^ij, packed (xx, xy, xz, yy, yz, zz), and det gamma, by cofactors.

    ``one`` is 1 in the data's dtype (so float32 stays float32).
    """
    cxx = gyy * gzz - gyz * gyz
    cxy = gxz * gyz - gxy * gzz
    cxz = gxy * gyz - gxz * gyy
    cyy = gxx * gzz - gxz * gxz
    cyz = gxy * gxz - gxx * gyz
    czz = gxx * gyy - gxy * gxy
    det = gxx * cxx + gxy * cxy + gxz * cxz
    inv_det = one / det
    return cxx * inv_det, cxy * inv_det, cxz * inv_det, cyy * inv_det, cyz * inv_det, czz * inv_det, det


@point_function
def lower_index(gxx, gxy, gxz, gyy, gyz, gzz, vx, vy, vz):
    """v_i = gamma_ij v^j (or, given the inverse metric, v^i = gamma^ij v_j)."""
    return (gxx * vx + gxy * vy + gxz * vz,
            gxy * vx + gyy * vy + gyz * vz,
            gxz * vx + gyz * vy + gzz * vz)
