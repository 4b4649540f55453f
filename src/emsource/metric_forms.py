"""The conformal decompositions of the spatial metric the package accepts: one table.

Each row names a decomposition (the value of ``decomposition=`` of
:func:`emsource.conformal.conformal_sources` and of the mapping key ``[forms] metric``), the
relation between the physical metric gamma_ij and the conformal metric tilde-gamma_ij, and the
code of the kernels' point converter (:func:`emsource.kernels.conformal.conformal_rescale`),
which turns tilde-gamma_ij and the stored factor into gamma_ij at every point (no whole-grid
conversion in the source kernel).

To add a decomposition: a code and a branch in ``conformal_rescale``, a row here, and a case in
``tests/test_conformal.py`` (a NumPy reference of the relation).
"""

from __future__ import annotations

from typing import NamedTuple

from .kernels import conformal as kernels

__all__ = ["Decomposition", "DECOMPOSITIONS", "decomposition"]


class Decomposition(NamedTuple):
    """One conformal decomposition.

    Attributes
    ----------
    name : str
        The value that selects it.
    code : int
        Its converter's code in :mod:`emsource.kernels.conformal`.
    relation : str
        gamma_ij in terms of tilde-gamma_ij and the factor.
    rescale : str
        The factor c = (conformal metric) / (physical metric) that multiplies S_ij^TF.
    """

    name: str
    code: int
    relation: str
    rescale: str


DECOMPOSITIONS = {d.name: d for d in (
    Decomposition("chi", kernels.DECOMPOSITION_CHI, "gamma_ij = tilde-gamma_ij / chi, chi > 0",
                  "chi"),
    Decomposition("w", kernels.DECOMPOSITION_W, "gamma_ij = tilde-gamma_ij / W^2, W = sqrt(chi) > 0",
                  "W^2"),
    Decomposition("phi", kernels.DECOMPOSITION_PHI, "gamma_ij = exp(4 phi) tilde-gamma_ij",
                  "exp(-4 phi)"),
)}


def decomposition(function: str, name) -> Decomposition:
    """The decomposition selected by ``name``, or a ValueError that lists the choices."""
    try:
        return DECOMPOSITIONS[name]
    except (KeyError, TypeError):
        raise ValueError(f"{function}: decomposition must be one of {tuple(DECOMPOSITIONS)}, "
                         f"found {name!r}") from None
