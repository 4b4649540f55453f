"""Symbolic (sympy) reference: the normal observer's E and B from a 4-potential and a metric.

Test helper, not part of the package. Follows the definitions of the conventions page literally:
F_ab = d_a A_b - d_b A_a, n_a = (-alpha, 0, 0, 0), E^a = F^ab n_b,
B^a = -(1/2) epsilon^abcd n_b F_cd with epsilon_0123 = +sqrt(-g).
"""

from __future__ import annotations

import itertools

import sympy as sp


def pull_back(covector, jacobian):
    """Components A_a = (dX^M/dx^a) A_M of a 1-form; jacobian[M, a] = dX^M/dx^a."""
    return sp.Matrix([sum(jacobian[M, a] * covector[M] for M in range(4)) for a in range(4)])


def pull_back_metric(eta, jacobian):
    """g_ab = (dX^M/dx^a)(dX^N/dx^b) eta_MN."""
    return (jacobian.T * eta * jacobian).applyfunc(sp.simplify)


def faraday(potential, coords):
    """F_ab = d_a A_b - d_b A_a."""
    return sp.Matrix(4, 4, lambda a, b: sp.diff(potential[b], coords[a]) - sp.diff(potential[a], coords[b]))


def lapse_shift(g):
    """alpha and beta^i read from g^ab: g^00 = -1/alpha^2, g^0i = beta^i / alpha^2."""
    g_inv = g.inv()
    alpha = sp.sqrt(-1 / g_inv[0, 0])
    beta = [sp.simplify(g_inv[0, i] * alpha**2) for i in range(1, 4)]
    return sp.simplify(alpha), beta


def normal_observer_fields(F, g):
    """E^i and B^i (i = 1..3, as lists of expressions) of Faraday tensor F in metric g."""
    g_inv = g.inv()
    alpha, _ = lapse_shift(g)
    n_low = [-alpha, 0, 0, 0]
    F_up = g_inv * F * g_inv.T
    E = [sum(F_up[i, b] * n_low[b] for b in range(4)) for i in range(1, 4)]
    sqrt_minus_g = sp.sqrt(-g.det())
    # epsilon^{abcd} = -[abcd] / sqrt(-g) (raising four indices of epsilon_abcd = sqrt(-g) [abcd]
    # multiplies by det(g^-1) = 1/g < 0).
    B = []
    for i in range(1, 4):
        total = 0
        for b, c, d in itertools.product(range(4), repeat=3):
            perm = sp.LeviCivita(i, b, c, d)
            if perm != 0 and n_low[b] != 0:
                total += -sp.Rational(1, 2) * (-perm / sqrt_minus_g) * n_low[b] * F[c, d]
        B.append(total)
    return E, B
