"""ndrigid for esper games: one processor that owns a Simulation per esper world.

Usage (the dimension is the one setting; the same game code runs in 2-D to 5-D)::

    import esper
    from ndrigid.adapters.esper import PhysicsProcessor, RigidBody, Transform, Velocity, CONTACT_BEGIN
    from ndrigid.core.geometry.shapes import Ball, HalfSpace

    physics = PhysicsProcessor(dim)                      # a Simulation(dim) inside
    esper.add_processor(physics)                         # priority 0: game logic above, drawing below
    floor = [0.0] * dim; floor[1] = 1.0
    esper.create_entity(RigidBody(HalfSpace(floor, 0.0), kind="static"))
    esper.create_entity(RigidBody(Ball(dim, 0.5)), Transform(position=[0, 3] + [0] * (dim - 2)))
    esper.set_handler(CONTACT_BEGIN, on_touch)           # on_touch(entity_a, entity_b, sensor)
    while running:
        esper.process(frame_seconds)                     # fixed 1/60 s steps inside

Choices:

* One processor, not one per stage. The stages of a step (integrate, broadphase, narrowphase,
  solver, integrate, sleep) must run in order with the same step size, and a fixed-step
  accumulator runs 0, 1 or several whole steps per frame: stages split into esper processors
  would run exactly once per frame each and let game processors see the world between the
  broadphase and the solver. Game processors run before the physics (priority > 0: input that
  sets velocities, spawning) or after it (priority < 0: reading transforms, drawing); esper sorts
  by priority.
* ``esper.process(frame_seconds)``: the first positional argument is the frame's wall time in
  seconds, banked into the fixed-step accumulator (:class:`~ndrigid.adapters.loop.FixedStepper`);
  ``esper.process()`` with no argument takes exactly one step.
* One Simulation per esper world context: a processor belongs to the world it was added to and
  refuses to run in another, so two worlds hold two independent simulations.
* Contact events go through esper's own event dispatch, in the world being processed, after each
  step: ``esper.dispatch_event(CONTACT_BEGIN | CONTACT_END, entity_a, entity_b, sensor)``. An
  entity is None for a body that no entity owns (one added to ``physics.sim`` directly). A body
  removed since the last step (its entity deleted) reports its end events with the old entity id.
  The same events, with their details (points, normal, approach speed, impulse), are kept in
  ``physics.contacts`` (an :class:`~ndrigid.adapters._common.EntityContact` list of the last
  ``process`` call). Reading that list needs no handler: esper keeps handlers as weak methods,
  and one whose object is collected at interpreter exit makes Python print an "Exception
  ignored ... WeakMethod" message from esper's own code.
* Joints: put a :class:`Joint` on an entity with a RigidBody, naming the other entity (or None:
  the world); removing the component removes the joint, and deleting either entity (or removing
  its RigidBody) removes it too (the component's ``state`` becomes "removed"). A joint that breaks
  above its ``break_force`` / ``break_torque`` is dispatched like a contact, after the step:
  ``esper.dispatch_event(JOINT_BROKEN, entity_a, entity_b, force, torque)`` with entity_a the
  holder of the Joint and entity_b its other entity (None: the world); its component's ``state``
  becomes "broken" (it stays on the entity). The events of the last ``process`` call, with the
  component, are in ``physics.joint_events`` (:class:`~ndrigid.adapters._joints.EntityJointEvent`).
  Which body is which and what a Joint shows: :mod:`ndrigid.adapters._joints`. ::

      link = esper.create_entity(RigidBody(Box(half)), Transform(centre),
                                 Joint("hinge", None, anchor=pivot, plane=plane, break_torque=500.0))
      esper.component_for_entity(link, Joint).motor_speed = 2.0   # set_motor before the next step
      esper.component_for_entity(link, Joint).angle                # after the latest step

* Change detection costs nothing per entity on a quiet frame: esper hands out the same cached
  query list until some entity or component changes, so the bridge diffs only when the list
  object is new (see :mod:`ndrigid.adapters._common` for the diff, the snapshots and the rules).
"""

from __future__ import annotations

from typing import Any

import esper
from ndrigid.core.errors import InputError
from ndrigid.core.world.simulation import Settings, Simulation

from ._common import EntityContact, PhysicsBridge, RigidBody, Transform, Velocity
from ._joints import EntityJointEvent, Joint

#: event names dispatched with ``(entity_a, entity_b, sensor)``: entity ids (or None), bool
CONTACT_BEGIN = "ndrigid_contact_begin"
CONTACT_END = "ndrigid_contact_end"
_EVENT_NAMES = {"begin": CONTACT_BEGIN, "end": CONTACT_END}
#: event name dispatched with ``(entity_a, entity_b, force, torque)`` when a joint breaks: the
#: entity holding the Joint, its other entity (None: the world), N, N m
JOINT_BROKEN = "ndrigid_joint_broken"


