"""Exact values of the electromagnetic sources at one point, for the round-off tests.

Every input is a binary floating-point number, hence an exact rational (``fractions.Fraction``).
Everything rational (E_i = gamma_ij E^j, E^2, the stress, the inverse metric, det gamma) is
computed in exact rational arithmetic; only sqrt(det gamma) and the Gaussian prefactor 1/(4 pi)
are irrational, and those are evaluated with mpmath at 60 significant digits (relative error
1e-60, far below any float64 error). Results are mpmath numbers.

The formulas are those of the conventions page (Gaussian units, c = 1/(4 pi); Heaviside-Lorentz
c = 1), with E_i = gamma_ij E^j and E^2 = E^i E_i:

    rho  = c/2 (E^2 + B^2)
    S_i  = c sqrt(gamma) [ijk] E^j B^k
    S_ij = c ( -E_i E_j - B_i B_j + 1/2 gamma_ij (E^2 + B^2) )
    T_tt = alpha^2 rho - 2 alpha beta^i S_i + beta^i beta^j S_ij,
    T_ti = beta^j S_ij - alpha S_i,  T_ij = S_ij

(E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2; T. W. Baumgarte and
S. L. Shapiro, Numerical Relativity (2010), sec. 5.2). T^ab is obtained from T_ab by raising
both indices with the inverse 4-metric g^tt = -1/alpha^2, g^ti = beta^i/alpha^2,
g^ij = gamma^ij - beta^i beta^j/alpha^2 (Gourgoulhon 2012, sec. 4.2), a route independent of
the kernel's n^a / S^a assembly.

Norms (all exact up to the final square root). With the normal observer's orthonormal frame,
a tensor's size is the Euclidean size of its frame components:

    |w|_gamma  = sqrt(gamma^ij w_i w_j)                      (a covector such as S_i)
    |M|_gamma  = sqrt(gamma^ik gamma^jl M_ij M_kl)           (a covariant 2-tensor such as S_ij)
    |T|_h      = sqrt(h^ac h^bd T_ab T_cd),  h^ab = g^ab + 2 n^a n^b  (4D covariant)
    |T|_h      = sqrt(h_ac h_bd T^ab T^cd),  h_ab = g_ab + 2 n_a n_b  (4D contravariant)

h is the positive-definite metric that is Euclidean in the normal observer's frame
(common practice).
"""

from __future__ import annotations

from fractions import Fraction

import mpmath

mpmath.mp.dps = 60

PACKED3 = ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))
PACKED4 = ((0, 0), (0, 1), (0, 2), (0, 3), (1, 1), (1, 2), (1, 3), (2, 2), (2, 3), (3, 3))


def fractions(values):
    """Exact rationals of floating-point numbers (NumPy scalars of any float dtype)."""
    return [Fraction(float(v)) for v in values]


def mp(x):
    """An exact Fraction (or an int, or an mpf) as an mpmath number."""
    if isinstance(x, Fraction):
        return mpmath.mpf(x.numerator) / x.denominator
    return mpmath.mpf(x)


def full3(packed):
    """Packed (xx, xy, xz, yy, yz, zz) -> nested 3x3 list."""
    xx, xy, xz, yy, yz, zz = packed
    return [[xx, xy, xz], [xy, yy, yz], [xz, yz, zz]]


def pivots(packed):
    """Exact pivots (d1, d2, d3) of gamma = L D L^T; gamma is positive definite iff all > 0.

    Returns None for d2 or d3 when an earlier pivot is zero (no factorisation exists).
    """
    xx, xy, xz, yy, yz, zz = packed
    if xx == 0:
        return xx, None, None
    d2 = yy - xy * xy / xx
    if d2 == 0:
        return xx, d2, None
    e23 = yz - xz * xy / xx
    return xx, d2, zz - xz * xz / xx - e23 * e23 / d2


def is_positive_definite(packed):
    d1, d2, d3 = pivots(packed)
    return d1 > 0 and d2 is not None and d2 > 0 and d3 is not None and d3 > 0


def determinant(packed):
    xx, xy, xz, yy, yz, zz = packed
    return xx * (yy * zz - yz * yz) - xy * (xy * zz - yz * xz) + xz * (xy * yz - yy * xz)


def inverse(packed):
    """Exact gamma^ij (packed) by the adjugate: gamma^-1 = adj(gamma) / det(gamma)."""
    xx, xy, xz, yy, yz, zz = packed
    det = determinant(packed)
    adj = (yy * zz - yz * yz, xz * yz - xy * zz, xy * yz - xz * yy,
           xx * zz - xz * xz, xy * xz - xx * yz, xx * yy - xy * xy)
    return tuple(a / det for a in adj)


def contract(matrix_packed, vector):
    m = full3(matrix_packed)
    return [sum(m[i][j] * vector[j] for j in range(3)) for i in range(3)]


def prefactor(units):
    return 1 / (4 * mpmath.pi) if units == "gaussian" else mpmath.mpf(1)


