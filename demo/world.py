"""The demo's thin layer over the esper adapter: one esper world with a PhysicsProcessor per scene.

Scenes add bodies through :meth:`DemoWorld.add` (an entity with RigidBody + Transform [+ Velocity]
components) and the app steps through :meth:`DemoWorld.step` (``esper.process``). Everything the
app reads for drawing and picking comes from ``world.sim`` (the Simulation the processor owns):
its arrays for slicing, ``queries`` for picking, ``apply_force`` for the drag spring. Keeping
all esper calls here means the rest of the demo would run unchanged on a bare Simulation.
"""

from __future__ import annotations

import itertools
from typing import Any

import esper
import numpy as np
from ndrigid.adapters.esper import PhysicsProcessor, RigidBody, Transform, Velocity
from ndrigid.core import Algebra, Simulation

from .palette import ROLE_COLOURS, Colour

_world_ids = itertools.count()


class DemoWorld:
    """An esper world holding one scene's bodies; ``sim`` is the physics state behind it."""

    def __init__(self, dim: int) -> None:
        self.dim = dim
        self.alg = Algebra(dim)
        self.name = f"ndrigid-demo-{next(_world_ids)}"
        esper.switch_world(self.name)
        self.physics = PhysicsProcessor(dim)
        esper.add_processor(self.physics)
        self.colours: dict[int, Colour] = {}  # body handle -> colour
        self.roles: dict[int, str] = {}  # body handle -> role (a key of ROLE_COLOURS)
        self._pending: list[tuple[int, str]] = []

    @property
    def sim(self) -> Simulation:
        return self.physics.sim

    def add(self, shape: Any, position: Any, *, role: str, kind: str = "dynamic", rotor: Any = None,
            velocity: Any = None, angular_velocity: Any = None, **material: Any) -> int:
        """Create an entity with a body; returns the entity id (its body exists after :meth:`sync`)."""
        esper.switch_world(self.name)
        comps: list[Any] = [RigidBody(shape, kind=kind, **material),
                            Transform(position=np.asarray(position, dtype=float), rotor=rotor)]
        if velocity is not None or angular_velocity is not None:
            comps.append(Velocity(linear=velocity, angular=angular_velocity))
        ent = esper.create_entity(*comps)
        self._pending.append((ent, role))
        return ent

    def sync(self) -> None:
        """Make the bodies of new entities now and give each its role colour."""
        esper.switch_world(self.name)
        self.physics.sync()
        for ent, role in self._pending:
            h = self.physics.handle_of(ent)
            self.colours[h] = ROLE_COLOURS[role]
            self.roles[h] = role
        self._pending.clear()

    def step(self, seconds: float | None = None) -> None:
        """One frame of physics: ``seconds`` of wall time (None: exactly one fixed step)."""
        esper.switch_world(self.name)
        if self._pending:
            self.sync()
        esper.process(seconds)

    def close(self) -> None:
        """Delete this scene's esper world."""
        if esper.current_world == self.name:
            esper.switch_world("default")
        esper.delete_world(self.name)
