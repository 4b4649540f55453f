"""The forms in which the package accepts the electromagnetic field: one table, one seam.

A form says what the caller's field arrays hold. Each row names the form (the value of the
``field_index`` option of the public functions), the arguments it takes with their meaning,
and the code of its point converter in :mod:`emsource.kernels.electromagnetic`, which turns
the stored components into E^i, E_i, B^i, B_i at every grid point inside the kernels (no
whole-grid conversion, no copy).

To add a form: a code and a branch with its point function in
:func:`emsource.kernels.electromagnetic.fields_both_indices`, the code in
``emsource.kernels.sources.INPUT_FORMS`` (one vectorised driver per form), a row here, and a
test that
compares the sources from the new form with those from :data:`CONTRAVARIANT` data converted
by a plain-NumPy reference (``tests/test_input_forms.py``).
"""

from __future__ import annotations

from typing import NamedTuple

from .kernels import electromagnetic as point_physics

__all__ = ["InputForm", "FORMS", "CONTRAVARIANT", "COVARIANT", "DENSITIZED", "input_form"]


class InputForm(NamedTuple):
    """One way of storing E and B.

    Attributes
    ----------
    name : str
        The option value that selects it (``field_index=name``).
    code : int
        Its converter's code in :mod:`emsource.kernels.electromagnetic`.
    arguments : tuple of (str, str)
        The field arguments it takes, each with what its components are.
    """

    name: str
    code: int
    arguments: tuple


CONTRAVARIANT = InputForm(
    "upper", point_physics.FORM_CONTRAVARIANT,
    (("E", "E^i, the electric field measured by the normal observer, (3, *grid)"),
     ("B", "B^i, the magnetic field measured by the normal observer, (3, *grid)")))

COVARIANT = InputForm(
    "lower", point_physics.FORM_COVARIANT,
    (("E", "E_i = gamma_ij E^j, (3, *grid)"),
     ("B", "B_i = gamma_ij B^j, (3, *grid)")))

DENSITIZED = InputForm(
    "densitized", point_physics.FORM_DENSITIZED,
    (("E", "sqrt(gamma) E^i, gamma = det gamma_ij of the physical metric, (3, *grid)"),
     ("B", "sqrt(gamma) B^i, (3, *grid)")))

#: Every form, by the name that selects it.
FORMS = {form.name: form for form in (CONTRAVARIANT, COVARIANT, DENSITIZED)}


def input_form(function: str, name) -> InputForm:
    """The form selected by ``field_index=name``, or a ValueError that lists the choices."""
    try:
        return FORMS[name]
    except (KeyError, TypeError):
        raise ValueError(f"{function}: field_index must be one of {tuple(FORMS)}, "
                         f"found {name!r}") from None
