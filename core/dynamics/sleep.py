"""Islands, sleeping and waking.

Invariants and choices:

* An *island* is a connected component of the graph whose nodes are the dynamic bodies and whose
  edges are this step's contact rows between two dynamic bodies (speculative rows included, so a
  body about to land joins the island it lands on). Static and kinematic bodies are not nodes:
  they would glue every body on the ground into one island. Components come from
  ``scipy.sparse.csgraph.connected_components`` (a vectorised union-find), not a Python loop.
* A dynamic body *rests* while ``|v| + |B| * radius < rest_speed`` (``|B|``, the norm of
  the angular-velocity bivector, bounds the speed of every point at distance ``radius`` from the
  centre); its ``rest_time`` grows by dt per resting step (up to the setting ``rest_time``).
  A body that is only *stirring* (slower than four times the rest speed) loses dt of it per
  step instead of restarting at zero; a faster one restarts at zero. One jittering body in a
  settled pile (a few steps in ten just above the rest speed) otherwise restarted the rest time
  of its whole island every few steps: a 4-D bin of 200 mixed bodies (four seeds) took 6.3 s,
  6.8 s, 23 s and more than 23 s to sleep after its kinetic energy fell below 1 % of its peak;
  with the leak 4.3-6.7 s (measured before the solver's tilt allowance; with everything of this
  release 5.9-10.9 s over seven seeds). A body that keeps moving faster than the rest speed
  still never sleeps.
* An island sleeps when every member has rested for ``rest_time``: its bodies get
  ``awake = False`` and zero velocity; integration and the solver skip them (zero inverse mass).
* An island wakes, as a whole, when any member wakes: a contact with an awake dynamic body or a
  moving kinematic body (checked by the solver before it solves, :func:`wake_touched`, so the
  sleeping body takes part in that same solve), the Simulation's calls that touch a body
  (impulse, force, velocity or pose change, a removed support: ``Simulation._wake_touching``), or
  the disappearance of a body the island rested on. Which bodies slept together, and on what, is
  kept by *handle* in ``caches["sleep"]`` (rows move when bodies are removed; handles do not), so
  waking works even when the collision stages skip pairs of sleeping bodies.
* A woken body restarts its rest time at zero.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..algebra import Algebra
from ..state.components import DYNAMIC, KINEMATIC, Bodies
from ..state.contacts import ContactSet

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

# a body slower than _STIR times the rest speed is stirring: it loses rest time, it does not restart
_STIR = 4.0


def body_speeds(bodies: Bodies) -> Array:
    """Sleep speed (N,) of every body: |v| + |B| * radius (radius: the bounding radius)."""
    lin = np.sqrt(np.einsum("ni,ni->n", bodies.velocity, bodies.velocity))
    ang = np.sqrt(np.einsum("ni,ni->n", bodies.angular_velocity, bodies.angular_velocity))
    rad = np.where(np.isfinite(bodies.radius), bodies.radius, 0.0)
    return lin + ang * rad


def _moving_kinematic(bodies: Bodies) -> NDArray[np.bool_]:
    """(N,) kinematic bodies with a non-zero velocity or angular velocity."""
    return (bodies.kind == KINEMATIC) & (np.any(bodies.velocity != 0.0, axis=1)
                                         | np.any(bodies.angular_velocity != 0.0, axis=1))


def island_labels(bodies: Bodies, contacts: ContactSet | None, edges: IntArray | None = None) -> IntArray:
    """Island label (N,) of every body; bodies that are not dynamic get -1. ``edges`` (E, 2): more
    body-row pairs that join islands (the joints)."""
    N = bodies.count
    dynamic = bodies.kind == DYNAMIC
    labels = np.full(N, -1, dtype=np.int64)
    if N == 0:
        return labels
    if contacts is not None and contacts.count:
        a, b = contacts.body_a, contacts.body_b
        both = dynamic[a] & dynamic[b]
        a, b = a[both], b[both]
    else:
        a = b = np.zeros(0, dtype=np.int64)
    if edges is not None and edges.shape[0]:
        e = edges[(edges[:, 0] >= 0) & (edges[:, 1] >= 0)]  # -1: the world, not a node
        both = dynamic[e[:, 0]] & dynamic[e[:, 1]]
        a = np.concatenate([a, e[both, 0]])
        b = np.concatenate([b, e[both, 1]])
    graph = coo_matrix((np.ones(a.shape[0]), (a, b)), shape=(N, N))
    _, lab = connected_components(graph, directed=False)
    labels[dynamic] = lab[dynamic]
    return labels


def _state(caches: dict[str, Any]) -> dict[str, Any]:
    st = caches.get("sleep")
    if st is None:
        # label: island label by handle (-1: not asleep); support: (handle asleep, handle touched)
        st = {"label": np.zeros(0, dtype=np.int64), "support": np.zeros((0, 2), dtype=np.int64), "next": 0}
        caches["sleep"] = st
    return st


def _labels_of(st: dict[str, Any], handles: IntArray) -> IntArray:
    """Sleep-island labels (R,) of body handles (R,), -1 where none."""
    lab = st["label"]
    inside = handles < lab.shape[0]
    out = np.full(handles.shape[0], -1, dtype=np.int64)
    out[inside] = lab[handles[inside]]
    return out


def _wake_islands(bodies: Bodies, caches: dict[str, Any], rows: IntArray) -> None:
    """Wake the given rows and every body that fell asleep in the same island as one of them."""
    st = _state(caches)
    if rows.size == 0:
        return
    handles = bodies.handle
    mine = _labels_of(st, handles[rows])
    mine = mine[mine >= 0]
    if mine.size:
        rows = np.union1d(rows, np.nonzero(np.isin(_labels_of(st, handles), mine))[0])
    bodies.awake[rows] = True
    bodies.rest_time[rows] = 0.0
    h = handles[rows]
    lab = st["label"]
    lab[h[h < lab.shape[0]]] = -1
    sup = st["support"]
    if sup.shape[0]:
        st["support"] = sup[~np.isin(sup[:, 0], h)]


def wake_touched(bodies: Bodies, contacts: ContactSet | None, caches: dict[str, Any]) -> None:
    """Wake sleeping dynamic bodies (and their islands) that share a contact with an awake
    dynamic body or a moving kinematic body. Called by the solver before it solves."""
    if contacts is None or contacts.count == 0:
        return
    kind, awake = bodies.kind, bodies.awake
    sleeping = (kind == DYNAMIC) & ~awake
    if not np.any(sleeping):
        return
    a, b = contacts.body_a, contacts.body_b
    moving_kin = _moving_kinematic(bodies)
    active = ((kind == DYNAMIC) & awake) | moving_kin
    hit = np.concatenate([a[sleeping[a] & active[b]], b[sleeping[b] & active[a]]])
    if hit.size:
        _wake_islands(bodies, caches, np.unique(hit))


def wake_joined(bodies: Bodies, edges: IntArray, caches: dict[str, Any]) -> None:
    """Wake sleeping dynamic bodies (and their islands) joined to an awake dynamic body or a moving
    kinematic body by one of ``edges`` (E, 2) body rows (a joint to the world: row -1, ignored)."""
    if edges.shape[0] == 0:
        return
    kind, awake = bodies.kind, bodies.awake
    sleeping = (kind == DYNAMIC) & ~awake
    if not np.any(sleeping):
        return
    e = edges[(edges[:, 0] >= 0) & (edges[:, 1] >= 0)]
    a, b = e[:, 0], e[:, 1]
    active = ((kind == DYNAMIC) & awake) | _moving_kinematic(bodies)
    hit = np.concatenate([a[sleeping[a] & active[b]], b[sleeping[b] & active[a]]])
    if hit.size:
        _wake_islands(bodies, caches, np.unique(hit))


def wake_resting_on(bodies: Bodies, caches: dict[str, Any], row: int) -> None:
    """Wake every island that fell asleep touching body ``row`` (its support moved, was pushed or
    is about to be removed). The collision stages skip pairs of a sleeping and a static body, so
    this step's contacts may not show them; the sleep cache does."""
    st = caches.get("sleep")
    if st is None or st["support"].shape[0] == 0:
        return
    sup = st["support"]
    sleepers = sup[sup[:, 1] == bodies.handle[row], 0]
    if sleepers.size:
        _wake_islands(bodies, caches, np.nonzero(np.isin(bodies.handle, sleepers))[0])


