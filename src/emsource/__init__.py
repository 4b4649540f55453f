"""emsource: electromagnetic stress-energy sources in 3+1 form for numerical relativity.

The main entry points are :func:`adm_sources` (rho, S_i, S_ij, S for the 3+1 equations) and
:func:`stress_energy_4d` (T_ab or T^ab). Signs, units and layouts: see the README.
"""

__version__ = "0.1.0"

__all__ = ["AdmSources", "GridPointError", "adm_sources", "stress_energy_4d", "__version__"]

# The names above are loaded on first use (PEP 562), so that ``import emsource.cli`` stays
# light: the command line installs its signal handlers before NumPy and Numba are imported,
# and a Ctrl-C during start-up exits cleanly with 130.
_SOURCES_NAMES = ("AdmSources", "GridPointError", "adm_sources", "stress_energy_4d")


def __getattr__(name):
    if name in _SOURCES_NAMES:
        from . import sources

        # Kept as a module global: later look-ups (``emsource.adm_sources`` in a loop) find it
        # directly instead of running this function and an import statement (about 1 us).
        value = globals()[name] = getattr(sources, name)
        return value
    if name == "unit_systems":
        import importlib

        return importlib.import_module(".unit_systems", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_SOURCES_NAMES) + ["unit_systems"])
