"""Joint components in both ECS adapters (esper and tcod-ecs), in 2-D to 5-D where it matters.

References outside the adapter: the simple pendulum's small-angle period 2 pi sqrt(L/g) with the
finite-amplitude factor 1 + theta0^2/16 (any mechanics text, e.g. Goldstein, Classical Mechanics,
ch. 1); tau = I alpha for a motor at its torque limit; the statics of a hanging ball (the joint
carries m g); the core Simulation driven directly with the documented calls (the adapter adds
nothing to the physics: bit for bit); the rotation matrix of a body (the turn of e_0 toward e_1
is atan2(M[1, 0], M[0, 0])), which the component's mirrored angle must match.
"""

from __future__ import annotations

from typing import Any

import esper
import numpy as np
import pytest
from conftest import dims
from ndrigid.adapters import EntityJointEvent, Joint, RigidBody, Transform, Velocity
from ndrigid.adapters.esper import JOINT_BROKEN, PhysicsProcessor
from ndrigid.core import Ball, Box, InputError, Settings, Simulation
from ndrigid.core.errors import InputTypeError

G = 9.81
HZ = 240.0


def _settings(hz: float = HZ) -> Settings:
    return Settings(dt=1.0 / hz, sleep_enabled=False)


def _e(dim: int, i: int, s: float = 1.0) -> np.ndarray:
    v = np.zeros(dim)
    v[i] = s
    return v


