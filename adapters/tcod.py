"""ndrigid for tcod-ecs games: a system object per registry, as thin as the esper adapter.

tcod-ecs has no processors and no event bus, so the adapter is a plain object that the game's
loop calls, and the contact events of a frame come back as its return value::

    import tcod.ecs
    from ndrigid.adapters.tcod import PhysicsSystem, RigidBody, Transform, Velocity

    registry = tcod.ecs.Registry()
    physics = PhysicsSystem(registry, dim)
    ball = registry.new_entity({RigidBody: RigidBody(Ball(dim, 0.5)), Transform: Transform([0, 3, 0])})
    while running:
        for contact in physics.update(frame_seconds):   # EntityContact(kind, entity_a, entity_b, sensor)
            ...
        draw(ball.components[Transform].matrix, ball.components[Transform].position)

Joints: a :class:`Joint` component (``entity.components[Joint]``) joins the entity's body to its
``other`` entity's (or the world); removing the component removes the joint, and clearing either
entity (or removing its RigidBody) removes it too (``state`` "removed"). A joint that breaks above
its threshold comes back from ``update`` among the contact events, in step order, as an
:class:`~ndrigid.adapters._joints.EntityJointEvent` (``kind == "joint_broken"``, ``entity_a`` the
holder, ``entity_b`` the other entity or None, ``joint`` the component, ``force``, ``torque``),
and its component's ``state`` becomes "broken" (it stays on the entity). ::

    wheel.components[Joint] = Joint("wheel", chassis, plane=spin_plane, max_motor_torque=20.0)
    wheel.components[Joint].motor_speed = 8.0        # forwarded to set_motor before the next step

Components are keyed by their class (``entity.components[Transform]``), the only convention the
adapter relies on. An entity is a body when it holds a RigidBody itself: components inherited
through tcod-ecs's ``IsA`` relation (prefabs) are not read, since one RigidBody would otherwise
describe many bodies; give each instance its own.

Change detection: tcod-ecs calls a component-changed hook on every assignment or deletion of a
RigidBody (including ``entity.clear()``); the hook bumps a counter for that registry, and the
system diffs its entities only when the counter moved, so a quiet frame does no per-entity work.
All other logic is shared with the esper adapter in :mod:`ndrigid.adapters._common`; nothing in
``ndrigid.core`` knows either ECS.
"""

from __future__ import annotations

from typing import Any

import tcod.ecs
import tcod.ecs.callbacks
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.world.simulation import Settings, Simulation

from ._common import EntityContact, PhysicsBridge, RigidBody, Transform, Velocity
from ._joints import EntityJointEvent, Joint

# registry id -> number of RigidBody changes seen by the hook (an id outlives nothing: a system
# holds its registry, and a new system always diffs on its first update)
_changes: dict[int, int] = {}


@tcod.ecs.callbacks.register_component_changed(component=RigidBody)
def _on_rigid_body_changed(entity: tcod.ecs.Entity, old: Any, new: Any) -> None:
    key = id(entity.registry)
    _changes[key] = _changes.get(key, 0) + 1


# a Transform or Velocity replaced by a new object teleports or steers the body: the next update
# diffs the entities again
@tcod.ecs.callbacks.register_component_changed(component=Transform)
def _on_transform_changed(entity: tcod.ecs.Entity, old: Any, new: Any) -> None:
    _on_rigid_body_changed(entity, old, new)


@tcod.ecs.callbacks.register_component_changed(component=Velocity)
def _on_velocity_changed(entity: tcod.ecs.Entity, old: Any, new: Any) -> None:
    _on_rigid_body_changed(entity, old, new)


@tcod.ecs.callbacks.register_component_changed(component=Joint)
def _on_joint_changed(entity: tcod.ecs.Entity, old: Any, new: Any) -> None:
    _on_rigid_body_changed(entity, old, new)