def settle_islands(alg: Algebra, bodies: Bodies, contacts: ContactSet | None, dt: float, settings: Any,
                   caches: dict[str, Any], edges: IntArray | None = None) -> None:
    """Advance rest times, put resting islands to sleep and wake islands that were disturbed.

    Args:
        alg: the algebra (unused; kept for the common system signature).
        bodies: the body table; ``awake``, ``rest_time`` and (for bodies that fall asleep)
            ``velocity`` and ``angular_velocity`` change in place.
        contacts: this step's contact rows, or None.
        dt: step length, s.
        settings: uses ``sleep_enabled``, ``rest_speed``, ``rest_time``.
        caches: ``caches["sleep"]`` keeps the island label and supports of sleeping bodies by handle.
        edges: (E, 2) body rows held together by joints (one island), or None.
    """
    st = _state(caches)
    N = bodies.count
    if N == 0:
        return
    dynamic = bodies.kind == DYNAMIC
    if not settings.sleep_enabled:
        if not np.all(bodies.awake[dynamic]):
            bodies.awake[dynamic] = True
        bodies.rest_time[:] = 0.0
        st["label"][:] = -1
        st["support"] = np.zeros((0, 2), dtype=np.int64)
        return
    handles = bodies.handle

    # 1. a body that slept and has been woken (by the Simulation's calls) wakes its whole old
    #    island; so does an island whose support has been removed
    sup = st["support"] = st["support"][np.isin(st["support"][:, 0], handles)]
    if sup.shape[0]:
        gone = ~np.isin(sup[:, 1], handles)
        if np.any(gone):
            bodies.awake[np.isin(handles, sup[gone, 0])] = True
    labelled = _labels_of(st, handles) >= 0
    if np.any(labelled):
        rewoken = np.nonzero(labelled & dynamic & bodies.awake)[0]
        if rewoken.size:
            _wake_islands(bodies, caches, rewoken)

    # 2. rest times of awake dynamic bodies
    awake_dyn = dynamic & bodies.awake
    speed = body_speeds(bodies)
    resting = speed < settings.rest_speed
    stirring = ~resting & (speed < _STIR * settings.rest_speed)
    rt = bodies.rest_time
    grow = awake_dyn & resting
    rt[grow] = np.minimum(rt[grow] + dt, settings.rest_time)
    leak = awake_dyn & stirring
    rt[leak] = np.maximum(rt[leak] - dt, 0.0)
    rt[awake_dyn & ~resting & ~stirring] = 0.0

    # 3. islands: any awake member keeps (or makes) the whole island awake; a moving kinematic
    #    body touching an island keeps it from resting
    labels = island_labels(bodies, contacts, edges)
    nl = int(labels.max()) + 1 if N else 0
    if nl <= 0:
        return
    dl = labels[dynamic]
    if contacts is not None and contacts.count:
        a, b = contacts.body_a, contacts.body_b
        moving_kin = _moving_kinematic(bodies)
        pushed = np.concatenate([a[moving_kin[b] & dynamic[a]], b[moving_kin[a] & dynamic[b]]])
        rt[pushed] = 0.0
    island_awake = np.zeros(nl, dtype=bool)
    np.logical_or.at(island_awake, dl, bodies.awake[dynamic])
    wake_now = dynamic & ~bodies.awake & island_awake[np.maximum(labels, 0)]
    if np.any(wake_now):
        _wake_islands(bodies, caches, np.nonzero(wake_now)[0])
    min_rest = np.full(nl, np.inf)
    np.minimum.at(min_rest, dl, rt[dynamic])

    # 4. islands that have all rested long enough fall asleep
    # (a relative tolerance: rest times are sums of dt and must not miss rest_time by rounding)
    falls = dynamic & bodies.awake & (min_rest[np.maximum(labels, 0)] >= settings.rest_time * (1.0 - 1e-9))
    if not np.any(falls):
        return
    rows = np.nonzero(falls)[0]
    bodies.awake[rows] = False
    bodies.velocity[rows] = 0.0
    bodies.angular_velocity[rows] = 0.0
    # remember who slept together (fresh labels per call) and what they rest on
    h = handles[rows]
    lab = st["label"]
    if lab.shape[0] <= h.max():
        grown = np.full(max(16, 2 * int(h.max()) + 1), -1, dtype=np.int64)
        grown[: lab.shape[0]] = lab
        lab = st["label"] = grown
    lab[h] = st["next"] + labels[rows]
    st["next"] += nl
    if contacts is not None and contacts.count:
        a, b = contacts.body_a, contacts.body_b
        pa = np.concatenate([handles[a[falls[a]]], handles[b[falls[b]]]])
        pb = np.concatenate([handles[b[falls[a]]], handles[a[falls[b]]]])
        st["support"] = np.unique(np.concatenate([st["support"], np.stack([pa, pb], axis=1)]), axis=0)
    del alg


__all__ = ["body_speeds", "island_labels", "settle_islands", "wake_joined", "wake_resting_on",
           "wake_touched"]
