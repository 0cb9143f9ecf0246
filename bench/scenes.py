"""Benchmark scenes: builders of Simulations with a known body count, seeded.

Each builder returns ``(sim, warmup_steps)``; the harness steps ``warmup_steps`` untimed (so that
a pile has settled) and then times ``--steps`` steps.

* ``pile``: mixed boxes and balls dropped into a walled bin, sleeping off, timed after settling;
* ``pyramid``: boxes stacked in a 2-D-style pyramid (rows in the e0-e1 plane), base given by
  ``bodies`` (so base 100 means 5,050 boxes);
* ``spin``: free bodies with random angular velocities, no gravity, far apart: integrate only;
* ``broadphase``: moving bodies in a cloud, only the broadphase stage is timed;
* ``boxes``: a dense cloud of turned boxes, only the narrowphase (box/box pairs) is timed;
* ``empty``: a world with no bodies (the fixed cost of a step);
* ``polytope-pair``: two convex polytopes resting face to face (24-cells in 4-D, orthoplexes in
  other dimensions), no gravity; only the narrowphase is timed (one pair with its manifold);
* ``demo-<name>``: the demo's own scenes, built by the demo's scene factory.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace
from ndrigid.core.world.simulation import Settings, Simulation

SceneBuilder = Callable[[int, int, int], tuple[Simulation, int]]


def _bin_walls(sim: Simulation, half_width: float) -> None:
    """A floor (normal +e1 at height 0) and walls at +-half_width on every horizontal axis."""
    n = sim.dim
    up = np.zeros(n)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")  # solid below y = 0: its normal points out (up)
    for axis in range(n):
        if axis == 1:
            continue
        for sign in (1.0, -1.0):
            u = np.zeros(n)
            u[axis] = sign
            # the wall's solid is sign * x_axis >= half_width; its outward normal is -u
            sim.add_body(HalfSpace(-u, -half_width), kind="static")


def lowest_point(sim: Simulation) -> float:
    """The lowest point (along e_1) of all dynamic bodies, m, from the shapes' support points."""
    up = np.zeros(sim.dim)
    up[1] = 1.0
    low = np.inf
    for h in sim.handles:  # a check for tests and the defaults bench, not a hot path
        if sim.kind(int(h)) != "dynamic":
            continue
        R = sim.rotation(int(h))
        p = sim.shape(int(h)).support((R.T @ -up)[None, :])[0]
        low = min(low, float((sim.position(int(h)) + R @ p)[1]))
    return low


def settle_asleep(sim: Simulation, limit: float) -> tuple[float | None, float | None]:
    """Step ``sim`` (sleeping on) until 90 % of its dynamic bodies sleep, or until ``limit`` s:
    returns the time its kinetic energy first fell below 1 % of its peak (after 0.5 s) and the
    time 90 % slept (None where it did not happen)."""
    dyn = sim.bodies.kind == sim.bodies.kind[sim.row(int(sim.handles[-1]))]
    peak = 0.0
    t_low = t_asleep = None
    while sim.time < limit:
        sim.step()
        ke = sim.kinetic_energy()
        peak = max(peak, ke)
        if t_low is None and sim.time > 0.5 and ke < 0.01 * peak:
            t_low = sim.time
        if t_low is not None and np.mean(~sim.bodies.awake[dyn]) >= 0.9:
            t_asleep = sim.time
            break
    return t_low, t_asleep