class PhysicsProcessor(esper.Processor):
    """Runs one esper world's rigid bodies: entities with a :class:`RigidBody` get a body.

    Args:
        dim: spatial dimension (ignored when ``sim`` is given).
        sim: an existing Simulation to drive instead of a new ``Simulation(dim, gravity, settings)``.
        dt: fixed step, s (default ``settings.dt``, 1/60).
        max_steps_per_frame: cap on steps per ``esper.process`` call (spiral-of-death guard).
        gravity, settings: passed to the new Simulation.

    Attributes:
        sim: the Simulation (its arrays are the physical state; read them for bulk work).
        bridge: the entity <-> body bookkeeping (``bridge.stepper.alpha`` for interpolation).
        steps_last_frame: fixed steps the last ``process`` call took.
        contacts: the contact events (with details) of the last ``process`` call.
        joint_events: the joints that broke in the last ``process`` call (with their components).
    """

    def __init__(self, dim: int | None = None, *, sim: Simulation | None = None, dt: float | None = None,
                 max_steps_per_frame: int = 5, gravity: Any = None, settings: Settings | None = None) -> None:
        if sim is None:
            if dim is None:
                raise InputError("dim: expected an integer dimension >= 2 (or sim=...), got None")
            sim = Simulation(dim, gravity=gravity, settings=settings)
        self.sim = sim
        self.bridge: PhysicsBridge[int] = PhysicsBridge(sim, dt, max_steps_per_frame, self._dispatch,
                                                        self._dispatch_joint)
        self.world: str | None = None
        self.steps_last_frame = 0
        self.contacts: list[EntityContact] = []  # the contact events of the last process() call
        self.joint_events: list[EntityJointEvent] = []  # the joints broken in the last process() call
        self._seen: Any = None  # the esper query list the bridge last diffed

    def process(self, frame_seconds: float | None = None, *args: Any, **kwargs: Any) -> None:
        """One frame: pick up entity changes, apply assigned velocities/poses, step, write back."""
        if self.world is None:
            self.world = esper.current_world
        elif esper.current_world != self.world:
            raise RuntimeError(f"PhysicsProcessor belongs to esper world {self.world!r}, got processed in "
                               f"{esper.current_world!r}; add one processor per world")
        self.sync()
        self.contacts = []
        self.joint_events = []
        self.steps_last_frame = self.bridge.update(frame_seconds)

    def sync(self) -> None:
        """Pick up created, changed and deleted entities now (``process`` does this first)."""
        current = esper.get_component(RigidBody)
        if current is self._seen:  # esper's cache survived: no entity or component changed
            return
        self.bridge.sync(current, _extras, _attach, esper.get_component(Joint))
        # attaching components cleared esper's cache; remember the list as it is after that
        self._seen = esper.get_component(RigidBody)

    def save(self) -> dict[str, Any]:
        """The physics of this esper world, in memory: the Simulation's state, which entity owns
        which body and which Joint owns which joint (save your components as you save the rest of
        the game)."""
        self.sync()
        return self.bridge.save()

    def restore(self, saved: dict[str, Any]) -> None:
        """Put back a :meth:`save`: the saved entities (which must hold a RigidBody) own their
        saved bodies again, at the saved poses; stepping on replays the saved world bit for bit."""
        self.bridge.restore(saved, lambda e: esper.try_component(e, RigidBody), _extras, _attach,
                            esper.get_component(Joint))
        self._seen = None  # diff the entities again at the next frame

    def handle_of(self, entity: int) -> int:
        """Body handle of an entity, for the Simulation's calls (apply_impulse, queries ...)."""
        return self.bridge.handle_of(entity)

    def entity_of(self, handle: int) -> int | None:
        """Entity owning a body handle (None if none does)."""
        return self.bridge.entity_of(handle)

    def _dispatch(self, ev: EntityContact) -> None:
        self.contacts.append(ev)
        esper.dispatch_event(_EVENT_NAMES[ev.kind], ev.entity_a, ev.entity_b, ev.sensor)

    def _dispatch_joint(self, ev: EntityJointEvent) -> None:
        self.joint_events.append(ev)
        esper.dispatch_event(JOINT_BROKEN, ev.entity_a, ev.entity_b, ev.force, ev.torque)


def _extras(entity: int) -> tuple[Transform | None, Velocity | None]:
    return esper.try_component(entity, Transform), esper.try_component(entity, Velocity)


def _attach(entity: int, transform: Transform | None, velocity: Velocity | None) -> None:
    for comp in (transform, velocity):
        if comp is not None:
            esper.add_component(entity, comp)


__all__ = ["CONTACT_BEGIN", "CONTACT_END", "JOINT_BROKEN", "EntityJointEvent", "Joint", "PhysicsProcessor",
           "RigidBody", "Transform", "Velocity"]
