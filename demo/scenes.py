"""The demo's scenes, registered by name. Each builds its bodies for any dimension n >= 2.

Layout in every dimension: e_0 runs left to right, e_1 is up, and e_2 .. e_{n-1} are depth axes.
Static ground and walls span the depth axes; low walls a little way out along each depth axis keep
bodies near the default slice (the hidden axes at 0), so the slice always has something in it.

* ``rockfall``  -- boulders (balls), cut blocks (boxes) and faceted stones (polytopes) tumble down a
  tilted slab into a walled catch basin.
* ``billiards`` -- a felt table with a racked cluster of balls and a cue ball sent into it.
* ``conveyor``  -- a kinematic pusher sweeps crates along a belt; they tip off its end down a chute.

A scene factory takes ``(world, dim, count, rng)`` (``count`` dynamic bodies) and returns a
:class:`SceneInfo` saying where the view should look and what to do every frame.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from ndrigid.core import Ball, Box, ConvexPolytope, HalfSpace, cell_24, orthoplex, regular_simplex

from .world import DemoWorld


@dataclass
class SceneInfo:
    """What the app needs to know about a built scene.

    Attributes:
        centre: (2,) world (x_0, x_1) point at the centre of the view.
        span: metres of x_0 visible across the main view.
        tick: called every frame with (world, seconds since start), or None.
    """

    centre: tuple[float, float]
    span: float
    tick: Callable[[DemoWorld, float], None] | None = None
    state: dict[str, Any] = field(default_factory=dict)


SceneFactory = Callable[[DemoWorld, int, int, np.random.Generator], SceneInfo]
SCENES: dict[str, tuple[str, SceneFactory]] = {}


def scene(name: str, title: str) -> Callable[[SceneFactory], SceneFactory]:
    """Register a scene factory under ``name`` (with a one-line title for the overlay)."""
    def register(fn: SceneFactory) -> SceneFactory:
        SCENES[name] = (title, fn)
        return fn
    return register


def build_scene(name: str, world: DemoWorld, count: int, seed: int = 7) -> SceneInfo:
    """Build the scene ``name`` into ``world`` with ``count`` dynamic bodies."""
    if name not in SCENES:
        raise ValueError(f"scene: expected one of {sorted(SCENES)}, got {name!r}")
    info = SCENES[name][1](world, world.dim, count, np.random.default_rng(seed))
    world.sync()
    return info


# -- helpers ----------------------------------------------------------------------------------------


def vec(dim: int, x: float = 0.0, y: float = 0.0, depth: Any = 0.0) -> np.ndarray:
    """An n-vector with e_0 = x, e_1 = y and every depth axis = depth (a scalar or (n-2,) values)."""
    v = np.zeros(dim)
    v[0], v[1] = x, y
    if dim > 2:
        v[2:] = depth
    return v


def slab(dim: int, hx: float, hy: float, depth: float) -> Box:
    """A box with half-extents hx, hy and ``depth`` along every depth axis."""
    return Box(vec(dim, hx, hy, depth))


def tilt(world: DemoWorld, angle: float) -> np.ndarray:
    """Rotor turning e_0 toward e_1 by ``angle`` (radians)."""
    B = np.zeros(world.alg.k)
    B[0] = angle  # the (0, 1) plane is the first bivector component
    return world.alg.rotor(B)


def ground_and_fences(world: DemoWorld, dim: int, reach: float, fence: float = 1.6) -> None:
    """Floor half-space x_1 <= 0, and low fences at +-fence on every depth axis."""
    up = np.zeros(dim)
    up[1] = 1.0
    world.add(HalfSpace(up, 0.0), np.zeros(dim), role="ground", kind="static")
    for axis in range(2, dim):
        # a fence across an axis the 3-D views show (e_2 in 4-D and 5-D) stays low, not to hide the scene
        shown = dim >= 4 and axis == 2
        h = vec(dim, reach, 0.15 if shown else 1.2, fence + 0.3)
        h[axis] = 0.15
        for side in (-1.0, 1.0):
            p = vec(dim, 0.0, 0.15 if shown else 1.2, 0.0)
            p[axis] = side * (fence + 0.15)
            world.add(Box(h), p, role="ground", kind="static")


def depth_jitter(dim: int, rng: np.random.Generator, amount: float) -> np.ndarray:
    return rng.uniform(-amount, amount, size=max(dim - 2, 0))


def faceted_stone(dim: int, rng: np.random.Generator, size: float) -> ConvexPolytope:
    """A polytope stone: a 24-cell in 4-D, else a random hull of points on a squashed sphere."""
    pick = rng.integers(0, 3)
    if dim == 4 and pick == 0:
        return cell_24(circumradius=size)
    if pick == 1:
        return orthoplex(dim, circumradius=size)
    if pick == 2 and dim <= 3:
        return regular_simplex(dim, circumradius=size * 1.2)
    X = rng.normal(size=(4 * dim + 4, dim))
    X /= np.linalg.norm(X, axis=1, keepdims=True)
    X *= size * rng.uniform(0.75, 1.0, size=(len(X), 1))
    return ConvexPolytope(X)


# -- scenes -----------------------------------------------------------------------------------------


@scene("rockfall", "Rockfall: boulders, cut blocks and faceted stones down a slope into a catch basin")
def rockfall(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    ground_and_fences(world, dim, reach=9.0)
    slope = -0.45
    world.add(slab(dim, 4.2, 0.25, 2.0), vec(dim, -3.4, 2.6), role="ground", kind="static",
              rotor=tilt(world, slope), friction=0.6)
    # catch basin: a lip at the foot of the slope and a back wall
    world.add(slab(dim, 0.2, 0.5, 2.0), vec(dim, 1.2, 0.5), role="ground", kind="static")
    world.add(slab(dim, 0.25, 1.4, 2.0), vec(dim, 6.5, 1.4), role="ground", kind="static")
    for i in range(count):
        x = -6.2 + 1.1 * (i % 5) + rng.uniform(-0.2, 0.2)
        y = 5.2 + 1.1 * (i // 5)
        pos = vec(dim, x, y, depth_jitter(dim, rng, 0.35))
        R = world.alg.rotor(rng.normal(size=world.alg.k))
        kind = i % 3
        if kind == 0:
            world.add(Ball(dim, rng.uniform(0.28, 0.42)), pos, role="boulder", rotor=R, friction=0.7)
        elif kind == 1:
            h = vec(dim, rng.uniform(0.25, 0.42), rng.uniform(0.2, 0.32), rng.uniform(0.22, 0.38))
            world.add(Box(h), pos, role="block", rotor=R, friction=0.7)
        else:
            stone = faceted_stone(dim, rng, rng.uniform(0.32, 0.45))
            world.add(stone, pos, role="facet", rotor=R, friction=0.7)
    return SceneInfo(centre=(0.0, 3.2), span=17.0)


@scene("billiards", "Billiards: a cue ball breaks a racked cluster on a felt table")
def billiards(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    ground_and_fences(world, dim, reach=7.0, fence=2.2)
    top = 0.8
    world.add(slab(dim, 5.0, top / 2, 2.4), vec(dim, 0.0, top / 2), role="table", kind="static", friction=0.2)
    for side in (-1.0, 1.0):  # cushions at the ends of the table
        world.add(slab(dim, 0.2, 0.25, 2.4), vec(dim, side * 5.2, top + 0.25), role="ground", kind="static",
                  restitution=0.8)
    r = 0.22
    placed = 0
    layer = 0
    while placed < count - 1:  # a triangular rack opening toward -e_0, spread over the depth axes
        for j in range(layer + 1):
            if placed >= count - 1:
                break
            d = (j - layer / 2) * 2.05 * r
            depth = np.zeros(max(dim - 2, 0))
            if dim > 2:
                depth[-1] = d  # the rack fans out along the hidden axis
            pos = vec(dim, 1.5 + layer * 1.8 * r, top + r, 0.0)
            pos[2:] = depth
            if dim == 2:
                pos[0] = 1.5 + placed * 2.05 * r
            world.add(Ball(dim, r), pos, role="ball", restitution=0.9, friction=0.1)
            placed += 1
        layer += 1
    world.add(Ball(dim, r), vec(dim, -3.5, top + r, 0.0), role="boulder", velocity=vec(dim, 7.0, 0.0, 0.0),
              restitution=0.9, friction=0.1)
    return SceneInfo(centre=(0.0, 1.6), span=12.0)


@scene("conveyor", "Conveyor: a kinematic pusher sweeps crates along a belt and off its end down a chute")
def conveyor(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    ground_and_fences(world, dim, reach=9.0)
    height, start, end, speed = 2.6, -6.5, -0.6, 1.2
    belt = slab(dim, (end - start) / 2, 0.15, 1.2)
    world.add(belt, vec(dim, (start + end) / 2, height - 0.15), role="roller", kind="static", friction=0.4)
    # the pusher: a kinematic paddle riding the belt at constant speed, sent back when it reaches the end
    paddle = world.add(slab(dim, 0.12, 0.35, 1.1), vec(dim, start, height + 0.36), role="crate",
                       kind="kinematic", velocity=vec(dim, speed, 0.0, 0.0))
    # chute from the end of the belt down to a bin
    world.add(slab(dim, 2.0, 0.12, 2.0), vec(dim, 1.2, 1.5), role="ground", kind="static",
              rotor=tilt(world, -0.55), friction=0.3)
    world.add(slab(dim, 0.2, 0.9, 2.0), vec(dim, 6.0, 0.9), role="ground", kind="static")
    info = SceneInfo(centre=(0.0, 2.6), span=16.0, state={"spawned": 0, "count": count, "next": 0.0})

    def tick(w: DemoWorld, t: float) -> None:
        st = info.state
        h = w.physics.handle_of(paddle)
        x = w.sim.position(h)
        if x[0] > end - 0.2:  # back to the start of the belt for the next sweep
            x[0] = start
            w.sim.set_pose(h, position=x)
        if st["spawned"] >= st["count"] or t < st["next"]:
            return
        he = vec(dim, rng.uniform(0.22, 0.3), rng.uniform(0.2, 0.3), rng.uniform(0.2, 0.3))
        at = vec(dim, x[0] + 0.9 + rng.uniform(0.0, 1.5), height + 0.8, depth_jitter(dim, rng, 0.25))
        w.add(Box(he), at,
              role="crate", rotor=tilt(w, rng.uniform(-0.2, 0.2)), friction=0.6)
        st["spawned"] += 1
        st["next"] = t + 0.9

    info.tick = tick
    world.sync()
    tick(world, 0.0)
    return info


def scene_names() -> list[str]:
    return list(SCENES)


def scene_title(name: str) -> str:
    return SCENES[name][0]


__all__ = ["SCENES", "SceneInfo", "build_scene", "scene", "scene_names", "scene_title"]
