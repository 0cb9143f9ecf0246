"""Adapter semantics users expect, in both ECS adapters: replacing a Transform or Velocity
component teleports or steers the body; one component object cannot serve two entities; a
frame's new bodies are added all or none; a refused assignment does not fail every frame; an
exception in a contact handler comes after the frame's steps and events are complete.

References: the core Simulation driven directly (set_pose / set_velocity give the same state bit
for bit), and free fall from rest, y = y0 - g dt^2 k (k + 1) / 2 after k semi-implicit Euler steps.
"""

from __future__ import annotations

import esper
import numpy as np
import pytest
import tcod.ecs
from ndrigid.adapters import RigidBody, Transform, Velocity
from ndrigid.adapters.esper import CONTACT_BEGIN, PhysicsProcessor
from ndrigid.adapters.tcod import PhysicsSystem
from ndrigid.core import Ball, Box, HalfSpace
from ndrigid.core.errors import InputError, InputTypeError

DT = 1.0 / 60.0


def _tcod(dim: int = 3):
    reg = tcod.ecs.Registry()
    system = PhysicsSystem(reg, dim, dt=DT)
    return reg, system


def test_tcod_replacing_transform_and_velocity_teleports_and_steers() -> None:
    reg, system = _tcod()
    e = reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: Transform([0.0, 5.0, 0.0])})
    other = reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: Transform([4.0, 5.0, 0.0])})
    system.update(DT)
    old_t = e.components[Transform]
    e.components[Transform] = Transform([1.0, 2.0, 3.0])
    e.components[Velocity] = Velocity([0.5, 0.0, 0.0])
    system.update(DT)
    h = system.handle_of(e)
    # one step from the teleported pose with the new velocity (semi-implicit Euler: v += g dt, x += v dt)
    want = [1.0 + 0.5 * DT, 2.0 - 9.81 * DT * DT, 3.0]
    np.testing.assert_allclose(system.sim.position(h), want, rtol=1e-12)
    new_t = e.components[Transform]
    assert new_t.bound and not old_t.bound
    np.testing.assert_array_equal(new_t.position, system.sim.position(h))
    np.testing.assert_allclose(old_t.position[1], 5.0 - 9.81 * DT * DT, rtol=1e-12)  # frozen
    np.testing.assert_allclose(other.components[Transform].position[1], 5.0 - 3 * 9.81 * DT * DT, rtol=1e-12)


def test_esper_replacing_transform_teleports_and_velocity_steers() -> None:
    esper.switch_world("robust:swap")
    try:
        proc = PhysicsProcessor(3, dt=DT)
        esper.add_processor(proc)
        e = esper.create_entity(RigidBody(Ball(3, 0.3)), Transform([0.0, 5.0, 0.0]))
        esper.process(DT)
        esper.add_component(e, Transform([2.0, 1.0, 0.0]))
        esper.add_component(e, Velocity([0.0, 0.0, 1.0]))
        esper.process(DT)
        h = proc.handle_of(e)
        np.testing.assert_allclose(proc.sim.position(h), [2.0, 1.0 - 9.81 * DT * DT, DT], rtol=1e-12)
        np.testing.assert_allclose(proc.sim.velocity(h), [0.0, -9.81 * DT, 1.0], rtol=1e-12)
        np.testing.assert_array_equal(esper.component_for_entity(e, Transform).position, proc.sim.position(h))
    finally:
        esper.switch_world("default")
        esper.delete_world("robust:swap")


def test_tcod_one_component_object_on_two_entities_is_refused() -> None:
    """Before: an IndexError from inside the adapter."""
    reg, system = _tcod()
    shared = Transform([0.0, 1.0, 0.0])
    reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: shared})
    reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: shared})
    with pytest.raises(InputError, match="expected a component of its own"):
        system.update(DT)
    assert system.sim.count == 0


def test_a_frame_with_one_bad_body_adds_none() -> None:
    """Three good bodies and one whose mass overflows (passes RigidBody's own checks, fails the
    simulation's): the frame raises naming the entity, and no body is added; once the bad one is
    gone the next frame adds the three."""
    reg, system = _tcod()
    good = [reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: Transform([2.0 * i, 1.0, 0.0])})
            for i in range(3)]
    bad = reg.new_entity({RigidBody: RigidBody(Box(np.full(3, 1e8)), density=1e300)})
    with pytest.raises(InputError, match="RigidBody of entity .*density, mass"):
        system.update(DT)
    assert system.sim.count == 0
    bad.clear()
    system.update(DT)
    assert system.sim.count == 3 and all(g.components[Transform].bound for g in good)


def test_a_refused_velocity_assignment_is_dropped_not_repeated() -> None:
    """A non-zero velocity assigned to a static body raises once; the next frame runs."""
    reg, system = _tcod()
    wall = reg.new_entity({RigidBody: RigidBody(HalfSpace([0.0, 1.0, 0.0], 0.0), kind="static")})
    system.update(DT)
    wall.components[Velocity].linear = [1.0, 0.0, 0.0]
    with pytest.raises(InputError, match="static"):
        system.update(DT)
    system.update(DT)  # no error: dropped
    assert system.sim.step_count == 2


