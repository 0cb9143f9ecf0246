"""Shared test helpers: dimension parametrisation and a reproducible random generator.

Keep this file small and generic; fixtures for one module belong in that module.

* ``dims(2, 3, 4)`` parametrises a test over ``dim`` with readable ids (``2d``, ``3d``, ...);
  ``ALL_DIMS`` is the default range every dimension-generic check runs over.
* ``rng`` is a ``numpy.random.Generator`` seeded from the test's node id, so each test (and each
  parametrised case) draws its own fixed stream: reruns are identical, and adding a test does not
  shift the numbers another test sees.
"""

from __future__ import annotations

import zlib
from collections.abc import Sequence

import numpy as np
import pytest

ALL_DIMS: tuple[int, ...] = (2, 3, 4, 5)


def dim_id(n: int) -> str:
    """Readable pytest id of a dimension: ``4`` -> ``'4d'``."""
    return f"{n}d"


def dims(*values: int, name: str = "dim") -> pytest.MarkDecorator:
    """``@dims(2, 3, 4)``: parametrise over the dimension argument ``name`` (default ``dim``).

    With no values, use :data:`ALL_DIMS`.
    """
    vals: Sequence[int] = values or ALL_DIMS
    return pytest.mark.parametrize(name, vals, ids=[dim_id(v) for v in vals])


@pytest.fixture
def rng(request: pytest.FixtureRequest) -> np.random.Generator:
    """A generator seeded from the test's node id (stable across runs and test-order changes)."""
    return np.random.default_rng(zlib.crc32(request.node.nodeid.encode()))
