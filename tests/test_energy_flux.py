"""emsource.energy_flux.energy_fluxes against a plain-NumPy reference, and its bad-input errors.

Reference (float64 NumPy, point by point through einsum, det and inv):

    E_i = gamma_ij E^j,  rho = c/2 (E^i E_i + B^i B_i),  S_i = c sqrt(gamma) [ijk] E^j B^k
    (the conventions page; Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2),
    energy = sqrt(gamma) rho,  momentum = sqrt(gamma) S_i,
    F^i = sqrt(gamma) (alpha gamma^ij S_j - beta^i rho)
    (the energy flux of d_t(sqrt(gamma) rho) + d_i F^i = sources, Gourgoulhon 2012, sec. 6.3).

Tolerances, per point in metric norms (|w|_g = sqrt(gamma^ij w_i w_j), |v|_g = sqrt(gamma_ij
v^i v^j)), with the bounds derived in test_metric_conditioning.py (eps of the data's dtype,
kappa the condition number of gamma, sg = sqrt(gamma)):
  energy:   |d(sg rho)|   <= (C_RHO + 9 + 1) eps kappa sg rho      (sqrt(det) 9 eps kappa + eps,
            one product)                                            -> 20 (lower form: 30)
  momentum: |d(sg S)|_g   <= (C_S + 9 + 1) eps kappa sg rho         -> 23 (lower form: 46)
  flux:     S^i = c [ijk] E_j B_k / sg: the lowered fields' error 2 x 5.2 u kappa, the cross
            product's 2.9 u kappa, 1/sg 9 eps kappa + eps: |dS^i|_g <= 17 eps kappa rho; then
            |dF|_g <= sg eps kappa rho (alpha (17 + 9 + 2) + |beta|_g (C_RHO + 9 + 2))
            <= 30 eps kappa sg rho (alpha + |beta|_g)              -> 30 (lower form: 40)
The float64 reference has round-off of the same kind and size, so for float64 data the
allowance is doubled; for float32 data the float64 reference is exact by comparison.
"""

from __future__ import annotations

import numpy as np
import pytest

import emsource
from emsource.energy_flux import EnergyFluxes, energy_fluxes
from conftest import assert_same_arithmetic, random_curved_data, unpack_symmetric

GRID = (4, 3, 5)
PREFACTOR = {"gaussian": 1 / (4 * np.pi), "heaviside_lorentz": 1.0}
#: (energy, momentum, flux) constants of the module docstring, per input form.
CONSTANTS = {"upper": (20, 23, 30), "lower": (30, 46, 40)}


def levi_civita():
    eps = np.zeros((3, 3, 3))
    eps[0, 1, 2] = eps[1, 2, 0] = eps[2, 0, 1] = 1
    eps[0, 2, 1] = eps[2, 1, 0] = eps[1, 0, 2] = -1
    return eps


def reference(alpha, beta, gamma, E_up, B_up, units):
    """(energy, momentum (3, ...), flux (3, ...)) in float64 from contravariant fields."""
    g = np.moveaxis(unpack_symmetric(gamma.astype(np.float64)), (0, 1), (-2, -1))
    e = np.moveaxis(E_up.astype(np.float64), 0, -1)
    b = np.moveaxis(B_up.astype(np.float64), 0, -1)
    c = PREFACTOR[units]
    sg = np.sqrt(np.linalg.det(g))
    rho = c / 2 * (np.einsum("...ij,...i,...j->...", g, e, e) + np.einsum("...ij,...i,...j->...", g, b, b))
    S = c * sg[..., None] * np.einsum("ijk,...j,...k->...i", levi_civita(), e, b)
    S_up = np.einsum("...ij,...j->...i", np.linalg.inv(g), S)
    F = sg[..., None] * (alpha.astype(np.float64)[..., None] * S_up
                         - np.moveaxis(beta.astype(np.float64), 0, -1) * rho[..., None])
    return sg * rho, np.moveaxis(sg[..., None] * S, -1, 0), np.moveaxis(F, -1, 0), rho, sg, g


