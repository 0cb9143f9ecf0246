"""The demo's scenes, registered by name. Each builds its bodies for any dimension n >= 2.

Layout in every dimension: e_0 runs left to right, e_1 is up, and e_2 .. e_{n-1} are depth axes.
A depth axis is *shown* when the default view draws it (e_2 in 4-D and 5-D, whose views are the
3-D slice x_3 = 0 [, x_4 = 0]) and *hidden* otherwise (e_2 in 3-D, e_3 and e_4 in 4-D and 5-D).

Every scene is a closed room (:func:`room`: static half-spaces on every side and a ceiling, the
box :attr:`SceneInfo.bounds`), so no body can leave it. Along the hidden axes the room is a
narrow slab around the default slice (the hidden coordinates at 0), about one body thick, so the
bodies the story is about stay in the slice the window shows.

* ``rockfall``  -- boulders (balls), cut blocks (boxes) and faceted stones (polytopes) tumble down a
  tilted slab into a catch basin at its foot.
* ``billiards`` -- a cue ball breaks a racked cluster on a felt table walled by cushions.
* ``conveyor``  -- a kinematic pusher sweeps crates along a belt; they drop off its end, slide down a
  chute and collect in a bin.
* ``drawbridge`` -- a winch motor raises and lowers a timber deck on a plane hinge across a moat
  (angle limits, a rope to the gatehouse); while it is down, kegs roll over it and push through a
  swinging gate into the castle yard.

A scene factory takes ``(world, dim, count, rng)`` (``count`` dynamic bodies) and returns a
:class:`SceneInfo` saying where the view should look, the room's bounds, what to do every frame
and how far the scene's story has got (:attr:`SceneInfo.progress`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from ndrigid.core import Ball, Box, ConvexPolytope, HalfSpace, cell_24, orthoplex, regular_simplex

from .world import DemoWorld

#: physics step of the demo, seconds (the Simulation's default fixed step)
FRAME = 1.0 / 60.0


@dataclass
class SceneInfo:
    """What the app needs to know about a built scene.

    Attributes:
        centre: (2,) world (x_0, x_1) point at the centre of the view.
        span: metres of x_0 visible across the main view.
        bounds: (lo, hi), each (n,): the room's inside; every body's centre stays in it.
        tick: called every frame with (world, seconds since start), or None.
        progress: called with the world, returns (done, total) of the scene's story (rocks in the
            basin, balls moved by the break, crates in the bin), or None.
        progress_label: what ``progress`` counts, for the status line.
        solid_height: x_1 of the point the 3-D views' camera looks at (None: ``centre``'s).
        lines: called with the world, returns polylines to draw over the bodies (ropes between
            joint anchors): a list of (points (P, n) in world coordinates, colour), or None.
        keys: the scene's own keys: pygame key name (``"b"``) -> (what it does, for the help
            overlay; a function of the world called when the key goes down).
    """

    centre: tuple[float, float]
    span: float
    bounds: tuple[np.ndarray, np.ndarray]
    tick: Callable[[DemoWorld, float], None] | None = None
    progress: Callable[[DemoWorld], tuple[int, int]] | None = None
    progress_label: str = ""
    solid_height: float | None = None
    state: dict[str, Any] = field(default_factory=dict)
    lines: Callable[[DemoWorld], list[tuple[np.ndarray, tuple[int, int, int]]]] | None = None
    keys: dict[str, tuple[str, Callable[[DemoWorld], None]]] = field(default_factory=dict)


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


def run_physics(name: str, dim: int, count: int, frames: int, seed: int = 7) -> tuple[DemoWorld, SceneInfo]:
    """Build a scene and run ``frames`` frames of its physics (the scene's tick, then one fixed
    step) without drawing anything, as the window does with nobody touching it."""
    world = DemoWorld(dim)
    info = build_scene(name, world, count, seed)
    for f in range(frames):
        if info.tick is not None:
            info.tick(world, f * FRAME)
        world.step(None)
    return world, info


def check_scene(name: str, dim: int, count: int = 18, frames: int = 600, seed: int = 7) -> dict[str, Any]:
    """Run a scene's physics (:func:`run_physics`) and measure what the tests check: dynamic
    bodies outside the room, dynamic bodies the default slice cuts, the story's progress, and
    the step time (median and max over the steps after the first, which loads the kernels)."""
    from ndrigid.core import DYNAMIC
    from ndrigid.core.geometry.slicing import axis_flat, slice_world

    world = DemoWorld(dim)
    info = build_scene(name, world, count, seed)
    ms = []
    for f in range(frames):
        if info.tick is not None:
            info.tick(world, f * FRAME)
        world.step(None)
        ms.append(1e3 * float(world.sim.timings.total))
    sim = world.sim
    dyn = [int(h) for h in sim.bodies.handle if sim.bodies.kind[sim.row(int(h))] == DYNAMIC]
    lo, hi = info.bounds
    P = _positions(world, dyn)
    flat = axis_flat(dim, [] if dim == 2 else [0.0] * (1 if dim == 3 else dim - 3))
    cut = {int(h) for bt in slice_world(sim, flat).batches for h in bt.handles[bt.hit]}
    out = {"scene": name, "dim": dim, "dynamic": len(dyn),
           "outside": int(np.sum(~np.all((P > lo) & (P < hi), axis=1))),
           "in_slice": sum(h in cut for h in dyn),
           "progress": info.progress(world) if info.progress is not None else None,
           "label": info.progress_label,
           "step_ms": (float(np.median(ms[1:])), float(np.max(ms[1:]))) if frames > 1 else None}
    world.close()
    return out


# -- helpers ----------------------------------------------------------------------------------------


def vec(dim: int, x: float = 0.0, y: float = 0.0, depth: Any = 0.0) -> np.ndarray:
    """An n-vector with e_0 = x, e_1 = y and every depth axis = depth (a scalar or (n-2,) values)."""
    v = np.zeros(dim)
    v[0], v[1] = x, y
    if dim > 2:
        v[2:] = depth
    return v


def hidden_axes(dim: int) -> list[int]:
    """The depth axes the default view does not draw: e_2 in 3-D, e_3 .. in 4-D and up."""
    return [2] if dim == 3 else list(range(3, dim))


def depths(dim: int, shown: float, hidden: float) -> np.ndarray:
    """(n-2,) half-widths of the depth axes: ``shown`` on a drawn one, ``hidden`` on the others."""
    hid = hidden_axes(dim)
    return np.array([hidden if a in hid else shown for a in range(2, dim)])


def slab(dim: int, hx: float, hy: float, depth: Any) -> Box:
    """A box with half-extents hx, hy and ``depth`` along the depth axes (scalar or (n-2,))."""
    return Box(vec(dim, hx, hy, depth))


def tilt(world: DemoWorld, angle: float) -> np.ndarray:
    """Rotor turning e_0 toward e_1 by ``angle`` (radians)."""
    B = np.zeros(world.alg.k)
    B[0] = angle  # the (0, 1) plane is the first bivector component
    return world.alg.rotor(B)


def room(world: DemoWorld, lo: np.ndarray, hi: np.ndarray, *, floor_role: str = "ground",
         wall_role: str = "ground", floor: dict[str, float] | None = None,
         walls: dict[str, float] | None = None, sides: dict[str, float] | None = None
         ) -> tuple[np.ndarray, np.ndarray]:
    """Static half-spaces around the box lo..hi: the floor at lo[1], a ceiling at hi[1] and a
    wall on each side of every other axis. Returns (lo, hi).

    ``floor``, ``walls`` (the ceiling and the e_0 walls) and ``sides`` (the walls across the depth
    axes) are materials; ``sides`` defaults to frictionless, so that bodies in a narrow slab do not
    wedge between its two sides.
    """
    n = world.dim
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    origin = np.zeros(n)
    world.add(HalfSpace.below(n, 1, float(lo[1])), origin, role=floor_role, kind="static", **(floor or {}))
    world.add(HalfSpace.above(n, 1, float(hi[1])), origin, role=wall_role, kind="static", **(walls or {}))
    for axis in range(n):
        if axis != 1:
            mat = (walls or {}) if axis == 0 else {"friction": 0.0, **(sides or {})}
            for face in (HalfSpace.below(n, axis, float(lo[axis])),
                         HalfSpace.above(n, axis, float(hi[axis]))):
                world.add(face, origin, role=wall_role, kind="static", **mat)
    return lo, hi


def depth_jitter(dim: int, rng: np.random.Generator, amount: float, shown: float | None = None) -> np.ndarray:
    """(n-2,) random depth offsets: +-``amount`` on hidden axes, +-``shown`` (default: the same) on
    shown ones."""
    lim = depths(dim, amount if shown is None else shown, amount)
    return rng.uniform(-lim, lim) if dim > 2 else np.zeros(0)


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


def _positions(world: DemoWorld, handles: list[int]) -> np.ndarray:
    sim = world.sim
    return np.array([sim.position(h) for h in handles]).reshape(len(handles), world.dim)


# -- scenes -----------------------------------------------------------------------------------------

# Rockfall tuning, measured with `python -m ndrigid.demo --check --scene rockfall --dim 0
# --seed 7 8 9 --frames 600` (18 bodies, 10 s):
# * materials: the slope is tilted by SLOPE rad (tan 0.48); a block slides on it when the
#   combined friction (geometric mean) is below that: ROCK_FRICTION and SLOPE_FRICTION give 0.32,
#   and 16-18 of 18 rocks end in the basin in 2-D to 5-D (friction 0.6-0.7 before: 2 in 2-D).
# * the room along the hidden axes: +-0.45 m keeps 11-18 of 18 bodies in the default slice
#   (5-D: 11, 12, 12), with frictionless sides. Measured before the blocks were made thinner
#   along the hidden axes: +-0.45 m gave 13-16 in 5-D and +-0.5 m 11; with friction 0.3 on the
#   sides a +-0.5 m slab jammed on the slope in 3-D (5 of 18 rocks reached the basin).
# * SPACING, m between spawned rocks: 1.3 m, median step of the first 60 steps in 5-D 8.7 ms
#   against 10.6 ms at 0.95 m (`python -m ndrigid.bench demo-rockfall --dim 5 --bodies 18
#   --steps 60`, on a loaded 2-core machine).
SLOPE = 0.45
SLOPE_FRICTION = 0.3
ROCK_FRICTION = 0.35
SPACING = 1.3


@scene("rockfall", "Rockfall: boulders, cut blocks and faceted stones down a slope into a catch basin")
def rockfall(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    hidden, shown = 0.45, 1.8
    d = depths(dim, shown, hidden)
    lo, hi = room(world, vec(dim, -8.2, 0.0, -d), vec(dim, 8.2, 11.0, d), floor={"friction": 0.3},
                  walls={"friction": 0.3})
    # the slope: a slab from the left wall whose top face ends LIP m above the basin floor at
    # x = foot; what leaves it drops into the basin (x > foot) and cannot climb back
    foot, lip, thick = 0.6, 1.0, 0.25
    c, s = np.cos(SLOPE), np.sin(SLOPE)
    top = float(lo[0]) - 0.2
    half = (foot - top) / c / 2
    mid = np.array([(foot + top) / 2, lip + (foot - top) / 2 * np.tan(SLOPE)])
    centre = mid - thick * np.array([s, c])
    world.add(slab(dim, half, thick, d + 0.3), vec(dim, *centre), role="ground", kind="static",
              rotor=tilt(world, -SLOPE), friction=SLOPE_FRICTION)

    def surface(x: float) -> float:  # height of the slope's top face at x
        return lip + (foot - x) * np.tan(SLOPE)

    rocks: list[int] = []
    per_row = 6
    for i in range(count):
        x = -7.4 + SPACING * (i % per_row) + rng.uniform(-0.1, 0.1)
        y = surface(-7.4) + 1.0 + SPACING * (i // per_row)
        pos = vec(dim, x, y, depth_jitter(dim, rng, 0.1, shown=1.0))
        # a random turn in the planes of the drawn axes only (e_0, e_1 and, in 4-D and 5-D, e_2):
        # a block then starts no wider along a hidden axis than its own half-extent there. With
        # fully random turns and blocks 0.22-0.35 m deep on every axis, 156 of 281 contact points
        # were block-on-side in 5-D after 60 steps and the longest step of 600 was 20-21 ms
        # (seeds 8, 9); with these, 11.3-11.5 ms (`--check`, as above)
        B = rng.normal(size=world.alg.k) * np.all(world.alg.pairs < (3 if dim >= 4 else 2), axis=1)
        R = world.alg.rotor(B)
        kind = i % 3
        if kind == 0:
            ent = world.add(Ball(dim, rng.uniform(0.28, 0.4)), pos, role="boulder", rotor=R,
                            friction=ROCK_FRICTION)
        elif kind == 1:
            # thinner along the hidden axes (0.18-0.25 m, 0.22-0.35 m drawn): a block resting
            # square between the room's sides then touches neither (+-0.45 m)
            h = vec(dim, rng.uniform(0.25, 0.4), rng.uniform(0.2, 0.3),
                    depths(dim, rng.uniform(0.22, 0.35), rng.uniform(0.18, 0.25)))
            ent = world.add(Box(h), pos, role="block", rotor=R, friction=ROCK_FRICTION)
        else:
            stone = faceted_stone(dim, rng, rng.uniform(0.32, 0.42))
            ent = world.add(stone, pos, role="facet", rotor=R, friction=ROCK_FRICTION)
        rocks.append(ent)
    info = SceneInfo(centre=(0.0, 4.3), span=17.0, bounds=(lo, hi), progress_label="in the basin",
                     solid_height=2.6,
                     state={"basin": (foot, float(hi[0])), "rocks": rocks})

    def progress(w: DemoWorld) -> tuple[int, int]:
        handles = [w.physics.handle_of(e) for e in rocks]
        x = _positions(w, handles)[:, 0]
        return int(np.sum(x > foot)), len(rocks)

    info.progress = progress
    return info


BALL_RADIUS = 0.22


def rack(dim: int, n: int, apex: float, length: float) -> tuple[float, list[tuple[float, float]]]:
    """Ball radius and (x_0, spread) centres of ``n`` touching balls racked from x_0 = apex over at
    most ``length`` metres (the radius shrinks from BALL_RADIUS to fit).

    The spread runs along a drawn axis where there is one: a triangle in the (e_0, e_2) plane in
    4-D and 5-D; a zig-zag two balls wide (+-0.7 r along the hidden e_2, both cut by the slice) in
    3-D; a straight row in 2-D.
    """
    gap = 1.01  # balls 1 % apart, so none starts in contact
    if dim >= 4:
        rows = int(np.ceil((np.sqrt(8 * n + 1) - 1) / 2))
        r = min(BALL_RADIUS, length / (2 + np.sqrt(3) * gap * (rows - 1)))
        out = []
        for k in range(rows):
            for j in range(k + 1):
                if len(out) < n:
                    out.append((apex + r + k * np.sqrt(3) * gap * r, (j - k / 2) * 2 * gap * r))
        return r, out
    if dim == 3:
        step = np.sqrt(4 * gap * gap - 1.4 ** 2)
        r = min(BALL_RADIUS, length / (2 + step * (n - 1)))
        return r, [(apex + r + i * step * r, 0.7 * r * (1 if i % 2 else -1)) for i in range(n)]
    r = min(BALL_RADIUS, length / (2 + 2 * gap * (n - 1)))
    return r, [(apex + r + i * 2 * gap * r, 0.0) for i in range(n)]


@scene("billiards", "Billiards: a cue ball breaks a racked cluster on a felt table")
def billiards(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    n = max(count - 1, 1)
    r, spots = rack(dim, n, apex=0.4, length=4.4)
    # cushions: the table is 10 m long; along hidden axes a lane 1.9 r wide each side keeps every
    # ball's centre within 0.9 r of the slice, so the slice cuts every ball
    spread = max(abs(sp) for _, sp in spots) + r
    d = depths(dim, max(spread + 1.0, 2.0), 1.9 * r)
    lo, hi = room(world, vec(dim, -5.0, 0.0, -d), vec(dim, 5.0, 4.0, d), floor_role="table",
                  floor={"friction": 0.2}, walls={"restitution": 0.8, "friction": 0.1})
    balls = []
    for x, sp in spots:
        pos = vec(dim, x, r)
        if dim == 3 or dim >= 4:
            pos[2] = sp
        balls.append(world.add(Ball(dim, r), pos, role="ball", restitution=0.9, friction=0.1))
    world.add(Ball(dim, r), vec(dim, -3.5, r), role="cue", velocity=vec(dim, 7.0, 0.0, 0.0),
              restitution=0.9, friction=0.1)
    start = np.array([[x, sp] for x, sp in spots])
    info = SceneInfo(centre=(0.0, 1.2), span=11.0, bounds=(lo, hi), progress_label="moved by the break",
                     state={"radius": r, "rack": balls, "spots": start})

    def progress(w: DemoWorld) -> tuple[int, int]:
        x = _positions(w, [w.physics.handle_of(e) for e in balls])[:, 0]
        return int(np.sum(np.abs(x - start[:, 0]) > r)), len(balls)

    info.progress = progress
    return info


@scene("conveyor", "Conveyor: a kinematic pusher sweeps crates along a belt and off its end down a chute")
def conveyor(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    # hidden axes +-0.5 m: 11-12 of the 12 crates spawned in 10 s are in the default slice; floor
    # and chute friction 0.2: the first 6 crates are down the chute (past the belt's end, below
    # 1.2 m) after 10 s in 2-D to 5-D (`python -m ndrigid.demo --check --scene conveyor --dim 0
    # --seed 7 8 9 --frames 600`)
    d = depths(dim, 1.5, 0.5)
    lo, hi = room(world, vec(dim, -7.6, 0.0, -d), vec(dim, 7.6, 9.0, d), floor={"friction": 0.2},
                  walls={"friction": 0.3})
    height, start, end, speed = 2.6, -6.8, -0.8, 1.2
    belt = slab(dim, (end - start) / 2, 0.15, np.minimum(d, 1.2))
    world.add(belt, vec(dim, (start + end) / 2, height - 0.15), role="belt", kind="static", friction=0.4)
    # the pusher: a kinematic paddle riding the belt at constant speed; it pushes past the belt's
    # end (so no crate is left on the edge) and is then sent back to the start
    paddle = world.add(slab(dim, 0.12, 0.35, np.minimum(d, 1.1)), vec(dim, start, height + 0.36),
                       role="pusher", kind="kinematic", velocity=vec(dim, speed, 0.0, 0.0))
    # the chute: its top face starts 0.4 m below the belt, just past its end, and meets the floor
    chute_angle, thick = 0.55, 0.12
    top0 = np.array([end + 0.15, height - 0.4])
    length = top0[1] / np.sin(chute_angle) + 0.3
    c, s = np.cos(chute_angle), np.sin(chute_angle)
    centre = top0 + (length / 2) * np.array([c, -s]) - thick * np.array([s, c])
    world.add(slab(dim, length / 2, thick, d + 0.3), vec(dim, *centre), role="ground", kind="static",
              rotor=tilt(world, -chute_angle), friction=0.2)
    bin_x = float(top0[0] + top0[1] / np.tan(chute_angle))  # where the chute meets the floor
    bin_top = 1.2  # a crate past the belt's end and below this height has come down the chute
    crates: list[int] = []
    info = SceneInfo(centre=(0.0, 3.2), span=16.0, bounds=(lo, hi), progress_label="in the bin",
                     solid_height=2.2,
                     state={"spawned": 0, "count": count, "next": 0.0, "bin": (bin_x, float(hi[0])),
                            "bin_top": bin_top, "crates": crates, "belt_end": end})

    def tick(w: DemoWorld, t: float) -> None:
        st = info.state
        h = w.physics.handle_of(paddle)
        x = w.sim.position(h)
        if x[0] > end + 0.3:  # back to the start of the belt for the next sweep
            x[0] = start
            w.sim.set_pose(h, position=x)
        if st["spawned"] >= st["count"] or t < st["next"]:
            return
        he = vec(dim, rng.uniform(0.22, 0.3), rng.uniform(0.2, 0.3), rng.uniform(0.2, 0.3))
        at = vec(dim, x[0] + 0.9 + rng.uniform(0.0, 1.5), height + 0.8, depth_jitter(dim, rng, 0.1, 0.6))
        crates.append(w.add(Box(he), at, role="crate", rotor=tilt(w, rng.uniform(-0.2, 0.2)), friction=0.6))
        st.setdefault("spawn_times", []).append(t)
        st["spawned"] += 1
        st["next"] = t + 0.9

    def progress(w: DemoWorld) -> tuple[int, int]:
        w.sync()
        P = _positions(w, [w.physics.handle_of(e) for e in crates])
        return int(np.sum((P[:, 0] > end) & (P[:, 1] < bin_top))), count

    info.tick = tick
    info.progress = progress
    world.sync()
    tick(world, 0.0)
    return info


# Drawbridge tuning (the deck, the winch and the gate):
# * the deck turns on a plane hinge in -e_0 ^ e_1 about its castle-side top edge: angle 0 is
#   lowered (its far end in a seat cut into the outer bank, its top flush with the bank) and
#   BRIDGE_RAISED is the upper limit; the winch is the hinge's motor, run at +-BRIDGE_SPEED
#   against one limit or the other (the limits and the seat stop it, the motor's torque limit
#   keeps it from fighting them harder than it needs to lift the deck and a few kegs:
#   DECK_MASS * g * half the deck's length is 6.1 kN m).
# * ropes (distance joints with only a maximum length) run from the gatehouse to the deck's
#   far end: taut within ROPE_SLACK of the lowered deck, slack (and drawn sagging) once it rises.
# * the gate is a bronze flap hanging from the gatehouse on a hinge in e_0 ^ e_1 that opens only
#   inwards (limits -0.05 .. 1.35 rad); its motor at speed 0 with GATE_DAMPING of torque is the
#   hinge's friction, so the flap comes to rest after a keg has pushed through.
BRIDGE_RAISED = 1.35
BRIDGE_SPEED = 0.6
BRIDGE_TORQUE = 2.5e4
DECK_MASS = 250.0
ROPE_SLACK = 0.02
GATE_DAMPING = 8.0
YARD_SLOPE = 0.08
#: collision layers: the room's depth sides sit on SIDE_LAYER; the hinged deck and gate collide
#: with everything else (HINGED_MASK)
SIDE_LAYER = 2
HINGED_MASK = 0xFFFFFFFF & ~SIDE_LAYER
#: the winch's cycle, seconds: the deck is lowered from the start, raised at RAISE_AT, lowered
#: again at LOWER_AT, and the cycle repeats every CYCLE (key B jumps to the next change)
RAISE_AT, LOWER_AT, CYCLE = 4.5, 9.5, 13.0
#: kegs: released on the outer bank every KEG_EVERY s from KEGS_FROM to KEGS_TO s of each
#: cycle (while the deck is down), rolling at KEG_SPEED m/s towards the bridge
KEG_RADIUS, KEG_MASS, KEG_SPEED = 0.3, 20.0, 2.5
KEGS_FROM, KEGS_TO, KEG_EVERY = 0.2, 2.7, 0.6


def rope_curve(a: np.ndarray, b: np.ndarray, length: float, points: int = 17) -> np.ndarray:
    """(points, n) world points of a rope of ``length`` hung between a and b: straight when taut,
    else a parabola sagging along -e_1 whose arc length is about ``length`` (for a shallow sag s
    over a span D the arc is D + 8 s^2 / (3 D))."""
    u = np.linspace(0.0, 1.0, points)[:, None]
    span = float(np.linalg.norm(b - a))
    slack = max(0.0, length - span)
    sag = float(np.sqrt(3.0 * span * slack / 8.0)) if span > 1e-9 else 0.0
    down = np.zeros(len(a))
    down[1] = -1.0
    return a + u * (b - a) + 4.0 * sag * u * (1.0 - u) * down


@scene("drawbridge", "Drawbridge: a winch motor swings a deck on a plane hinge over a moat; kegs roll "
                     "across and through a swinging gate")
def drawbridge(world: DemoWorld, dim: int, count: int, rng: np.random.Generator) -> SceneInfo:
    from . import palette as P

    hidden, shown = 0.45, 1.5
    d = depths(dim, shown, hidden)
    # the room's sides across the depth axes are on collision layer SIDE_LAYER, which the deck and
    # the gate do not see: their hinges hold them in the e_0 ^ e_1 plane, so they never need the
    # sides, and the pairs are not worth their broadphase and narrowphase time
    lo, hi = room(world, vec(dim, -8.2, 0.0, -d), vec(dim, 8.2, 10.0, d), floor_role="moat",
                  floor={"friction": 0.4}, walls={"friction": 0.3}, sides={"layer": SIDE_LAYER})
    top, thick = 2.0, 0.24  # the banks' height; the deck's thickness
    seat_x, far, hinge_x, yard_x = -2.6, -2.55, 2.4, 2.45  # seat's edge, deck's ends, yard's edge
    wall_x, pin_y, gate_half = (3.3, 3.9), 3.45, 0.66  # the gatehouse wall; the gate's pin, half height

    def block(x0: float, x1: float, y0: float, y1: float, role: str) -> int:
        return world.add(slab(dim, (x1 - x0) / 2, (y1 - y0) / 2, d + 0.3),
                         vec(dim, (x0 + x1) / 2, (y0 + y1) / 2), role=role, kind="static", friction=0.5)

    block(float(lo[0]), seat_x, 0.0, top, "ground")  # the outer bank
    block(seat_x, -2.0, 0.0, top - thick, "ground")  # the seat of the deck's far end
    yard = block(yard_x, wall_x[1], 0.0, top, "ground")  # the gateway
    # the castle yard beyond the gate falls by YARD_SLOPE towards the far wall, so kegs roll on
    # and the gate swings shut behind them
    c, s_ = np.cos(YARD_SLOPE), np.sin(YARD_SLOPE)
    length, half = (float(hi[0]) - wall_x[1]) / c, 1.0
    world.add(slab(dim, length / 2, half, d + 0.3),
              vec(dim, wall_x[1] + length / 2 * c - half * s_, top - length / 2 * s_ - half * c),
              role="ground", kind="static", rotor=tilt(world, -YARD_SLOPE), friction=0.5)
    keep = block(wall_x[0], wall_x[1], pin_y + 0.1, 7.6, "keep")  # the gatehouse wall over the gate
    deck_pos = vec(dim, (hinge_x + far) / 2, top - thick / 2)
    deck = world.add(slab(dim, (hinge_x - far) / 2, thick / 2, depths(dim, 1.2, 0.4)), deck_pos, role="deck",
                     mass=DECK_MASS, friction=0.6, mask=HINGED_MASK)
    gate_x = sum(wall_x) / 2
    gate = world.add(slab(dim, 0.06, gate_half, depths(dim, 1.3, 0.4)), vec(dim, gate_x, pin_y - gate_half),
                     role="gate", mass=6.0, friction=0.3, mask=HINGED_MASK)
    world.sync()
    sim, handle = world.sim, world.physics.handle_of
    raise_plane = np.zeros(world.alg.k)
    raise_plane[0] = -1.0  # -e_0 ^ e_1: turns -e_0 (the far end) towards +e_1
    hinge = sim.add_joint("hinge", handle(yard), handle(deck), anchor=vec(dim, hinge_x, top),
                          plane=raise_plane, lower=0.0, upper=BRIDGE_RAISED, max_motor_torque=BRIDGE_TORQUE)
    # one rope in the middle of the deck where the view is a flat slice (2-D, 3-D), two near its
    # edges along the drawn depth axis e_2 where it is a solid (4-D, 5-D)
    ropes = []
    for side in ([0.0] if dim < 4 else [-1.0, 1.0]):
        post, end = vec(dim, wall_x[0], 7.3), vec(dim, far + 0.1, top)
        if dim >= 4:
            post[2] = end[2] = side
        rope_length = float(np.linalg.norm(end - post)) + ROPE_SLACK
        ropes.append((sim.add_joint("distance", handle(keep), handle(deck), anchor=post, anchor_b=end,
                                    max_length=rope_length), post, end - deck_pos))
    swing = np.zeros(world.alg.k)
    swing[0] = 1.0  # e_0 ^ e_1: the hanging flap's foot swings towards +e_0, into the yard
    gate_hinge = sim.add_joint("hinge", handle(keep), handle(gate), anchor=vec(dim, gate_x, pin_y),
                               plane=swing, lower=-0.05, upper=1.35, max_motor_torque=GATE_DAMPING)
    kegs: list[int] = []
    info = SceneInfo(centre=(0.0, 4.4), span=17.0, bounds=(lo, hi), progress_label="kegs through the gate",
                     solid_height=2.6,
                     state={"deck": deck, "gate": gate, "kegs": kegs, "count": count, "hinge": hinge,
                            "ropes": [r[0] for r in ropes], "gate_hinge": gate_hinge,
                            "rope_length": rope_length,
                            "raised": BRIDGE_RAISED, "lowered": 0.0, "gate_x": wall_x[1], "top": top,
                            "up": None, "shift": 0.0, "t": 0.0, "next": 0.0, "released": 0,
                            "through": 0, "counted": set(), "moat": (far, yard_x)})
    st = info.state

    def release(w: DemoWorld) -> None:
        """Roll a keg out on the outer bank: the one farthest into the yard, or one in the moat,
        if there is one (moving or not: the kegs behind it roll on down the slope), else a new
        one (at most ``count``)."""
        at = vec(dim, -7.3, top + KEG_RADIUS + 0.01, depth_jitter(dim, rng, 0.05, shown=0.5))
        v = vec(dim, KEG_SPEED)
        spin = np.zeros(w.alg.k)
        spin[0] = -KEG_SPEED / KEG_RADIUS  # rolling: the contact point at -r e_1 is at rest
        idle = []
        for e in kegs:
            h = w.physics.handle_of(e)
            p = w.sim.position(h)
            if p[0] > wall_x[1] + 0.5 or p[1] < top - 0.5:
                idle.append((float(p[0]) + (1e3 if p[1] < top - 0.5 else 0.0), e))
        if idle:
            e = max(idle)[1]
            h = w.physics.handle_of(e)
            w.sim.set_pose(h, position=at, rotor=w.alg.rotor(np.zeros(w.alg.k)))
            w.sim.set_velocity(h, v, spin)
            st["counted"].discard(e)
        elif len(kegs) < count:
            kegs.append(w.add(Ball(dim, KEG_RADIUS), at, role="keg", velocity=v, angular_velocity=spin,
                              mass=KEG_MASS, friction=0.5, restitution=0.1))
        else:
            return
        st["released"] += 1

    def tick(w: DemoWorld, t: float) -> None:
        w.sync()
        st["t"] = t
        phase = (t + st["shift"]) % CYCLE
        up = RAISE_AT <= phase < LOWER_AT
        if up != st["up"]:
            st["up"] = up
            w.sim.set_motor(hinge, speed=BRIDGE_SPEED if up else -BRIDGE_SPEED)
        for e in kegs:
            if e not in st["counted"] and w.sim.position(w.physics.handle_of(e))[0] > wall_x[1]:
                st["counted"].add(e)
                st["through"] += 1
        if (not up and KEGS_FROM <= phase < KEGS_TO and t >= st["next"]
                and w.sim.joint_angle(hinge) < 0.05):
            release(w)
            st["next"] = t + KEG_EVERY

    def toggle(w: DemoWorld) -> None:
        """Key B: start raising now if the deck is lowered or coming down, else start lowering."""
        phase = (st["t"] + st["shift"]) % CYCLE
        target = LOWER_AT if RAISE_AT <= phase < LOWER_AT else RAISE_AT
        st["shift"] += target - phase

    def progress(w: DemoWorld) -> tuple[int, int]:
        return st["through"], st["released"]

    def lines(w: DemoWorld) -> list[tuple[np.ndarray, tuple[int, int, int]]]:
        h = w.physics.handle_of(deck)
        x, R = w.sim.position(h), w.sim.rotation(h)
        # (the rope's anchor on the deck is kept in the deck's frame: the deck starts unturned)
        return [(rope_curve(post, x + R @ local, rope_length), P.ROPE_HEMP) for _, post, local in ropes]

    info.tick, info.progress, info.lines = tick, progress, lines
    info.keys["b"] = ("drawbridge: raise / lower the deck now", toggle)
    return info


def scene_names() -> list[str]:
    return list(SCENES)


def scene_title(name: str) -> str:
    return SCENES[name][0]


__all__ = ["FRAME", "SCENES", "SceneInfo", "build_scene", "check_scene", "run_physics", "scene",
           "scene_names",
           "scene_title"]
