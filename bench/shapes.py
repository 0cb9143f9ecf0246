"""Benchmark of shape construction (hull and face structure) and mass properties.

``run_shape_bench()`` returns one row per measurement and prints nothing; the bench command formats
the rows. Each time is the best of several repeats (``time.perf_counter``), which filters out the
noise of a shared machine. Mass-property rows time the uncached computation (the shapes cache
their density-1 record after the first call, so timing ``mass_properties()`` twice would measure a
dictionary lookup).

Target (issue 3): mass properties of a 10,000-cell 4-D mesh in under 20 ms.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np
from ndrigid.core.geometry.polytopes import cell_24, cell_120, cell_600
from ndrigid.core.geometry.shapes import ConvexPolytope, Shape, SimplexMesh


def _best(fn: Callable[[], Any], repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def sphere_mesh_4d(cells: int = 10_000, seed: int = 0) -> SimplexMesh:
    """A closed 4-D mesh with at least ``cells`` cells: the hull boundary of points on the 3-sphere.

    A random hull of N points on the 3-sphere has about 6.6 N facets; points are added until the
    boundary has enough cells.
    """
    rng = np.random.default_rng(seed)
    npts = int(cells / 6.5) + 1
    while True:
        X = rng.normal(size=(npts, 4))
        X /= np.linalg.norm(X, axis=1, keepdims=True)
        mesh = ConvexPolytope(X).boundary_mesh()
        if len(mesh.cells) >= cells:
            return mesh
        npts = int(npts * 1.02) + 1


def _uncached_mass(shape: Shape) -> Callable[[], Any]:
    return lambda: shape._compute_mass_properties()


def run_shape_bench(repeats: int = 5) -> list[dict[str, Any]]:
    """Rows ``{"name", "seconds", "detail"}``: hull and mass-property times for the 24-, 600- and
    120-cell and for a 10,000-cell 4-D mesh."""
    rows: list[dict[str, Any]] = []
    for name, build in (("24-cell", cell_24), ("600-cell", cell_600), ("120-cell", cell_120)):
        shape = build()
        detail = (
            f"{len(shape.vertices)} vertices, {len(shape.facet_normals)} facets, {len(shape.edges)} edges"
        )
        rows.append({"name": f"{name} hull and faces", "seconds": _best(build, repeats), "detail": detail})
        rows.append(
            {
                "name": f"{name} mass properties",
                "seconds": _best(_uncached_mass(shape), repeats),
                "detail": detail,
            }
        )
    mesh = sphere_mesh_4d()
    V, C = np.asarray(mesh.vertices), np.asarray(mesh.cells)
    detail = f"{len(C)} cells, {len(V)} vertices"
    rows.append(
        {
            "name": "4-D mesh validation (closed, oriented)",
            "seconds": _best(lambda: SimplexMesh(V, C), repeats),
            "detail": detail,
        }
    )
    rows.append(
        {
            "name": "4-D mesh mass properties",
            "seconds": _best(_uncached_mass(mesh), repeats),
            "detail": detail + "; target < 0.020 s",
        }
    )
    return rows
