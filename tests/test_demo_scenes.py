"""The demo's scenes over ten seconds of simulated time in 2-D to 5-D, physics only (no drawing).

For every scene and dimension, 600 frames of 1/60 s with the demo's default 18 bodies: no body's
centre leaves the scene's room (``SceneInfo.bounds``, checked every 30 frames), at least half of
the dynamic bodies are cut by the default slice (the hidden coordinates at 0) at the end, and the
scene's story happens: most rocks end in the catch basin, every billiard ball starts on the
table, the crates come down the chute. Also: different body roles get clearly different colours.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import DYNAMIC
from ndrigid.core.geometry.slicing import axis_flat, slice_world
from ndrigid.demo.scenes import FRAME, build_scene, scene_names
from ndrigid.demo.world import DemoWorld

FRAMES = 600
BODIES = 18


def default_flat(dim: int):  # type: ignore[no-untyped-def]
    """The slice the window shows first: the world itself in 2-D, x_2 = 0 in 3-D, x_3 = 0 in 4-D,
    x_3 = x_4 = 0 in 5-D."""
    return axis_flat(dim, [] if dim == 2 else [0.0] * (1 if dim == 3 else dim - 3))


def dynamic_handles(sim) -> list[int]:  # type: ignore[no-untyped-def]
    return [int(h) for h in sim.bodies.handle if sim.bodies.kind[sim.row(int(h))] == DYNAMIC]


def outside(sim, bounds) -> list[int]:  # type: ignore[no-untyped-def]
    lo, hi = bounds
    return [h for h in dynamic_handles(sim)
            if not (np.all(np.isfinite(p := sim.position(h))) and np.all(p > lo) and np.all(p < hi))]


_runs: dict[tuple[str, int], dict] = {}


def run(name: str, dim: int) -> dict:
    """One 600-frame run per (scene, dimension), shared by the tests below."""
    key = (name, dim)
    if key not in _runs:
        world = DemoWorld(dim)
        info = build_scene(name, world, BODIES)
        escaped: list[tuple[int, list[int]]] = []
        for f in range(FRAMES):
            if info.tick is not None:
                info.tick(world, f * FRAME)
            world.step(None)
            if f % 30 == 29 and (out := outside(world.sim, info.bounds)):
                escaped.append((f, out))
        _runs[key] = {"world": world, "info": info, "escaped": escaped}
    return _runs[key]


@dims(2, 3, 4, 5)
@pytest.mark.parametrize("scene", scene_names())
def test_scene_stays_in_its_room_and_in_the_default_slice(scene: str, dim: int) -> None:
    r = run(scene, dim)
    sim = r["world"].sim
    assert r["escaped"] == [], f"bodies outside the room at (frame, handles): {r['escaped'][:3]}"
    dyn = dynamic_handles(sim)
    assert len(dyn) >= 6
    ws = slice_world(sim, default_flat(dim))
    cut = {int(h) for bt in ws.batches for h in bt.handles[bt.hit]}
    shown = [h for h in dyn if h in cut]
    assert 2 * len(shown) >= len(dyn), f"only {len(shown)} of {len(dyn)} dynamic bodies in the default slice"


@dims(2, 3, 4, 5)
def test_rockfall_rocks_end_in_the_basin(dim: int) -> None:
    r = run("rockfall", dim)
    world, info = r["world"], r["info"]
    foot, back = info.state["basin"]
    rocks = [world.physics.handle_of(e) for e in info.state["rocks"]]
    assert len(rocks) == BODIES
    x = np.array([world.sim.position(h)[0] for h in rocks])
    inside = int(np.sum((x > foot) & (x < back)))
    assert 3 * inside >= 2 * len(rocks), f"{inside} of {len(rocks)} rocks in the basin"


@dims(2, 3, 4, 5)
def test_billiards_every_ball_starts_on_the_table(dim: int) -> None:
    world = DemoWorld(dim)
    try:
        info = build_scene("billiards", world, BODIES)
        sim = world.sim
        lo, hi = info.bounds
        balls = dynamic_handles(sim)
        assert len(balls) == BODIES
        P = np.array([sim.position(h) for h in balls])
        radius = np.array([sim.bodies.radius[sim.row(h)] for h in balls])
        # resting on the felt (the room's floor), inside the cushions on every axis
        np.testing.assert_allclose(P[:, 1], lo[1] + radius, atol=1e-9)
        across = [a for a in range(dim) if a != 1]
        assert np.all(P[:, across] - radius[:, None] > lo[across])
        assert np.all(P[:, across] + radius[:, None] < hi[across])
        # no two balls overlap
        gap = np.linalg.norm(P[:, None] - P[None], axis=-1) - (radius[:, None] + radius[None])
        assert np.all(gap[np.triu_indices(len(balls), 1)] > 0)
        # and after the first frame every ball is still on it (nothing thrown off at frame 0)
        world.step(None)
        assert outside(sim, info.bounds) == []
        assert np.all(np.abs(np.array([sim.position(h)[1] for h in balls]) - (lo[1] + radius)) < 0.05)
    finally:
        world.close()


@dims(2, 3, 4, 5)
def test_billiards_break_moves_the_rack(dim: int) -> None:
    r = run("billiards", dim)
    world, info = r["world"], r["info"]
    rack = [world.physics.handle_of(e) for e in info.state["rack"]]
    x = np.array([world.sim.position(h)[0] for h in rack])
    moved = np.abs(x - info.state["spots"][:, 0]) > info.state["radius"]
    assert 2 * moved.sum() >= len(rack), f"the break moved {moved.sum()} of {len(rack)} balls"


@dims(2, 3, 4, 5)
def test_conveyor_crates_come_down_the_chute(dim: int) -> None:
    r = run("conveyor", dim)
    world, info = r["world"], r["info"]
    st = info.state
    crates = [world.physics.handle_of(e) for e in st["crates"]]
    early = [h for h, t in zip(crates, st["spawn_times"], strict=True) if t <= 4.0]
    assert len(early) >= 4
    P = np.array([world.sim.position(h) for h in early])
    down = (P[:, 0] > st["belt_end"]) & (P[:, 1] < st["bin_top"])
    assert down.all(), f"crates spawned in the first 4 s still up at {P[~down][:, :2].round(2).tolist()}"


@pytest.mark.parametrize("scene", scene_names())
def test_roles_have_distinct_colours(scene: str) -> None:
    """Bodies playing different roles in a scene (ground, table, belt, pusher, crates, cue ball,
    rack, rocks of each kind) differ by at least 60 in RGB; the kinematic pusher is not coloured
    like anything it pushes."""
    world = DemoWorld(4)
    try:
        build_scene(scene, world, BODIES)
        world.step(None)
        world.sync()
        colours = {world.roles[h]: np.array(c, dtype=float) for h, c in world.colours.items()}
        assert len(colours) >= 3
        for (a, ca), (b, cb) in itertools.combinations(colours.items(), 2):
            assert np.linalg.norm(ca - cb) >= 60, f"roles {a} and {b} look alike: {ca} vs {cb}"
        sim = world.sim
        kinematic = {world.colours[h] for h in world.colours if sim.kind(h) == "kinematic"}
        dynamic = {world.colours[h] for h in world.colours if sim.kind(h) == "dynamic"}
        assert not kinematic & dynamic
    finally:
        world.close()