class PhysicsSystem:
    """Runs one tcod-ecs registry's rigid bodies: entities holding a :class:`RigidBody` get a body.

    Args:
        registry: the ``tcod.ecs.Registry`` of the game.
        dim: spatial dimension (ignored when ``sim`` is given).
        sim: an existing Simulation to drive instead of a new one.
        dt, max_steps_per_frame: the fixed step and the spiral-of-death cap.
        gravity, settings: passed to the new Simulation.

    Attributes:
        sim: the Simulation (the single source of physical state).
        bridge: entity <-> body bookkeeping (``bridge.stepper.alpha`` for interpolation).
    """

    def __init__(self, registry: tcod.ecs.Registry, dim: int | None = None, *, sim: Simulation | None = None,
                 dt: float | None = None, max_steps_per_frame: int = 5, gravity: Any = None,
                 settings: Settings | None = None) -> None:
        if not isinstance(registry, tcod.ecs.Registry):
            raise InputTypeError(f"registry: expected a tcod.ecs.Registry, got {type(registry).__name__}")
        if sim is None:
            if dim is None:
                raise InputError("dim: expected an integer dimension >= 2 (or sim=...), got None")
            sim = Simulation(dim, gravity=gravity, settings=settings)
        self.registry = registry
        self.sim = sim
        self._events: list[EntityContact | EntityJointEvent] = []
        self.bridge: PhysicsBridge[tcod.ecs.Entity] = PhysicsBridge(sim, dt, max_steps_per_frame,
                                                                    self._events.append, self._events.append)
        self._seen_changes: int | None = None

    def update(self, frame_seconds: float | None = None) -> list[EntityContact | EntityJointEvent]:
        """One frame: pick up entity changes, apply assigned velocities/poses/motors, take the fixed
        steps ``frame_seconds`` pays for (exactly one when None), write back; returns the frame's
        contact events and broken joints in the order the steps produced them."""
        self.sync()
        self._events.clear()
        self.bridge.update(frame_seconds)
        return list(self._events)

    def sync(self) -> None:
        """Pick up created, changed and deleted entities now (``update`` does this first)."""
        version = _changes.get(id(self.registry), 0)
        if version == self._seen_changes:
            return
        holders = self.registry.Q.all_of(components=[RigidBody], traverse=())
        self.bridge.sync(((e, e.components(traverse=())[RigidBody]) for e in holders), _extras, _attach,
                         _joints(self.registry))
        self._seen_changes = version

    def save(self) -> dict[str, Any]:
        """The physics of this registry, in memory: the Simulation's state and which entity owns
        which body."""
        self.sync()
        return self.bridge.save()

    def restore(self, saved: dict[str, Any]) -> None:
        """Put back a :meth:`save` (the saved entities must hold a RigidBody)."""
        self.bridge.restore(saved, lambda e: e.components(traverse=()).get(RigidBody), _extras, _attach,
                            _joints(self.registry))
        self._seen_changes = None

    def handle_of(self, entity: tcod.ecs.Entity) -> int:
        """Body handle of an entity, for the Simulation's calls."""
        return self.bridge.handle_of(entity)

    def entity_of(self, handle: int) -> tcod.ecs.Entity | None:
        """Entity owning a body handle (None if none does)."""
        return self.bridge.entity_of(handle)


def _joints(registry: tcod.ecs.Registry) -> list[tuple[tcod.ecs.Entity, Joint]]:
    """Every (entity, Joint) the registry's entities hold themselves (not through IsA)."""
    return [(e, e.components(traverse=())[Joint]) for e in registry.Q.all_of(components=[Joint], traverse=())]


def _extras(entity: tcod.ecs.Entity) -> tuple[Transform | None, Velocity | None]:
    own = entity.components(traverse=())
    return own.get(Transform), own.get(Velocity)


def _attach(entity: tcod.ecs.Entity, transform: Transform | None, velocity: Velocity | None) -> None:
    own = entity.components(traverse=())
    if transform is not None:
        own[Transform] = transform
    if velocity is not None:
        own[Velocity] = velocity


__all__ = ["EntityContact", "EntityJointEvent", "Joint", "PhysicsSystem", "RigidBody", "Transform",
           "Velocity"]
