"""Scene queries: rays, points, boxes and shapes against the bodies of a simulation.

Every query is vectorised over the bodies' colliders (the same flat table the narrowphase uses:
compound pieces with composed poses, meshes as their convex hulls), with a loop only over the
distinct polytope shapes. A body takes part when ``body.layer & layer_mask`` is non-zero; sensors
take part like any other body (filter them with layers if needed).

Choices:

* Rays: ``origin + t direction`` with the direction normalised, so distances are in metres. A ray
  that starts inside a solid hits it at distance 0 with the normal ``-direction`` (the solid
  blocks the ray at once; common practice in game engines, and what a ray march reports).
  Ball: the smaller root of the quadratic |o + t d - c|^2 = r^2. Box: the slab method in the box
  frame (Kay and Kajiya, "Ray tracing complex scenes", SIGGRAPH 1986). Convex polytope: clipping
  the ray against every facet half-space (Cyrus and Beck, 1978), entering through the facet with
  the largest entering t. Half-space: the plane crossing.
* Before the exact tests, the ray is clipped against the bodies' world bounding boxes (one slab
  test per body), so only bodies whose boxes it crosses are expanded into colliders.
* Overlap with a box is a bounding-box test (what broadphase-style queries are for); overlap with a
  shape is exact, through the narrowphase kernels with a zero margin (depth >= 0).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from ..collision import broadphase as bp
from ..collision import narrowphase as nph
from ..errors import InputError, InputTypeError, vector
from ..state.components import ALL_LAYERS, SHAPE_BALL, SHAPE_BOX, SHAPE_HALFSPACE, SHAPE_POLYTOPE, STATIC

if TYPE_CHECKING:
    from .simulation import Simulation

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

__all__ = [
    "RayHit",
    "bodies_containing_point",
    "bodies_overlapping_box",
    "bodies_overlapping_shape",
    "raycast",
    "raycast_all",
]

# Containment tolerance of point tests, metres (points on the surface count as inside).
_POINT_TOL = 1e-12


class RayHit(NamedTuple):
    """The first point where a ray enters a body."""

    handle: int
    point: Array  # (n,) world point of the hit
    normal: Array  # (n,) outward unit surface normal there (-direction for a ray starting inside)
    distance: float  # metres along the ray


# -- validation -----------------------------------------------------------------------------------


def _layer_mask(value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) \
            or not 0 <= int(value) <= ALL_LAYERS:
        raise InputError(f"layer_mask: expected an integer bit mask in [0, 2**32), got {value!r}")
    return int(value)


def _ray(sim: Simulation, origin: Any, direction: Any, max_distance: Any) -> tuple[Array, Array, float]:
    n = sim.dim
    o = vector("origin", origin, n)
    d = vector("direction", direction, n, bound=None)
    if o.ndim != 1 or d.ndim != 1:
        raise InputError(f"origin, direction: expected single vectors of shape ({n},), "
                         f"got {o.shape} and {d.shape}")
    norm = float(np.linalg.norm(d))
    if not (norm > 0.0 and np.isfinite(norm)):
        raise InputError(f"direction: expected a non-zero finite vector, got {d.tolist()}")
    try:
        tmax = float(max_distance)
    except (TypeError, ValueError) as exc:
        raise InputTypeError(f"max_distance: expected a number, got {type(max_distance).__name__}") from exc
    if not tmax > 0.0:  # also rejects nan
        raise InputError(f"max_distance: expected a number > 0 (inf allowed), got {tmax!r}")
    return o, d / norm, tmax


def _rows(sim: Simulation, mask: int) -> IntArray:
    return np.flatnonzero((sim.bodies.layer & np.uint32(mask)) != 0).astype(np.int64)


def _store(sim: Simulation) -> nph.ShapeStore:
    return nph.ShapeStore(sim.info.shapes, sim.caches.setdefault("narrowphase", {}))


# -- rays -----------------------------------------------------------------------------------------


def _ray_boxes(lo: Array, hi: Array, o: Array, d: Array, tmax: float) -> NDArray[np.bool_]:
    """Which boxes (N, n) the ray segment [0, tmax] meets (slab method; infinite boxes pass)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t1 = (lo - o) / d
        t2 = (hi - o) / d
    par = d == 0.0  # parallel to a slab: inside it or never
    inside = (o >= lo) & (o <= hi)
    near = np.where(par, np.where(inside, -np.inf, np.inf), np.minimum(t1, t2))
    far = np.where(par, np.where(inside, np.inf, -np.inf), np.maximum(t1, t2))
    near = np.nan_to_num(near, nan=-np.inf)  # inf - inf on an unbounded axis
    far = np.nan_to_num(far, nan=np.inf)
    t0 = near.max(axis=1)
    t1_ = far.min(axis=1)
    return (t0 <= t1_) & (t1_ >= 0.0) & (t0 <= tmax)


