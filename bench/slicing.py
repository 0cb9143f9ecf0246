"""Benchmark of world slicing: 1,000 4-D bodies (half boxes, half 24-cells) cut by the hyperplane x_3 = 0.

Every body is placed so that the hyperplane cuts it (the worst case: nothing is culled by the
bounding-sphere test) and turned by a random rotation, so every section is a generic 3-D polytope
with ordered faces. Times are the best of several repeats (``time.perf_counter``), which filters out
the noise of a shared machine.

* ``slice_world``  -- the batched sections, faces ordered for drawing (what a renderer needs), in the
  steady state of a game: per-shape tables built and face orientations remembered;
* ``first_call``   -- the first slice of the fresh shapes (builds the per-shape slicing tables, and
  the cut-pattern tables unless their combinatorial type was seen earlier in the process);
* ``face_soup``    -- flattening them into one face array for projection;
* ``records``      -- per-body Python records (a convenience, not the drawing path).

Target (issue 9): slicing 1,000 4-D bodies in under 5 ms. Measured (one core, ``OPENBLAS_NUM_THREADS=1``,
shared 2-core machine): 8.1-10.8 ms before the cut-pattern tables, 2.6-3.0 ms after; first call ~45 ms.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np
from ndrigid.core.algebra import Algebra
from ndrigid.core.geometry.polytopes import cell_24
from ndrigid.core.geometry.shapes import Box
from ndrigid.core.geometry.slicing import axis_flat, face_soup, slice_world
from ndrigid.core.world.simulation import Simulation


def _best(fn: Callable[[], Any], repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def bench_world(bodies: int = 1000, dim: int = 4, seed: int = 0) -> Simulation:
    """A static world of ``bodies`` boxes and 24-cells (4-D) or boxes and orthoplex-like boxes, all cut."""
    rng = np.random.default_rng(seed)
    alg = Algebra(dim)
    sim = Simulation(dim)
    box = Box(np.full(dim, 0.4))
    other = cell_24(circumradius=0.5) if dim == 4 else Box(np.linspace(0.2, 0.5, dim))
    B = rng.normal(size=(bodies, alg.k)) * 2.0
    rotors = alg.rotor(B)
    for i in range(bodies):  # building the scene, not timed
        pos = rng.uniform(-20.0, 20.0, size=dim)
        pos[dim - 1] = rng.uniform(-0.1, 0.1)  # within every body's reach of the hyperplane
        sim.add_body(box if i % 2 == 0 else other, position=pos, rotor=rotors[i], kind="static")
    return sim


def run_slicing_bench(bodies: int = 1000, dim: int = 4, repeats: int = 7) -> dict[str, Any]:
    """Seconds for slicing ``bodies`` bodies (half boxes, half 24-cells in 4-D), and derived figures."""
    sim = bench_world(bodies, dim)
    flat = axis_flat(dim, [0.0])
    t0 = time.perf_counter()
    world = slice_world(sim, flat)
    t_first = time.perf_counter() - t0
    t_slice = _best(lambda: slice_world(sim, flat), repeats)
    t_soup = _best(lambda: face_soup(world), repeats) if dim == 4 else float("nan")
    t_rec = _best(lambda: world.records(), max(1, repeats // 3))
    cut = int(sum(int(b.hit.sum()) for b in world.batches))
    faces = int(sum(len(b.faces) for b in world.batches if b.faces is not None))
    return {
        "bodies": bodies,
        "dim": dim,
        "bodies_cut": cut,
        "section_faces": faces,
        "slice_world_s": t_slice,
        "slice_world_us_per_body": 1e6 * t_slice / bodies,
        "first_call_s": t_first,
        "face_soup_s": t_soup,
        "records_s": t_rec,
        "target_s": 0.005,
    }


if __name__ == "__main__":
    for key, value in run_slicing_bench().items():
        print(f"{key:26s} {value}")
