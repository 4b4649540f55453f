"""The layers of the package, and the direction in which its imports may run.

Every module of ``emsource`` belongs to one layer (the table below, also drawn in DEVELOPERS.md,
"Architecture"). A module may import modules of its own layer or of a lower one, never of a
higher one, and the imports between the package's modules form no cycle. The test reads the
source with ``ast`` (imports inside functions count too), so it needs no import side effects.
A module that is in no layer fails the test: place a new module in the table when you add it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: Layers from the bottom up: (name, module-name prefixes). The longest matching prefix wins.
LAYERS = (
    ("kernels", ("emsource.kernels",)),
    ("foundation", ("emsource._arguments", "emsource.errors", "emsource.grid", "emsource.unit_systems",
                    "emsource.quantities", "emsource.input_forms", "emsource._threading",
                    "emsource.interruption", "emsource._deprecated_names",
                    "emsource.spin_harmonics", "emsource.staggering", "emsource.metric_forms",
                    "emsource.grid_arrays", "emsource._call_plans")),
    ("point physics", ("emsource.sources", "emsource.energy_flux", "emsource.reductions",
                       "emsource.physical_units", "emsource.newman_penrose",
                       "emsource.potential", "emsource.patches",
                       "emsource.faraday", "emsource.ideal_mhd", "emsource.conformal")),
    ("package root", ("emsource",)),
    ("exact data", ("emsource.exact",)),
    ("diagnostics", ("emsource.conservation", "emsource.constraints", "emsource.unit_audit",
                     "emsource.convergence", "emsource.diagnosis")),
    ("snapshot files", ("emsource.snapshot", "emsource.io", "emsource.layout_mapping",
                        "emsource.streaming")),
    ("post-processing", ("emsource.integrals", "emsource.time_series",
                         "emsource.sample_grids", "emsource.radiation",
                         "emsource.radiation_output", "emsource.snapshot_balance",
                         "emsource.distributed")),
    ("command line", ("emsource.commands", "emsource.cli", "emsource.__main__")),
)


def _module_files():
    """Module name -> source file, for src/emsource and kernels/ (installed as emsource.kernels)."""
    files = {}
    for base, package in ((ROOT / "src" / "emsource", "emsource"), (ROOT / "kernels", "emsource.kernels")):
        for path in base.rglob("*.py"):
            parts = list(path.relative_to(base).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            files[".".join([package] + parts)] = path
    return files


FILES = _module_files()


def layer_of(module: str) -> int:
    best, rank = -1, None
    for index, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best:
                best, rank = len(prefix), index
    return rank


def imports_of(module: str) -> set:
    """The package modules that ``module`` imports (relative imports resolved)."""
    path = FILES[module]
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            names = []
            for alias in node.names:
                candidate = f"{target}.{alias.name}"
                names.append(candidate if candidate in FILES else target)
        else:
            continue
        for name in names:
            while name and name not in FILES:
                name = name.rpartition(".")[0]
            if name.startswith("emsource") and name != module:
                found.add(name)
    return found


def test_every_module_has_a_layer():
    unplaced = sorted(m for m in FILES if layer_of(m) is None)
    assert not unplaced, f"modules in no layer of tests/test_architecture.py: {unplaced}"


@pytest.mark.parametrize("module", sorted(FILES))
def test_imports_run_downwards(module):
    own = layer_of(module)
    upward = sorted(f"{target} ({LAYERS[layer_of(target)][0]})" for target in imports_of(module)
                    if layer_of(target) is not None and layer_of(target) > own)
    assert not upward, f"{module} ({LAYERS[own][0]}) imports a higher layer: {upward}"


def test_kernels_import_nothing_of_the_package_outside_kernels():
    for module in FILES:
        if layer_of(module) == 0:
            outside = sorted(t for t in imports_of(module) if layer_of(t) != 0)
            assert not outside, f"{module} imports {outside}"


#: Import pairs known to run both ways, to be removed by the snapshot-package restructuring
#: (issue "seams before growth", item 1). The test below fails when a listed pair is gone, so
#: that this list only ever shrinks.
KNOWN_CYCLES = set()


def test_known_cycles_are_still_there():
    for a, b in KNOWN_CYCLES:
        assert b in imports_of(a) and a in imports_of(b), f"{a} <-> {b} is fixed: remove it from KNOWN_CYCLES"


def test_no_import_cycles():
    graph = {m: imports_of(m) for m in FILES}
    for a, b in KNOWN_CYCLES:
        graph[a] = graph[a] - {b}
    state = {}

    def visit(module, trail):
        state[module] = "open"
        for target in sorted(graph[module]):
            # A package's __init__ re-exporting its own submodules is not a cycle of concepts.
            if target.startswith(module + "."):
                continue
            if state.get(target) == "open":
                cycle = trail[trail.index(target):] + [target] if target in trail else [module, target]
                pytest.fail(f"import cycle: {' -> '.join(cycle)}")
            if target not in state:
                visit(target, trail + [target])
        state[module] = "done"

    for module in sorted(graph):
        if module not in state:
            visit(module, [module])


def test_the_checker_sees_a_wrong_import(tmp_path, monkeypatch):
    """Negative control: an upward import written into a kernel module is reported."""
    fake = tmp_path / "fake_kernel.py"
    fake.write_text("from ..commands import integrate\n")
    monkeypatch.setitem(FILES, "emsource.kernels.fake_kernel", fake)
    assert "emsource.commands.integrate" in imports_of("emsource.kernels.fake_kernel")
    with pytest.raises(AssertionError, match="imports a higher layer"):
        test_imports_run_downwards("emsource.kernels.fake_kernel")