def _ray_colliders(c: nph.Colliders, store: nph.ShapeStore, o: Array, d: Array) -> tuple[Array, Array]:
    """Entry distance (C,) (inf for a miss) and outward normal (C, n) of the ray on each collider."""
    C, n = c.count, o.shape[0]
    t = np.full(C, np.inf)
    nrm = np.zeros((C, n))
    inward = -d

    ball = np.flatnonzero(c.kind == SHAPE_BALL)
    if ball.size:
        oc = o - c.pos[ball]
        b = oc @ d
        cc = np.einsum("bi,bi->b", oc, oc) - c.radius[ball] ** 2
        disc = b * b - cc
        root = -b - np.sqrt(np.maximum(disc, 0.0))
        hit = (disc >= 0.0) & (root >= 0.0)
        inside = cc <= 0.0
        tb = np.where(inside, 0.0, np.where(hit, root, np.inf))
        t[ball] = tb
        surf = o + np.where(np.isfinite(tb), tb, 0.0)[:, None] * d - c.pos[ball]
        nrm[ball] = np.where(inside[:, None], inward, surf / c.radius[ball, None])

    box = np.flatnonzero(c.kind == SHAPE_BOX)
    if box.size:
        M, h = c.rot[box], c.half[box]
        ol = np.einsum("bji,bj->bi", M, o - c.pos[box])  # the ray in the box frame
        dl = np.einsum("bji,j->bi", M, d)
        tb, ax, sgn, inside = _slabs(-h, h, ol, dl)
        t[box] = tb
        local = np.zeros_like(ol)
        local[np.arange(box.size), ax] = sgn
        nrm[box] = np.where(inside[:, None], inward, np.einsum("bij,bj->bi", M, local))

    poly = np.flatnonzero(c.kind == SHAPE_POLYTOPE)
    if poly.size:
        keys = c.key[poly]
        for k in np.unique(keys):  # loop over distinct polytope shapes
            sel = poly[keys == k]
            s = store.get(int(k))
            N, off = np.asarray(s.facet_normals), np.asarray(s.facet_offsets)
            M = c.rot[sel]
            ol = np.einsum("bji,bj->bi", M, o - c.pos[sel])
            dl = np.einsum("bji,j->bi", M, d)
            num = off[None, :] - ol @ N.T  # >= 0 on the inner side of each facet
            den = dl @ N.T
            with np.errstate(divide="ignore", invalid="ignore"):
                tf = num / den
            enter = np.where(den < 0.0, tf, -np.inf)
            leave = np.where(den > 0.0, tf, np.inf)
            blocked = np.any((den == 0.0) & (num < 0.0), axis=1)  # parallel and outside a facet
            f = np.argmax(enter, axis=1)
            t_in = enter[np.arange(sel.size), f]
            t_out = leave.min(axis=1)
            inside = np.all(num >= 0.0, axis=1)
            ok = ~blocked & (t_in <= t_out) & (t_out >= 0.0)
            t[sel] = np.where(inside, 0.0, np.where(ok & (t_in >= 0.0), t_in, np.inf))
            nrm[sel] = np.where(inside[:, None], inward, np.einsum("bij,bj->bi", M, N[f]))

    half = np.flatnonzero(c.kind == SHAPE_HALFSPACE)
    if half.size:
        u = np.einsum("bij,bj->bi", c.rot[half], c.plane_u[half])
        dw = c.plane_d[half] + np.einsum("bi,bi->b", u, c.pos[half])
        s = u @ o - dw
        den = u @ d
        with np.errstate(divide="ignore", invalid="ignore"):
            th = -s / den
        inside = s <= 0.0
        t[half] = np.where(inside, 0.0, np.where(den < 0.0, th, np.inf))
        nrm[half] = np.where(inside[:, None], inward, u)
    return t, nrm


