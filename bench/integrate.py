"""Micro-benchmark of the integrate stages: body-steps per second for many free bodies."""

from __future__ import annotations

import time
from typing import Any

import numpy as np
from ndrigid.core.algebra import Algebra
from ndrigid.core.dynamics import integrate
from ndrigid.core.geometry.shapes import Box
from ndrigid.core.state.components import Bodies


def run_integrate_bench(bodies: int = 100_000, dims: tuple[int, ...] = (2, 3, 4, 5),
                        steps: int = 5) -> list[dict[str, Any]]:
    """Both integrate stages on ``bodies`` free boxes with random spins; best of ``steps`` runs."""
    rows = []
    for n in dims:
        alg = Algebra(n)
        rng = np.random.default_rng(0)
        b = Bodies(alg, capacity=bodies)
        mp = Box(np.linspace(0.2, 0.5, n)).mass_properties(density=1.0)
        b._grow(bodies)
        b.count = bodies
        b.inv_mass[:] = 1.0 / mp.mass
        b.inv_inertia[:] = 1.0 / np.asarray(mp.principal_moments)
        b.principal_rotor[:] = mp.principal_rotor
        b.angular_velocity[:] = rng.normal(size=(bodies, alg.k))
        g = np.zeros(n)
        best = np.inf
        for _ in range(steps):
            t0 = time.perf_counter()
            integrate.accelerate(alg, b, g, 1 / 60)
            integrate.advance_poses(alg, b, 1 / 60)
            best = min(best, time.perf_counter() - t0)
        rows.append({"op": "integrate (both stages)", "dim": n, "bodies": bodies,
                     "body_steps_per_s": bodies / best, "ms_per_step": best * 1e3})
    return rows
