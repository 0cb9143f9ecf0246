"""ndrigid.adapters: thin glue between game loops / ECS libraries and the core.

* :mod:`ndrigid.adapters.loop`  -- a plain game loop: fixed-step accumulator and interpolation;
* :mod:`ndrigid.adapters.esper` -- esper processors (imports esper);
* :mod:`ndrigid.adapters.tcod`  -- a tcod-ecs system (imports tcod-ecs).

The components (:class:`RigidBody`, :class:`Transform`, :class:`Velocity`, :class:`Joint`) and the shared
entity/body bookkeeping live in :mod:`ndrigid.adapters._common`; this package imports neither
ECS, so a game that uses one need not install the other.
"""

from __future__ import annotations

from ._common import EntityContact, PhysicsBridge, RigidBody, Transform, Velocity
from ._joints import EntityJointEvent, Joint
from .loop import FixedStepper, interpolate_poses

__all__ = [
    "EntityContact",
    "EntityJointEvent",
    "FixedStepper",
    "Joint",
    "PhysicsBridge",
    "RigidBody",
    "Transform",
    "Velocity",
    "interpolate_poses",
]
