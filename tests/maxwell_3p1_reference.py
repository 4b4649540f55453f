"""Plain-NumPy finite-difference residuals of Maxwell's equations in 3+1 form (test helper).

Slow, obviously-correct reference used by the exact-data tests; not part of the package.

The equations are nabla_b F^ab = kappa J^a and nabla_b *F^ab = 0 (kappa = 4 pi in Gaussian units,
1 in Heaviside-Lorentz units) written with the 3+1 split of the conventions page, using
sqrt(-g) = alpha sqrt(gamma), F^{0i} = E^i / alpha,
F^{ij} = (beta^j E^i - beta^i E^j) / alpha + [ijk] B_k / sqrt(gamma), J^0 = rho_e / alpha and
J^i = j^i - beta^i rho_e / alpha, in the densitised (flux) form
d_b (sqrt(-g) F^ab) = kappa sqrt(-g) J^a:

    d_i (sqrt(gamma) E^i) = kappa sqrt(gamma) rho_e
    d_i (sqrt(gamma) B^i) = 0
    d_t (sqrt(gamma) E^i) = d_j [sqrt(gamma) (beta^j E^i - beta^i E^j)] + [ijk] d_j (alpha B_k)
                            - kappa sqrt(gamma) (alpha j^i - beta^i rho_e)
    d_t (sqrt(gamma) B^i) = d_j [sqrt(gamma) (beta^j B^i - beta^i B^j)] - [ijk] d_j (alpha E_k)

with B_k = gamma_kl B^l, [ijk] the permutation symbol, and the dual pair obtained by E -> B,
B -> -E. These are the 3+1 Maxwell equations of T. W. Baumgarte and S. L. Shapiro, Numerical
Relativity (2010), sec. 11.1 (there in the non-densitised form with alpha K E^i and Lie-derivative
terms; the two agree because d_t sqrt(gamma) = sqrt(gamma) (-alpha K + D_i beta^i)), and of
E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), which we re-derived here from
nabla_b F^ab = kappa J^a (section numbers from memory).
"""

from __future__ import annotations

import numpy as np

# Centred first-derivative weights w_m for (f[i+m] - f[i-m]) / h, m = 1..radius: the standard
# central-difference coefficients (B. Fornberg, Math. Comp. 51, 699 (1988), Table 1).
WEIGHTS = {
    2: (1.0 / 2.0,),
    4: (2.0 / 3.0, -1.0 / 12.0),
    6: (3.0 / 4.0, -3.0 / 20.0, 1.0 / 60.0),
}

PACKED = ((0, 1, 2), (1, 3, 4), (2, 4, 5))  # (i, j) -> packed index of a symmetric 3x3 tensor
LEVI_CIVITA = np.zeros((3, 3, 3))
LEVI_CIVITA[0, 1, 2] = LEVI_CIVITA[1, 2, 0] = LEVI_CIVITA[2, 0, 1] = 1.0
LEVI_CIVITA[0, 2, 1] = LEVI_CIVITA[2, 1, 0] = LEVI_CIVITA[1, 0, 2] = -1.0


def unpack(packed):
    """(6, *grid) -> (3, 3, *grid)."""
    return np.stack([np.stack([packed[PACKED[i][j]] for j in range(3)]) for i in range(3)])


def derivative(f, axis, h, order):
    """Centred derivative of f along grid `axis` (0..2) on the interior, trimmed on all axes.

    f has the grid as its last three axes; the result has each grid axis shortened by
    2 * radius, so every output point has a full stencil.
    """
    r = order // 2
    n = f.shape[-3 + axis]
    out = 0.0
    for m, w in enumerate(WEIGHTS[order], start=1):
        plus = np.take(f, np.arange(r + m, n - r + m), axis=f.ndim - 3 + axis)
        minus = np.take(f, np.arange(r - m, n - r - m), axis=f.ndim - 3 + axis)
        out = out + w * (plus - minus)
    out = out / h
    return interior(out, r, skip=axis)


def interior(f, r, skip=None):
    """Drop r points at both ends of every grid axis (the last three), except `skip`."""
    index = [slice(None)] * (f.ndim - 3)
    for a in range(3):
        index.append(slice(None) if a == skip else slice(r, f.shape[f.ndim - 3 + a] - r))
    return f[tuple(index)]