def _plane01(dim: int) -> np.ndarray:
    P = np.zeros(dim * (dim - 1) // 2)
    P[0] = 1.0  # e_0 ^ e_1
    return P


def _turn01(M: Any) -> float:
    """The turn of e_0 toward e_1 of a rotation matrix (column 0 is the image of e_0)."""
    return float(np.arctan2(M[1, 0], M[0, 0]))


def _period(t: np.ndarray, x: np.ndarray) -> float:
    """Mean period from the upward zero crossings of x(t) (linear interpolation)."""
    i = np.nonzero((x[:-1] < 0.0) & (x[1:] >= 0.0))[0]
    tz = t[i] + (0.0 - x[i]) / (x[i + 1] - x[i]) * (t[i + 1] - t[i])
    assert tz.size >= 3, "fewer than three crossings: no period"
    return float(np.mean(np.diff(tz)))


def _fingerprint(sim: Simulation) -> tuple[Any, ...]:
    """What a refused frame must leave exactly as it was."""
    j = sim.joints
    return (sim.step_count, sim.count, sim.positions.tobytes(), sim.velocities.tobytes(),
            sim.bodies.angular_velocity.tobytes(), j.count, j.handle.tobytes(), j.motor_speed.tobytes(),
            j.max_motor_torque.tobytes(), j.next_handle)


# -- one driver per ECS ------------------------------------------------------------------------------


class EsperECS:
    """esper: entities are ints; broken joints arrive through esper's event dispatch."""

    name = "esper"

    def __init__(self, dim: int, **kwargs: Any) -> None:
        self.proc = PhysicsProcessor(dim, **kwargs)
        self.sim = self.proc.sim
        esper.add_processor(self.proc)
        self.dispatched: list[tuple[Any, Any, float, float]] = []
        esper.set_handler(JOINT_BROKEN, self._broken)  # held weakly by esper: the test holds self

    def _broken(self, a: Any, b: Any, force: float, torque: float) -> None:
        self.dispatched.append((a, b, force, torque))

    def new(self, *components: Any) -> int:
        return esper.create_entity(*components)

    def put(self, e: int, component: Any) -> None:
        esper.add_component(e, component)

    def take(self, e: int, kind: type) -> None:
        esper.remove_component(e, kind)

    def get(self, e: int, kind: type) -> Any:
        return esper.component_for_entity(e, kind)

    def delete(self, e: int) -> None:
        esper.delete_entity(e)

    def frame(self, seconds: float | None = None) -> list[EntityJointEvent]:
        """One frame (one step when None); returns the frame's joint events."""
        esper.process(seconds)
        return list(self.proc.joint_events)

    def save(self) -> Any:
        return self.proc.save()

    def restore(self, saved: Any) -> None:
        self.proc.restore(saved)

    def handle_of(self, e: Any) -> int:
        return self.proc.handle_of(e)


class TcodECS:
    """tcod-ecs: entities are objects; broken joints come back from update among the contacts."""

    name = "tcod"

    def __init__(self, dim: int, **kwargs: Any) -> None:
        import tcod.ecs
        from ndrigid.adapters.tcod import PhysicsSystem

        self.registry = tcod.ecs.Registry()
        self.system = PhysicsSystem(self.registry, dim, **kwargs)
        self.sim = self.system.sim
        self.dispatched: list[tuple[Any, Any, float, float]] = []

    def new(self, *components: Any) -> Any:
        return self.registry.new_entity({type(c): c for c in components})

    def put(self, e: Any, component: Any) -> None:
        e.components[type(component)] = component

    def take(self, e: Any, kind: type) -> None:
        del e.components[kind]

    def get(self, e: Any, kind: type) -> Any:
        return e.components[kind]

    def delete(self, e: Any) -> None:
        e.clear()

    def frame(self, seconds: float | None = None) -> list[EntityJointEvent]:
        out = [ev for ev in self.system.update(seconds) if ev.kind == "joint_broken"]
        self.dispatched += [(ev.entity_a, ev.entity_b, ev.force, ev.torque) for ev in out]
        return out

    def save(self) -> Any:
        return self.system.save()

    def restore(self, saved: Any) -> None:
        self.system.restore(saved)

    def handle_of(self, e: Any) -> int:
        return self.system.handle_of(e)


@pytest.fixture(params=["esper", "tcod"])
def ecs(request: pytest.FixtureRequest) -> Any:
    """A factory ``ecs(dim, **PhysicsProcessor/PhysicsSystem options)`` for one ECS; esper runs in
    a world context of the test's own, deleted afterwards; tcod is skipped where not installed."""
    if request.param == "tcod":
        pytest.importorskip("tcod.ecs")
        yield TcodECS
        return
    name = f"joints:{request.node.nodeid}"
    esper.switch_world(name)
    try:
        yield EsperECS
    finally:
        esper.switch_world(name)
        esper.event_registry.clear()  # esper holds handlers weakly: drop them while in this world
        esper.switch_world("default")
        esper.delete_world(name)


# -- the pendulum ------------------------------------------------------------------------------------


@dims()
@pytest.mark.parametrize("kind", ["point", "hinge"])
def test_pendulum_built_through_the_adapter_has_the_textbook_period(ecs: Any, dim: int, kind: str) -> None:
    """A small ball on a 0.25 m joint to the world, released at 0.05 rad: the period is
    2 pi sqrt(L/g) (1 + theta0^2/16) within 1 % (mechanics text, Goldstein ch. 1; the ball's own
    inertia, r = 1 cm, changes it by under 1e-3). The hinge's angle, read from the component, is the
    ball's swing from where it was joined (the turn of its rotation matrix, and the turn of its
    position about the pivot) to 1e-4 rad, and the component shows what the core holds."""
    w = ecs(dim, settings=_settings())
    L, th = 0.25, 0.05
    pos = L * (np.sin(th) * _e(dim, 0) - np.cos(th) * _e(dim, 1))
    joint = Joint(kind, None, anchor=np.zeros(dim), **({"plane": _plane01(dim)} if kind == "hinge" else {}))
    bob = w.new(RigidBody(Ball(dim, 0.01), mass=1.0), Transform(pos), joint)
    assert joint.state == "waiting" and joint.angle is None and joint.force is None
    t, x, worst = [], [], 0.0
    for _ in range(int(HZ * 3.2)):  # upward crossings at 3/4, 7/4 and 11/4 of a period (1.0 s)
        w.frame()
        p = w.get(bob, Transform).position
        t.append(w.sim.time)
        x.append(p[0])
        if kind == "hinge":
            swing = np.arctan2(p[0], -p[1]) - th
            turned = _turn01(w.get(bob, Transform).matrix)
            worst = max(worst, abs(joint.angle - swing), abs(joint.angle - turned))
    T = _period(np.array(t), np.array(x))
    T_ref = 2.0 * np.pi * np.sqrt(L / G) * (1.0 + th ** 2 / 16.0)
    assert abs(T / T_ref - 1.0) < 0.01, (T, T_ref)
    assert worst < 1e-4, worst
    h = joint.handle
    assert joint.state == "live" and w.sim.joint_handles().tolist() == [h]
    assert joint.error == pytest.approx(w.sim.joint_error(h), rel=1e-12, abs=1e-15)
    assert joint.error < 1e-6
    assert joint.force == w.sim.joint(h)["force"] and joint.torque == w.sim.joint(h)["torque"]
    if kind == "hinge":  # the world holds the holder as the core's body A: the angle is mirrored
        assert joint.angle == -w.sim.joint_angle(h)
    else:
        assert joint.angle is None


# -- roles and bit-for-bit equality with the core -------------------------------------------------------


def _chain_in_core(dim: int, frames: int) -> Simulation:
    """The documented calls: with another entity, the other's body is body_a and the holder's body_b."""
    sim = Simulation(dim, settings=_settings())
    half = np.full(dim, 0.03)
    half[0] = 0.1
    a = sim.add_body(Box(half), position=0.1 * _e(dim, 0), mass=1.0)
    b = sim.add_body(Box(half), position=0.3 * _e(dim, 0), mass=0.5)
    c = sim.add_body(Ball(dim, 0.05), position=0.3 * _e(dim, 0) - 0.25 * _e(dim, 1), mass=0.2)
    sim.add_joint("point", a, None, anchor=np.zeros(dim))
    sim.add_joint("hinge", a, b, anchor=0.2 * _e(dim, 0), plane=_plane01(dim))
    sim.add_joint("distance", b, c, anchor=0.35 * _e(dim, 0), anchor_b=sim.position(c))
    for _ in range(frames):
        sim.step()
    return sim


@dims()
def test_a_chain_moves_as_the_core_does_with_the_documented_roles(ecs: Any, dim: int) -> None:
    """Three links (a point joint to the world, a hinge and a distance joint to the previous link),
    released horizontally: every pose equal bit for bit to the core driven with body_a = the other
    entity's body, body_b = the holder's (and the holder as body_a with the world)."""
    w = ecs(dim, settings=_settings())
    half = np.full(dim, 0.03)
    half[0] = 0.1
    a = w.new(RigidBody(Box(half), mass=1.0), Transform(0.1 * _e(dim, 0)),
              Joint("point", anchor=np.zeros(dim)))
    b = w.new(RigidBody(Box(half), mass=0.5), Transform(0.3 * _e(dim, 0)),
              Joint("hinge", a, anchor=0.2 * _e(dim, 0), plane=_plane01(dim)))
    c_pos = 0.3 * _e(dim, 0) - 0.25 * _e(dim, 1)
    c = w.new(RigidBody(Ball(dim, 0.05), mass=0.2), Transform(c_pos),
              Joint("distance", b, anchor=c_pos, anchor_other=0.35 * _e(dim, 0)))
    for _ in range(90):
        w.frame()
    sim = _chain_in_core(dim, 90)
    for e, h in zip((a, b, c), range(3), strict=True):
        assert np.array_equal(w.get(e, Transform).position, sim.position(h)), e
        assert np.array_equal(w.get(e, Transform).rotor, sim.rotor(h)), e
    hinge = w.get(b, Joint)
    assert hinge.angle == sim.joint_angle(1) != 0.0  # holder = body B: not mirrored
    assert w.get(c, Joint).error == sim.joint_error(2)


# -- the motor --------------------------------------------------------------------------------------


@dims()
@pytest.mark.parametrize("to_world", [True, False])
def test_motor_assigned_through_the_component_reaches_its_speed(ecs: Any, dim: int, to_world: bool) -> None:
    """A box on a hinge (to the world, or to a static entity), no gravity. At a small torque limit
    the turn rate grows as tau/I (tau = I alpha); after assigning an ample torque and a new speed
    through the component, the holder turns at exactly that speed in the plane's positive sense
    (e_0 toward e_1) relative to the other, whichever core role it has."""
    w = ecs(dim, gravity=np.zeros(dim), settings=_settings())
    other = None if to_world else w.new(RigidBody(Box(np.full(dim, 0.1)), kind="static"))
    joint = Joint("hinge", other, anchor=np.zeros(dim), plane=_plane01(dim), motor_speed=50.0,
                  max_motor_torque=0.5)
    box = w.new(RigidBody(Box(np.full(dim, 0.2)), mass=3.0), joint)
    w.frame()
    h = w.handle_of(box)
    I = w.sim.inertia(h, "body")[0, 0]
    for _ in range(119):
        w.frame()
    spin = w.get(box, Velocity).angular[0]
    assert abs(spin - 0.5 / I * 0.5) < 1e-6 * abs(spin), (spin, 0.5 / I * 0.5)  # 120 steps = 0.5 s
    assert joint.motor_speed == 50.0 and joint.max_motor_torque == 0.5
    joint.motor_speed = -2.0
    joint.max_motor_torque = 100.0
    assert joint.motor_speed == -2.0 and joint.max_motor_torque == 100.0  # shown before it applies
    for _ in range(10):
        w.frame()
    a0 = joint.angle
    w.frame()
    assert abs(w.get(box, Velocity).angular[0] + 2.0) < 1e-9
    assert joint.angle - a0 == pytest.approx(-2.0 / HZ, rel=1e-6)
    assert joint.motor_speed == -2.0 and joint.max_motor_torque == 100.0
    core_speed = w.sim.joints.motor_speed[w.sim.joints.handle_to_row[joint.handle]]
    assert core_speed == (2.0 if to_world else -2.0)  # the world case holds the holder as body A


@dims(2, 4)
@pytest.mark.parametrize("to_world", [True, False])
def test_limits_are_the_holders_turn(ecs: Any, dim: int, to_world: bool) -> None:
    """lower/upper bound the holder's turn relative to the other (checked on the holder's own
    rotation matrix, not on the joint's read-back): driven by the motor each way, the box settles
    at upper, then at lower, within 2e-3 rad."""
    w = ecs(dim, gravity=np.zeros(dim), settings=_settings())
    other = None if to_world else w.new(RigidBody(Box(np.full(dim, 0.1)), kind="static"))
    joint = Joint("hinge", other, anchor=np.zeros(dim), plane=_plane01(dim), lower=-0.2, upper=0.45,
                  motor_speed=3.0, max_motor_torque=5.0)
    box = w.new(RigidBody(Box(np.full(dim, 0.2)), mass=1.0), Transform(0.5 * _e(dim, 0)), joint)
    for _ in range(240):
        w.frame()
    assert abs(_turn01(w.get(box, Transform).matrix) - 0.45) < 2e-3
    assert abs(joint.angle - 0.45) < 2e-3
    joint.motor_speed = -3.0
    for _ in range(240):
        w.frame()
    assert abs(_turn01(w.get(box, Transform).matrix) + 0.2) < 2e-3
    assert joint.torque == pytest.approx(5.0, rel=1e-6)  # the limit holds the motor's couple


# -- removal ------------------------------------------------------------------------------------------


@dims(2, 3)
def test_removing_the_component_or_an_entity_removes_the_joint(ecs: Any, dim: int) -> None:
    """Four balls each held to the world or to a static post. Removing a Joint component, deleting
    the other entity, removing the holder's RigidBody, deleting the holder and removing the joint
    through the Simulation each remove exactly that joint; the components say "removed", keep
    their last values and refuse a motor change; a freed ball falls as in free fall."""
    w = ecs(dim, settings=_settings())
    post = w.new(RigidBody(Box(np.full(dim, 0.05)), kind="static"), Transform(_e(dim, 1, 2.0)))
    posts = [w.new(RigidBody(Box(np.full(dim, 0.05)), kind="static"),
                   Transform(_e(dim, 1, 2.0) + _e(dim, 0, x)))
             for x in (2.0, 4.0)]
    joints = [Joint("hinge", None, anchor=_e(dim, 0, -1.0) + _e(dim, 1, 1.0), plane=_plane01(dim)),
              Joint("point", post, anchor=_e(dim, 1, 2.0)),
              Joint("distance", posts[0], anchor_other=_e(dim, 1, 2.0) + _e(dim, 0, 2.0)),
              Joint("hinge", posts[1], anchor=_e(dim, 1, 2.0) + _e(dim, 0, 4.0), plane=_plane01(dim),
                    motor_speed=1.0, max_motor_torque=1.0),
              Joint("point", None, anchor=_e(dim, 1, 2.0) + _e(dim, 0, 6.0))]
    balls = [w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 1, 1.0) + _e(dim, 0, x)), j)
             for x, j in zip((-1.0, 0.0, 2.0, 4.0, 6.0), joints, strict=True)]
    for _ in range(5):
        w.frame()
    assert w.sim.joints.count == 5 and all(j.state == "live" for j in joints)
    live = {j.handle for j in joints}

    def remaining() -> set[int]:
        return set(w.sim.joint_handles().tolist())

    steps: list[tuple[int, Any]] = [
        (0, lambda: w.take(balls[0], Joint)),
        (1, lambda: w.delete(post)),
        (2, lambda: w.take(balls[2], RigidBody)),
        (3, lambda: w.delete(balls[3])),
        (4, lambda: w.sim.remove_joint(joints[4].handle)),
    ]
    for i, act in steps:
        h, shown = joints[i].handle, joints[i].force
        act()
        w.frame()
        live.discard(h)
        assert remaining() == live, i
        assert joints[i].state == "removed" and joints[i].handle is None and not joints[i].bound, i
        assert joints[i].force == shown, i  # the last value shown before the removal
        if joints[i].kind == "hinge":
            with pytest.raises(InputError, match="the joint is removed"):
                joints[i].motor_speed = 0.5
    assert joints[3].motor_speed == 1.0  # its last value
    # ball 1 hung from the deleted post: now free, it falls from rest as semi-implicit Euler steps
    # (v += g dt, x += v dt): k steps fall g dt^2 k (k + 1) / 2
    y0, v0 = w.get(balls[1], Transform).position[1], w.get(balls[1], Velocity).linear[1]
    for _ in range(10):
        w.frame()
    dt = 1.0 / HZ
    fall = y0 + 10 * v0 * dt - G * dt * dt * 10 * 11 / 2
    assert w.get(balls[1], Transform).position[1] == pytest.approx(fall, abs=1e-12)


