"""A kernel module as it was at an earlier git revision, loaded beside the current one.

``revision_module("b89a3b2", "conservation")`` reads ``kernels/conservation.py`` at that revision
with ``git show`` and imports it as ``emsource.kernels._revision_conservation``: its relative
imports (``from .stencils import ...``) resolve to the current point functions, so the old loops
run on the same physics and can be timed beside the current ones in one process, without a copy
of the old kernel in the tree. The file is written to a directory of its own per revision and
rewritten only when its text changes, so Numba's disk cache keeps the compiled old kernels
between runs. Needs a git checkout of the project (benchmarks only).
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

__all__ = ["revision_module"]


def revision_module(rev: str, kernel: str):
    """``kernels/<kernel>.py`` at git revision ``rev`` as the module
    ``emsource.kernels._revision_<kernel>``."""
    source = subprocess.run(["git", "show", f"{rev}:kernels/{kernel}.py"], cwd=ROOT, check=True,
                            capture_output=True, text=True).stdout
    directory = os.path.join(tempfile.gettempdir(), f"emsource-revision-{rev}")
    os.makedirs(directory, exist_ok=True)
    path = os.path.join(directory, f"revision_{kernel}.py")
    try:
        with open(path) as handle:
            unchanged = handle.read() == source
    except OSError:
        unchanged = False
    if not unchanged:
        with open(path, "w") as handle:
            handle.write(source)
    spec = importlib.util.spec_from_file_location(f"emsource.kernels._revision_{kernel}", path)
    module = importlib.util.module_from_spec(spec)
    # Registered before it runs: Numba's disk cache stores the module name of each compiled
    # kernel and imports it again when it loads the kernel in a later process (an unregistered
    # module failed there with "No module named '<dynamic>'").
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module
