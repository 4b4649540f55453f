"""Every ``Examples`` section in the package's docstrings runs and prints what it shows.

The examples are part of the documentation a user copies from; running them here keeps them
true. Each module with examples is one test case.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import emsource


def _modules_with_examples():
    names = []
    for info in pkgutil.walk_packages(emsource.__path__, "emsource."):
        module = importlib.import_module(info.name)
        if any(test.examples for test in doctest.DocTestFinder().find(module)):
            names.append(info.name)
    return sorted(names)


MODULES = _modules_with_examples()


def test_the_package_has_examples():
    # The public entry points carry examples; losing them all would make this file vacuous.
    assert "emsource.sources" in MODULES and len(MODULES) >= 5, MODULES


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    report = []
    for test in doctest.DocTestFinder().find(module):
        if test.examples:
            runner.run(test, out=report.append)
    result = runner.summarize(verbose=False)
    assert result.attempted > 0
    assert result.failed == 0, "".join(report)
