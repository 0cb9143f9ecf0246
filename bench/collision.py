"""Benchmark of the broadphase: ``find_pairs`` on a scene of many moving bodies.

Scene: ``bodies`` dynamic bodies in ``dim`` dimensions, half balls (radius 0.2-0.5 m) and half
boxes (half-extents 0.15-0.4 m) with random orientations, spread uniformly over a cube whose edge
is chosen so that a body's fattened box overlaps about three others, moving at about 1 m/s and
spinning, over a static floor half-space. Each of ``steps`` updates first advances the positions
by ``v dt`` (so the boxes really move), then times ``find_pairs``; the median is reported.

For comparison the same fattened boxes also go through the one-axis sweep-and-prune
(:func:`ndrigid.core.collision.broadphase.sweep_and_prune_pairs`) and the grid alone, so the choice recorded
in the broadphase module can be re-measured.

Run ``python -m ndrigid.bench.collision``.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
from ndrigid.core.collision import broadphase as bp
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace
from ndrigid.core.world.simulation import Simulation

__all__ = ["build_scene", "run_broadphase_bench"]


def build_scene(bodies: int = 10_000, dim: int = 4, seed: int = 0) -> Simulation:
    """The benchmark scene (module notes), as a Simulation."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim)
    alg = sim.alg
    # ~3 overlapping fat boxes per body: N (2 w / L)^n = 3 with w ~ 0.9 m the mean box edge
    edge = 1.8 * (bodies / 3.0) ** (1.0 / dim)
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    balls = [Ball(dim, r) for r in np.linspace(0.2, 0.5, 8)]
    boxes = [Box(rng.uniform(0.15, 0.4, size=dim)) for _ in range(8)]
    rotors = alg.rotor(rng.normal(scale=2.0, size=(bodies, alg.k)))
    pos = rng.uniform(0.0, edge, size=(bodies, dim))
    vel = rng.normal(size=(bodies, dim))
    om = rng.normal(scale=0.5, size=(bodies, alg.k))
    for i in range(bodies):  # scene set-up, not timed
        shape = balls[i % 8] if i % 2 == 0 else boxes[i % 8]
        sim.add_body(shape, position=pos[i], rotor=rotors[i], velocity=vel[i], angular_velocity=om[i])
    return sim


def _median_ms(samples: list[float]) -> float:
    return float(np.median(samples) * 1e3)


def run_broadphase_bench(bodies: int = 10_000, dim: int = 4, steps: int = 20,
                         seed: int = 0, sap_steps: int = 3) -> dict[str, Any]:
    """Time ``find_pairs`` over ``steps`` updates of the moving scene.

    Returns a dict with the median milliseconds of ``find_pairs`` (wall clock ``find_pairs_ms``
    and process CPU time ``find_pairs_cpu_ms``, the steadier figure on a shared machine), of the
    box pass alone (``aabb_ms``), of the grid and of the sweep-and-prune on the same fat boxes
    (``grid_ms``; ``sweep_and_prune_ms`` over the first ``sap_steps`` updates), and the mean number
    of pairs found.
    """
    sim = build_scene(bodies, dim, seed)
    b, s, dt = sim.bodies, sim.settings, sim.settings.dt
    shapes, caches = sim.info.shapes, sim.caches
    bp.find_pairs(sim.alg, b, shapes, s, caches, dt)  # warm-up: shape clouds, first allocations
    t_up: list[float] = []
    cpu_up: list[float] = []
    t_box: list[float] = []
    t_grid: list[float] = []
    t_sap: list[float] = []
    counts = []
    for step in range(steps):
        b.position[:] += dt * b.velocity
        t0, c0 = time.perf_counter(), time.process_time()
        pairs = bp.find_pairs(sim.alg, b, shapes, s, caches, dt)
        t1, c1 = time.perf_counter(), time.process_time()
        lo, hi, _ = bp.fat_aabbs(sim.alg, b, shapes, s, dt, caches)
        t2 = time.perf_counter()
        rows = np.flatnonzero(np.isfinite(lo).all(axis=1))
        lo, hi = lo[rows], hi[rows]
        t3 = time.perf_counter()
        g = bp.grid_pairs(lo, hi)
        t4 = time.perf_counter()
        if step < sap_steps:  # the sweep-and-prune is slow in 4-D: time it on a few updates only
            sp = bp.sweep_and_prune_pairs(lo, hi)
            t_sap.append(time.perf_counter() - t4)
            if len(g) != len(sp):
                raise AssertionError(f"grid found {len(g)} pairs, sweep-and-prune {len(sp)}")
        t_up.append(t1 - t0)
        cpu_up.append(c1 - c0)
        t_box.append(t2 - t1)
        t_grid.append(t4 - t3)
        counts.append(len(pairs))
    return {
        "bodies": bodies,
        "dim": dim,
        "steps": steps,
        "find_pairs_ms": _median_ms(t_up),
        "find_pairs_cpu_ms": _median_ms(cpu_up),
        "aabb_ms": _median_ms(t_box),
        "grid_ms": _median_ms(t_grid),
        "sweep_and_prune_ms": _median_ms(t_sap) if t_sap else float("nan"),
        "pairs": float(np.mean(counts)),
    }


def main() -> None:
    """Print the broadphase figures."""
    r = run_broadphase_bench()
    print(f"broadphase, {r['bodies']} moving {r['dim']}-D bodies, median of {r['steps']} updates:")
    for key in ("find_pairs_ms", "find_pairs_cpu_ms", "aabb_ms", "grid_ms", "sweep_and_prune_ms"):
        print(f"  {key:<20} {r[key]:8.2f}")
    print(f"  {'pairs':<20} {r['pairs']:8.0f}")


if __name__ == "__main__":
    main()