def _raise_on_begin(a, b, sensor):  # noqa: ANN001, ANN202 - esper's handler signature
    _SEEN.append((a, b))
    raise RuntimeError("handler failed")


_SEEN: list[tuple[int, int]] = []


def test_an_exception_in_a_contact_handler_comes_after_the_frame() -> None:
    """Two balls landing on a floor in the same step and a handler that raises on every begin
    event: the frame still takes all three paid steps and dispatches both events, then the
    handler's exception propagates; the world is the same as one whose handler did not raise."""
    results = []
    for raising in (True, False):
        world = f"robust:handler:{raising}"
        esper.switch_world(world)
        _SEEN.clear()
        try:
            proc = PhysicsProcessor(3, dt=DT)
            esper.add_processor(proc)
            esper.create_entity(RigidBody(HalfSpace([0.0, 1.0, 0.0], 0.0), kind="static"))
            for x in (0.0, 2.0):
                esper.create_entity(RigidBody(Ball(3, 0.3)), Transform([x, 0.302, 0.0]))
            if raising:
                esper.set_handler(CONTACT_BEGIN, _raise_on_begin)
                with pytest.raises(RuntimeError, match="handler failed"):
                    esper.process(3 * DT + 1e-9)
                assert len(_SEEN) == 2
            else:
                esper.process(3 * DT + 1e-9)
            assert proc.sim.step_count == 3
            assert sum(c.kind == "begin" for c in proc.contacts) == 2
            results.append(proc.sim.positions.copy())
        finally:
            esper.event_registry.clear()
            esper.switch_world("default")
            esper.delete_world(world)
    np.testing.assert_array_equal(results[0], results[1])


def test_replacing_with_a_bad_component_is_refused_and_changes_nothing() -> None:
    reg, system = _tcod()
    e = reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3)), Transform: Transform([0.0, 5.0, 0.0])})
    system.update(DT)
    before = system.sim.positions.copy()
    e.components[Transform] = Transform([0.0, 1.0, 0.0, 0.0])  # a 4-D pose in a 3-D world
    with pytest.raises((InputError, InputTypeError), match="Transform.position"):
        system.update(DT)
    np.testing.assert_array_equal(system.sim.positions, before)


def _pile(reg, n: int = 6) -> list:
    reg.new_entity({RigidBody: RigidBody(HalfSpace([0.0, 1.0, 0.0], 0.0), kind="static")})
    return [reg.new_entity({RigidBody: RigidBody(Ball(3, 0.3) if i % 2 else Box(np.full(3, 0.25))),
                            Transform: Transform([0.3 * (i % 3), 0.4 + 0.7 * i, 0.1 * i])}) for i in range(n)]


def test_tcod_save_and_restore_rewinds_bit_for_bit() -> None:
    """Save after 30 frames, run 60 more (spawning and deleting a body meanwhile), restore, run the
    60 again: every entity's pose equal bit for bit and the saved handles back; an entity made
    after the save still gets a body; restoring for an entity that lost its RigidBody is refused
    and changes nothing."""
    reg, system = _tcod()
    ents = _pile(reg)
    for _ in range(30):
        system.update(DT)
    saved = system.save()
    for _ in range(60):
        system.update(DT)
    want = [e.components[Transform].position.copy() for e in ents]
    handles = [system.handle_of(e) for e in ents]
    gone = reg.new_entity({RigidBody: RigidBody(Ball(3, 0.2)), Transform: Transform([5.0, 1.0, 0.0])})
    system.update(DT)
    gone.clear()
    system.update(DT)
    system.restore(saved)
    assert [system.handle_of(e) for e in ents] == handles
    for _ in range(60):
        system.update(DT)
    for e, w in zip(ents, want, strict=True):
        np.testing.assert_array_equal(e.components[Transform].position, w)
    late = reg.new_entity({RigidBody: RigidBody(Ball(3, 0.2)), Transform: Transform([5.0, 1.0, 0.0])})
    system.update(DT)
    assert system.sim.position(system.handle_of(late))[0] == 5.0
    before = system.sim.positions.copy()
    ents[0].components.pop(RigidBody)
    with pytest.raises(InputError, match="has no RigidBody now"):
        system.restore(saved)
    np.testing.assert_array_equal(system.sim.positions, before)


def test_esper_save_and_restore_rewinds_bit_for_bit() -> None:
    esper.switch_world("robust:save")
    try:
        proc = PhysicsProcessor(3, dt=DT)
        esper.add_processor(proc)
        esper.create_entity(RigidBody(HalfSpace([0.0, 1.0, 0.0], 0.0), kind="static"))
        ents = [esper.create_entity(RigidBody(Ball(3, 0.3)), Transform([0.2 * i, 0.5 + 0.7 * i, 0.0]))
                for i in range(5)]
        for _ in range(20):
            esper.process(DT)
        saved = proc.save()
        for _ in range(40):
            esper.process(DT)
        want = [esper.component_for_entity(e, Transform).position.copy() for e in ents]
        proc.restore(saved)
        for _ in range(40):
            esper.process(DT)
        for e, w in zip(ents, want, strict=True):
            np.testing.assert_array_equal(esper.component_for_entity(e, Transform).position, w)
    finally:
        esper.switch_world("default")
        esper.delete_world("robust:save")
