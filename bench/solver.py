"""Contact-solver benchmark: cost per contact point per iteration, and stacking quality beside it.

Two measurements per dimension and batching (``"manifold"``, ``"point"``, ``"jacobi"``):

* ``kernel``: :func:`~ndrigid.core.dynamics.solver.solve_impulses` alone on a hand-built contact set of
  boxes resting on a static floor, in rows of stacks (each box carries one face manifold of
  2**(n-1) points on the body below). The cost per point per iteration is the slope between two
  iteration counts, so the per-call set-up (Jacobians, colouring, warm start) drops out; the
  set-up is reported apart as ``setup_us``.
* ``exact_stack``: a stack of boxes with exact face contacts from a small find_contacts stage written
  here (no narrowphase), so that the solver's own stacking quality shows apart from the manifolds;
* ``stack`` / ``pyramid``: a stack of boxes (and a pyramid for the given base) through the whole
  Simulation, with the real narrowphase, for ``seconds`` at 60 Hz with sleeping off.

Quality figures beside the time: drift of the top box over ``seconds`` after a 1 s settle (in box
sizes), the largest and the final kinetic energy in that window (J; boxes of 1000 kg), and the
median solver stage time per step.

Timings are medians on one core (BLAS pinned to one thread by ``python -m ndrigid.bench``); no
test asserts them.
"""

from __future__ import annotations

import time
from dataclasses import replace
from typing import Any

import numpy as np
from ndrigid.core.dynamics.solver import BATCHINGS, solve_impulses
from ndrigid.core.geometry.shapes import Box, HalfSpace
from ndrigid.core.state.contacts import ContactSet, contact_keys
from ndrigid.core.world.simulation import Settings, Simulation


