"""Tests of ``core/geometry/polytopes.py``: the regular polytope builders.

References (named again beside each check):

* Coxeter, *Regular Polytopes* (from memory: Table I): element counts of the regular polytopes;
  4-volumes by edge length a: 5-cell sqrt(5) a^4 / 96, tesseract a^4, 16-cell a^4 / 6, 24-cell
  2 a^4, 120-cell (15/4)(105 + 47 sqrt 5) a^4, 600-cell (25/4)(2 + sqrt 5) a^4.
* Closed forms in every n (from memory, common practice): k-faces of the n-simplex C(n+1, k+1),
  of the n-cube 2^(n-k) C(n, k), of the n-orthoplex 2^(k+1) C(n, k+1); volumes by edge a: simplex
  a^n / n! sqrt((n+1) / 2^n), cube a^n, orthoplex (sqrt(2) a)^n / n!.
* scipy.spatial.ConvexHull for the volume of each vertex set.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.errors import InputError
from ndrigid.core.geometry.polytopes import cell_24, cell_120, cell_600, hypercube, orthoplex, regular_simplex
from ndrigid.core.geometry.shapes import Box, ConvexPolytope
from scipy.spatial import ConvexHull

S5 = math.sqrt(5.0)

FAMILIES: dict[
    str, tuple[Callable[..., ConvexPolytope], Callable[[int, int], int], Callable[[int, float], float]]
] = {
    "simplex": (
        regular_simplex,
        lambda n, k: math.comb(n + 1, k + 1),
        lambda n, a: a**n / math.factorial(n) * math.sqrt((n + 1) / 2**n),
    ),
    "cube": (hypercube, lambda n, k: 2 ** (n - k) * math.comb(n, k), lambda n, a: a**n),
    "orthoplex": (
        orthoplex,
        lambda n, k: 2 ** (k + 1) * math.comb(n, k + 1),
        lambda n, a: (math.sqrt(2.0) * a) ** n / math.factorial(n),
    ),
}

# name: (builder, (vertices, edges, faces, cells), 4-volume for edge 1) -- Coxeter (from memory)
FOUR_D: dict[str, tuple[Callable[..., ConvexPolytope], tuple[int, int, int, int], float]] = {
    "5-cell": (lambda **kw: regular_simplex(4, **kw), (5, 10, 10, 5), S5 / 96),
    "tesseract": (lambda **kw: hypercube(4, **kw), (16, 32, 24, 8), 1.0),
    "16-cell": (lambda **kw: orthoplex(4, **kw), (8, 24, 32, 16), 1 / 6),
    "24-cell": (cell_24, (24, 96, 96, 24), 2.0),
    "120-cell": (cell_120, (600, 1200, 720, 120), 15 / 4 * (105 + 47 * S5)),
    "600-cell": (cell_600, (120, 720, 1200, 600), 25 / 4 * (2 + S5)),
}


@pytest.fixture(scope="module")
def four_d() -> dict[str, ConvexPolytope]:
    """The six regular 4-polytopes at edge 1.3 (built once: the 120-cell takes a few tens of ms)."""
    return {name: build(edge=1.3) for name, (build, _, _) in FOUR_D.items()}


@pytest.mark.parametrize("family", list(FAMILIES))
@dims(2, 3, 4, 5, 6)
def test_family_counts_and_volume(family: str, dim: int) -> None:
    """k-face counts for every k and the volume by edge length (closed forms, from memory), and the
    volume of the vertex set by scipy ConvexHull."""
    build, count, volume = FAMILIES[family]
    a = 0.7
    poly = build(dim, edge=a)
    for k in range(dim):
        assert len(poly.faces(k)) == count(dim, k), f"{k}-faces"
    assert len(poly.vertices) == count(dim, 0)
    assert len(poly.edges) == count(dim, 1)
    assert len(poly.facet_normals) == count(dim, dim - 1)
    vol = poly.mass_properties().volume
    assert vol == pytest.approx(volume(dim, a), rel=1e-12)
    assert vol == pytest.approx(ConvexHull(poly.vertices).volume, rel=1e-12)


@pytest.mark.parametrize("name", list(FOUR_D))
def test_regular_4_polytopes(name: str, four_d: dict[str, ConvexPolytope]) -> None:
    """Vertex, edge, face and cell counts and 4-volume by edge length (Coxeter, Regular Polytopes,
    from memory), volume against scipy ConvexHull; every edge has the requested length and every
    vertex the same distance from the centre (regularity)."""
    _, counts, unit_volume = FOUR_D[name]
    poly = four_d[name]
    got = (len(poly.vertices), len(poly.edges), len(poly.faces(2)), len(poly.facet_normals))
    assert got == counts
    vol = poly.mass_properties().volume
    assert vol == pytest.approx(unit_volume * 1.3**4, rel=1e-12)
    assert vol == pytest.approx(ConvexHull(poly.vertices).volume, rel=1e-12)
    e = poly.vertices[poly.edges[:, 0]] - poly.vertices[poly.edges[:, 1]]
    np.testing.assert_allclose(np.linalg.norm(e, axis=1), 1.3, rtol=1e-12)
    r = np.linalg.norm(poly.vertices, axis=1)
    np.testing.assert_allclose(r, r[0], rtol=1e-12)
    # a regular polytope centred at the origin has an isotropic covariance (symmetry, common practice)
    cov = poly.mass_properties().covariance
    np.testing.assert_allclose(cov, np.eye(4) * np.trace(cov) / 4, atol=1e-12 * np.trace(cov))


@pytest.mark.parametrize("name", list(FOUR_D))
def test_facets_of_4_polytopes(name: str, four_d: dict[str, ConvexPolytope]) -> None:
    """Cells of the regular 4-polytopes (Coxeter, from memory): tetrahedra (4 vertices, 6 edges) for
    the 5-, 16- and 600-cell, cubes (8, 12) for the tesseract, octahedra (6, 12) for the 24-cell,
    dodecahedra (20, 30) for the 120-cell."""
    cell = {
        "5-cell": (4, 6),
        "16-cell": (4, 6),
        "600-cell": (4, 6),
        "tesseract": (8, 12),
        "24-cell": (6, 12),
        "120-cell": (20, 30),
    }[name]
    poly = four_d[name]
    assert {(len(fv), len(fe)) for fv, fe in zip(poly.facet_vertices, poly.facet_edges, strict=True)} == {
        cell
    }


@pytest.mark.parametrize("name", ["24-cell", "600-cell", "simplex-5", "orthoplex-3"])
def test_sizing_by_circumradius(name: str) -> None:
    """circumradius= puts every vertex at that distance (definition of the circumradius)."""
    build: Callable[..., Any] = {
        "24-cell": cell_24,
        "600-cell": cell_600,
        "simplex-5": lambda **kw: regular_simplex(5, **kw),
        "orthoplex-3": lambda **kw: orthoplex(3, **kw),
    }[name]
    poly = build(circumradius=2.5)
    np.testing.assert_allclose(np.linalg.norm(poly.vertices, axis=1), 2.5, rtol=1e-12)
    np.testing.assert_allclose(poly.vertices.mean(axis=0), 0.0, atol=1e-12)


def test_hypercube_is_a_box() -> None:
    """The n-cube builder returns a Box with half-extent a/2; circumradius a sqrt(n)/2 (common practice)."""
    cube = hypercube(5, circumradius=math.sqrt(5.0))
    assert isinstance(cube, Box)
    np.testing.assert_allclose(cube.half_extents, 1.0)


@pytest.mark.parametrize(
    "call",
    [
        lambda: cell_24(edge=1.0, circumradius=1.0),
        lambda: cell_600(edge=-1.0),
        lambda: cell_120(circumradius=0.0),
        lambda: regular_simplex(1),
        lambda: orthoplex(3, edge=float("nan")),
    ],
    ids=["both-sizes", "negative-edge", "zero-radius", "dim-1", "nan-edge"],
)
def test_bad_sizes_rejected(call: Callable[[], Any]) -> None:
    """Bad sizes and dimensions raise InputError."""
    with pytest.raises(InputError):
        call()
