"""Builders for the regular convex polytopes: the n-simplex, n-cube and n-orthoplex in every n >= 2,
and in 4-D the 24-cell, 120-cell and 600-cell.

Each builder starts from the standard coordinates of its polytope (listed beside it, with their
edge length and circumradius) and scales them to the requested size: give ``edge`` (edge length) or
``circumradius`` (centre-to-vertex distance), not both; with neither the edge length is 1. All are
centred on the origin. The n-cube is returned as a :class:`Box` (a ConvexPolytope built without a
hull); the others go through :class:`ConvexPolytope`, so their facets, edges and faces come from
the same face-structure code as user polytopes.
"""

from __future__ import annotations

import itertools
import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError, dimension, shape_size
from .shapes import Box, ConvexPolytope

Array = NDArray[np.float64]

__all__ = ["cell_24", "cell_120", "cell_600", "hypercube", "orthoplex", "regular_simplex"]

PHI = (1.0 + math.sqrt(5.0)) / 2.0  # golden ratio


def _scale(edge: Any, circumradius: Any, unit_edge: float, unit_radius: float) -> float:
    """Factor taking coordinates with edge ``unit_edge`` and circumradius ``unit_radius`` to the request."""
    if edge is not None and circumradius is not None:
        raise InputError(
            f"edge, circumradius: give one size, not both (got edge={edge!r}, circumradius={circumradius!r})"
        )
    if circumradius is not None:
        return shape_size("circumradius", circumradius) / unit_radius
    return shape_size("edge", 1.0 if edge is None else edge) / unit_edge


def _signed(base: tuple[float, ...]) -> list[tuple[float, ...]]:
    """All sign changes of the non-zero entries of ``base``."""
    nz = [i for i, x in enumerate(base) if x != 0.0]
    out = []
    for signs in itertools.product((1.0, -1.0), repeat=len(nz)):
        v = list(base)
        for i, s in zip(nz, signs, strict=True):
            v[i] *= s
        out.append(tuple(v))
    return out


def _permuted(base: tuple[float, ...], even_only: bool) -> Array:
    """Distinct (even, or all) coordinate permutations of every sign change of ``base``."""
    rows = []
    for perm in itertools.permutations(range(len(base))):
        inversions = sum(perm[a] > perm[b] for a in range(len(perm)) for b in range(a + 1, len(perm)))
        if even_only and inversions % 2:
            continue
        for v in _signed(base):
            rows.append([v[p] for p in perm])
    arr = np.array(rows)
    # permutations of repeated entries coincide; merge them (exact, the entries are identical floats)
    return np.unique(arr, axis=0)


def regular_simplex(n: int, *, edge: Any = None, circumradius: Any = None) -> ConvexPolytope:
    """The regular n-simplex (n + 1 vertices).

    Standard coordinates: the basis vectors e_0..e_n of R^(n+1), which lie in the hyperplane
    ``sum x = 1``, written in the orthonormal Helmert basis of that hyperplane (row k has k entries
    ``1/sqrt(k(k+1))`` then ``-k/sqrt(k(k+1))``). Edge sqrt(2), circumradius sqrt(n / (n + 1)).
    """
    n = dimension("n", n)
    H = np.zeros((n, n + 1))
    for k in range(1, n + 1):
        H[k - 1, :k] = 1.0
        H[k - 1, k] = -float(k)
        H[k - 1] /= math.sqrt(k * (k + 1))
    V = H.T  # (n+1, n): coordinates of e_j; their mean is 0 because every Helmert row sums to 0
    f = _scale(edge, circumradius, math.sqrt(2.0), math.sqrt(n / (n + 1)))
    return ConvexPolytope(V * f)


def hypercube(n: int, *, edge: Any = None, circumradius: Any = None) -> Box:
    """The n-cube, as a :class:`Box` (2^n vertices ``(+-1, ..., +-1)``: edge 2, circumradius sqrt(n))."""
    n = dimension("n", n)
    f = _scale(edge, circumradius, 2.0, math.sqrt(n))
    return Box(np.full(n, f))


def orthoplex(n: int, *, edge: Any = None, circumradius: Any = None) -> ConvexPolytope:
    """The n-orthoplex (cross-polytope): 2n vertices ``+-e_i``; edge sqrt(2), circumradius 1."""
    n = dimension("n", n)
    f = _scale(edge, circumradius, math.sqrt(2.0), 1.0)
    return ConvexPolytope(np.concatenate([np.eye(n), -np.eye(n)]) * f)


def cell_24(*, edge: Any = None, circumradius: Any = None) -> ConvexPolytope:
    """The 24-cell: all permutations of ``(+-1, +-1, 0, 0)``; edge sqrt(2), circumradius sqrt(2)."""
    V = _permuted((1.0, 1.0, 0.0, 0.0), even_only=False)
    f = _scale(edge, circumradius, math.sqrt(2.0), math.sqrt(2.0))
    return ConvexPolytope(V * f)


def cell_600(*, edge: Any = None, circumradius: Any = None) -> ConvexPolytope:
    """The 600-cell (120 vertices, circumradius 1, edge 1/phi).

    Standard coordinates: the 16 points ``(+-1/2, +-1/2, +-1/2, +-1/2)``, the 8 permutations of
    ``(+-1, 0, 0, 0)`` and the 96 even permutations of ``(+-phi, +-1, +-1/phi, 0) / 2``.
    """
    V = np.concatenate(
        [
            _permuted((0.5, 0.5, 0.5, 0.5), even_only=False),
            _permuted((1.0, 0.0, 0.0, 0.0), even_only=False),
            _permuted((PHI / 2, 0.5, 1 / (2 * PHI), 0.0), even_only=True),
        ]
    )
    f = _scale(edge, circumradius, 1.0 / PHI, 1.0)
    return ConvexPolytope(V * f)


def cell_120(*, edge: Any = None, circumradius: Any = None) -> ConvexPolytope:
    """The 120-cell (600 vertices, circumradius sqrt(8), edge 2/phi^2 = 3 - sqrt(5)).

    Standard coordinates: all permutations of ``(0, 0, +-2, +-2)``, ``(+-1, +-1, +-1, +-sqrt5)``,
    ``(+-phi^-2, +-phi, +-phi, +-phi)`` and ``(+-phi^-1, +-phi^-1, +-phi^-1, +-phi^2)``, and the even
    permutations of ``(0, +-phi^-2, +-1, +-phi^2)``, ``(0, +-phi^-1, +-phi, +-sqrt5)`` and
    ``(+-phi^-1, +-1, +-phi, +-2)``.
    """
    s5 = math.sqrt(5.0)
    V = np.concatenate(
        [
            _permuted((0.0, 0.0, 2.0, 2.0), even_only=False),
            _permuted((1.0, 1.0, 1.0, s5), even_only=False),
            _permuted((PHI**-2, PHI, PHI, PHI), even_only=False),
            _permuted((1 / PHI, 1 / PHI, 1 / PHI, PHI**2), even_only=False),
            _permuted((0.0, PHI**-2, 1.0, PHI**2), even_only=True),
            _permuted((0.0, 1 / PHI, PHI, s5), even_only=True),
            _permuted((1 / PHI, 1.0, PHI, 2.0), even_only=True),
        ]
    )
    f = _scale(edge, circumradius, 2.0 / PHI**2, math.sqrt(8.0))
    return ConvexPolytope(V * f)
