"""Outputs of ``emsource sources`` beyond the four physical sources (``--outputs NAME``).

:data:`emsource.quantities.FORM_OUTPUTS`, computed per slab from the slab's physical gamma_ij,
E^i, B^i (whatever form the file stores them in, :mod:`.stored_forms`) through the package's
functions:

- ``conformal_tracefree_stress``: A_ij = c (S_ij - gamma_ij S / 3), c = chi, W^2 or e^{-4 phi}
  (:func:`emsource.conformal.conformal_sources`); reads conformal_metric and conformal_factor,
  and needs the mapping key ``[forms] metric`` to say which factor is stored.
- ``faraday_lower``, ``faraday_upper``: F_ab, F^ab packed (tx, ty, tz, xy, xz, yz)
  (:func:`emsource.faraday.faraday_tensor`); reads lapse and shift.
- ``field_invariant``, ``dual_invariant``: F_ab F^ab = 2 (B^2 - E^2), F_ab *F^ab = 4 E_i B^i
  (:func:`emsource.faraday.field_invariants`).

Excised points (valid_mask = 0) hold NaN, like the four sources.
"""

from __future__ import annotations

import numpy as np

from ..conformal import conformal_sources
from ..faraday import faraday_tensor, field_invariants
from ..quantities import FORM_OUTPUTS
from ..sources import GridPointError
from .errors import SnapshotError
from .slabs import neutralise_excised, slab_error

__all__ = ["FORM_OUTPUTS", "READS", "check_level", "extra_quantities", "slab_outputs"]

#: Output -> the quantities it reads beyond gamma_ij, E^i, B^i.
READS = {
    "conformal_tracefree_stress": ("conformal_metric", "conformal_factor"),
    "faraday_lower": ("lapse", "shift"),
    "faraday_upper": ("lapse", "shift"),
    "field_invariant": (),
    "dual_invariant": (),
}


def extra_quantities(outputs) -> tuple:
    """The form outputs asked for and the quantities they read (for the memory plan)."""
    asked = tuple(q for q in outputs if q in READS)
    return asked + tuple(dict.fromkeys(r for q in asked for r in READS[q]))


def _decomposition(level):
    return getattr(level.source("spatial_metric"), "decomposition", None)


def check_level(level, outputs) -> None:
    """Raise :class:`SnapshotError` before anything is written if an output cannot be made."""
    for q in outputs:
        for needed in READS.get(q, ()):
            if not level.has(needed):
                raise SnapshotError(f"{level.where}: output {q!r} needs {needed!r}, which time "
                                    f"level {level.label!r} does not hold")
        if q == "conformal_tracefree_stress" and _decomposition(level) is None:
            raise SnapshotError(f"{level.where}: output {q!r} needs a conformal decomposition "
                                "(mapping key [forms] metric = \"chi\", \"w\" or \"phi\")")


def slab_outputs(level, outputs, start, stop, gamma, E, B, valid, check) -> dict:
    """{output: storage-order array} for the slab ``start:stop``; NaN at excised points.

    ``gamma``, ``E``, ``B`` are the slab's physical (x, y, z)-order arrays, already neutralised
    at excised points (``valid`` False).
    """
    asked = [q for q in outputs if q in READS]
    if not asked:
        return {}
    read = {q: level.read(q, start, stop, dtype=gamma.dtype)
            for q in dict.fromkeys(r for q in asked for r in READS[q])}
    if valid is not True:
        read = neutralise_excised(read, valid, in_place=True)
        if "conformal_factor" in read:
            read["conformal_factor"][~valid] = 0.0 if _decomposition(level) == "phi" else 1.0
    results = {}
    try:
        for q in asked:
            if q.startswith("faraday"):
                results[q] = faraday_tensor(read["lapse"], read["shift"], gamma, E, B,
                                            index=q.split("_")[1], check=check)
            elif q == "conformal_tracefree_stress":
                results[q] = conformal_sources(read["conformal_factor"], read["conformal_metric"],
                                               E, B, decomposition=_decomposition(level),
                                               units=level.units, check=check).A_ij
            else:
                invariants = field_invariants(gamma, E, B, check=check)
                results[q] = invariants.square if q == "field_invariant" else invariants.dual
    except GridPointError as error:
        raise slab_error(error, level, start, stop) from None
    for q, a in results.items():
        if valid is not True and not np.all(valid):
            a[..., ~valid] = np.nan
        results[q] = level.to_xyz(a)  # (x, y, z) -> storage order (an involution)
    return results
