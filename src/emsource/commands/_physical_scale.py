"""The physical scale of a snapshot command: ``--mass`` / ``--code-scale`` or the mapping's
``[physical_units] code_scale`` (one code unit of length, time or mass, G = c = 1,
:mod:`emsource.physical_units`). Shared by ``integrate``, ``balance`` and ``radiation``, so that
every command converts with the same options, the same rule and the same factors.
"""

from __future__ import annotations

import argparse
import math

from ._snapshot_options import positive_number

__all__ = ["CodeScaleAction", "add_scale_options", "chosen_scale"]


class CodeScaleAction(argparse.Action):
    """``--code-scale VALUE UNIT``: a positive number and a unit of
    :data:`emsource.physical_units.SCALE_UNITS` (anything else is a usage error, exit 2)."""

    def __call__(self, parser, namespace, values, option_string=None):
        from ..physical_units import SCALE_UNITS

        text, unit = values
        try:
            value = positive_number(text, "the code scale")
        except argparse.ArgumentTypeError as error:
            parser.error(f"argument {option_string}: {error}")
        if unit not in SCALE_UNITS:
            parser.error(f"argument {option_string}: unit must be one of "
                         f"{', '.join(SCALE_UNITS)}, found {unit!r}")
        setattr(namespace, self.dest, (value, unit))


def add_scale_options(parser, what="cgs and SI values"):
    """``--mass MSUN`` and ``--code-scale VALUE UNIT``."""
    parser.add_argument("--mass", metavar="MSUN",
                        type=lambda text: positive_number(text, "mass", " of solar masses"),
                        help=f"mass scale in solar masses: also report {what}")
    parser.add_argument("--code-scale", nargs=2, metavar=("VALUE", "UNIT"), action=CodeScaleAction,
                        help="one code unit of length (m, cm), time (s) or mass (g, kg, "
                             f"solar_mass), e.g. '--code-scale 1 m': also report {what} "
                             "(default: the mapping's [physical_units] code_scale)")


def chosen_scale(args, units, mapping_scale):
    """(scale or None, where it came from, usage error message or None).

    The options win over the mapping's ``code_scale``; both given and disagreeing is a usage
    error: the mapping already converted the stored SI or cgs values with its own scale, so
    reporting them with another would give wrong physical numbers.
    """
    from ..physical_units import physical_scale, scale_of

    if args.mass is not None and args.code_scale is not None:
        return None, "", "give --mass or --code-scale, not both"
    if args.mass is not None:
        scale, origin = physical_scale(args.mass, units), "--mass"
    elif args.code_scale is not None:
        scale, origin = scale_of(*args.code_scale, units), "--code-scale"
    else:
        scale, origin = mapping_scale, "the mapping's code_scale"
    if scale is not None and mapping_scale is not None and not math.isclose(
            scale.mass_solar, mapping_scale.mass_solar, rel_tol=1e-12):
        return None, origin, (f"{origin} gives M = {scale.mass_solar:.6g} M_sun, but the "
                              f"mapping's code_scale is M = {mapping_scale.mass_solar:.6g} M_sun; "
                              "leave the option out or make them agree")
    return scale, origin, None