# -- breaking ------------------------------------------------------------------------------------------


@dims(2, 4)
def test_a_broken_joint_is_forwarded_with_entities(ecs: Any, dim: int) -> None:
    """A 2 kg ball hangs from a static post by a hinge that breaks above 25 N: it holds and
    carries m g = 19.62 N (statics, within 1 %); a 1 kg ball hung below it by a rod brings the load
    to 29.4 N and the joint breaks: one event, dispatched with (holder, post, force, torque), the
    component marked broken with the breaking force, the upper ball falling. A joint made on the
    Simulation directly reports the entities that own its bodies and no component."""
    w = ecs(dim, settings=_settings())
    post = w.new(RigidBody(Box(np.full(dim, 0.05)), kind="static"))
    joint = Joint("hinge", post, anchor=np.zeros(dim), plane=_plane01(dim), break_force=25.0)
    ball = w.new(RigidBody(Ball(dim, 0.1), mass=2.0), Transform(_e(dim, 1, -0.3)), joint)
    raw_ball = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 0, 3.0) - _e(dim, 1, 0.3)))
    events: list[EntityJointEvent] = []
    for _ in range(120):
        events += w.frame()
    assert not events and joint.state == "live"
    assert joint.force == pytest.approx(2.0 * G, rel=0.01)
    raw = w.sim.add_joint("point", w.handle_of(raw_ball), None, anchor=_e(dim, 0, 3.0), break_force=5.0)
    weight = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 1, -0.8)),
                   Joint("distance", ball, anchor_other=_e(dim, 1, -0.3)))
    for _ in range(60):
        events += w.frame()
    mine = [ev for ev in events if ev.joint is joint]
    assert len(mine) == 1 and mine[0].kind == "joint_broken"
    ev = mine[0]
    assert (ev.entity_a, ev.entity_b) == (ball, post) and ev.force > 25.0
    assert joint.state == "broken" and joint.broken and joint.handle is None
    assert joint.force == ev.force and joint.torque == ev.torque
    assert w.get(ball, Joint) is joint  # marked, not removed from the entity
    assert w.dispatched.count((ball, post, ev.force, ev.torque)) == 1
    other = [e for e in events if e.joint is None]
    assert len(other) == 1
    assert (other[0].entity_a, other[0].entity_b, other[0].handle) == (raw_ball, None, raw)
    assert w.get(ball, Velocity).linear[1] < -0.5  # falling with the weight
    assert w.get(weight, Joint).state == "live"
    with pytest.raises(InputError, match="broken"):
        joint.max_motor_torque = 1.0


