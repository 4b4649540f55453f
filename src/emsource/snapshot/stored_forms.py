"""Stored forms of a mapped snapshot: the ``[forms]`` table of a layout mapping.

A code may store the fields and the metric in other forms than E^i, B^i and gamma_ij. The
mapping's ``[forms]`` table names them; this module builds, per time level, the data sources of
``spatial_metric``, ``electric_field`` and ``magnetic_field`` that convert the stored
quantities slab by slab through the package's own functions (so the reading layer writes no
physics):

=========================  ==========================================  =========================
key = value                stored quantities                            conversion
=========================  ==========================================  =========================
metric = "chi"/"w"/"phi"   conformal_metric, conformal_factor          :func:`emsource.conformal.physical_metric`
fields = "lower"           electric_field, magnetic_field (E_i, B_i)    :func:`emsource.faraday.faraday_tensor` and back
fields = "densitized"      electric_field, magnetic_field (sqrt(gamma) E^i, ...)  the same
fields = "faraday_lower"   faraday_tensor (F_ab), lapse, shift          :func:`emsource.faraday.fields_from_faraday`
fields = "faraday_upper"   faraday_tensor (F^ab), lapse, shift          the same
fields = "ideal_mhd"       magnetic_field (B^i), fluid_velocity, lapse, shift; ``velocity`` =
                           "eulerian" (default) or "four_velocity"     :func:`emsource.ideal_mhd.ideal_mhd_fields`
=========================  ==========================================  =========================

Bad values at grid points raise the functions' GridPointError, which the level reader reports
as bad input with the file, level and rows. Excised points (valid_mask = 0) are set to a flat
metric, unit lapse, zero shift, field and velocity, and a unit conformal factor (phi = 0)
before converting, with the fill values of the source pipeline (:func:`.slabs.neutralise_excised`,
which this module cannot import: slabs reads through the mapping, which imports this module).
"""

from __future__ import annotations

import numpy as np

from ..input_forms import FORMS
from ..metric_forms import DECOMPOSITIONS

__all__ = ["FORMS_KEYS", "FIELD_FORMS", "METRIC_FORMS", "VELOCITY_FORMS", "needed_quantities",
           "derived_sources"]

FORMS_KEYS = {"fields", "metric", "velocity"}
FIELD_FORMS = tuple(FORMS) + ("faraday_lower", "faraday_upper", "ideal_mhd")
METRIC_FORMS = ("physical",) + tuple(DECOMPOSITIONS)
VELOCITY_FORMS = ("eulerian", "four_velocity")


def needed_quantities(forms: dict) -> tuple:
    """(needed, replaced): the stored quantities the forms read, and (quantity, [forms] key)
    of those they compute."""
    fields = forms.get("fields", "upper")
    needed, replaced = [], []
    conformal = forms.get("metric", "physical") != "physical"
    if conformal:
        needed += ["conformal_metric", "conformal_factor"]
    if fields in ("lower", "densitized"):
        needed += ["spatial_metric", "electric_field", "magnetic_field"]
    elif fields.startswith("faraday"):
        needed += ["spatial_metric", "faraday_tensor", "lapse", "shift"]
        replaced += [("electric_field", "fields"), ("magnetic_field", "fields")]
    elif fields == "ideal_mhd":
        needed += ["spatial_metric", "magnetic_field", "fluid_velocity", "lapse", "shift"]
        replaced += [("electric_field", "fields")]
    if conformal:
        needed = [q for q in needed if q != "spatial_metric"]
        replaced.append(("spatial_metric", "metric"))
    return tuple(dict.fromkeys(needed)), tuple(replaced)


#: The flat metric, packed (xx, xy, xz, yy, yz, zz): the fill of excised points.
_FLAT = (1.0, 0.0, 0.0, 1.0, 0.0, 1.0)


def _components(source) -> int:
    """Values per point of a data source (a scalar counts 1)."""
    return int(np.prod(source.shape[:-3], dtype=int))


