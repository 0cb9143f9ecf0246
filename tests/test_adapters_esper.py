"""The esper adapter against real esper 3.x, in every dimension 2..5.

References outside the adapter: the core Simulation driven directly with the same calls (the
adapter must add nothing to the physics: bit-for-bit equal poses); the free-fall time
t = sqrt(2 h / g) (any mechanics text) for when a dropped ball first touches the floor; esper's
own documented semantics for world contexts and event handlers.

The scenario runner here (:class:`Scenario`, :func:`core_run`, :func:`adapter_run`) is shared with
``test_adapters_tcod.py``: a scenario is a list of frames, each a list of operations (add, remove,
velocity, teleport) done before that frame's step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import esper
import numpy as np
import pytest
from conftest import dims
from ndrigid.adapters.esper import (
    CONTACT_BEGIN,
    CONTACT_END,
    PhysicsProcessor,
    RigidBody,
    Transform,
    Velocity,
)
from ndrigid.core.algebra import Algebra, skew
from ndrigid.core.errors import InputError
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace
from ndrigid.core.world.simulation import Simulation
from scipy.linalg import expm

DT = 1.0 / 60.0


# -- scenario runner (shared with the tcod tests) ------------------------------------------------


def floor(dim: int) -> HalfSpace:
    """The ground u . x <= 0 with u = e_1 ("up" is +e_1)."""
    u = np.zeros(dim)
    u[1] = 1.0
    return HalfSpace(u, 0.0)


def body_spec(dim: int, i: int, rng: np.random.Generator) -> dict[str, Any]:
    """Body i of a mixed pile: balls and boxes at staggered heights, a little spin and drift."""
    k = dim * (dim - 1) // 2
    pos = np.zeros(dim)
    pos[0] = 0.9 * (i % 3) - 0.9
    pos[1] = 0.32 + 0.5 * i  # body 0 starts just above the floor: a contact in every run
    pos[2:] = rng.uniform(-0.2, 0.2, dim - 2)
    shape = Ball(dim, 0.3) if i % 2 == 0 else Box(np.full(dim, 0.25))
    return {"shape": shape, "position": pos, "velocity": rng.uniform(-0.3, 0.3, dim),
            "angular_velocity": rng.uniform(-1.0, 1.0, k), "restitution": 0.2 * (i % 2)}


@dataclass
class Scenario:
    """frames[f] = operations before step f: ("add", key, spec) | ("remove", key) |
    ("velocity", key, v, w) | ("teleport", key, position)."""

    dim: int
    frames: list[list[tuple[Any, ...]]] = field(default_factory=list)


def churn_scenario(dim: int, rng: np.random.Generator, frames: int = 36) -> Scenario:
    """A floor and four bodies; bodies come and go mid-run, removals in an order other than creation."""
    sc = Scenario(dim, [[] for _ in range(frames)])
    sc.frames[0].append(("add", "floor", {"shape": floor(dim), "kind": "static"}))
    for i in range(4):
        sc.frames[0].append(("add", f"b{i}", body_spec(dim, i, rng)))
    sc.frames[6] += [("add", "b4", body_spec(dim, 4, rng)), ("add", "b5", body_spec(dim, 5, rng))]
    sc.frames[10] += [("remove", "b3"), ("remove", "b0")]  # newest first: not creation order
    sc.frames[12] += [("velocity", "b1", rng.uniform(-1, 1, dim), rng.uniform(-1, 1, dim * (dim - 1) // 2))]
    sc.frames[14] += [("teleport", "b2", np.r_[0.0, 3.0, np.zeros(dim - 2)]),
                      ("add", "b6", body_spec(dim, 6, rng))]
    sc.frames[20] += [("remove", "b5"), ("add", "b7", body_spec(dim, 7, rng)), ("remove", "b1")]
    sc.frames[28] += [("velocity", "b7", np.zeros(dim), None)]
    return sc


def _spec_args(spec: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in spec.items() if k != "shape"}


def core_run(sc: Scenario) -> list[dict[str, tuple[np.ndarray, np.ndarray]]]:
    """The reference: the Simulation driven directly, doing each frame's removals (in creation
    order), then additions, then teleports and velocities, then one step. Returns, per frame, the
    pose (position, rotor) of every live key after the step."""
    sim = Simulation(sc.dim)
    handles: dict[str, int] = {}
    created: list[str] = []
    out = []
    for ops in sc.frames:
        for key in sorted((op[1] for op in ops if op[0] == "remove"), key=created.index):
            sim.remove_body(handles.pop(key))
        for op in ops:
            if op[0] == "add":
                created.append(op[1])
                handles[op[1]] = sim.add_body(op[2]["shape"], **_spec_args(op[2]))
            elif op[0] == "teleport":
                sim.set_pose(handles[op[1]], position=op[2])
            elif op[0] == "velocity":
                sim.set_velocity(handles[op[1]], velocity=op[2], angular_velocity=op[3])
        sim.step()
        out.append({k: (sim.position(h), sim.rotor(h)) for k, h in handles.items()})
    return out


class Driver:
    """What the scenario runner needs from an ECS: make, delete and read entities, run a frame."""

    sim: Simulation

    def create(self, rigid: RigidBody, transform: Transform, velocity: Velocity) -> Any:
        raise NotImplementedError

    def delete(self, entity: Any) -> None:
        raise NotImplementedError

    def component(self, entity: Any, kind: type) -> Any:
        raise NotImplementedError

    def frame(self, seconds: float) -> None:
        raise NotImplementedError

    def body_entities(self) -> int:
        """Number of entities holding a RigidBody."""
        raise NotImplementedError


def adapter_run(sc: Scenario, driver: Driver,
                ents: dict[str, Any] | None = None) -> list[dict[str, tuple[np.ndarray, np.ndarray]]]:
    """The same scenario through an ECS; also checks after every frame that the simulation holds
    exactly one body per physics entity (no stale body after a deletion). ``ents`` (key -> entity)
    carries on a run split over several calls."""
    ents = {} if ents is None else ents
    out = []
    for ops in sc.frames:
        for op in ops:
            if op[0] == "add":
                spec = op[2]
                a = _spec_args(spec)
                rb = RigidBody(spec["shape"], **{k: v for k, v in a.items()
                                                  if k not in ("position", "velocity", "angular_velocity")})
                ents[op[1]] = driver.create(rb, Transform(position=a.get("position")),
                                            Velocity(a.get("velocity"), a.get("angular_velocity")))
            elif op[0] == "remove":
                driver.delete(ents.pop(op[1]))
            elif op[0] == "teleport":
                driver.component(ents[op[1]], Transform).position = op[2]
            elif op[0] == "velocity":
                vel = driver.component(ents[op[1]], Velocity)
                vel.linear = op[2]
                if op[3] is not None:
                    vel.angular = op[3]
        driver.frame(DT)
        assert driver.sim.count == driver.body_entities() == len(ents)
        out.append({k: (np.array(driver.component(e, Transform).position),
                        np.array(driver.component(e, Transform).rotor)) for k, e in ents.items()})
    return out


def assert_same_run(got: list[dict[str, Any]], want: list[dict[str, Any]]) -> None:
    """Bit-for-bit equal poses of the same keys in every frame."""
    assert len(got) == len(want)
    for f, (g, w) in enumerate(zip(got, want, strict=True)):
        assert g.keys() == w.keys(), f"frame {f}"
        for key in w:
            for a, b, what in ((g[key][0], w[key][0], "position"), (g[key][1], w[key][1], "rotor")):
                assert np.array_equal(a, b), f"frame {f}, {key} {what}: {a} != {b}"


def check_event_pairing(events: list[tuple[str, Any, Any]], removed: set[Any]) -> int:
    """Every begin of a pair is followed by exactly one end before the next begin; a pair still
    open at the end must involve a removed entity (then its end must have come). Returns begins."""
    open_pairs: set[frozenset[Any]] = set()
    begins = 0
    for kind, a, b in events:
        pair = frozenset((a, b))
        if kind == "begin":
            assert pair not in open_pairs, f"second begin without an end for {pair}"
            open_pairs.add(pair)
            begins += 1
        else:
            assert pair in open_pairs, f"end without a begin for {pair}"
            open_pairs.discard(pair)
    assert not any(p & removed for p in open_pairs), f"removed entities left open pairs: {open_pairs}"
    return begins


# -- esper driver and fixtures --------------------------------------------------------------------


_HANDLER_OWNERS: list[Any] = []


@pytest.fixture
def world(request: pytest.FixtureRequest) -> Any:
    """A fresh esper world context for the test, deleted afterwards.

    esper holds handlers by weak reference, and the clean-up callback of a dead handler looks in
    whichever world is current when it dies (a KeyError if that is another world). So handler
    owners are kept alive here until every test world's handlers have been dropped.
    """
    name = f"test:{request.node.nodeid}"
    esper.switch_world(name)
    yield name
    worlds = [w for w in esper.list_worlds() if w.startswith("test:")]
    for w in worlds:
        esper.switch_world(w)
        esper.event_registry.clear()
    esper.switch_world("default")
    for w in worlds:
        esper.delete_world(w)
    _HANDLER_OWNERS.clear()


class EsperDriver(Driver):
    def __init__(self, dim: int, **kwargs: Any) -> None:
        self.proc = PhysicsProcessor(dim, **kwargs)
        self.sim = self.proc.sim
        esper.add_processor(self.proc)

    def create(self, rigid: RigidBody, transform: Transform, velocity: Velocity) -> int:
        return esper.create_entity(rigid, transform, velocity)

    def delete(self, entity: int) -> None:
        esper.delete_entity(entity)

    def component(self, entity: int, kind: type) -> Any:
        return esper.component_for_entity(entity, kind)

    def frame(self, seconds: float) -> None:
        esper.process(seconds)

    def body_entities(self) -> int:
        return len(esper.get_component(RigidBody))


class Recorder:
    """esper keeps weak references to handlers: hold the bound methods on a live object."""

    def __init__(self) -> None:
        self.events: list[tuple[str, Any, Any]] = []
        self.frames: list[int] = []
        self.frame = 0
        _HANDLER_OWNERS.append(self)
        esper.set_handler(CONTACT_BEGIN, self.begin)
        esper.set_handler(CONTACT_END, self.end)

    def begin(self, a: Any, b: Any, sensor: bool) -> None:
        self.events.append(("begin", a, b))
        self.frames.append(self.frame)

    def end(self, a: Any, b: Any, sensor: bool) -> None:
        self.events.append(("end", a, b))
        self.frames.append(self.frame)


# -- tests ----------------------------------------------------------------------------------------


@dims()
def test_same_poses_as_core_with_bodies_added_and_removed_mid_run(world: str, dim: int,
                                                                  rng: np.random.Generator) -> None:
    """Reference: the core driven directly with the same bodies at the same steps (bit for bit)."""
    sc = churn_scenario(dim, rng)
    assert_same_run(adapter_run(sc, EsperDriver(dim)), core_run(sc))


@dims(3)
def test_irregular_frames_take_the_accumulated_steps(world: str, dim: int, rng: np.random.Generator) -> None:
    """Irregular frame times worth 60 steps in all give the poses of 60 core steps (reference: core)."""
    d = EsperDriver(dim)
    spec = body_spec(dim, 0, rng)
    ent = d.create(RigidBody(spec["shape"]), Transform(spec["position"]), Velocity(spec["velocity"]))
    frames = np.tile(np.array([0.5, 1.5, 0.25, 1.75]) * DT, 15)  # 0 to 2 steps a frame
    for s in frames:
        d.frame(float(s))
    sim = Simulation(dim)
    h = sim.add_body(spec["shape"], position=spec["position"], velocity=spec["velocity"])
    for _ in range(d.proc.bridge.stepper.steps):
        sim.step()
    assert d.proc.bridge.stepper.steps == 60
    assert np.array_equal(esper.component_for_entity(ent, Transform).position, sim.position(h))


@dims()
def test_contact_events_pair_up_and_first_touch_matches_free_fall(world: str, dim: int) -> None:
    """A ball dropped from height h touches the floor after about sqrt(2 h / g) (free fall, any
    mechanics text); every begin is matched by one end, including the end that deleting the ball
    while it rests on the floor reports."""
    d = EsperDriver(dim)
    rec = Recorder()
    ground = d.create(RigidBody(floor(dim), kind="static"), Transform(), Velocity())
    r, h = 0.25, 0.6
    start = np.zeros(dim)
    start[1] = r + h
    ball = d.create(RigidBody(Ball(dim, r), restitution=0.0), Transform(start), Velocity())
    for f in range(50):
        rec.frame = f
        d.frame(DT)
    begins = [f for (kind, *_), f in zip(rec.events, rec.frames, strict=True) if kind == "begin"]
    assert begins, "no contact begin event: the ball never touched the floor"
    t_fall = math.sqrt(2 * h / 9.81)
    assert abs(begins[0] * DT - t_fall) <= 3 * DT
    assert set(rec.events[0][1:]) == {ground, ball}
    d.delete(ball)
    rec.frame = 50
    d.frame(DT)
    assert d.sim.count == 1
    assert rec.events[-1][0] == "end" and set(rec.events[-1][1:]) == {ground, ball}  # the removal's end
    assert check_event_pairing(rec.events, removed={ball}) >= 1


@dims(2, 4)
def test_pile_events_pair_up_through_churn(world: str, dim: int, rng: np.random.Generator) -> None:
    """Bodies colliding, bouncing and being removed: begins and ends alternate per pair, and every
    pair of a removed entity is closed (common practice for contact callbacks)."""
    d = EsperDriver(dim)
    rec = Recorder()
    sc = churn_scenario(dim, rng, frames=40)
    adapter_run(sc, d)
    removed = {e for e in range(1, 20) if not esper.entity_exists(e)}
    for e in list(esper.get_component(RigidBody)):
        esper.delete_entity(e[0])
        removed.add(e[0])
    d.frame(DT)
    assert check_event_pairing(rec.events, removed) >= 1
    assert d.sim.count == 0


@dims(2, 5)
def test_two_worlds_run_independent_simulations(world: str, dim: int, rng: np.random.Generator) -> None:
    """World A interleaved with world B moves, and hears contacts, exactly as world A alone
    (reference: A alone); B's handlers hear only B's ball and floor."""
    sc_a = churn_scenario(dim, rng, frames=30)
    rec_alone = Recorder()
    alone = adapter_run(sc_a, EsperDriver(dim))
    esper.switch_world(world + ":A")
    da, rec_a = EsperDriver(dim), Recorder()
    esper.switch_world(world + ":B")
    db, rec_b = EsperDriver(dim), Recorder()
    ball_b = db.create(RigidBody(Ball(dim, 0.5)), Transform(np.r_[5.0, 0.3, np.zeros(dim - 2)]), Velocity())
    floor_b = db.create(RigidBody(floor(dim), kind="static"), Transform(), Velocity())
    got: list[dict[str, Any]] = []
    ents: dict[str, Any] = {}
    for ops in sc_a.frames:  # one frame of A, then one of B, each in its own context
        esper.switch_world(world + ":A")
        got += adapter_run(Scenario(dim, [ops]), da, ents)
        esper.switch_world(world + ":B")
        db.frame(DT)
    assert_same_run(got, alone)
    assert rec_alone.events and rec_a.events == rec_alone.events
    assert rec_b.events and all({a, b} == {ball_b, floor_b} for _, a, b in rec_b.events)
    assert da.sim is not db.sim and db.sim.count == 2
    # a processor runs only in the world it was added to
    with pytest.raises(RuntimeError, match="belongs to esper world"):
        da.proc.process(DT)


@dims()
def test_transform_and_velocity_read_the_core_and_stay_frozen(world: str, dim: int,
                                                              rng: np.random.Generator) -> None:
    """Transform/Velocity show the core's state after each frame; a value read earlier does not
    change later; the matrix of a teleported rotor is expm(W(B)) (scipy.linalg.expm, independent
    of the geometric-algebra code)."""
    d = EsperDriver(dim)
    spec = body_spec(dim, 1, rng)
    ent = d.create(RigidBody(spec["shape"]), Transform(spec["position"]), Velocity(spec["velocity"]))
    d.frame(DT)
    t, v = esper.component_for_entity(ent, Transform), esper.component_for_entity(ent, Velocity)
    h = d.proc.handle_of(ent)
    first = t.position
    assert np.array_equal(first, d.sim.position(h)) and np.array_equal(v.linear, d.sim.velocity(h))
    with pytest.raises(ValueError, match="read-only"):
        t.position[0] = 1.0  # in-place writes would be lost: refused
    d.frame(DT)
    assert not np.array_equal(first, t.position) and np.array_equal(t.position, d.sim.position(h))
    assert first[1] > t.position[1]  # falling, and the earlier read kept its value
    B = rng.uniform(-1.0, 1.0, dim * (dim - 1) // 2)
    t.rotor = Algebra(dim).rotor(B)
    d.frame(DT)  # the teleport happens before this frame's step, which then turns the body a little
    w = d.sim.angular_velocity(h)
    want = expm(skew(w * DT)) @ expm(skew(B))
    assert np.allclose(t.matrix, want, atol=1e-9)
    pts = rng.normal(size=(3, dim))
    assert np.allclose(t.to_world(pts), pts @ t.matrix.T + t.position, atol=1e-12)


@dims(3, 5)
def test_bad_components_raise_before_any_state_changes(world: str, dim: int) -> None:
    """Bad input: a clear InputError naming the thing, and the simulation untouched."""
    d = EsperDriver(dim)
    with pytest.raises(InputError, match="kind"):
        RigidBody(Ball(dim, 0.5), kind="floating")
    with pytest.raises(InputError, match="no finite mass"):
        RigidBody(floor(dim), kind="dynamic")
    with pytest.raises(InputError, match="restitution"):
        RigidBody(Ball(dim, 0.5), restitution=1.2)
    RigidBody(floor(dim), kind="static", mass=0.0)  # ignored for static bodies, so accepted
    good = d.create(RigidBody(Ball(dim, 0.5)), Transform(np.zeros(dim)), Velocity())
    wrong_dim = d.create(RigidBody(Ball(dim - 1, 0.5)), Transform(), Velocity())
    with pytest.raises(InputError, match=f"entity {wrong_dim}.*dimension {dim}"):
        d.frame(DT)
    assert d.sim.count == 0 and d.sim.step_count == 0  # not even the good entity's body was made
    esper.delete_entity(wrong_dim)
    d.frame(DT)
    assert d.sim.count == 1
    vel = esper.component_for_entity(good, Velocity)
    with pytest.raises(InputError, match="linear"):
        vel.linear = np.zeros(dim + 1)
    wall = d.create(RigidBody(floor(dim), kind="static"), Transform(), Velocity())
    d.frame(DT)
    before = d.sim.velocities
    esper.component_for_entity(wall, Velocity).linear = np.ones(dim)
    vel.linear = np.ones(dim)
    with pytest.raises(InputError, match=f"entity {wall}.*static"):
        d.frame(DT)
    assert np.array_equal(d.sim.velocities, before)


@dims(2, 4)
def test_replaced_or_removed_rigid_body(world: str, dim: int, rng: np.random.Generator) -> None:
    """Replacing the RigidBody rebuilds the body at the same pose and velocity (the core's
    remove + add with the state read first, bit for bit); removing it leaves the entity with a
    frozen Transform and no body."""
    d = EsperDriver(dim)
    spec = body_spec(dim, 1, rng)
    ent = d.create(RigidBody(spec["shape"]), Transform(spec["position"]), Velocity(spec["velocity"]))
    for _ in range(3):
        d.frame(DT)
    sim = Simulation(dim)
    h = sim.add_body(spec["shape"], position=spec["position"], velocity=spec["velocity"])
    for _ in range(3):
        sim.step()
    old = d.proc.handle_of(ent)
    esper.add_component(ent, RigidBody(spec["shape"], friction=0.9, mass=2.0))
    d.frame(DT)
    p, r, v, w = sim.position(h), sim.rotor(h), sim.velocity(h), sim.angular_velocity(h)
    sim.remove_body(h)
    h = sim.add_body(spec["shape"], position=p, rotor=r, velocity=v, angular_velocity=w, friction=0.9,
                     mass=2.0)
    sim.step()
    assert d.proc.handle_of(ent) != old and d.sim.count == 1
    assert np.array_equal(esper.component_for_entity(ent, Transform).position, sim.position(h))
    esper.remove_component(ent, RigidBody)
    d.frame(DT)
    t = esper.component_for_entity(ent, Transform)
    assert d.sim.count == 0 and not t.bound and np.array_equal(t.position, sim.position(h))


def test_orchard_demo_runs_headless(world: str) -> None:
    """The README's example game: fruit spawn (entities added mid-run), some are caught or rot
    (deleted mid-run), and the simulation holds exactly one body per physics entity."""
    from ndrigid.demo.esper_game import main

    s = main(["--dim", "3", "--frames", "150"])
    assert s["steps"] == 150 and s["spawned"] > 5
    assert s["caught"] + s["rotted"] >= 1
    assert s["bodies"] == 2 + s["spawned"] - s["caught"] - s["rotted"] - s["lost"]
    assert esper.current_world == world
