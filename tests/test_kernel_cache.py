"""The kernels' disk cache is keyed on every file of the kernels folder, not only the kernel's own.

Numba stamps a cached kernel with the source of the file that defines it; the kernels inline
point functions from other files (metric.py, electromagnetic.py), so without the tree stamp an
edit there, or a package upgrade over an old cache, would run stale machine code. These tests
recompute the stamp independently (hashlib over the folder) and check that the cache of a real
kernel carries it, and that an edit of an inlined file changes it.
"""

import hashlib
import os
import shutil

import numpy as np

import emsource
from emsource.kernels import _compile
from emsource.kernels import sources as source_kernels


def _independent_stamp(directory):
    digest = hashlib.sha256()
    for name in sorted(n for n in os.listdir(directory) if n.endswith(".py")):
        digest.update(name.encode())
        with open(os.path.join(directory, name), "rb") as f:
            digest.update(f.read())
    return digest.hexdigest()


def test_kernel_cache_stamp_covers_the_whole_kernels_folder():
    gamma = np.zeros((6, 3, 3, 3))
    gamma[[0, 3, 5]] = 1.0
    emsource.adm_sources(gamma, np.ones((3, 3, 3, 3)), np.ones((3, 3, 3, 3)))
    locator = source_kernels.ADM_SOURCES_FLAT[0]._cache._impl._locator
    own_stamp, folder_stamp = locator.get_source_stamp()
    assert folder_stamp == _independent_stamp(os.path.dirname(source_kernels.__file__))
    assert type(locator).__name__.startswith("TreeStamped")


def test_an_edit_of_an_inlined_file_changes_the_stamp(tmp_path):
    copy = tmp_path / "kernels"
    shutil.copytree(_compile.KERNEL_DIRECTORY, copy, ignore=shutil.ignore_patterns("__pycache__"))
    before = _compile.tree_stamp(str(copy))
    assert before == _compile.tree_stamp()
    metric = copy / "metric.py"
    metric.write_text(metric.read_text().replace("d2 = gyy - l21 * gxy", "d2 = gyy - gxy * l21"))
    assert _compile.tree_stamp(str(copy)) != before