def metric_scales(g):
    lam = np.linalg.eigvalsh(g)
    return lam[..., -1] / lam[..., 0]


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
@pytest.mark.parametrize("field_index", ["upper", "lower"])
def test_energy_fluxes_match_numpy_reference(rng, dtype, units, field_index):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, dtype)
    if field_index == "lower":   # the stored data are E_i, B_i; the reference raises them
        E_in = np.einsum("ij...,j...->i...", unpack_symmetric(gamma.astype(np.float64)), E).astype(dtype)
        B_in = np.einsum("ij...,j...->i...", unpack_symmetric(gamma.astype(np.float64)), B).astype(dtype)
        g_inv = np.linalg.inv(np.moveaxis(unpack_symmetric(gamma.astype(np.float64)), (0, 1), (-2, -1)))
        E_up = np.moveaxis(np.einsum("...ij,j...->...i", g_inv, E_in.astype(np.float64)), -1, 0)
        B_up = np.moveaxis(np.einsum("...ij,j...->...i", g_inv, B_in.astype(np.float64)), -1, 0)
    else:
        E_in, B_in, E_up, B_up = E, B, E, B
    result = energy_fluxes(alpha, beta, gamma, E_in, B_in, units=units, field_index=field_index)
    assert isinstance(result, EnergyFluxes)
    assert all(a.dtype == dtype for a in result)
    energy, momentum, flux, rho, sg, g = reference(alpha, beta, gamma, E_up, B_up, units)
    eps = np.finfo(dtype).eps * (2 if dtype == np.float64 else 1)
    kappa = metric_scales(g)
    c_energy, c_momentum, c_flux = CONSTANTS[field_index]
    scale = eps * kappa * sg * rho
    d_energy = np.abs(result.energy - energy)
    dm = np.moveaxis(result.momentum - momentum, 0, -1)
    d_momentum = np.sqrt(np.einsum("...ij,...i,...j->...", np.linalg.inv(g), dm, dm))
    dF = np.moveaxis(result.flux - flux, 0, -1)
    d_flux = np.sqrt(np.einsum("...ij,...i,...j->...", g, dF, dF))
    b = np.moveaxis(beta.astype(np.float64), 0, -1)
    speed = np.sqrt(np.einsum("...ij,...i,...j->...", g, b, b))
    assert np.all(d_energy <= c_energy * scale), np.max(d_energy / scale)
    assert np.all(d_momentum <= c_momentum * scale), np.max(d_momentum / scale)
    assert np.all(d_flux <= c_flux * scale * (alpha + speed)), np.max(d_flux / (scale * (alpha + speed)))
    # And the check is not empty: the fluxes are of order one, not zero.
    assert np.max(np.abs(flux)) > 0.01 * PREFACTOR[units]


def test_energy_fluxes_agree_with_adm_sources(rng):
    """energy = sqrt(gamma) rho and momentum = sqrt(gamma) S_i with rho, S_i of adm_sources and
    sqrt(gamma) from NumPy: consistent to the rounding of one product and sqrt(det)."""
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    f = energy_fluxes(alpha, beta, gamma, E, B)
    src = emsource.adm_sources(gamma, E, B)
    sg = np.sqrt(np.linalg.det(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))))
    np.testing.assert_allclose(f.energy, sg * src.rho, rtol=1e-13)
    np.testing.assert_allclose(f.momentum, sg * src.S_i, rtol=0, atol=1e-13 * np.max(np.abs(f.momentum)))


def test_plane_wave_flux_in_flat_space_moves_energy_at_the_speed_of_light():
    """E = y-hat, B = z-hat: a wave moving to +x (conventions page): F = (energy, 0, 0) for
    alpha = 1, beta = 0; with shift beta^x = 0.25 the coordinates drift and F^x = 0.75 energy
    (F^i = alpha S^i - beta^i rho with sg = 1). Exact in binary arithmetic up to 1/(4 pi)."""
    grid = (2, 3, 2)
    gamma = np.zeros((6,) + grid)
    gamma[[0, 3, 5]] = 1
    E = np.zeros((3,) + grid)
    B = np.zeros((3,) + grid)
    E[1] = 2.0
    B[2] = 2.0
    beta = np.zeros((3,) + grid)
    f = energy_fluxes(np.ones(grid), beta, gamma, E, B)
    np.testing.assert_allclose(f.energy, 4 / (4 * np.pi), rtol=1e-15)
    np.testing.assert_array_equal(f.flux[0], f.energy)
    np.testing.assert_array_equal(f.flux[1:], 0)
    beta[0] = 0.25
    f = energy_fluxes(np.ones(grid), beta, gamma, E, B)
    np.testing.assert_allclose(f.flux[0], 0.75 * f.energy, rtol=1e-15)


