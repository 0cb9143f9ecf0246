"""The collision, solver and sleep stages of a step, as thin wrappers over the systems.

Each wrapper reads the simulation's tables, calls the system (a function of arrays) and stores
what later stages need on the simulation (``sim.pairs``, ``sim.contacts``, ``sim.events``).
Caches that live across steps (the pair cache, warm-start impulses, sleep islands) are kept in
``sim.caches`` under the name of the system that owns them.

Contact events: a pair *meets* in a step when one of its points has depth >= 0 or takes a
normal impulse in the solve (a speculative point that the bodies reach within the step: a fast
body is stopped, or bounces, before it overlaps). A ``begin`` event is reported, after the solve,
for a pair that meets now and did not in the previous step, with the pair's touching points, its
normal, the approach speed before the solve and the normal impulse of the impact (a pair that
first meets only through speculative points is reported one step later, with both steps'
impulses: :func:`report_contacts`); an ``end`` event
for one that no longer meets (or whose body was removed). Sensor pairs report the same events
(touching = overlapping, no details) but produce no contacts.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np

from .. import kernels as _kernels
from ..algebra import skew
from ..collision import broadphase, narrowphase
from ..dynamics import integrate as _integrate
from ..dynamics import joint_positions as _joint_positions
from ..dynamics import joints as _joints
from ..dynamics import sleep, solver
from ..state.components import DYNAMIC
from . import queries as _queries

if TYPE_CHECKING:
    from ..state.contacts import ContactSet
    from .simulation import Simulation, Stage


_NO_POINTS = np.zeros((0, 0))
_NO_POINTS.setflags(write=False)


class ContactEvent(NamedTuple):
    """A pair of bodies that started ("begin") or stopped ("end") touching in the last step.

    ``handle_a < handle_b``. A begin event of a non-sensor pair also carries what sound, damage
    and effects need (an end event, or a sensor's, carries the defaults):

    points: (P, n) world points where the pair touches (midway between the surfaces).
    normal: (n,) unit contact normal, from body A toward body B (None when there are no points).
    approach_speed: how fast the bodies closed along the normal before the step's solve, m/s
        (the largest over the points; 0 when they were not closing).
    impulse: total normal impulse between the bodies in the step, N s (m v for a body of mass m
        that hits a static body at speed v and stops).
    """

    kind: str
    handle_a: int
    handle_b: int
    sensor: bool
    points: np.ndarray = _NO_POINTS
    normal: np.ndarray | None = None
    approach_speed: float = 0.0
    impulse: float = 0.0


def _stage_find_pairs(sim: Simulation, dt: float) -> None:
    pairs = broadphase.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, dt)
    if sim.joints.count and len(pairs):
        pairs = _without_joined(sim, pairs)
    sim.pairs = pairs


def _without_joined(sim: Simulation, pairs: np.ndarray) -> np.ndarray:
    """Candidate pairs less those of two bodies held by a joint that does not let them collide."""
    j = sim.joints
    keep = ~j.collide & (j.body_b >= 0)
    if not np.any(keep):
        return pairs
    ja, jb = j.body_a[keep], j.body_b[keep]
    jk = np.unique((np.minimum(ja, jb) << np.int64(32)) | np.maximum(ja, jb))
    h = sim.bodies.handle
    ha, hb = h[pairs[:, 0]].astype(np.int64), h[pairs[:, 1]].astype(np.int64)
    pk = (np.minimum(ha, hb) << np.int64(32)) | np.maximum(ha, hb)
    return pairs[~np.isin(pk, jk)]


def _stage_find_contacts(sim: Simulation, dt: float) -> None:
    contacts, touching, sensor_touching = narrowphase.find_contacts(
        sim.alg, sim.bodies, sim.pairs, sim.info.shapes, sim.settings, sim.caches, dt)
    sim.contacts = contacts
    note_touching(sim, touching, sensor_touching, dt)


def _stage_solve(sim: Simulation, dt: float) -> None:
    rows = None
    if sim.joints.count:
        _joints.wake_joined(sim.bodies, sim.joints, sim.info.handle_to_row, sim.caches)
        rows = _joints.prepare(sim.alg, sim.bodies, sim.joints, sim.info.handle_to_row, dt, sim.settings)
    if rows is not None:
        _joints.run(rows, sim.bodies, sim.settings.joint_passes, warm=True, settings=sim.settings)
    solver.solve_impulses(sim.alg, sim.bodies, sim.contacts, dt, sim.settings, sim.caches, sim.gravity)
    if rows is not None:
        _joints.run(rows, sim.bodies, sim.settings.joint_passes_after, warm=False, settings=sim.settings)
        _joints.finish(rows, sim.joints)
        broken = _joints.broken(sim.joints)
        for r in sorted(broken.tolist(), reverse=True):
            j = sim.joints
            sim.events.append(_joints.JointEvent("joint_broken", int(j.handle[r]), int(j.body_a[r]),
                                                 int(j.body_b[r]), float(j.force[r]), float(j.torque[r])))
        for h in [int(sim.joints.handle[r]) for r in broken.tolist()]:
            sim.joints.remove(h)
        # the rows, for the position pass after the bodies move (stale once a joint is removed)
        if not broken.size:
            sim.caches["joint_rows"] = rows


def _stage_sleep(sim: Simulation, dt: float) -> None:
    was_awake = sim.bodies.awake.copy()
    edges = _joints.joined_rows(sim.joints, sim.info.handle_to_row) if sim.joints.count else None
    sleep.settle_islands(sim.alg, sim.bodies, sim.contacts, dt, sim.settings, sim.caches, edges)
    _queries.note_sleepers(sim, was_awake)


def _touch_keys(sim: Simulation, pairs: np.ndarray, sensor: bool) -> np.ndarray:
    """Sorted int64 keys of touching handle pairs (T, 2): lo << 32 | hi << 1 | sensor."""
    if not len(pairs):
        return np.zeros(0, np.int64)
    h = sim.bodies.handle
    ha, hb = h[pairs[:, 0]].astype(np.int64), h[pairs[:, 1]].astype(np.int64)
    lo, hi = np.minimum(ha, hb), np.maximum(ha, hb)
    return (lo << np.int64(32)) | (hi << np.int64(1)) | np.int64(sensor)


def _emit(sim: Simulation, kind: str, keys: np.ndarray) -> None:
    """Append one detail-free event per key (keys sorted: events come in handle order)."""
    if not len(keys):
        return
    lo = (keys >> np.int64(32)).tolist()
    hi = ((keys & np.int64(0xFFFFFFFF)) >> np.int64(1)).tolist()
    sen = (keys & np.int64(1)).astype(bool).tolist()
    sim.events.extend(ContactEvent(kind, a, b, s) for a, b, s in zip(lo, hi, sen, strict=True))


def _row_keys(sim: Simulation, c: ContactSet, rows: np.ndarray) -> np.ndarray:
    return _touch_keys(sim, np.stack([c.body_a[rows], c.body_b[rows]], axis=1), False)


def _normal_speeds(sim: Simulation, c: ContactSet, rows: np.ndarray) -> np.ndarray:
    """Relative normal speed (B's point velocity less A's, along the normal) of the given rows;
    negative when the bodies close. The point velocity is v + W r (design.md)."""
    b = sim.bodies
    n = sim.alg.n
    p = c.point[rows]
    rel = np.zeros_like(p)
    for side, sign in ((c.body_a[rows], -1.0), (c.body_b[rows], 1.0)):
        W = skew(b.angular_velocity[side], n)
        rel += sign * (b.velocity[side] + np.einsum("mij,mj->mi", W, p - b.position[side]))
    return np.einsum("mi,mi->m", rel, c.normal[rows])


def note_touching(sim: Simulation, touching: np.ndarray, sensor_touching: np.ndarray,
                  dt: float | None = None) -> None:
    """Keep the narrowphase's overlapping pairs (T, 2) and (S, 2) for :func:`report_contacts`,
    with the normal speeds at the time of impact of the rows of pairs that did not meet last step
    (only they can begin), as the solver judges a bounce (solver.py, step 5; no correction when
    ``dt`` is None)."""
    c = sim.contacts
    before: np.ndarray = sim.caches.get("touching", np.zeros(0, np.int64))
    speed = np.zeros(0 if c is None else c.count)
    keys = np.zeros(0, np.int64)
    if c is not None and c.count:
        keys = _row_keys(sim, c, np.arange(c.count))  # the rows' pair keys, reused by report_contacts
        new = ~np.isin(keys, before)
        if np.any(new):
            rows = np.nonzero(new)[0]
            vn = _normal_speeds(sim, c, rows)
            if dt is not None:
                b = sim.bodies
                dyn = ((b.kind == DYNAMIC) & b.awake).astype(np.float64)
                gn = dt * (c.normal[rows] @ np.asarray(sim.gravity, dtype=np.float64)) * (
                    dyn[c.body_b[rows]] - dyn[c.body_a[rows]])
                gap = -c.depth[rows]
                closing = -vn
                tau = np.where((gap > 0.0) & (closing > 0.0),
                               np.minimum(gap / np.maximum(closing * dt, 1e-300), 1.0), 0.0)
                vn = np.where(gap > 0.0, vn + gn * (tau - 0.5), vn - gn)
            speed[rows] = vn
    sim.caches["touch_now"] = (touching, sensor_touching, speed, keys)


def report_contacts(sim: Simulation) -> None:
    """Diff the pairs that meet in this step against the last step's (sorted int64 keys,
    ``np.setdiff1d``; no Python set of pairs) and append the begin and end events.

    A pair that first meets only through speculative points (the solver stopped or turned a body
    before it overlapped) is held for one step, and its begin event, reported in the next step,
    adds the normal impulses of both steps: a speculative contact lets a fast body close the gap at
    gap/dt and takes the rest of the stop one step later (solver.py, step 5), so the first step
    alone carries only part of the impact (0 to 100 % of m v, by where the gap fell). A bounce off
    a speculative point carries its whole impulse in the first step; its end event then follows
    the begin event in the same step.
    """
    c = sim.contacts
    empty = np.zeros((0, 2), np.int64)
    none = np.zeros(0, np.int64)
    touching, sensor_touching, speed, keys = sim.caches.pop("touch_now", (empty, empty, np.zeros(0), none))
    met = none
    rows = none
    rk = none
    if c is not None and c.count:
        took = np.zeros(c.count, bool) if c.normal_impulse is None else c.normal_impulse > 0.0
        rows = np.nonzero(took | (c.depth >= 0.0))[0]
        speed = speed[rows] if len(speed) == c.count else np.zeros(len(rows))
        rk = keys[rows] if len(keys) == c.count else _row_keys(sim, c, rows)
        sp = took[rows] & (c.depth[rows] < 0.0)  # speculative points the bodies reached
        met = np.unique(rk[sp])
    overlapping = np.unique(np.concatenate([_touch_keys(sim, touching, False),
                                            _touch_keys(sim, sensor_touching, True)]))
    now = np.union1d(overlapping, met)
    before: np.ndarray = sim.caches.get("touching", np.zeros(0, np.int64))
    held: dict[int, Any] = sim.caches.pop("held_begins", {})
    fresh = np.setdiff1d(now, before, assume_unique=True)
    sensor = (fresh & np.int64(1)).astype(bool)
    # a new pair that meets only through speculative points waits a step (see above)
    wait = ~sensor & ~np.isin(fresh, overlapping, assume_unique=True)
    asked = np.concatenate([fresh[~sensor], np.array(sorted(held), dtype=np.int64)])
    details = _begin_details(sim, asked, rows, rk, speed)
    for key in fresh[~sensor & ~wait].tolist():
        sim.events.append(_begin_event(key, details.get(key)))
    for key in sorted(held):  # last step's held pairs: both steps' impulses
        first, later = held[key], details.get(key)
        if first is None:
            first = later
        elif later is not None:
            first = (later[0], later[1], first[2], first[3] + later[3])
        sim.events.append(_begin_event(key, first))
    _emit(sim, "begin", fresh[sensor])
    _emit(sim, "end", np.setdiff1d(before, now, assume_unique=True))
    if np.any(wait):
        sim.caches["held_begins"] = {k: details.get(k) for k in fresh[wait].tolist()}
    sim.caches["touching"] = now


def _begin_event(key: int, d: tuple[Any, ...] | None) -> ContactEvent:
    a, b = key >> 32, (key & 0xFFFFFFFF) >> 1
    if d is None:  # met by overlap of a pair the narrowphase kept no rows for (e.g. carried)
        return ContactEvent("begin", a, b, False)
    return ContactEvent("begin", a, b, False, d[0], d[1], d[2], d[3])


def _begin_details(sim: Simulation, keys: np.ndarray, rows: np.ndarray, rk: np.ndarray,
                   speed: np.ndarray) -> dict[int, tuple[Any, ...]]:
    """Points (P, n), normal (n,) from the lower handle, approach speed and summed normal impulse
    of the step's touching rows, per non-sensor pair key that has rows; ``rows`` are the step's
    touching contact rows, ``rk`` their pair keys and ``speed`` their normal speeds at impact."""
    c = sim.contacts
    if not len(keys) or c is None or not len(rows):
        return {}
    asked = np.isin(rk, keys)  # only the rows of the pairs asked about (few) are gathered and sorted
    rk, rows, speed = rk[asked], rows[asked], speed[asked]
    order = np.argsort(rk, kind="stable")
    rk, rows, speed = rk[order], rows[order], speed[order]
    lo = np.searchsorted(rk, keys, "left")
    hi = np.searchsorted(rk, keys, "right")
    imp = np.zeros(len(rows)) if c.normal_impulse is None else c.normal_impulse[rows]
    cum_imp = np.concatenate([[0.0], np.cumsum(imp)])
    closing = np.maximum(-speed, 0.0)
    h = sim.bodies.handle
    flip = h[c.body_a[rows]] > h[c.body_b[rows]]  # row normals run A -> B of the row
    normals = np.where(flip[:, None], -c.normal[rows], c.normal[rows])
    out: dict[int, tuple[Any, ...]] = {}
    for k, s, e in zip(keys.tolist(), lo.tolist(), hi.tolist(), strict=True):  # one per new pair
        if s == e:
            continue
        pts = c.point[rows[s:e]].copy()
        pts.setflags(write=False)
        nrm = normals[s].copy()
        nrm.setflags(write=False)
        out[k] = (pts, nrm, float(closing[s:e].max()), float(cum_imp[e] - cum_imp[s]))
    return out


def removal_events(sim: Simulation, handle: int) -> None:
    """End events for every touching pair of a body that is being removed."""
    before: np.ndarray = sim.caches.get("touching", np.zeros(0, np.int64))
    lo = before >> np.int64(32)
    hi = (before & np.int64(0xFFFFFFFF)) >> np.int64(1)
    gone = (lo == handle) | (hi == handle)
    held: dict[int, Any] = sim.caches.get("held_begins", {})
    unreported = np.array([k for k in held if (k >> 32) == handle or (k & 0xFFFFFFFF) >> 1 == handle],
                          dtype=np.int64)
    for k in unreported.tolist():  # a held pair whose begin was never reported ends silently
        del held[k]
    _emit(sim, "end", np.setdiff1d(before[gone], unreported))
    sim.caches["touching"] = before[~gone]


def _stage_report(sim: Simulation, dt: float) -> None:
    report_contacts(sim)


def collision_stages() -> list[tuple[str, Stage]]:
    return [("find_pairs", _stage_find_pairs), ("find_contacts", _stage_find_contacts),
            ("solve_impulses", _stage_solve), ("report_contacts", _stage_report)]


def sleep_stages() -> list[tuple[str, Stage]]:
    return [("settle_islands", _stage_sleep)]


# -- the default stages ---------------------------------------------------------------------------


def _stage_accelerate(sim: Simulation, dt: float) -> None:
    split = _integrate.accelerate(sim.alg, sim.bodies, sim.gravity, dt, sim.settings.gyroscopic,
                                  compiled=_kernels.use_compiled(sim.settings))
    if split is not None:  # the split mode: its momenta, for the end of the step
        sim.caches["split_momenta"] = split


def _stage_advance_poses(sim: Simulation, dt: float) -> None:
    _integrate.advance_poses(sim.alg, sim.bodies, dt, compiled=_kernels.use_compiled(sim.settings))
    rows = sim.caches.pop("joint_rows", None)
    if rows is not None and sim.settings.joint_position_passes:
        _joint_positions.project(sim.alg, sim.bodies, sim.joints, rows, sim.settings.joint_position_passes,
                                 dt, compiled=_kernels.use_compiled(sim.settings))
    _integrate.keep_split_momenta(sim.alg, sim.bodies, sim.caches.pop("split_momenta", None))


def default_stages() -> list[tuple[str, Stage]]:
    """The ordered stages of a step (see the module docstring)."""
    stages: list[tuple[str, Stage]] = [("accelerate", _stage_accelerate)]
    stages += collision_stages()
    stages.append(("advance_poses", _stage_advance_poses))
    stages += sleep_stages()
    return stages