def maxwell_residuals(data, order, *, kappa=None):
    """Residuals of the four 3+1 Maxwell equations for TimeLevelFields `data` on a 3D grid.

    Returns a dict name -> (residual, scale): residual on the interior points (boundary width
    order/2), scale the largest magnitude of any single term of that equation there, for
    normalising. Uses the supplied exact d_t E, d_t B and d_t gamma.
    """
    if kappa is None:
        kappa = 4.0 * np.pi if data.units == "gaussian" else 1.0
    h = data.grid.spacing
    r = order // 2
    g = unpack(data.gamma)
    sqrt_gamma = np.sqrt(np.linalg.det(np.moveaxis(g, (0, 1), (-2, -1))))
    g_inv = np.moveaxis(np.linalg.inv(np.moveaxis(g, (0, 1), (-2, -1))), (-2, -1), (0, 1))
    dt_sqrt_gamma = 0.5 * sqrt_gamma * np.einsum("ij...,ij...->...", g_inv, unpack(data.dt_gamma))
    alpha, beta = data.alpha, data.beta

    def div(vec):
        terms = [derivative(vec[i], i, h[i], order) for i in range(3)]
        return sum(terms), max(np.abs(t).max() for t in terms)

    def curl_lowered(vec):
        """[ijk] d_j (alpha gamma_kl vec^l), returned per component with its largest term."""
        low = alpha * np.einsum("kl...,l...->k...", g, vec)
        comps, scale = [], 0.0
        for i in range(3):
            total = 0.0
            for j in range(3):
                for k in range(3):
                    if LEVI_CIVITA[i, j, k] != 0.0:
                        term = LEVI_CIVITA[i, j, k] * derivative(low[k], j, h[j], order)
                        scale = max(scale, np.abs(term).max())
                        total = total + term
            comps.append(total)
        return np.stack(comps), scale

    def shift_flux(vec):
        """d_j [sqrt(gamma) (beta^j V^i - beta^i V^j)] per component i."""
        comps, scale = [], 0.0
        for i in range(3):
            total = 0.0
            for j in range(3):
                term = derivative(sqrt_gamma * (beta[j] * vec[i] - beta[i] * vec[j]), j, h[j], order)
                scale = max(scale, np.abs(term).max())
                total = total + term
            comps.append(total)
        return np.stack(comps), scale

    def inner(f):
        return interior(f, r)

    results = {}
    div_E, s1 = div(sqrt_gamma * data.E)
    source = inner(kappa * sqrt_gamma * data.charge_density)
    results["div_E"] = (div_E - source, max(s1, np.abs(source).max()))
    div_B, s2 = div(sqrt_gamma * data.B)
    results["div_B"] = (div_B, s2)

    for name, field, dt_field, other, sign in (
        ("ampere", data.E, data.dt_E, data.B, 1.0),
        ("faraday", data.B, data.dt_B, data.E, -1.0),
    ):
        dt_density = inner(sqrt_gamma * dt_field + field * dt_sqrt_gamma)
        flux, s3 = shift_flux(field)
        curl, s4 = curl_lowered(other)
        residual = dt_density - flux - sign * curl
        scale = max(np.abs(dt_density).max(), s3, s4)
        if name == "ampere":
            current = inner(kappa * sqrt_gamma * (alpha * data.current_density - beta * data.charge_density))
            residual = residual + current
            scale = max(scale, np.abs(current).max())
        results[name] = (residual, scale)
    return results


def normalised_max_residuals(data, order):
    """name -> max |residual| / scale over the interior (0 where every term vanishes identically)."""
    out = {}
    for name, (res, scale) in maxwell_residuals(data, order).items():
        worst = float(np.abs(res).max())
        out[name] = worst / scale if scale > 0 else worst
    return out


def extrinsic_curvature_residual(data, order):
    """K_ij + (d_t gamma_ij - D_i beta_j - D_j beta_i) / (2 alpha) on the interior (conventions page)."""
    h = data.grid.spacing
    r = order // 2
    g = unpack(data.gamma)
    g_inv = np.moveaxis(np.linalg.inv(np.moveaxis(g, (0, 1), (-2, -1))), (-2, -1), (0, 1))
    beta_low = np.einsum("ij...,j...->i...", g, data.beta)
    d_g = np.stack([derivative(g, a, h[a], order) for a in range(3)])  # d_a gamma_ij -> [a, i, j]
    d_beta = np.stack([derivative(beta_low, a, h[a], order) for a in range(3)])  # [a, j]
    g_inv_i, beta_low_i = interior(g_inv, r), interior(beta_low, r)
    # Christoffel symbols Gamma^k_ij = (1/2) gamma^kl (d_i gamma_lj + d_j gamma_li - d_l gamma_ij).
    lower = 0.5 * (np.einsum("ilj...->lij...", d_g) + np.einsum("jli...->lij...", d_g) - d_g)
    christoffel = np.einsum("kl...,lij...->kij...", g_inv_i, lower)
    D_beta = d_beta - np.einsum("kij...,k...->ij...", christoffel, beta_low_i)  # D_i beta_j
    expected = -(interior(unpack(data.dt_gamma), r) - D_beta - np.einsum("ij...->ji...", D_beta)) / (
        2.0 * interior(data.alpha, r))
    return interior(unpack(data.K), r) - expected


def observed_order(errors, refinement=2.0):
    """Observed orders log(e_n / e_{n+1}) / log(refinement) for successive resolutions."""
    e = np.asarray(errors, dtype=float)
    return np.log(e[:-1] / e[1:]) / np.log(refinement)


def residual_convergence(make_data, order, sizes=(12, 24, 48)):
    """Normalised max residuals of each equation at each size, and the observed orders.

    make_data(n) must return TimeLevelFields on a 3D grid with spacing proportional to 1/n.
    Returns name -> (errors, orders).
    """
    errors = {}
    for n in sizes:
        for name, value in normalised_max_residuals(make_data(n), order).items():
            errors.setdefault(name, []).append(value)
    ratio = sizes[1] / sizes[0]
    return {name: (e, observed_order(e, ratio)) for name, e in errors.items()}


def time_derivative_errors(make_at_time, t, steps=(2e-3, 1e-3)):
    """Max errors of the supplied dt_E, dt_B, dt_gamma against centred time differences.

    make_at_time(t) returns TimeLevelFields. Returns name -> (errors per step, scale), scale the max
    magnitude of the supplied derivative. The centred difference has error dt^2 f'''/6, so the
    errors fall by 4 per halving of dt (order 2) until round-off ~ eps |f| / dt takes over.
    """
    now = make_at_time(t)
    out = {}
    for name in ("E", "B", "gamma"):
        exact = getattr(now, "dt_" + name)
        errs = []
        for dt in steps:
            later, earlier = make_at_time(t + dt), make_at_time(t - dt)
            diff = (getattr(later, name) - getattr(earlier, name)) / (2.0 * dt)
            errs.append(float(np.abs(diff - exact).max()))
        out[name] = (errs, float(np.abs(exact).max()))
    return out