def build_pile(dim: int, bodies: int, seed: int, boxes_only: bool = False) -> tuple[Simulation, int]:
    """Mixed boxes and balls (or boxes only) in a walled bin, sleeping off."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, settings=Settings(sleep_enabled=False))
    size = 0.5
    # bin floor area holds about bodies^(1/(n-1))... choose a width giving ~6 layers
    per_layer = max(1.0, bodies / 6.0)
    cells = int(np.ceil(per_layer ** (1.0 / (dim - 1))))
    half_width = 0.5 * cells * size * 1.25 + 0.1
    _bin_walls(sim, half_width)
    ball = Ball(dim, 0.5 * size * 0.9)
    box = Box(np.full(dim, 0.5 * size * 0.85))
    horiz = [a for a in range(dim) if a != 1]
    for i in range(bodies):
        pos = np.zeros(dim)
        layer, slot = divmod(i, cells ** (dim - 1))
        idx = np.unravel_index(slot, (cells,) * (dim - 1))
        for a, j in zip(horiz, idx, strict=False):
            pos[a] = -half_width + 0.1 + (j + 0.5) * size * 1.25 + rng.uniform(-0.05, 0.05)
        pos[1] = 0.5 * size + layer * size * 1.3 + rng.uniform(0, 0.05)
        rot = sim.alg.rotor(rng.normal(size=sim.alg.k) * 0.3)
        sim.add_body(box if (i % 2 or boxes_only) else ball, position=pos, rotor=rot, density=500.0,
                     friction=0.6)
    settle = int(min(240, 60 + 3 * np.sqrt(bodies)))
    return sim, settle


def build_pyramid(dim: int, base: int, seed: int) -> tuple[Simulation, int]:
    """A pyramid of unit-ish boxes in the e0-e1 plane (other axes at 0), base ``base`` boxes."""
    del seed
    sim = Simulation(dim, settings=Settings(sleep_enabled=False))
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    h = 0.5
    box = Box(np.full(dim, h))
    for row in range(base):
        for col in range(base - row):
            pos = np.zeros(dim)
            pos[0] = (col - (base - row - 1) / 2.0) * (2 * h + 0.01)
            pos[1] = h + row * 2 * h
            sim.add_body(box, position=pos, density=1.0, friction=0.6)
    return sim, 0


def build_spin(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
    """Free bodies far apart with random angular velocities; only integration does work."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, gravity=np.zeros(dim), settings=Settings(sleep_enabled=False))
    box = Box(np.linspace(0.2, 0.5, dim))
    side = int(np.ceil(bodies ** (1.0 / dim)))
    for i in range(bodies):
        idx = np.array(np.unravel_index(i, (side,) * dim), dtype=float)
        sim.add_body(box, position=idx * 3.0, angular_velocity=rng.normal(size=sim.alg.k), density=1.0)
    return sim, 0