def _stacked_contacts(dim: int, columns: int, height: int) -> tuple[Simulation, ContactSet]:
    """``columns`` stacks of ``height`` unit boxes on a static floor, with exact face contacts."""
    sim = Simulation(dim, settings=Settings(sleep_enabled=False))
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(Box(np.r_[1e3, 0.5, [1e3] * (dim - 2)]), kind="static", position=-0.5 * up)
    corners = np.array(np.meshgrid(*[[-0.5, 0.5]] * (dim - 1), indexing="ij")).reshape(dim - 1, -1).T
    a_rows, b_rows, points = [], [], []
    for col in range(columns):
        x = np.zeros(dim)
        x[0] = 2.0 * col
        for level in range(height):
            row = sim.add_body(Box(np.full(dim, 0.5)), position=x + (0.5 + level) * up)
            row = sim.row(row)
            below = 0 if level == 0 else row - 1
            p = np.zeros((corners.shape[0], dim))
            p[:, [0] + list(range(2, dim))] = corners
            p += x + level * up
            a_rows.append(np.full(corners.shape[0], below))
            b_rows.append(np.full(corners.shape[0], row))
            points.append(p)
    a = np.concatenate(a_rows).astype(np.int64)
    b = np.concatenate(b_rows).astype(np.int64)
    M = a.shape[0]
    feat = np.tile(np.arange(corners.shape[0]), M // corners.shape[0]).astype(np.int64)
    pairs = np.stack([a, b], 1)
    _, manifold = np.unique(pairs, axis=0, return_inverse=True)
    h = sim.bodies.handle
    c = ContactSet(a, b, np.tile(up, (M, 1)), np.concatenate(points), np.full(M, 0.001), feat,
                   manifold.reshape(-1).astype(np.int64), contact_keys(h[a], h[b], feat), np.full(M, 0.5),
                   np.zeros(M))
    return sim, c


def _time_solve(sim: Simulation, c: ContactSet, settings: Settings, repeats: int) -> float:
    """Median seconds of one solve_impulses call (velocities reset before each call)."""
    v0 = sim.bodies.velocity.copy()
    w0 = sim.bodies.angular_velocity.copy()
    p0 = sim.bodies.position.copy()
    times = []
    for _ in range(repeats):
        sim.bodies.velocity[...] = v0
        sim.bodies.angular_velocity[...] = w0
        sim.bodies.position[...] = p0
        t0 = time.perf_counter()
        solve_impulses(sim.alg, sim.bodies, c, sim.settings.dt, settings, sim.caches)
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def kernel_record(dim: int, batching: str, columns: int = 20, height: int = 5,
                  repeats: int = 7) -> dict[str, Any]:
    """Solver cost per contact point per iteration on hand-built stacks (see module docstring)."""
    sim, c = _stacked_contacts(dim, columns, height)
    sim.bodies.velocity[1:, 1] = -9.81 * sim.settings.dt
    lo, hi = 2, 12
    base = replace(sim.settings, solver_batching=batching, bias_free_passes=0)
    t_lo = _time_solve(sim, c, replace(base, solver_passes=lo), repeats)
    t_hi = _time_solve(sim, c, replace(base, solver_passes=hi), repeats)
    per_iter = (t_hi - t_lo) / (hi - lo)
    from ndrigid.core.dynamics.solver import _batches

    dyn = sim.bodies.kind == 0
    colours = int(_batches(batching, c.body_a, c.body_b, dyn[c.body_a], dyn[c.body_b], c.key, c.manifold,
                           sim.bodies.count).max()) + 1
    return {"bench": "solver_kernel", "dim": dim, "batching": batching, "points": c.count, "colours": colours,
            "ns_per_point_iteration": per_iter / c.count * 1e9, "us_per_iteration": per_iter * 1e6,
            "setup_us": (t_lo - lo * per_iter) * 1e6}


def _box_stack(dim: int, height: int, settings: Settings) -> tuple[Simulation, int]:
    sim = Simulation(dim, settings=settings)
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    top = -1
    for level in range(height):
        top = sim.add_body(Box(np.full(dim, 0.5)), position=(0.5 + level) * up, friction=0.6)
    return sim, top


def _pyramid(dim: int, base: int, settings: Settings) -> tuple[Simulation, int]:
    """Rows of boxes in the e0-e1 plane: base boxes at the bottom, one fewer per level."""
    sim = Simulation(dim, settings=settings)
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    top = -1
    for level in range(base):
        for i in range(base - level):
            pos = (0.5 + level) * up
            pos[0] = (i - 0.5 * (base - level - 1)) * 1.0
            top = sim.add_body(Box(np.full(dim, 0.5)), position=pos, friction=0.6)
    return sim, top


def scene_record(scene: str, dim: int, batching: str, size: int, seconds: float) -> dict[str, Any]:
    """Run a stack (``size`` boxes) or pyramid (base ``size``) for ``seconds`` at 60 Hz."""
    st = replace(Settings(), sleep_enabled=False, solver_batching=batching)
    sim, top = (_box_stack if scene == "stack" else _pyramid)(dim, size, st)
    solve_ms, worst = [], 0.0
    for i in range(int(round(seconds / st.dt)) + 60):
        if i == 60:
            x1 = sim.position(top)  # after a 1 s settle
        sim.step()
        if i >= 60:
            solve_ms.append(sim.timings.stages.get("solve_impulses", 0.0) * 1e3)
            worst = max(worst, sim.kinetic_energy())
    drift = float(np.linalg.norm(sim.position(top) - x1))  # box size 1
    c = sim.contacts
    return {"bench": f"solver_{scene}", "dim": dim, "batching": batching, "size": size,
            "bodies": sim.count - 1, "seconds": seconds, "points": 0 if c is None else c.count,
            "top_drift_after_settle_sizes": drift, "max_kinetic_energy_J": worst,
            "final_kinetic_energy_J": sim.kinetic_energy(),
            "solve_ms_median": float(np.median(solve_ms)), "step_ms_last": sim.timings.total * 1e3}


def _exact_stack_stage(height: int, dim: int):
    """A find_contacts stage for a vertical stack: the bottom face corners of box i against the top
    face of body i-1 (row 0: a static floor box), normal along the lower body's e1 axis."""
    corners = np.array(np.meshgrid(*[[-0.5, 0.5]] * (dim - 1), indexing="ij")).reshape(dim - 1, -1).T
    local = np.zeros((corners.shape[0], dim))
    local[:, [0] + list(range(2, dim))] = corners
    local[:, 1] = -0.5
    c_count = local.shape[0]
    upper = np.repeat(np.arange(1, height + 1), c_count)
    lower = upper - 1
    feat = np.tile(np.arange(c_count), height).astype(np.int64)

    def stage(sim: Simulation, dt: float) -> None:
        b = sim.bodies
        pts = b.position[upper] + np.einsum("mij,mj->mi", b.rotation[upper], np.tile(local, (height, 1)))
        nrm = b.rotation[lower][:, :, 1]
        top = np.einsum("mi,mi->m", b.position[lower], nrm) + 0.5
        depth = top - np.einsum("mi,mi->m", pts, nrm)
        h = b.handle
        M = upper.shape[0]
        sim.contacts = ContactSet(lower, upper, nrm, pts + 0.5 * depth[:, None] * nrm, depth, feat,
                                  lower.astype(np.int64), contact_keys(h[lower], h[upper], feat),
                                  np.full(M, 0.6), np.zeros(M))

    return stage


def exact_stack_record(dim: int, batching: str, height: int = 10, seconds: float = 10.0,
                       **settings: Any) -> dict[str, Any]:
    """A stack of ``height`` unit boxes with exact face contacts (no narrowphase): the solver's
    own stacking quality. Drift of the top box after a 1 s settle, residual kinetic energy.
    ``settings`` override Settings fields (e.g. solver_passes)."""
    st = replace(Settings(), sleep_enabled=False, solver_batching=batching, **settings)
    sim = Simulation(dim, settings=st)
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(Box(np.r_[50.0, 0.5, [50.0] * (dim - 2)]), kind="static", position=-0.5 * up)
    top = -1
    for level in range(height):
        top = sim.add_body(Box(np.full(dim, 0.5)), position=(0.5 + level) * up, friction=0.6)
    stage = _exact_stack_stage(height, dim)
    sim.stages = [(name, stage if name == "find_contacts" else fn) for name, fn in sim.stages
                  if name != "find_pairs"]
    solve_ms, worst = [], 0.0
    steps = int(round(seconds / st.dt))
    for i in range(steps + 60):
        if i == 60:
            x1 = sim.position(top)
        sim.step()
        if i >= 60:
            solve_ms.append(sim.timings.stages.get("solve_impulses", 0.0) * 1e3)
            worst = max(worst, sim.kinetic_energy())
    return {"bench": "solver_exact_stack", "dim": dim, "batching": batching, "size": height,
            "seconds": seconds, "points": sim.contacts.count,
            "top_drift_after_settle_sizes": float(np.linalg.norm(sim.position(top) - x1)),
            "max_kinetic_energy_J": worst, "final_kinetic_energy_J": sim.kinetic_energy(),
            "solve_ms_median": float(np.median(solve_ms))}


def run_solver_bench(dims: tuple[int, ...] = (4,), batchings: tuple[str, ...] = BATCHINGS, stack: int = 10,
                     pyramid: int = 10, seconds: float = 10.0, scenes: bool = True) -> list[dict[str, Any]]:
    """Kernel cost per point per iteration and stack/pyramid quality for each dim and batching.

    Returns one JSON-ready dict per measurement (see the module docstring for the fields).
    """
    out: list[dict[str, Any]] = []
    for dim in dims:
        for batching in batchings:
            out.append(kernel_record(dim, batching))
            if scenes:
                out.append(exact_stack_record(dim, batching, stack, seconds))
                out.append(scene_record("stack", dim, batching, stack, seconds))
                if pyramid:
                    out.append(scene_record("pyramid", dim, batching, pyramid, seconds))
    return out


if __name__ == "__main__":  # python -m ndrigid.bench.solver
    import json
    import sys

    dims_arg = tuple(int(x) for x in sys.argv[1:]) or (4,)
    for rec in run_solver_bench(dims_arg):
        print(json.dumps(rec))