# -- bad input, and frames all or nothing --------------------------------------------------------------


def test_bad_joints_are_refused_where_they_are_made() -> None:
    """Construction checks: each names the argument, the value and what was expected."""
    bad: list[tuple[dict[str, Any], str]] = [
        ({"kind": "glue"}, "Joint.kind"),
        ({"kind": "wheel"}, "Joint.other.*carrier"),
        ({"kind": "point", "plane": [1.0]}, "Joint.plane: only hinge and wheel"),
        ({"kind": "hinge", "axis": [1.0, 0.0]}, "Joint.axis: only slider and wheel"),
        ({"kind": "point", "length": 1.0}, "Joint.length: only distance and spring"),
        ({"kind": "distance", "length": 1.0, "max_length": 2.0}, "Joint.length: give either"),
        ({"kind": "distance", "min_length": 2.0, "max_length": 1.0}, "min_length <= max_length"),
        ({"kind": "distance", "length": -1.0}, "Joint.length"),
        ({"kind": "hinge", "lower": 0.5, "upper": 0.1}, "lower <= upper"),
        ({"kind": "hinge", "upper": 4.0}, r"Joint.upper: expected a number in \[-3.14159, 3.14159\]"),
        ({"kind": "point", "motor_speed": 1.0}, "only hinge and wheel joints have a motor"),
        ({"kind": "hinge", "max_motor_torque": -1.0}, "Joint.max_motor_torque"),
        ({"kind": "hinge", "motor_speed": float("nan")}, "Joint.motor_speed"),
        ({"kind": "spring"}, "Joint.frequency: a spring needs"),
        ({"kind": "point", "break_force": 0.0}, "Joint.break_force"),
        ({"kind": "point", "anchor": [[0.0, 1.0]]}, "Joint.anchor: expected a 1-D array"),
        ({"kind": "point", "damping_ratio": -0.5}, "Joint.damping_ratio"),
    ]
    for args, match in bad:
        with pytest.raises(InputError, match=match):
            Joint(**args)
    for args, match in [({"kind": "point", "collide": 1}, "Joint.collide"),
                        ({"kind": "point", "other": True}, "Joint.other"),
                        ({"kind": "hinge", "motor_speed": "fast"}, "Joint.motor_speed")]:
        with pytest.raises(InputTypeError, match=match):
            Joint(**args)
    j = Joint("hinge")
    with pytest.raises(InputError, match="Joint.kind is fixed"):
        j.kind = "point"  # type: ignore[misc]
    with pytest.raises(InputError, match="only hinge and wheel"):
        Joint("weld").motor_speed = 1.0
    with pytest.raises(InputTypeError, match="Joint.motor_speed"):
        j.motor_speed = "fast"
    assert j.motor_speed == 0.0


