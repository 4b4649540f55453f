r"""Newman-Penrose scalars of the electromagnetic field from E, B and the spatial metric.

Tetrad (at a point x^i, r = |x| in coordinates, spherical angles theta, phi of x^i):

1. Coordinate vectors, contravariant, in the order they are orthonormalised:
   radial :math:`x^i / r`, polar :math:`(\cos\theta\cos\phi, \cos\theta\sin\phi, -\sin\theta)`
   (along :math:`\partial_\theta`), azimuthal :math:`(-\sin\phi, \cos\phi, 0)` (along
   :math:`\partial_\phi`).
2. Gram-Schmidt with the spatial metric :math:`\gamma_{ij}` in that order (radial first):
   :math:`\hat r = r/|r|_\gamma`; :math:`\hat\theta \propto \theta - \gamma(\theta,\hat r)\hat r`;
   :math:`\hat\phi \propto \phi - \gamma(\phi,\hat r)\hat r - \gamma(\phi,\hat\theta)\hat\theta`,
   each normalised with :math:`\gamma`. The triangular map keeps the orientation of
   :math:`(\partial_r, \partial_\theta, \partial_\phi)`, so the triad is right-handed:
   :math:`\epsilon_{ijk}\hat r^i\hat\theta^j\hat\phi^k = +1` with
   :math:`\epsilon_{ijk} = \sqrt\gamma\,[ijk]` (the package's conventions). In flat space and
   Cartesian coordinates it is the usual spherical unit triad.
3. Null tetrad from the unit normal :math:`n^a = (1, -\beta^i)/\alpha` and the triad
   (vectors :math:`\hat r^a = (0, \hat r^i)` etc.):

   .. math:: l^a = \frac{n^a + \hat r^a}{\sqrt2}, \quad k^a = \frac{n^a - \hat r^a}{\sqrt2},
             \quad m^a = \frac{\hat\theta^a + i\hat\phi^a}{\sqrt2},

   with :math:`l\cdot k = -1`, :math:`m\cdot\bar m = 1`, all other products zero (signature
   -+++). :math:`l` is outgoing, :math:`k` (the NP "n", renamed here to keep it apart from the
   normal) ingoing.

Scalars (E. T. Newman and R. Penrose, J. Math. Phys. 3, 566 (1962); S. A. Teukolsky,
Astrophys. J. 185, 635 (1973), eq. (3.2); both from memory):

.. math::

    \Phi_0 = F_{ab} l^a m^b, \quad
    \Phi_1 = \tfrac12 F_{ab}(l^a k^b + \bar m^a m^b), \quad
    \Phi_2 = F_{ab} \bar m^a k^b .

With :math:`F_{ab} = n_a E_b - n_b E_a + \epsilon_{abc} B^c` (the conventions' definitions of E
and B inverted), so that :math:`F_{ab} n^a u^b = -E_u`, :math:`F_{ab} u^a v^b =
\epsilon_{abc}u^a v^b B^c` for spatial u, v, and with the triad components
:math:`E_r = \gamma_{ij}E^i\hat r^j` etc.:

.. math::

    \Phi_0 &= -\tfrac12\,[(E_\theta - B_\phi) + i(E_\phi + B_\theta)], \\
    \Phi_1 &= \tfrac12\,(E_r + i B_r), \\
    \Phi_2 &= \tfrac12\,[(E_\theta + B_\phi) - i(E_\phi - B_\theta)] .

The lapse and shift drop out: only the Eulerian E, B and the metric enter.
Spin weights (see :mod:`emsource.spin_harmonics`): +1, 0, -1. Identities used by the tests:
:math:`|\Phi_2|^2 - |\Phi_0|^2 = \epsilon_{ijk}\hat r^i E^j B^k` (4 pi times the radial Poynting
flux in Gaussian units, 1 times in Heaviside-Lorentz) and
:math:`|\Phi_0|^2 + 2|\Phi_1|^2 + |\Phi_2|^2 = (E^2 + B^2)/2`.
For an outgoing wave in flat space (B = r-hat x E) :math:`\Phi_0 = 0` and
:math:`\Phi_2 = E_\theta - iE_\phi`.
"""

from __future__ import annotations

import numpy as np

__all__ = ["sphere_triad", "newman_penrose_scalars", "metric_dot"]


def metric_dot(gamma, u, v):
    """gamma_ij u^i v^j with gamma packed (6, ...) as (xx, xy, xz, yy, yz, zz), u, v (3, ...)."""
    g = gamma
    return (g[0] * u[0] * v[0] + g[3] * u[1] * v[1] + g[5] * u[2] * v[2]
            + g[1] * (u[0] * v[1] + u[1] * v[0]) + g[2] * (u[0] * v[2] + u[2] * v[0])
            + g[4] * (u[1] * v[2] + u[2] * v[1]))