class _ConvertedSource:
    """A data source computed from other sources slab by slab (see ``levels.DataSource``)."""

    def __init__(self, inputs: dict, convert, ncomp, mask=None, factor_fill=1.0, temporaries=0):
        self.inputs = inputs
        self.mask = mask
        self.factor_fill = factor_fill
        self.convert = convert
        self.ncomp = ncomp
        first = next(iter(inputs.values()))
        grid = tuple(first.shape[-3:])
        self.grid = grid
        self.dtype = np.dtype(np.result_type(*[s.dtype for s in inputs.values()]))
        self.shape = ((ncomp,) if ncomp else ()) + grid
        self.paths = tuple(p for s in inputs.values() for p in s.paths)
        self.chunk_rows = min(s.chunk_rows for s in inputs.values())
        self.chunk_bytes = max(s.chunk_bytes for s in inputs.values())
        plane = int(np.prod(grid[1:]))
        # the inputs read, and ``temporaries`` values per point that the conversion allocates
        self.scratch_bytes_per_row = plane * 8 * temporaries + sum(
            _components(s) * plane * 8 + s.scratch_bytes_per_row for s in inputs.values())

    def read_into(self, out, start, stop):
        arrays = {}
        for q, source in self.inputs.items():
            lead = tuple(source.shape[:-3])
            shape = lead + (stop - start,) + self.grid[1:]
            a = np.empty(shape, source.dtype)
            source.read_into(a, start, stop)
            arrays[q] = a.astype(out.dtype, copy=False)
        if self.mask is not None:
            stored = np.empty((stop - start,) + self.grid[1:], self.mask.dtype)
            self.mask.read_into(stored, start, stop)
            excised = stored == 0
            if excised.any():
                fills = {"lapse": 1.0, "conformal_factor": self.factor_fill,
                         "spatial_metric": _FLAT, "conformal_metric": _FLAT}
                for q, a in arrays.items():
                    fill = fills.get(q, 0.0)
                    for c, row in enumerate(a.reshape((-1,) + excised.shape)):
                        row[excised] = fill[c] if isinstance(fill, tuple) else fill
        out[...] = self.convert(arrays)


def derived_sources(forms: dict, stored: dict, derived_so_far: dict) -> dict:
    """Quantity -> callable(storage_shape) -> data source, for ``build_level(derived=...)``.

    ``derived_so_far`` holds the makers of quantities with nothing stored (a flat metric).

    Pointwise conversions do not depend on the axis order, so they run on storage-order slabs.
    """
    from ..conformal import physical_metric
    from ..faraday import faraday_tensor, fields_from_faraday
    from ..ideal_mhd import ideal_mhd_fields

    derived = {}
    mask = stored.get("valid_mask")
    metric_form = forms.get("metric", "physical")
    metric = stored.get("spatial_metric")
    if metric is None and "spatial_metric" in derived_so_far and stored:
        metric = derived_so_far["spatial_metric"](next(iter(stored.values())).shape[-3:])
    if metric_form != "physical":
        metric = _ConvertedSource(
            {"conformal_factor": stored["conformal_factor"],
             "conformal_metric": stored["conformal_metric"]},
            lambda a: physical_metric(a["conformal_factor"], a["conformal_metric"],
                                      decomposition=metric_form), 6,
            mask, 0.0 if metric_form == "phi" else 1.0, temporaries=0)
        metric.decomposition = metric_form  # read by the conformal outputs of the pipeline
        derived["spatial_metric"] = metric
    fields = forms.get("fields", "upper")

    def spacetime(a):
        return a["lapse"], a["shift"], a["spatial_metric"]

    if fields in ("lower", "densitized"):
        def upper(a, which):
            g = a["spatial_metric"]
            ones, zeros = np.ones(g.shape[1:], g.dtype), np.zeros((3,) + g.shape[1:], g.dtype)
            F = faraday_tensor(ones, zeros, g, a["electric_field"], a["magnetic_field"],
                               field_index=fields)
            return fields_from_faraday(ones, zeros, g, F)[which]
        inputs = {"spatial_metric": metric, "electric_field": stored["electric_field"],
                  "magnetic_field": stored["magnetic_field"]}
        derived["electric_field"] = _ConvertedSource(inputs, lambda a: upper(a, 0), 3, mask,
                                                     temporaries=16)
        derived["magnetic_field"] = _ConvertedSource(inputs, lambda a: upper(a, 1), 3, mask,
                                                     temporaries=16)
    elif fields.startswith("faraday"):
        index = fields.split("_")[1]
        inputs = {"lapse": stored["lapse"], "shift": stored["shift"], "spatial_metric": metric,
                  "faraday_tensor": stored["faraday_tensor"]}
        for which, q in enumerate(("electric_field", "magnetic_field")):
            derived[q] = _ConvertedSource(
                inputs, lambda a, w=which: fields_from_faraday(*spacetime(a), a["faraday_tensor"],
                                                               index=index)[w], 3, mask,
                                     temporaries=6)
    elif fields == "ideal_mhd":
        kind = forms.get("velocity", "eulerian")
        inputs = {"lapse": stored["lapse"], "shift": stored["shift"], "spatial_metric": metric,
                  "magnetic_field": stored["magnetic_field"],
                  "fluid_velocity": stored["fluid_velocity"]}
        derived["electric_field"] = _ConvertedSource(
            inputs, lambda a: ideal_mhd_fields(*spacetime(a), a["magnetic_field"],
                                               a["fluid_velocity"], velocity_kind=kind).E, 3,
            mask, temporaries=11)
    return {q: (lambda storage, s=s: s) for q, s in derived.items()}