@dims(3, 4)
def test_bad_joints_are_refused_against_the_world_and_change_nothing(ecs: Any, dim: int) -> None:
    """Each frame below holds one bad Joint next to a good new body and a good new joint: the frame
    raises naming the entity and the argument, and the world is exactly as it was (no body, no
    joint, no step); with the bad component gone the next frame makes the rest."""
    w = ecs(dim, settings=_settings())
    anchor = w.new(RigidBody(Box(np.full(dim, 0.1)), kind="static"))
    ghost = w.new(Transform(np.zeros(dim)))  # an entity without a RigidBody
    wall = w.new(RigidBody(Box(np.full(dim, 0.1)), kind="static"), Transform(_e(dim, 0, 2.0)))
    w.frame()
    twisted = np.zeros(dim * (dim - 1) // 2)
    twisted[0] = 1.0
    twisted[-1] = 1.0  # e01 + e23 in 4-D: two planes, no hinge plane
    cases: list[tuple[Any, str]] = [
        (Joint("point", anchor, anchor=np.zeros(dim + 1)), "Joint.anchor of entity"),
        (Joint("slider", anchor, axis=np.zeros(dim)), "axis: expected a non-zero vector"),
        (Joint("hinge", anchor, plane=np.ones(dim * (dim - 1) // 2 + 1)), "plane: expected shape"),
        (Joint("point", ghost), "Joint.other .*without one"),
        (Joint("point", wall), "at least one dynamic body"),
    ]
    if dim == 4:
        cases.append((Joint("hinge", None, plane=twisted), "simple bivector"))
    for bad, match in cases:
        before = _fingerprint(w.sim)
        good = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 1, 3.0)),
                     Joint("point", anchor, anchor=_e(dim, 1, 3.5)))
        holder = w.new(RigidBody(Box(np.full(dim, 0.1)), kind="static" if "dynamic" in match else "dynamic"),
                       Transform(_e(dim, 0, -2.0)), bad)
        with pytest.raises((InputError, InputTypeError), match=match):
            w.frame()
        assert _fingerprint(w.sim) == before, match
        assert bad.state == w.get(good, Joint).state == "waiting"
        w.take(holder, Joint)
        w.frame()
        assert w.get(good, Joint).state == "live" and bad.state == "waiting"
        w.delete(good)
        w.delete(holder)
        w.frame()
    # a Joint on an entity without a RigidBody, and one naming its own entity
    before = _fingerprint(w.sim)
    w.put(ghost, Joint("point"))
    with pytest.raises(InputError, match=r"Joint of entity .*holds a RigidBody"):
        w.frame()
    w.take(ghost, Joint)
    selfish = w.new(RigidBody(Ball(dim, 0.1)))
    w.put(selfish, Joint("point", selfish))
    with pytest.raises(InputError, match="holder itself"):
        w.frame()
    assert _fingerprint(w.sim) == before


@dims(2, 5)
def test_a_frame_applies_its_joint_changes_all_or_nothing(ecs: Any, dim: int) -> None:
    """A frame that removes a live Joint, deletes nothing else, adds two good joints and one bad
    one: nothing of it happens (the removed joint still holds, no new body or joint); once the bad
    one is gone the whole frame applies, in the order the Joint components were made."""
    w = ecs(dim, settings=_settings())
    hold = Joint("point", None, anchor=np.zeros(dim))
    first = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 1, -0.5)), hold)
    w.frame()
    before = _fingerprint(w.sim)
    w.take(first, Joint)
    j1 = Joint("distance", first, anchor_other=_e(dim, 1, -0.5))
    j2 = Joint("hinge", None, anchor=_e(dim, 0, 1.0), plane=_plane01(dim))
    bad = Joint("point", None, anchor=np.full(dim, 1e12))
    a = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 1, -1.0)), j1)
    b = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 0, 1.5)), j2)
    c = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 0, 3.0)), bad)
    with pytest.raises(InputError, match="Joint.anchor of entity"):
        w.frame()
    assert _fingerprint(w.sim) == before and hold.state == "live"
    assert w.sim.joint_handles().tolist() == [hold.handle]
    w.take(c, Joint)
    w.frame()
    assert hold.state == "removed" and j1.state == j2.state == "live"
    assert j1.handle < j2.handle and w.sim.count == 4 and w.sim.joints.count == 2
    assert w.sim.joint(j1.handle)["body_a"] == w.handle_of(first)
    assert w.sim.joint(j1.handle)["body_b"] == w.handle_of(a)
    assert w.sim.joint(j2.handle)["body_a"] == w.handle_of(b) and w.sim.joint(j2.handle)["body_b"] is None