def _check(function, name, value, ncomp, count=None):
    a = np.asarray(value, dtype=float)
    if a.ndim != 2 or a.shape[0] != ncomp or (count is not None and a.shape[1] != count):
        want = f"({ncomp}, {count if count is not None else 'n'})"
        raise ValueError(f"{function}: {name} must have shape {want}, found {a.shape}")
    return a


def sphere_triad(points, gamma):
    """Orthonormal right-handed triad (r-hat, theta-hat, phi-hat), each (3, n) contravariant.

    Parameters
    ----------
    points : (3, n) array_like
        Coordinates x^i of the points relative to the sphere's centre; not on the z axis.
    gamma : (6, n) array_like
        Spatial metric at the points, packed (xx, xy, xz, yy, yz, zz), positive definite.

    Notes
    -----
    Gram-Schmidt with gamma in the order radial, polar, azimuthal (module docstring).
    """
    function = "sphere_triad"
    x = _check(function, "points", points, 3)
    g = _check(function, "gamma", gamma, 6, x.shape[1])
    rho = np.hypot(x[0], x[1])
    r = np.sqrt(rho**2 + x[2] ** 2)
    if np.any(rho <= 1e-12 * np.maximum(r, 1e-300)):
        bad = int(np.argmax(rho <= 1e-12 * np.maximum(r, 1e-300)))
        raise ValueError(f"{function}: point {bad} at {tuple(x[:, bad])} lies on the z axis (or at "
                         "the centre), where the polar and azimuthal directions are undefined")
    cos_t, sin_t = x[2] / r, rho / r
    cos_p, sin_p = x[0] / rho, x[1] / rho
    radial = x / r
    polar = np.stack([cos_t * cos_p, cos_t * sin_p, -sin_t])
    azimuthal = np.stack([-sin_p, cos_p, np.zeros_like(cos_p)])
    triad = []
    for vector in (radial, polar, azimuthal):
        for previous in triad:
            vector = vector - metric_dot(g, vector, previous) * previous
        norm2 = metric_dot(g, vector, vector)
        if not np.all(norm2 > 0) or not np.all(np.isfinite(norm2)):
            bad = int(np.argmin(np.where(np.isfinite(norm2), norm2, -np.inf)))
            raise ValueError(f"{function}: the spatial metric at point {bad} "
                             f"{tuple(x[:, bad])} is not positive definite or not finite "
                             f"(gamma = {tuple(g[:, bad])})")
        triad.append(vector / np.sqrt(norm2))
    return tuple(triad)


def newman_penrose_scalars(points, gamma, E, B):
    r"""Phi_0, Phi_1, Phi_2 (complex, (n,) each) at points, from E^i, B^i and gamma_ij.

    Parameters
    ----------
    points : (3, n) array_like
        Coordinates relative to the sphere centre (off the z axis).
    gamma : (6, n) array_like
        Spatial metric, packed (xx, xy, xz, yy, yz, zz).
    E, B : (3, n) array_like
        Contravariant electric and magnetic fields of the normal observer (any unit system:
        the scalars are linear in the fields and carry their units).

    Returns
    -------
    (Phi_0, Phi_1, Phi_2) : tuple of (n,) complex ndarrays
        In the tetrad of the module docstring (l, k = (n +- r-hat)/sqrt 2,
        m = (theta-hat + i phi-hat)/sqrt 2).

    References
    ----------
    E. T. Newman and R. Penrose, J. Math. Phys. 3, 566 (1962); S. A. Teukolsky,
    Astrophys. J. 185, 635 (1973) (definitions, from memory). The E, B form is derived in the
    module docstring.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[1.0], [0.0], [0.0]])           # on the x axis: theta-hat = -z, phi-hat = y
    >>> g = np.array([[1.0], [0.0], [0.0], [1.0], [0.0], [1.0]])
    >>> E = np.array([[0.0], [0.0], [-1.0]])           # outgoing wave: E along theta-hat,
    >>> B = np.array([[0.0], [1.0], [0.0]])            # B = r-hat x E along phi-hat
    >>> phi0, phi1, phi2 = newman_penrose_scalars(x, g, E, B)
    >>> [round(float(abs(v[0])), 12) for v in (phi0, phi1, phi2)]
    [0.0, 0.0, 1.0]
    """
    function = "newman_penrose_scalars"
    x = _check(function, "points", points, 3)
    n = x.shape[1]
    g = _check(function, "gamma", gamma, 6, n)
    E = _check(function, "E", E, 3, n)
    B = _check(function, "B", B, 3, n)
    r_hat, t_hat, p_hat = sphere_triad(x, g)
    e_r, e_t, e_p = (metric_dot(g, E, v) for v in (r_hat, t_hat, p_hat))
    b_r, b_t, b_p = (metric_dot(g, B, v) for v in (r_hat, t_hat, p_hat))
    phi0 = -0.5 * ((e_t - b_p) + 1j * (e_p + b_t))
    phi1 = 0.5 * (e_r + 1j * b_r)
    phi2 = 0.5 * ((e_t + b_p) - 1j * (e_p - b_t))
    return phi0, phi1, phi2
