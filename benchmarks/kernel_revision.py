"""A kernel module as it was at an earlier git revision, loaded beside the current one.

``revision_module("b89a3b2", "conservation")`` reads ``kernels/conservation.py`` at that revision
with ``git show`` and imports it as ``emsource.kernels._revision_b89a3b2_conservation``: its
relative imports (``from .stencils import ...``) resolve to the current point functions, so the old loops
run on the same physics and can be timed beside the current ones in one process, without a copy
of the old kernel in the tree. The file is written to a directory of its own per revision and
rewritten only when its text changes, so Numba's disk cache keeps the compiled old kernels
between runs. The module is entered in ``sys.modules`` under a name of its own per revision:
Numba records a cached kernel's module by name and imports it again when it loads the kernel
from its disk cache, so a module missing there made the second run of a benchmark fail
("No module named '<dynamic>'"), and two revisions of one kernel must not share a name.
``variant_module`` loads the current file with a text edit the same way (one change of a
kernel timed beside the kernel). Needs a git checkout of the project (benchmarks only).
"""

from __future__ import annotations

import importlib.util
import os
import re
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

__all__ = ["revision_module", "variant_module"]


def revision_module(rev: str, kernel: str):
    """``kernels/<kernel>.py`` at git revision ``rev`` as the module
    ``emsource.kernels._revision_<rev>_<kernel>`` (characters of ``rev`` that cannot be part of
    a name replaced by ``_``)."""
    tag = re.sub(r"\W", "_", rev)
    name = f"emsource.kernels._revision_{tag}_{kernel}"
    if name in sys.modules:
        return sys.modules[name]
    source = subprocess.run(["git", "show", f"{rev}:kernels/{kernel}.py"], cwd=ROOT, check=True,
                            capture_output=True, text=True).stdout
    return _load(name, f"emsource-revision-{rev}", f"{kernel}_{tag}.py", source)


def variant_module(kernel: str, tag: str, edits):
    """The current ``kernels/<kernel>.py`` with each (old, new) text of ``edits`` replaced once,
    as the module ``emsource.kernels._variant_<tag>_<kernel>``: the same kernel with one change
    (a call left out, say), timed beside the current one. Raises ValueError where an old text
    is not in the file (the kernel changed under the benchmark)."""
    name = f"emsource.kernels._variant_{tag}_{kernel}"
    if name in sys.modules:
        return sys.modules[name]
    with open(os.path.join(ROOT, "kernels", f"{kernel}.py")) as handle:
        source = handle.read()
    for old, new in edits:
        if old not in source:
            raise ValueError(f"variant {tag!r} of kernels/{kernel}.py: text not found: {old!r}")
        source = source.replace(old, new, 1)
    return _load(name, "emsource-variants", f"{kernel}_{tag}.py", source)


def _load(name, folder, file_name, source):
    """Import ``source`` as module ``name`` from ``file_name`` in a temporary ``folder``."""
    directory = os.path.join(tempfile.gettempdir(), folder)
    os.makedirs(directory, exist_ok=True)
    # A file name of its own: cache entries written before the module had a name in sys.modules
    # (under the old file name) recorded no importable module and cannot be loaded.
    path = os.path.join(directory, file_name)
    try:
        with open(path) as handle:
            unchanged = handle.read() == source
    except OSError:
        unchanged = False
    if not unchanged:
        with open(path, "w") as handle:
            handle.write(source)
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[name]
        raise
    return module