@pytest.mark.parametrize("grid", [(7,), (5, 4)])
def test_one_and_two_dimensional_grids_and_strided_views(rng, grid):
    alpha, beta, gamma, E, B = random_curved_data(rng, grid)
    f = energy_fluxes(alpha, beta, gamma, E, B)
    assert f.energy.shape == grid and f.flux.shape == (3,) + grid
    # Ghost zones sliced off: the same values as on the contiguous copy (same point code, so
    # equal up to the few FMA contractions that a different loop may fuse: 16 eps, conftest).
    cut = (slice(None), slice(1, -1)) + (slice(None),) * (len(grid) - 1)
    sliced = energy_fluxes(alpha[cut[1:]], beta[cut], gamma[cut], E[cut], B[cut])
    copied = energy_fluxes(*(np.ascontiguousarray(a) for a in
                             (alpha[cut[1:]], beta[cut], gamma[cut], E[cut], B[cut])))
    for a, b in zip(sliced, copied):
        assert_same_arithmetic(a, b)


def test_out_is_filled_and_returned_as_views(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    out = np.full((7,) + GRID, np.nan)
    f = energy_fluxes(alpha, beta, gamma, E, B, out=out)
    assert np.shares_memory(f.energy, out) and np.shares_memory(f.flux, out)
    np.testing.assert_array_equal(out, np.concatenate([f.energy[None], f.momentum, f.flux]))
    assert np.isfinite(out).all()


def test_energy_fluxes_bad_arguments(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    with pytest.raises(ValueError, match=r"alpha must have shape \(4, 3, 5\), found \(4, 3\)"):
        energy_fluxes(alpha[..., 0], beta, gamma, E, B)
    with pytest.raises(ValueError, match=r"beta must have shape \(3, 4, 3, 5\), found \(2, 4, 3, 5\)"):
        energy_fluxes(alpha, beta[:2], gamma, E, B)
    with pytest.raises(ValueError, match=r"gamma must have shape \(6, 4, 3, 5\)"):
        energy_fluxes(alpha, beta, gamma[:, :3], E, B)
    with pytest.raises(TypeError, match="share one float dtype, found alpha: float32"):
        energy_fluxes(alpha.astype(np.float32), beta, gamma, E, B)
    with pytest.raises(TypeError, match="beta must be a NumPy array"):
        energy_fluxes(alpha, beta.tolist(), gamma, E, B)
    with pytest.raises(TypeError, match="E must have dtype float32 or float64, found int64"):
        energy_fluxes(alpha, beta, gamma, E.astype(np.int64), B)
    with pytest.raises(ValueError, match="units must be one of"):
        energy_fluxes(alpha, beta, gamma, E, B, units="si")
    with pytest.raises(ValueError, match="field_index must be one of"):
        energy_fluxes(alpha, beta, gamma, E, B, field_index="contravariant")
    with pytest.raises(ValueError, match=r"out must have shape \(7, 4, 3, 5\) and dtype float64, "
                                         r"found shape \(7, 4, 3, 5\) and dtype float32"):
        energy_fluxes(alpha, beta, gamma, E, B, out=np.empty((7,) + GRID, np.float32))
    frozen = np.empty((7,) + GRID)
    frozen.flags.writeable = False
    with pytest.raises(ValueError, match="out is read-only"):
        energy_fluxes(alpha, beta, gamma, E, B, out=frozen)
    with pytest.raises(TypeError, match="keyword|positional"):
        energy_fluxes(alpha, beta, gamma, E, B, "gaussian")
