"""The tcod-ecs adapter against real tcod-ecs 5.x, in every dimension 2..5.

The same scenarios as the esper tests (the runner is shared from ``test_adapters_esper``) with
the same reference: the core Simulation driven directly, bit for bit. Passing both proves that
the physics knows nothing of either ECS.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
import tcod.ecs
from conftest import dims
from ndrigid.adapters.tcod import PhysicsSystem, RigidBody, Transform, Velocity
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.shapes import Ball
from test_adapters_esper import (
    DT,
    Driver,
    adapter_run,
    assert_same_run,
    check_event_pairing,
    churn_scenario,
    core_run,
    floor,
)


class TcodDriver(Driver):
    def __init__(self, dim: int) -> None:
        self.registry = tcod.ecs.Registry()
        self.system = PhysicsSystem(self.registry, dim)
        self.sim = self.system.sim
        self.events: list[tuple[str, Any, Any]] = []
        self.created: dict[Any, int] = {}  # entity -> creation number, to compare runs

    def create(self, rigid: RigidBody, transform: Transform, velocity: Velocity) -> tcod.ecs.Entity:
        e = self.registry.new_entity({RigidBody: rigid, Transform: transform, Velocity: velocity})
        self.created[e] = len(self.created)
        return e

    def numbered_events(self) -> list[tuple[str, int, int]]:
        return [(k, self.created[a], self.created[b]) for k, a, b in self.events]

    def delete(self, entity: tcod.ecs.Entity) -> None:
        entity.clear()

    def component(self, entity: tcod.ecs.Entity, kind: type) -> Any:
        return entity.components[kind]

    def frame(self, seconds: float) -> None:
        self.events += [(c.kind, c.entity_a, c.entity_b) for c in self.system.update(seconds)]

    def body_entities(self) -> int:
        return len(self.registry.Q.all_of(components=[RigidBody], traverse=()).get_entities())


@dims()
def test_same_poses_as_core_with_bodies_added_and_removed_mid_run(dim: int, rng: np.random.Generator) -> None:
    """Reference: the core driven directly with the same bodies at the same steps (bit for bit),
    although tcod-ecs iterates its entity sets in no defined order."""
    sc = churn_scenario(dim, rng)
    assert_same_run(adapter_run(sc, TcodDriver(dim)), core_run(sc))


@dims(2, 4)
def test_events_pair_up_and_two_registries_are_independent(dim: int, rng: np.random.Generator) -> None:
    """Registry A next to a busy registry B moves and hears exactly what A alone does (reference:
    A alone); every begin is matched by one end, removals included."""
    sc = churn_scenario(dim, rng, frames=30)
    alone_driver = TcodDriver(dim)
    alone = adapter_run(sc, alone_driver)
    da, db = TcodDriver(dim), TcodDriver(dim)
    db.create(RigidBody(floor(dim), kind="static"), Transform(), Velocity())
    ball_b = db.create(RigidBody(Ball(dim, 0.5)), Transform(np.r_[0.0, 0.4, np.zeros(dim - 2)]), Velocity())
    got: list[dict[str, Any]] = []
    ents: dict[str, Any] = {}
    for ops in sc.frames:  # a frame of A, then a frame of B
        got += adapter_run(type(sc)(dim, [ops]), da, ents)
        db.frame(DT)
    assert_same_run(got, alone)
    assert da.events and da.numbered_events() == alone_driver.numbered_events()
    assert db.events and all(ball_b in (a, b) for _, a, b in db.events)
    for e in list(ents.values()):
        da.delete(e)
    da.frame(DT)
    assert da.sim.count == 0
    assert check_event_pairing(da.events, removed=set(da.created)) >= 1


def test_replaced_component_and_prefabs() -> None:
    """A RigidBody assigned over an existing one rebuilds the body; a RigidBody inherited through
    tcod-ecs's IsA relation does not make a body (one description, one body)."""
    dim = 3
    d = TcodDriver(dim)
    prefab = d.registry.new_entity({RigidBody: RigidBody(Ball(dim, 0.2))})
    child = prefab.instantiate()
    ent = d.create(RigidBody(Ball(dim, 0.3)), Transform(np.r_[0.0, 2.0, 0.0]), Velocity())
    d.frame(DT)
    assert d.sim.count == 2  # the prefab holds its own RigidBody; the instance only inherits it
    with pytest.raises(InputError):
        d.system.handle_of(child)
    before = d.system.handle_of(ent)
    pos = np.array(ent.components[Transform].position)
    ent.components[RigidBody] = RigidBody(Ball(dim, 0.3), mass=3.0)
    d.frame(DT)
    assert d.system.handle_of(ent) != before and d.sim.count == 2
    h = d.system.handle_of(ent)
    assert np.isclose(1.0 / d.sim.bodies.inv_mass[d.sim.row(h)], 3.0)
    assert ent.components[Transform].position[1] < pos[1]  # rebuilt where it was, still falling


def test_bad_registry_and_dimension() -> None:
    """Bad input names the argument and leaves nothing half-built."""
    with pytest.raises(InputTypeError, match="registry"):
        PhysicsSystem(object(), 3)  # type: ignore[arg-type]
    with pytest.raises(InputError, match="dim"):
        PhysicsSystem(tcod.ecs.Registry())
    d = TcodDriver(4)
    d.create(RigidBody(Ball(3, 0.5)), Transform(), Velocity())
    with pytest.raises(InputError, match="dimension 4"):
        d.frame(DT)
    assert d.sim.count == 0
