"""The collision, solver and sleep stages of a step, as thin wrappers over the systems.

Each wrapper reads the simulation's tables, calls the system (a function of arrays) and stores
what later stages need on the simulation (``sim.pairs``, ``sim.contacts``, ``sim.events``).
Caches that live across steps (the pair cache, warm-start impulses, sleep islands) are kept in
``sim.caches`` under the name of the system that owns them.

Contact events: a pair *touches* in a step when one of its points has depth >= 0. A ``begin``
event is reported for a pair that touches now and did not in the previous step, an ``end`` event
for one that no longer touches (or whose body was removed). Sensor pairs report the same events
but produce no contacts.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from .. import kernels as _kernels
from ..collision import broadphase, narrowphase
from ..dynamics import integrate as _integrate
from ..dynamics import sleep, solver

if TYPE_CHECKING:
    from .simulation import Simulation, Stage


class ContactEvent(NamedTuple):
    """A pair of bodies that started ("begin") or stopped ("end") touching in the last step."""

    kind: str
    handle_a: int
    handle_b: int
    sensor: bool


def _stage_find_pairs(sim: Simulation, dt: float) -> None:
    sim.pairs = broadphase.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, dt)


def _stage_find_contacts(sim: Simulation, dt: float) -> None:
    contacts, touching, sensor_touching = narrowphase.find_contacts(
        sim.alg, sim.bodies, sim.pairs, sim.info.shapes, sim.settings, sim.caches, dt)
    sim.contacts = contacts
    _update_events(sim, touching, sensor_touching)


def _stage_solve(sim: Simulation, dt: float) -> None:
    solver.solve_impulses(sim.alg, sim.bodies, sim.contacts, dt, sim.settings, sim.caches)


def _stage_sleep(sim: Simulation, dt: float) -> None:
    sleep.settle_islands(sim.alg, sim.bodies, sim.contacts, dt, sim.settings, sim.caches)


def _touch_keys(sim: Simulation, pairs: np.ndarray, sensor: bool) -> np.ndarray:
    """Sorted int64 keys of touching handle pairs (T, 2): lo << 32 | hi << 1 | sensor."""
    if not len(pairs):
        return np.zeros(0, np.int64)
    h = sim.bodies.handle
    ha, hb = h[pairs[:, 0]].astype(np.int64), h[pairs[:, 1]].astype(np.int64)
    lo, hi = np.minimum(ha, hb), np.maximum(ha, hb)
    return (lo << np.int64(32)) | (hi << np.int64(1)) | np.int64(sensor)


def _emit(sim: Simulation, kind: str, keys: np.ndarray) -> None:
    """Append one event per key (keys sorted: events come in handle order)."""
    if not len(keys):
        return
    lo = (keys >> np.int64(32)).tolist()
    hi = ((keys & np.int64(0xFFFFFFFF)) >> np.int64(1)).tolist()
    sen = (keys & np.int64(1)).astype(bool).tolist()
    sim.events.extend(ContactEvent(kind, a, b, s) for a, b, s in zip(lo, hi, sen, strict=True))


def _update_events(sim: Simulation, touching: np.ndarray, sensor_touching: np.ndarray) -> None:
    """Diff this step's touching handle pairs (T, 2) against the last step's, as sorted int64 keys
    (``np.setdiff1d`` on sorted unique arrays; no Python set of pairs)."""
    now = np.unique(np.concatenate([_touch_keys(sim, touching, False),
                                    _touch_keys(sim, sensor_touching, True)]))
    before: np.ndarray = sim.caches.get("touching", np.zeros(0, np.int64))
    _emit(sim, "begin", np.setdiff1d(now, before, assume_unique=True))
    _emit(sim, "end", np.setdiff1d(before, now, assume_unique=True))
    sim.caches["touching"] = now


def removal_events(sim: Simulation, handle: int) -> None:
    """End events for every touching pair of a body that is being removed."""
    before: np.ndarray = sim.caches.get("touching", np.zeros(0, np.int64))
    lo = before >> np.int64(32)
    hi = (before & np.int64(0xFFFFFFFF)) >> np.int64(1)
    gone = (lo == handle) | (hi == handle)
    _emit(sim, "end", before[gone])
    sim.caches["touching"] = before[~gone]


def collision_stages() -> list[tuple[str, Stage]]:
    return [("find_pairs", _stage_find_pairs), ("find_contacts", _stage_find_contacts),
            ("solve_impulses", _stage_solve)]


def sleep_stages() -> list[tuple[str, Stage]]:
    return [("settle_islands", _stage_sleep)]


# -- the default stages ---------------------------------------------------------------------------


def _stage_accelerate(sim: Simulation, dt: float) -> None:
    _integrate.accelerate(sim.alg, sim.bodies, sim.gravity, dt, sim.settings.gyroscopic,
                          compiled=_kernels.use_compiled(sim.settings))


def _stage_advance_poses(sim: Simulation, dt: float) -> None:
    _integrate.advance_poses(sim.alg, sim.bodies, dt, compiled=_kernels.use_compiled(sim.settings))


def default_stages() -> list[tuple[str, Stage]]:
    """The ordered stages of a step (see the module docstring)."""
    stages: list[tuple[str, Stage]] = [("accelerate", _stage_accelerate)]
    stages += collision_stages()
    stages.append(("advance_poses", _stage_advance_poses))
    stages += sleep_stages()
    return stages