def _slabs(lo: Array, hi: Array, o: Array, d: Array) -> tuple[Array, IntArray, Array, NDArray[np.bool_]]:
    """Slab test of rays (B, n) on boxes [lo, hi] in their frames: entry t (inf on a miss), the entry
    axis, the outward sign of the entry face, and whether the origin is inside."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t1 = (lo - o) / d
        t2 = (hi - o) / d
    par = d == 0.0
    within = (o >= lo) & (o <= hi)
    near = np.where(par, np.where(within, -np.inf, np.inf), np.minimum(t1, t2))
    far = np.where(par, np.where(within, np.inf, -np.inf), np.maximum(t1, t2))
    ax = np.argmax(near, axis=1)
    rows = np.arange(o.shape[0])
    t_in = near[rows, ax]
    t_out = far.min(axis=1)
    inside = np.all(within, axis=1)
    ok = (t_in <= t_out) & (t_out >= 0.0)
    t = np.where(inside, 0.0, np.where(ok & (t_in >= 0.0), t_in, np.inf))
    sgn = np.where(d[rows, ax] > 0.0, -1.0, 1.0)  # entering the low face moving up: normal -e_ax
    return t, ax, sgn, inside


def _ray_hits(sim: Simulation, origin: Any, direction: Any, max_distance: Any,
              layer_mask: Any) -> tuple[IntArray, Array, Array, Array, Array]:
    """Per body hit by the ray: rows (H,), distances (H,), normals (H, n), sorted by distance."""
    mask = _layer_mask(layer_mask)
    o, d, tmax = _ray(sim, origin, direction, max_distance)
    n = sim.dim
    rows = _rows(sim, mask)
    if rows.size:
        lo, hi = bp.world_aabbs(sim.alg, sim.bodies, sim.info.shapes, sim.caches)
        rows = rows[_ray_boxes(lo[rows], hi[rows], o, d, tmax)]
    if rows.size == 0:
        return np.zeros(0, np.int64), np.zeros(0), np.zeros((0, n)), o, d
    store = _store(sim)
    c, _, _ = nph.colliders_of_rows(sim.bodies, store, rows)
    t, nrm = _ray_colliders(c, store, o, d)
    ok = np.flatnonzero(np.isfinite(t) & (t <= tmax))  # a miss is t = inf, also when tmax is
    # first entry per body (compound pieces): sort by (owner, t), keep the first of each owner
    order = ok[np.lexsort((t[ok], c.owner[ok]))]
    first = np.ones(order.size, dtype=bool)
    first[1:] = c.owner[order][1:] != c.owner[order][:-1]
    best = order[first]
    by_t = best[np.lexsort((sim.bodies.handle[c.owner[best]], t[best]))]
    return c.owner[by_t], t[by_t], nrm[by_t], o, d


def raycast(sim: Simulation, origin: Any, direction: Any, max_distance: Any = np.inf,
            layer_mask: Any = ALL_LAYERS) -> RayHit | None:
    """The first body hit by the ray ``origin + t direction``, 0 <= t <= max_distance, or None.

    Args:
        origin: (n,) world point; direction: (n,) non-zero (normalised here).
        max_distance: metres along the ray (> 0, default unbounded).
        layer_mask: bodies with ``layer & layer_mask == 0`` are ignored.
    """
    rows, t, nrm, o, d = _ray_hits(sim, origin, direction, max_distance, layer_mask)
    if rows.size == 0:
        return None
    return RayHit(int(sim.bodies.handle[rows[0]]), o + t[0] * d, nrm[0], float(t[0]))


def raycast_all(sim: Simulation, origin: Any, direction: Any, max_distance: Any = np.inf,
                layer_mask: Any = ALL_LAYERS) -> list[RayHit]:
    """Every body the ray enters (one hit each, where it first enters), sorted by distance."""
    rows, t, nrm, o, d = _ray_hits(sim, origin, direction, max_distance, layer_mask)
    h = sim.bodies.handle
    return [RayHit(int(h[r]), o + ti * d, ni, float(ti)) for r, ti, ni in zip(rows, t, nrm, strict=True)]


# -- points, boxes and shapes ---------------------------------------------------------------------


def _contains(c: nph.Colliders, store: nph.ShapeStore, x: Array) -> NDArray[np.bool_]:
    """Whether each collider (C,) contains the world point x (n,)."""
    inside = np.zeros(c.count, dtype=bool)
    local = np.einsum("cji,cj->ci", c.rot, x - c.pos)
    k = c.kind
    ball = k == SHAPE_BALL
    inside[ball] = np.linalg.norm(local[ball], axis=1) <= c.radius[ball] + _POINT_TOL
    box = k == SHAPE_BOX
    inside[box] = np.all(np.abs(local[box]) <= c.half[box] + _POINT_TOL, axis=1)
    half = k == SHAPE_HALFSPACE
    inside[half] = np.einsum("ci,ci->c", local[half], c.plane_u[half]) <= c.plane_d[half] + _POINT_TOL
    poly = np.flatnonzero(k == SHAPE_POLYTOPE)
    keys = c.key[poly]
    for key in np.unique(keys):  # loop over distinct polytope shapes
        sel = poly[keys == key]
        s = store.get(int(key))
        inside[sel] = np.all(local[sel] @ np.asarray(s.facet_normals).T
                             <= np.asarray(s.facet_offsets) + _POINT_TOL, axis=1)
    return inside


def _handles_of(sim: Simulation, rows: IntArray) -> IntArray:
    return np.sort(sim.bodies.handle[np.unique(rows)]).astype(np.int64)


def bodies_containing_point(sim: Simulation, point: Any, layer_mask: Any = ALL_LAYERS) -> IntArray:
    """Handles (sorted, int64) of the bodies whose solid contains the world point (n,)."""
    mask = _layer_mask(layer_mask)
    x = vector("point", point, sim.dim)
    if x.ndim != 1:
        raise InputError(f"point: expected a single point of shape ({sim.dim},), got shape {x.shape}")
    rows = _rows(sim, mask)
    if rows.size:
        lo, hi = bp.world_aabbs(sim.alg, sim.bodies, sim.info.shapes, sim.caches)
        rows = rows[np.all((lo[rows] <= x + _POINT_TOL) & (x - _POINT_TOL <= hi[rows]), axis=1)]
    if rows.size == 0:
        return np.zeros(0, np.int64)
    store = _store(sim)
    c, _, _ = nph.colliders_of_rows(sim.bodies, store, rows)
    return _handles_of(sim, c.owner[_contains(c, store, x)])


def _box_rows(sim: Simulation, lo: Array, hi: Array, rows: IntArray) -> IntArray:
    """The rows whose world bounding box meets [lo, hi] (half-spaces: whose solid the box reaches)."""
    blo, bhi = bp.world_aabbs(sim.alg, sim.bodies, sim.info.shapes, sim.caches)
    hit = np.all((blo[rows] <= hi) & (lo <= bhi[rows]), axis=1)
    is_half = sim.bodies.shape_kind[rows] == SHAPE_HALFSPACE
    if np.any(is_half):
        hr = rows[is_half]
        u, d = bp.halfspace_planes(sim.bodies, sim.info.shapes, hr)
        c, e = 0.5 * (lo + hi), 0.5 * (hi - lo)
        hit[is_half] = u @ c - np.abs(u) @ e <= d  # the box's lowest point along u is in the solid
    return rows[hit]


def bodies_overlapping_box(sim: Simulation, lo: Any, hi: Any, layer_mask: Any = ALL_LAYERS) -> IntArray:
    """Handles (sorted) of the bodies whose world bounding box overlaps the box [lo, hi] (each (n,))."""
    mask = _layer_mask(layer_mask)
    n = sim.dim
    lo_ = vector("lo", lo, n, bound=None)
    hi_ = vector("hi", hi, n, bound=None)
    if lo_.ndim != 1 or hi_.ndim != 1:
        raise InputError(f"lo, hi: expected single corners of shape ({n},), got {lo_.shape} and {hi_.shape}")
    if np.any(lo_ > hi_):
        raise InputError(f"lo, hi: expected lo <= hi on every axis, got lo={lo_.tolist()}, hi={hi_.tolist()}")
    rows = _rows(sim, mask)
    if rows.size == 0:
        return np.zeros(0, np.int64)
    return _handles_of(sim, _box_rows(sim, lo_, hi_, rows))


def bodies_overlapping_shape(sim: Simulation, shape: Any, position: Any, rotor: Any = None,
                             layer_mask: Any = ALL_LAYERS) -> IntArray:
    """Handles (sorted) of the bodies whose solid overlaps ``shape`` placed at (position, rotor).

    Exact: the narrowphase kernels with a zero margin (touching counts as overlapping).
    """
    from ..state.components import shape_kind

    mask = _layer_mask(layer_mask)
    alg, n = sim.alg, sim.dim
    sdim = getattr(shape, "dim", None)
    if sdim is None:
        raise InputTypeError(f"shape: expected an ndrigid shape, got {type(shape).__name__}")
    if sdim != n:
        raise InputError(f"shape: expected a shape of dimension {n}, got one of dimension {sdim}")
    kind = shape_kind(shape)
    p = vector("position", position, n)
    if p.ndim != 1:
        raise InputError(f"position: expected shape ({n},), got {p.shape}")
    R = (alg.identity_rotor() if rotor is None
         else alg.rotor_normalize(alg.check_rotor(rotor, "rotor", single=True), 2))
    M = alg.rotor_to_matrix(R)
    rows = _rows(sim, mask)
    if kind == SHAPE_HALFSPACE:
        rows = rows[sim.bodies.shape_kind[rows] != SHAPE_HALFSPACE]
    else:
        P, r = bp.shape_cloud(shape)
        W = P @ M.T
        rows = _box_rows(sim, p + (W - r[:, None]).min(axis=0), p + (W + r[:, None]).max(axis=0), rows)
    if rows.size == 0:
        return np.zeros(0, np.int64)
    store = _store(sim)
    body_c, _, _ = nph.colliders_of_rows(sim.bodies, store, rows)
    mark = store.mark()
    try:
        query_c = nph.colliders_of_shape(alg, store, shape, p, M)
        c = nph.Colliders.concat([body_c, query_c])
        B = body_c.count
        ib = np.repeat(np.arange(B), query_c.count)
        iq = B + np.tile(np.arange(query_c.count), B)
        mp = nph.collide_colliders(alg, c, iq, ib, np.zeros(ib.size), store, sim.settings)
    finally:
        store.forget_since(mark)  # the query shape is not kept in the simulation's store
    hit = mp.depth >= 0.0
    return _handles_of(sim, c.owner[ib[mp.pair[hit]]])


# -- contacts of the last step ----------------------------------------------------------------------


class BodyContacts(NamedTuple):
    """The points where one body touched others in the last step (m points, one row each).

    other: (m,) handles of the bodies touched.
    point: (m, n) world contact points.
    normal: (m, n) unit normals from the queried body toward the other.
    depth: (m,) overlap (> 0), or minus the gap of a point the bodies reached within the step.
    normal_impulse: (m,) normal impulse of the point in the step, N s (>= 0).
    impulse: (m, n) total impulse (normal and friction) the point applied to the queried body, N s.
    """

    other: IntArray
    point: Array
    normal: Array
    depth: Array
    normal_impulse: Array
    impulse: Array


def _touching_rows(sim: Simulation) -> tuple[Any, NDArray[np.bool_], Array, Array]:
    """The step's contact set, a mask of its touching rows (depth >= 0 or an impulse), and the rows'
    normal and friction impulses (zeros where the solver has not run)."""
    c = sim.contacts
    n = sim.dim
    if c is None or not c.count:
        return None, np.zeros(0, bool), np.zeros(0), np.zeros((0, n))
    lam_n = np.zeros(c.count) if c.normal_impulse is None else c.normal_impulse
    lam_t = np.zeros((c.count, n)) if c.tangent_impulse is None else c.tangent_impulse
    return c, (c.depth >= 0.0) | (lam_n > 0.0), lam_n, lam_t


_RECORD = ("ha", "hb", "point", "normal", "depth", "lam_n", "lam_t")


def _live_rows(sim: Simulation, handles: IntArray) -> IntArray:
    """Rows of handles, -1 for removed ones."""
    h2r = np.asarray(sim.info.handle_to_row, dtype=np.int64)
    return np.where(handles < h2r.size, h2r[np.minimum(handles, h2r.size - 1)], -1)


def _resting_record(sim: Simulation) -> dict[str, Any] | None:
    """The kept touching points of sleeping bodies whose two bodies still both rest (asleep or
    static) and are live; None when there are none."""
    rec = sim.caches.get("asleep_rows")
    if rec is None or not rec["ha"].size:
        return None
    b = sim.bodies
    ra, rb = _live_rows(sim, rec["ha"]), _live_rows(sim, rec["hb"])
    live = (ra >= 0) & (rb >= 0)
    moving = (b.kind != STATIC) & b.awake
    ok = live.copy()
    ok[live] = ~moving[ra[live]] & ~moving[rb[live]]
    return {f: v[ok] for f, v in rec.items()}


def note_sleepers(sim: Simulation, was_awake: NDArray[np.bool_]) -> None:
    """Keep the touching points of the bodies that fell asleep in this step (handle-based), so that
    the contact queries still show what a sleeping body rests on: its island is not collided or
    solved while it sleeps."""
    b = sim.bodies
    if was_awake.shape != b.awake.shape:
        return
    fell = was_awake & ~b.awake
    if not np.any(fell):
        return
    c, touching, lam_n, lam_t = _touching_rows(sim)
    old = _resting_record(sim)
    h = b.handle.astype(np.int64)
    if old is not None:  # the bodies that fell asleep now get their rows afresh
        gone = fell[_live_rows(sim, old["ha"])] | fell[_live_rows(sim, old["hb"])]
        old = {f: v[~gone] for f, v in old.items()}
    parts = [] if old is None else [old]
    if c is not None:
        rows = np.nonzero(touching & (fell[c.body_a] | fell[c.body_b]))[0]
        parts.append({"ha": h[c.body_a[rows]], "hb": h[c.body_b[rows]], "point": c.point[rows],
                      "normal": c.normal[rows], "depth": c.depth[rows], "lam_n": lam_n[rows],
                      "lam_t": lam_t[rows]})
    if parts:
        sim.caches["asleep_rows"] = {f: np.concatenate([p[f] for p in parts]) for f in _RECORD}


def _all_touching(sim: Simulation) -> dict[str, Any]:
    """The last step's touching points as handle-based arrays: the solved rows, and the kept rows
    of resting pairs of sleeping bodies."""
    n = sim.dim
    c, touching, lam_n, lam_t = _touching_rows(sim)
    parts = []
    if c is not None:
        b = sim.bodies
        moving = (b.kind != STATIC) & b.awake
        # rows of pairs that now both rest are in the record (they fell asleep in this step)
        rows = np.nonzero(touching & (moving[c.body_a] | moving[c.body_b]))[0]
        h = b.handle.astype(np.int64)
        parts.append({"ha": h[c.body_a[rows]], "hb": h[c.body_b[rows]], "point": c.point[rows],
                      "normal": c.normal[rows], "depth": c.depth[rows], "lam_n": lam_n[rows],
                      "lam_t": lam_t[rows]})
    rec = _resting_record(sim)
    if rec is not None:
        parts.append(rec)
    if not parts:
        z = np.zeros(0, np.int64)
        return {"ha": z, "hb": z, "point": np.zeros((0, n)), "normal": np.zeros((0, n)), "depth": np.zeros(0),
                "lam_n": np.zeros(0), "lam_t": np.zeros((0, n))}
    if len(parts) == 1:
        return parts[0]
    return {f: np.concatenate([p[f] for p in parts]) for f in _RECORD}


def contacts_of(sim: Simulation, handle: int) -> BodyContacts:
    """Every touching point of one body in the last step (see :class:`BodyContacts`); a sleeping
    body reports the points it rested on when it fell asleep."""
    sim.row(handle)
    h = int(handle)
    t = _all_touching(sim)
    as_a, as_b = t["ha"] == h, t["hb"] == h
    sel = as_a | as_b
    sign = np.where(as_b[sel], 1.0, -1.0)[:, None]  # a row's impulse acts on B, minus it on A
    other = np.where(as_b[sel], t["ha"][sel], t["hb"][sel])
    total = t["lam_n"][sel, None] * t["normal"][sel] + t["lam_t"][sel]
    return BodyContacts(other, t["point"][sel].copy(), -sign * t["normal"][sel], t["depth"][sel].copy(),
                        t["lam_n"][sel].copy(), sign * total)


def impulse_between(sim: Simulation, handle_a: int, handle_b: int) -> Array:
    """(n,) total impulse that body A applied to body B in the last step, N s (normal and friction,
    summed over their touching points; minus it acted on A). Zeros when they did not touch."""
    sim.row(handle_a)
    sim.row(handle_b)
    ha, hb = int(handle_a), int(handle_b)
    if ha == hb:
        raise InputError(f"impulse_between: handle_a and handle_b are both {ha}; expected two different "
                         "bodies")
    t = _all_touching(sim)
    fwd = (t["ha"] == ha) & (t["hb"] == hb)
    rev = (t["ha"] == hb) & (t["hb"] == ha)
    total = t["lam_n"][:, None] * t["normal"] + t["lam_t"]
    return total[fwd].sum(axis=0) - total[rev].sum(axis=0)
