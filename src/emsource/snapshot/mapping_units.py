"""Physical units in a layout mapping: the code's scale, and stored values in SI or cgs.

The keys (all optional; see :mod:`.mapping` for the whole file)::

    [physical_units]
    code_scale = { value = 1.0, unit = "m" }   # one code unit of length (m, cm), time (s) or
                                               # mass (g, kg, solar_mass): G = c = 1 makes the
                                               # three one scale (emsource.physical_units)
    length_unit = "m"                          # spacing and origin are stored in m (or "cm")
    time_unit = "s"                            # level times are stored in seconds

    [quantities.electric_field]
    unit = "V/m"                               # stored unit: "V/m" or "statV/cm"
    [quantities.magnetic_field]
    unit = "A/m"                               # "T", "G", or "A/m" (H, read as B = mu_0 H)
    [quantities.vector_potential]
    unit = "T m"                               # "T m" or "G cm"

A stored value v of a quantity with ``unit`` becomes ``v * scale * f`` in code units, with
``scale`` the quantity's own key (default 1) and f the factor of
:func:`emsource.physical_units.to_code_units` for the mapping's ``units`` (the code's unit
system, Gaussian or Heaviside-Lorentz). ``length_unit`` and ``time_unit`` convert the grid's
spacing and origin and the level times (attribute or ``per_index``) the same way. Every unit key
needs ``code_scale``; the scale is also what ``emsource integrate`` reports physical values with
when no option gives one.

A Yee-type SI file (E in V/m on edges, H in A/m on faces, metres, seconds) then maps with one
scale declaration, for instance ``code_scale = { value = 1.0, unit = "m" }``: a code length of
one metre, a code time of 1/c seconds.
"""

from __future__ import annotations

from ..physical_units import SCALE_UNITS, STORED_UNITS, scale_of, to_code_units

__all__ = ["UNIT_KEYS", "QUANTITY_UNITS", "MappingUnits", "parse_physical_units"]

UNIT_KEYS = {"code_scale", "length_unit", "time_unit"}
_SCALE_KEYS = {"value", "unit"}

#: Quantity -> the stored units it accepts (``unit`` key of ``[quantities.<name>]``).
QUANTITY_UNITS = {
    name: tuple(u for u, (what, _, _) in STORED_UNITS.items() if what == measure)
    for name, measure in (("electric_field", "electric field"), ("magnetic_field", "magnetic field"),
                          ("vector_potential", "vector potential"))
}


class MappingUnits:
    """The parsed ``[physical_units]``: the scale (or None) and the length and time factors."""

    def __init__(self, scale=None, length_factor=1.0, time_factor=1.0):
        self.scale = scale
        self.length_factor = length_factor
        self.time_factor = time_factor


def parse_physical_units(table, quantities, units, check) -> tuple:
    """(MappingUnits, {quantity: factor}) from the mapping's top-level table and its
    ``[quantities]`` tables; ``check`` is the mapping's checker (errors name file and key)."""
    section = table.get("physical_units")
    scale = None
    length_factor = time_factor = 1.0
    if section is not None:
        check.keys(section, UNIT_KEYS, "[physical_units]")
        if "code_scale" not in section:
            given = sorted(section)
            check.fail(f"[physical_units] needs code_scale = {{ value = ..., unit = ... }} "
                       f"(one code unit of length, time or mass); found {given or 'no key'}")
        spec = section["code_scale"]
        check.keys(spec, _SCALE_KEYS, "[physical_units] code_scale")
        for key in ("value", "unit"):
            if key not in spec:
                check.fail(f"[physical_units] code_scale needs {key!r}, found {sorted(spec)}")
        value = check.number(spec["value"], "[physical_units] code_scale value")
        if not value > 0:
            check.fail(f"[physical_units] code_scale value must be positive, found {value!r}")
        unit = check.text(spec["unit"], "[physical_units] code_scale unit", tuple(SCALE_UNITS))
        scale = scale_of(value, unit, units)
        if "length_unit" in section:
            length = check.text(section["length_unit"], "[physical_units] length_unit", ("m", "cm"))
            length_factor = to_code_units(1.0, length, scale)
        if "time_unit" in section:
            check.text(section["time_unit"], "[physical_units] time_unit", ("s",))
            time_factor = to_code_units(1.0, "s", scale)
    factors = {}
    for name, q in quantities.items():
        if not isinstance(q, dict) or "unit" not in q:
            continue
        where = f"[quantities.{name}]"
        if name not in QUANTITY_UNITS:
            check.fail(f"{where} takes no unit (unit keys apply to {', '.join(QUANTITY_UNITS)}); "
                       f"found unit = {q['unit']!r}")
        unit = check.text(q["unit"], f"{where} unit", QUANTITY_UNITS[name])
        if scale is None:
            check.fail(f"{where} unit = {unit!r} needs [physical_units] code_scale (the code "
                       "unit the stored values are converted to)")
        factors[name] = to_code_units(1.0, unit, scale)
    return MappingUnits(scale, length_factor, time_factor), factors