class ExactPoint:
    """Exact rho, S_i, S_ij (and T_ab, T^ab when lapse and shift are given) at one point.

    ``gamma`` packed, ``E`` and ``B`` the three stored components in the form ``field_index``
    ("upper": E^i, B^i; "lower": E_i, B_i), all floating-point numbers.
    """

    def __init__(self, gamma, E, B, *, field_index="upper", units="gaussian",
                 alpha=None, beta=None):
        self.gamma = fractions(gamma)
        self.gamma_inv = inverse(self.gamma)
        self.det = determinant(self.gamma)
        stored_e, stored_b = fractions(E), fractions(B)
        if field_index == "upper":
            self.e_up, self.b_up = stored_e, stored_b
            self.e_low, self.b_low = contract(self.gamma, stored_e), contract(self.gamma, stored_b)
        else:
            self.e_low, self.b_low = stored_e, stored_b
            self.e_up = contract(self.gamma_inv, stored_e)
            self.b_up = contract(self.gamma_inv, stored_b)
        e2 = sum(a * b for a, b in zip(self.e_up, self.e_low))
        b2 = sum(a * b for a, b in zip(self.b_up, self.b_low))
        c = prefactor(units)
        self.sg = mpmath.sqrt(mp(self.det))
        e, b = self.e_up, self.b_up
        cross = (e[1] * b[2] - e[2] * b[1], e[2] * b[0] - e[0] * b[2], e[0] * b[1] - e[1] * b[0])
        g = full3(self.gamma)
        self.rho = c * mp((e2 + b2) / 2)
        self.S_i = [c * self.sg * mp(x) for x in cross]
        self.S_ij = [c * mp(-self.e_low[i] * self.e_low[j] - self.b_low[i] * self.b_low[j]
                            + g[i][j] * (e2 + b2) / 2) for i, j in PACKED3]
        if alpha is not None:
            self._four_d(alpha, beta)

    def _four_d(self, alpha, beta):
        a = mp(Fraction(float(alpha)))
        bt = [mp(x) for x in fractions(beta)]
        S = self.S_i
        Sij = full3(self.S_ij)
        t_low = [[None] * 4 for _ in range(4)]
        t_low[0][0] = (a * a * self.rho - 2 * a * sum(bt[i] * S[i] for i in range(3))
                       + sum(bt[i] * bt[j] * Sij[i][j] for i in range(3) for j in range(3)))
        for i in range(3):
            t_low[0][i + 1] = t_low[i + 1][0] = sum(bt[j] * Sij[i][j] for j in range(3)) - a * S[i]
            for j in range(3):
                t_low[i + 1][j + 1] = Sij[i][j]
        g_up = inverse_four_metric(a, bt, [mp(x) for x in self.gamma_inv])
        t_up = [[sum(g_up[p][r] * g_up[q][s] * t_low[r][s] for r in range(4) for s in range(4))
                 for q in range(4)] for p in range(4)]
        self.alpha, self.beta = a, bt
        self.T_low = [t_low[p][q] for p, q in PACKED4]
        self.T_up = [t_up[p][q] for p, q in PACKED4]

    # ---- norms of differences (mpmath numbers) ----

    def covector_norm(self, w):
        gi = full3([mp(x) for x in self.gamma_inv])
        return mpmath.sqrt(abs(sum(gi[i][j] * w[i] * w[j] for i in range(3) for j in range(3))))

    def tensor_norm(self, packed):
        gi = full3([mp(x) for x in self.gamma_inv])
        m = full3(packed)
        # (gamma^-1 M) then the trace of its square: gamma^ik M_kj gamma^jl M_li.
        p = [[sum(gi[i][k] * m[k][j] for k in range(3)) for j in range(3)] for i in range(3)]
        return mpmath.sqrt(abs(sum(p[i][j] * p[j][i] for i in range(3) for j in range(3))))

    def four_tensor_norm(self, packed, upper):
        """|T|_h of a packed 4D tensor, covariant (upper=False) or contravariant (True)."""
        a, bt = self.alpha, self.beta
        if upper:
            g = [mp(x) for x in self.gamma]
            h = four_metric(a, bt, g)
            n_low = [-a, 0, 0, 0]
            h = [[h[p][q] + 2 * n_low[p] * n_low[q] for q in range(4)] for p in range(4)]
        else:
            h = inverse_four_metric(a, bt, [mp(x) for x in self.gamma_inv])
            n_up = [1 / a] + [-b / a for b in bt]
            h = [[h[p][q] + 2 * n_up[p] * n_up[q] for q in range(4)] for p in range(4)]
        t = [[None] * 4 for _ in range(4)]
        for value, (p, q) in zip(packed, PACKED4):
            t[p][q] = t[q][p] = value
        m = [[sum(h[p][r] * t[r][q] for r in range(4)) for q in range(4)] for p in range(4)]
        return mpmath.sqrt(abs(sum(m[p][q] * m[q][p] for p in range(4) for q in range(4))))

    def shift_speed(self):
        """|beta|_gamma / alpha, the coordinate speed of the shift in the normal frame."""
        g = full3([mp(x) for x in self.gamma])
        bt = self.beta
        return mpmath.sqrt(sum(g[i][j] * bt[i] * bt[j] for i in range(3) for j in range(3))) / self.alpha


def four_metric(alpha, beta, gamma_packed):
    g3 = full3(gamma_packed)
    beta_low = [sum(g3[i][j] * beta[j] for j in range(3)) for i in range(3)]
    g = [[None] * 4 for _ in range(4)]
    g[0][0] = -alpha * alpha + sum(beta_low[i] * beta[i] for i in range(3))
    for i in range(3):
        g[0][i + 1] = g[i + 1][0] = beta_low[i]
        for j in range(3):
            g[i + 1][j + 1] = g3[i][j]
    return g


def inverse_four_metric(alpha, beta, gamma_inv_packed):
    gi = full3(gamma_inv_packed)
    a2 = alpha * alpha
    g = [[None] * 4 for _ in range(4)]
    g[0][0] = -1 / a2
    for i in range(3):
        g[0][i + 1] = g[i + 1][0] = beta[i] / a2
        for j in range(3):
            g[i + 1][j + 1] = gi[i][j] - beta[i] * beta[j] / a2
    return g