def build_cloud(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
    """Moving balls and boxes in a cloud of density ~1 body per 8 unit cells (broadphase load)."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, gravity=np.zeros(dim), settings=Settings(sleep_enabled=False))
    extent = (8.0 * bodies) ** (1.0 / dim)
    shapes = [Ball(dim, 0.4), Box(np.full(dim, 0.3))]
    for i in range(bodies):
        sim.add_body(shapes[i % 2], position=rng.uniform(0, extent, size=dim), velocity=rng.normal(size=dim),
                     density=1.0)
    return sim, 0


def build_boxes(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
    """Randomly turned boxes in a dense cloud (about one touching neighbour each): box/box load."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, gravity=np.zeros(dim), settings=Settings(sleep_enabled=False))
    extent = (6.0 * bodies) ** (1.0 / dim)
    box = Box(np.full(dim, 0.4))
    for _ in range(bodies):
        sim.add_body(box, position=rng.uniform(0, extent, size=dim),
                     rotor=sim.alg.rotor(rng.normal(size=sim.alg.k)), velocity=0.2 * rng.normal(size=dim),
                     density=1.0)
    return sim, 0


def build_empty(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
    """No bodies at all (``bodies`` is ignored): what a step costs before any work."""
    return Simulation(dim), 0


def build_polytope_pair(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
    """Two polytopes face to face, slightly overlapping (``bodies`` is ignored)."""
    from ndrigid.core.geometry.polytopes import cell_24, orthoplex

    shape = cell_24() if dim == 4 else orthoplex(dim)
    sim = Simulation(dim, gravity=np.zeros(dim), settings=Settings(sleep_enabled=False))
    # put a facet of the first against a facet of the second: along that facet's normal
    u = np.asarray(shape.facet_normals[0], dtype=float)
    off = float(shape.facet_offsets[0])
    sim.add_body(shape, position=np.zeros(dim))
    sim.add_body(shape, position=(2.0 * off - 0.002) * u, rotor=_half_turn(sim, u))
    return sim, 0


def _half_turn(sim: Simulation, u: np.ndarray) -> np.ndarray:
    """A rotor that turns u into -u (a half turn in a plane containing u)."""
    n = sim.dim
    j = int(np.argmin(np.abs(u)))
    e = np.zeros(n)
    e[j] = 1.0
    v = e - (e @ u) * u
    v /= np.linalg.norm(v)
    B = np.zeros(sim.alg.k)
    for p, (a, b) in enumerate(sim.alg.pairs):
        B[p] = u[a] * v[b] - u[b] * v[a]
    return sim.alg.rotor(np.pi * B)


def _demo_builder(name: str) -> SceneBuilder:
    """A bench scene from the demo's own scene factory (the same builder the window uses).

    The scene's per-frame script (the conveyor's pusher, the drawbridge's winch, for two) runs as
    a first stage of the step, so the timed steps are the demo's physics frames. The bodies a
    script spawns (the conveyor's crates, the drawbridge's kegs) are made by the esper adapter's
    sync at the end of that stage, as the window's frame makes them before its step; on frames
    that spawn nothing the sync returns at once (``bench.adapters`` measures it).
    """

    def build(dim: int, bodies: int, seed: int) -> tuple[Simulation, int]:
        from ndrigid.demo import scenes as demo_scenes
        from ndrigid.demo.world import DemoWorld

        world = DemoWorld(dim)
        info = demo_scenes.build_scene(name, world, bodies, seed=7 + seed)
        sim = world.sim
        clock = {"t": 0.0}

        def tick(sim_: Simulation, dt: float) -> None:
            if info.tick is not None:
                info.tick(world, clock["t"])
                world.sync()
            clock["t"] += dt

        sim.stages = [("demo_script", tick), *sim.stages]
        sim.demo_world = world  # type: ignore[attr-defined]  # keeps the esper world alive
        return sim, 60

    build.__doc__ = f"The demo's {name!r} scene (``--bodies`` dynamic bodies; the demo's default is 18)."
    return build


DEMO_SCENES = ("rockfall", "billiards", "conveyor", "drawbridge")

SCENES: dict[str, SceneBuilder] = {
    "pile": build_pile,
    "pyramid": build_pyramid,
    "spin": build_spin,
    "broadphase": build_cloud,
    "boxes": build_boxes,
    "empty": build_empty,
    "polytope-pair": build_polytope_pair,
    **{f"demo-{name}": _demo_builder(name) for name in DEMO_SCENES},
}

# which stages run in each scene (None: the whole pipeline)
KEPT_STAGES: dict[str, tuple[str, ...] | None] = {
    "pile": None,
    "pyramid": None,
    "spin": ("accelerate", "advance_poses"),
    "broadphase": ("find_pairs", "advance_poses"),
    "boxes": ("find_pairs", "find_contacts", "advance_poses"),
    "empty": None,
    "polytope-pair": ("find_pairs", "find_contacts"),
    **{f"demo-{name}": None for name in DEMO_SCENES},
}

# which stages are timed for each scene (None: the whole step)
TIMED_STAGES: dict[str, tuple[str, ...] | None] = {
    "pile": None,
    "pyramid": None,
    "spin": ("accelerate", "advance_poses"),
    "broadphase": ("find_pairs",),
    "boxes": ("find_contacts",),
    "empty": None,
    "polytope-pair": ("find_contacts",),
    **{f"demo-{name}": None for name in DEMO_SCENES},
}