def test_one_joint_object_on_two_entities_is_refused(ecs: Any) -> None:
    w = ecs(3, settings=_settings())
    shared = Joint("point")
    w.new(RigidBody(Ball(3, 0.1)), shared)
    w.new(RigidBody(Ball(3, 0.1)), Transform([1.0, 0.0, 0.0]), shared)
    with pytest.raises(InputError, match="expected a component of its own"):
        w.frame()
    assert w.sim.count == 0 and shared.state == "waiting"


# -- snapshots --------------------------------------------------------------------------------------------


@dims(3, 4)
def test_save_and_restore_keep_the_joints(ecs: Any, dim: int) -> None:
    """Save a swinging chain, run on (a joint is replaced by an equal new component, another
    breaks), restore and run the same frames again: every pose bit for bit the uninterrupted run,
    the saved joint handles back on the entities' current components, the broken one live again.
    A Joint made after the save waits to be made again after a restore; restoring for an entity
    that lost its Joint is refused and changes nothing."""
    w = ecs(dim, settings=_settings())
    half = np.full(dim, 0.03)
    half[0] = 0.1
    a = w.new(RigidBody(Box(half), mass=1.0), Transform(0.1 * _e(dim, 0)),
              Joint("hinge", None, anchor=np.zeros(dim), plane=_plane01(dim), motor_speed=1.0,
                    max_motor_torque=0.5))
    b = w.new(RigidBody(Box(half), mass=0.5), Transform(0.3 * _e(dim, 0)),
              Joint("point", a, anchor=0.2 * _e(dim, 0), break_force=12.0))
    c = w.new(RigidBody(Ball(dim, 0.05), mass=0.2), Transform(0.3 * _e(dim, 0) - 0.25 * _e(dim, 1)),
              Joint("distance", b, anchor_other=0.35 * _e(dim, 0)))
    for _ in range(20):
        w.frame()
    saved = w.save()
    handles = {e: w.get(e, Joint).handle for e in (a, b, c)}
    breaks = 0
    for _ in range(80):
        breaks += len(w.frame())
    assert breaks == 1 and w.get(b, Joint).state == "broken"  # the whip breaks the middle joint
    want = [np.array(w.get(e, Transform).position) for e in (a, b, c)]
    old_c = w.get(c, Joint)
    w.put(c, Joint("distance", b, anchor_other=0.35 * _e(dim, 0)))
    w.frame()
    assert old_c.state == "removed"
    w.restore(saved)
    assert {e: w.get(e, Joint).handle for e in (a, b, c)} == handles
    assert all(w.get(e, Joint).state == "live" for e in (a, b, c))
    for _ in range(80):
        w.frame()
    for e, p in zip((a, b, c), want, strict=True):
        assert np.array_equal(w.get(e, Transform).position, p)
    late = Joint("point", None, anchor=_e(dim, 0, 3.0))
    d = w.new(RigidBody(Ball(dim, 0.1), mass=1.0), Transform(_e(dim, 0, 3.0) - _e(dim, 1, 0.2)), late)
    w.frame()
    assert late.state == "live"
    w.restore(saved)
    assert late.state == "waiting" and d not in saved["joints"]
    w.frame()
    assert late.state == "live" and w.sim.joints.count == 4
    w.take(a, Joint)
    w.frame()
    before = _fingerprint(w.sim)
    with pytest.raises(InputError, match="has no Joint now"):
        w.restore(saved)
    assert _fingerprint(w.sim) == before
