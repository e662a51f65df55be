"""Every docstring example in the package runs and gives what it shows (doctest)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import branchline


def _module_names() -> list[str]:
    names = ["branchline"]
    for info in pkgutil.walk_packages(branchline.__path__, prefix="branchline."):
        if not info.name.endswith("__main__"):  # importing it runs the command line
            names.append(info.name)
    return sorted(names)


def _with_examples(name: str) -> bool:
    module = importlib.import_module(name)
    return any(test.examples for test in doctest.DocTestFinder().find(module))


MODULES = [name for name in _module_names() if _with_examples(name)]


def test_examples_are_found():
    # The engine, tracing, dispatch and vocabulary at least carry runnable examples.
    assert {
        "branchline.continuation.engine",
        "branchline.problems.tracing",
        "branchline.events.brackets",
        "branchline.vocabulary",
    } <= set(MODULES)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"
