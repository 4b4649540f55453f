r"""Spin-weighted spherical harmonics :math:`{}_sY_{lm}(\theta, \phi)`.

Evaluated by the closed sum of J. N. Goldberg, A. J. Macfarlane, E. T. Newman, F. Rohrlich and
E. C. G. Sudarshan, "Spin-s spherical harmonics and eth", J. Math. Phys. 8, 2155 (1967)
(the form below is from memory; ``tests/test_spin_harmonics.py`` checks it against scipy's
ordinary harmonics, against the spin-raising and -lowering operators applied to sympy's
harmonics, and for orthonormality by quadrature):

.. math::

    {}_sY_{lm} = (-1)^m \sqrt{\frac{(l+m)!\,(l-m)!\,(2l+1)}{4\pi\,(l+s)!\,(l-s)!}}
        \sum_r \binom{l-s}{r}\binom{l+s}{r+s-m} (-1)^{l-r-s}\, e^{im\phi}\,
        \sin^{2l-k}(\theta/2)\,\cos^{k}(\theta/2), \qquad k = 2r + s - m,

the sum over the r where both binomials are nonzero (then both exponents are non-negative, so
no power of cot(theta/2) is formed and the poles are regular). For s = 0 it is the ordinary
:math:`Y_{lm}` with the Condon-Shortley phase (scipy's and sympy's convention). The spin
raising and lowering operators

.. math::

    \eth\,\eta = -(\sin\theta)^{s}\Big(\partial_\theta + \frac{i}{\sin\theta}\partial_\phi\Big)
        \big[(\sin\theta)^{-s}\eta\big], \qquad
    \bar\eth\,\eta = -(\sin\theta)^{-s}\Big(\partial_\theta - \frac{i}{\sin\theta}\partial_\phi
        \Big)\big[(\sin\theta)^{s}\eta\big]

act as :math:`\eth\,{}_sY_{lm} = \sqrt{(l-s)(l+s+1)}\,{}_{s+1}Y_{lm}` and
:math:`\bar\eth\,{}_sY_{lm} = -\sqrt{(l+s)(l-s+1)}\,{}_{s-1}Y_{lm}` (same source). A quantity has
spin weight s if it changes by :math:`e^{is\psi}` when the dyad vector
:math:`m = (\hat\theta + i\hat\phi)/\sqrt2` turns into :math:`e^{i\psi} m` (E. T. Newman and
R. Penrose, J. Math. Phys. 7, 863 (1966); from memory).

Accuracy: the sum alternates in sign, and near the equator its terms exceed the result by about
:math:`2^l`, so the relative round-off is about :math:`2^l \epsilon` (1e-10 at l = 20).
:data:`MAX_DEGREE` bounds l accordingly.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["spin_weighted_harmonic", "harmonic_table", "mode_indices", "MAX_DEGREE"]

#: Largest degree l evaluated: the round-off of the alternating sum, about 2^l eps, stays
#: below 1e-9 of the harmonic's size up to here.
MAX_DEGREE = 24


def _check_indices(s: int, l: int, m: int) -> None:
    for name, value in (("s", s), ("l", l), ("m", m)):
        if not isinstance(value, (int, np.integer)):
            raise TypeError(f"spin_weighted_harmonic: {name} must be an integer, found {value!r}")
    if not (abs(s) <= l <= MAX_DEGREE and abs(m) <= l):
        raise ValueError(f"spin_weighted_harmonic: need |s| <= l <= {MAX_DEGREE} and |m| <= l, "
                         f"found s = {s}, l = {l}, m = {m}")


def spin_weighted_harmonic(s: int, l: int, m: int, theta, phi) -> np.ndarray:
    r""":math:`{}_sY_{lm}(\theta, \phi)` at arrays of angles (radians), complex128.

    Parameters
    ----------
    s, l, m : int
        Spin weight, degree and order, :math:`|s| \le l`, :math:`|m| \le l`,
        l <= :data:`MAX_DEGREE`.
    theta, phi : array_like
        Polar and azimuthal angles, broadcast together.

    Examples
    --------
    >>> import numpy as np
    >>> value = spin_weighted_harmonic(0, 1, 0, 0.0, 0.0)   # sqrt(3 / (4 pi)) at the north pole
    >>> bool(np.isclose(value, np.sqrt(3 / (4 * np.pi))))
    True
    """
    _check_indices(s, l, m)
    theta, phi = np.broadcast_arrays(np.asarray(theta, dtype=float), np.asarray(phi, dtype=float))
    half_sin, half_cos = np.sin(theta / 2), np.cos(theta / 2)
    # Exact integers for the factorials: a float ratio of factorials loses digits for l > 10.
    norm = math.sqrt(math.factorial(l + m) * math.factorial(l - m) * (2 * l + 1)
                     / (4 * math.pi * math.factorial(l + s) * math.factorial(l - s)))
    total = np.zeros(theta.shape)
    for r in range(max(0, m - s), min(l - s, l + m) + 1):
        k = 2 * r + s - m
        coefficient = math.comb(l - s, r) * math.comb(l + s, r + s - m) * (-1) ** (l - r - s)
        total += coefficient * half_sin ** (2 * l - k) * half_cos**k
    return (-1) ** m * norm * total * np.exp(1j * m * phi)


def mode_indices(l_max: int, spin: int = 0) -> list:
    """(l, m) pairs with |spin| <= l <= l_max, -l <= m <= l, ordered by l then m."""
    return [(l, m) for l in range(abs(spin), l_max + 1) for m in range(-l, l + 1)]


def harmonic_table(spin: int, l_max: int, theta, phi) -> np.ndarray:
    """:math:`{}_sY_{lm}` for every (l, m) of :func:`mode_indices`, shape (modes, *theta.shape)."""
    return np.stack([spin_weighted_harmonic(spin, l, m, theta, phi)
                     for l, m in mode_indices(l_max, spin)])
