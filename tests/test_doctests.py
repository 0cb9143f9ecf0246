"""The docstring examples of the public API run as doctests (under the installed import names, so
``ndrigid.core`` classes are the ones the examples build)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

PACKAGES = ["ndrigid.core", "ndrigid.adapters"]


def _modules() -> list[str]:
    names = []
    for pkg in PACKAGES:
        mod = importlib.import_module(pkg)
        names.append(pkg)
        for info in pkgutil.walk_packages(mod.__path__, pkg + "."):
            if ".kernels." in info.name + "." and info.name != "ndrigid.core.kernels":
                continue  # kernel templates are generated code, not public API
            names.append(info.name)
    return names


MODULES = _modules()


def test_the_public_api_has_examples() -> None:
    """The collection is not empty: the modules that carry examples are found and hold some."""
    found = {m: len(doctest.DocTestFinder().find(importlib.import_module(m))) for m in MODULES}
    with_examples = [m for m in MODULES if any(t.examples for t in
                                               doctest.DocTestFinder().find(importlib.import_module(m)))]
    assert {"ndrigid.core.collision.pairs", "ndrigid.core.world.simulation",
            "ndrigid.core.geometry.shapes", "ndrigid.core.geometry.slicing"} <= set(with_examples), found


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name: str) -> None:
    mod = importlib.import_module(name)
    result = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"
