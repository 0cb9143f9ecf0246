"""Narrowphase: contact manifolds for the candidate pairs, one vectorised path per pair kind.

Pipeline of :func:`find_contacts`:

1. Every body of a pair becomes one or more *colliders* (:class:`Colliders`, a flat table): a
   plain body gives one, a compound gives one per piece with the piece pose composed with the body
   pose (``x = p + M (t + M_piece y)``), and a simplex mesh collides as its convex hull (computed
   once per shape; a concave mesh should be split into convex compound pieces). Each body pair
   expands into the product of its colliders (a loop over distinct compound shapes only).
2. Each collider pair is ordered so that the lower kind code (components.SHAPE_*) is A; normals of
   swapped pairs are negated at the end, so the output keeps the broadphase's (a, b) order with
   normals from a to b.
3. One kernel per kind pair, vectorised over all its pairs: ball/ball, ball/box, ball/half-space,
   box/half-space and polytope/half-space (vertices against the plane, grouped per shape) are here;
   box/box goes to :func:`sat.box_box` in one batch; ball/polytope, box/polytope and
   polytope/polytope go, with the compiled kernels, in one call to the ``convex`` kernel family
   (``kernels/convex_tpl.py``: GJK, EPA and the clipped manifold as loops over all pairs, shapes
   packed once per shape into flat tables), else pair by pair to :mod:`gjk` (the numpy path).
4. Speculative margin of a pair: ``speculative_margin + dt (|v_a| + |v_b| + |w_a| e_a +
   |w_b| e_b)`` with ``e`` a body's reach from its centre of mass (a bound on the closing speed of
   any two surface points); points whose gap is below it are kept, with negative depth.

Conventions (contacts.py): normal from A to B, depth > 0 when overlapping, point midway between the
two surfaces. Feature ids: ball/ball and ball/plane 0; box/plane and polytope/plane the vertex
index; ball/box the box feature holding the closest point, as the base-3 code of its per-axis state
(-1, 0, +1: on the low face, between, on the high face). Compound pieces mix their piece indices
into the feature (a 64-bit multiply-xorshift), so features stay unique within a body pair.

Vertex-plane manifolds take their candidates from the incident facet only (the facet through the
deepest vertex that faces the plane) and keep at most ``min(2^(n-1), 8)`` points: a box face down
on a plane has 2^(n-1) corners, which are all kept up to n = 4; beyond that a box keeps the corners
along the diagonals of its face's own axes (as box/box does), and a polytope facet with many
vertices keeps the deepest point and then, by farthest-point sampling in the tangent plane, the
points that preserve the extent of the support patch.

Sensors: pairs with a sensor body produce no contact rows; they are reported in
``sensor_touching`` when some point has depth >= 0. ``touching`` lists the other pairs with a point
of depth >= 0. Pairs of two inert bodies (static or asleep) are not collided (the broadphase skips
them); a pair that touched when it went inert is carried over in ``caches["narrowphase"]`` so that
a body falling asleep on the ground does not report a spurious end event.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .. import kernels as _kernels
from ..algebra import Algebra
from ..state.components import (
    SHAPE_BALL,
    SHAPE_BOX,
    SHAPE_COMPOUND,
    SHAPE_HALFSPACE,
    SHAPE_MESH,
    SHAPE_POLYTOPE,
    STATIC,
    Bodies,
)
from ..state.contacts import ContactSet, ManifoldPoints, combine_friction, combine_restitution, contact_keys

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

__all__ = [
    "Colliders",
    "ShapeStore",
    "ball_ball",
    "ball_box",
    "ball_halfspace",
    "box_halfspace",
    "find_contacts",
    "collide_colliders",
    "colliders_of_rows",
    "colliders_of_shape",
    "manifold_cap",
    "pair_margins",
    "polytope_halfspace",
]

_CACHE_KEY = "narrowphase"
_NKINDS = 8  # dispatch code = kind_a * _NKINDS + kind_b


# a box face over a plane counts as tilted when its corners' depths spread more than this
# fraction of its extent (its half width): then its deepest corner is kept first (_reduce)
_TILTED = 0.02

def manifold_cap(n: int) -> int:
    """Most points kept per vertex-plane manifold in dimension n: 2^(n-1), at most 8."""
    return min(1 << (n - 1), 8)


def _empty_rows() -> IntArray:
    return np.zeros((0, 2), dtype=np.int64)


# -- shapes and colliders -------------------------------------------------------------------------


class ShapeStore:
    """Shape objects by integer key: keys >= 0 index the simulation's shape registry, keys < 0 an
    extra list (compound pieces, mesh hulls, query shapes) kept in ``cache``.

    Per-shape derived data (compound piece tables, mesh hulls) are cached by registry id; shapes
    are immutable, so the caches never go stale.
    """

    def __init__(self, shapes: list[Any], cache: dict[str, Any]) -> None:
        self.shapes = shapes
        self.cache = cache
        self.extras: list[Any] = cache.setdefault("extras", [])
        self._extra_ids: dict[int, int] = cache.setdefault("extra_ids", {})
        self.compound: dict[int, tuple[Any, ...]] = cache.setdefault("compound", {})
        self.mesh: dict[int, int] = cache.setdefault("mesh", {})

    def get(self, key: int) -> Any:
        return self.shapes[key] if key >= 0 else self.extras[-1 - key]

    def extra_key(self, shape: Any) -> int:
        """Key of a shape outside the registry (the store keeps a reference, so ids stay valid)."""
        k = self._extra_ids.get(id(shape))
        if k is not None and self.extras[-1 - k] is not shape:  # a stale id (see _convex_table)
            k = None
        if k is None:
            self.extras.append(shape)
            k = -len(self.extras)
            self._extra_ids[id(shape)] = k
        return k

    def mark(self) -> int:
        """A mark for :meth:`forget_since` (the number of extra shapes now)."""
        return len(self.extras)

    def forget_since(self, mark: int) -> None:
        """Drop the extra shapes (and what was cached about them) added after ``mark``: queries
        register their temporary shapes here and must not grow the store for good."""
        del self.extras[mark:]
        for sid in [s for s, k in self._extra_ids.items() if -k > mark]:
            del self._extra_ids[sid]
        for table in (self.compound, self.mesh):
            for k in [k for k, v in table.items() if k < -mark or (isinstance(v, int) and v < -mark)]:
                del table[k]

    def hull_key(self, key: int) -> int:
        """Key of the convex hull of the mesh with key ``key``."""
        k = self.mesh.get(key)
        if k is None:
            k = self.extra_key(self.get(key).convex_hull())
            self.mesh[key] = k
        return k

    def pieces(self, key: int) -> tuple[Any, ...]:
        """Piece table of a compound: kinds (P,), positions (P, n), rotations (P, n, n), radii (P,),
        half-extents (P, n), shape keys (P,)."""
        hit = self.compound.get(key)
        if hit is not None:
            return hit
        from ..state.components import shape_kind

        comp = self.get(key)
        n = comp.dim
        kinds = np.array([shape_kind(s) for s in comp.shapes], dtype=np.int8)
        radii = np.array([getattr(s, "radius", 0.0) if k == SHAPE_BALL else s.bounding_radius
                          for s, k in zip(comp.shapes, kinds, strict=True)])
        half = np.array([np.asarray(s.half_extents) if k == SHAPE_BOX else np.zeros(n)
                         for s, k in zip(comp.shapes, kinds, strict=True)]).reshape(-1, n)
        keys = np.array([self.extra_key(s) for s in comp.shapes], dtype=np.int64)
        out = (kinds, np.asarray(comp.positions), np.asarray(comp.rotations), radii, half, keys)
        self.compound[key] = out
        return out


@dataclass
class Colliders:
    """A flat table of C convex colliders (column arrays, components last).

    owner: (C,) int, body row (or query slot) the collider belongs to.
    piece: (C,) int, compound piece index, -1 for a whole body.
    kind: (C,) int8, SHAPE_BALL, SHAPE_BOX, SHAPE_POLYTOPE or SHAPE_HALFSPACE.
    pos: (C, n) world position of the collider's local origin; rot: (C, n, n) local -> world.
    radius: (C,) ball radius (bounding radius for other kinds).
    half: (C, n) box half-extents (0 for other kinds).
    plane_u, plane_d: (C, n), (C,) local half-space normal and offset (0 for other kinds).
    key: (C,) int shape key in the :class:`ShapeStore`.
    """

    owner: IntArray
    piece: IntArray
    kind: NDArray[np.int8]
    pos: Array
    rot: Array
    radius: Array
    half: Array
    plane_u: Array
    plane_d: Array
    key: IntArray

    @property
    def count(self) -> int:
        return int(self.owner.shape[0])

    @staticmethod
    def concat(parts: list[Colliders]) -> Colliders:
        return Colliders(*(np.concatenate([getattr(p, f) for p in parts]) for f in _COLLIDER_FIELDS))


_COLLIDER_FIELDS = ("owner", "piece", "kind", "pos", "rot", "radius", "half", "plane_u", "plane_d", "key")


def _fill_planes(c: Colliders, store: ShapeStore) -> None:
    """Local plane columns of the half-space colliders (a loop over distinct half-space shapes)."""
    hs = np.flatnonzero(c.kind == SHAPE_HALFSPACE)
    if hs.size == 0:
        return
    keys = c.key[hs]
    for k in np.unique(keys):
        sel = hs[keys == k]
        s = store.get(int(k))
        c.plane_u[sel] = np.asarray(s.normal)
        c.plane_d[sel] = float(s.offset)


def colliders_of_rows(bodies: Bodies, store: ShapeStore,
                      rows: IntArray) -> tuple[Colliders, IntArray, IntArray]:
    """Colliders of body ``rows`` (R,): the table and, per row, its first collider and count (R,)."""
    n = bodies.position.shape[1]
    rows = np.asarray(rows, dtype=np.int64)
    kind = bodies.shape_kind[rows].astype(np.int8)
    sid = bodies.shape_id[rows].astype(np.int64)
    count = np.ones(rows.size, dtype=np.int64)
    comp = np.flatnonzero(kind == SHAPE_COMPOUND)
    comp_keys = np.unique(sid[comp]) if comp.size else np.zeros(0, np.int64)
    for k in comp_keys:  # loop over distinct compound shapes
        count[comp[sid[comp] == k]] = len(store.pieces(int(k))[0])
    start = np.cumsum(count) - count
    slot = np.repeat(np.arange(rows.size), count)
    rank = np.arange(slot.size) - start[slot]
    owner = rows[slot]
    C = slot.size
    c = Colliders(
        owner=owner, piece=np.full(C, -1, dtype=np.int64), kind=kind[slot].copy(),
        pos=bodies.position[owner].copy(), rot=bodies.rotation[owner].copy(),
        radius=bodies.radius[owner].copy(), half=bodies.half_extents[owner].copy(),
        plane_u=np.zeros((C, n)), plane_d=np.zeros(C), key=sid[slot].copy())
    mesh = np.flatnonzero(c.kind == SHAPE_MESH)
    if mesh.size:
        for k in np.unique(c.key[mesh]):  # loop over distinct meshes: they collide as their hulls
            c.key[mesh[c.key[mesh] == k]] = store.hull_key(int(k))
        c.kind[mesh] = SHAPE_POLYTOPE
    for k in comp_keys:
        sel = np.flatnonzero((c.kind == SHAPE_COMPOUND) & (c.key == k))
        kinds, t, Mp, radii, half, keys = store.pieces(int(k))
        p = rank[sel]
        M = c.rot[sel]
        c.pos[sel] = c.pos[sel] + np.einsum("cij,cj->ci", M, t[p])
        c.rot[sel] = M @ Mp[p]
        c.kind[sel] = kinds[p]
        c.radius[sel] = radii[p]
        c.half[sel] = half[p]
        c.key[sel] = keys[p]
        c.piece[sel] = p
    _fill_planes(c, store)
    return c, start, count


def colliders_of_shape(alg: Algebra, store: ShapeStore, shape: Any, position: Array, rotation: Array,
                       owner: int = -1) -> Colliders:
    """Colliders of one free-standing shape at a pose (queries): compound pieces expanded."""
    from ..state.components import shape_kind

    n = alg.n
    kind = shape_kind(shape)
    if kind == SHAPE_COMPOUND:
        key = store.extra_key(shape)
        kinds, t, Mp, radii, half, keys = store.pieces(key)
        P = len(kinds)
        c = Colliders(np.full(P, owner, np.int64), np.arange(P, dtype=np.int64), kinds.copy(),
                      position + t @ rotation.T, rotation @ Mp, radii.copy(), half.copy(), np.zeros((P, n)),
                      np.zeros(P), keys.copy())
    else:
        key = store.extra_key(shape)
        if kind == SHAPE_MESH:
            key = store.hull_key(key)
            kind = SHAPE_POLYTOPE
        radius = float(shape.radius) if kind == SHAPE_BALL else (
            0.0 if kind == SHAPE_HALFSPACE else float(shape.bounding_radius))
        half = np.zeros((1, n))
        if kind == SHAPE_BOX:
            half = np.asarray(shape.half_extents, dtype=np.float64)[None].copy()
        c = Colliders(np.array([owner], np.int64), np.array([-1], np.int64), np.array([kind], np.int8),
                      np.asarray(position, dtype=np.float64)[None].copy(), np.asarray(rotation)[None].copy(),
                      np.array([radius]), half, np.zeros((1, n)), np.zeros(1), np.array([key], np.int64))
    _fill_planes(c, store)
    return c


# -- kernels: each takes collider indices A, B (Q,) and margins (Q,), returns ManifoldPoints -------


def _world_planes(c: Colliders, B: IntArray) -> tuple[Array, Array]:
    """World normals (Q, n) and offsets (Q,) of half-space colliders B: u_w = M u, d_w = d + u_w . p."""
    u = np.einsum("qij,qj->qi", c.rot[B], c.plane_u[B])
    return u, c.plane_d[B] + np.einsum("qi,qi->q", u, c.pos[B])


def ball_ball(c: Colliders, A: IntArray, B: IntArray, margin: Array) -> ManifoldPoints:
    """Ball/ball: normal along the centre line (+e_1 for coincident centres), one point, feature 0."""
    ca, cb = c.pos[A], c.pos[B]
    ra, rb = c.radius[A], c.radius[B]
    d = cb - ca
    dist = np.linalg.norm(d, axis=1)
    up = np.zeros_like(d)
    up[:, 1] = 1.0
    nrm = np.where(dist[:, None] > 0.0, d / np.where(dist > 0.0, dist, 1.0)[:, None], up)
    depth = ra + rb - dist
    keep = np.flatnonzero(-depth < margin)
    nrm = nrm[keep]
    # midway between A's surface point ca + n ra and B's cb - n rb
    point = 0.5 * (ca[keep] + cb[keep] + nrm * (ra[keep] - rb[keep])[:, None])
    return ManifoldPoints(keep.astype(np.int64), nrm, point, depth[keep], np.zeros(keep.size, np.int64))


def ball_halfspace(c: Colliders, A: IntArray, B: IntArray, margin: Array) -> ManifoldPoints:
    """Ball (A) on a half-space (B): normal -u (into the solid), depth r - (u . c - d), feature 0."""
    u, d = _world_planes(c, B)
    ctr, r = c.pos[A], c.radius[A]
    s = np.einsum("qi,qi->q", u, ctr) - d  # signed height of the centre above the plane
    depth = r - s
    keep = np.flatnonzero(-depth < margin)
    u = u[keep]
    # midway between the ball's lowest point c - u r and the plane point c - u s
    point = ctr[keep] - u * (0.5 * (r[keep] + s[keep]))[:, None]
    return ManifoldPoints(keep.astype(np.int64), -u, point, depth[keep], np.zeros(keep.size, np.int64))


def ball_box(c: Colliders, A: IntArray, B: IntArray, margin: Array) -> ManifoldPoints:
    """Ball (A) against box (B): the closest box point by clamping the centre in the box frame.

    A centre inside the box is pushed out along the axis of least penetration. Feature: base-3 code
    of the closest point's per-axis state (low face, between, high face).
    """
    n = c.pos.shape[1]
    ctr, r = c.pos[A], c.radius[A]
    p, M, h = c.pos[B], c.rot[B], c.half[B]
    x = np.einsum("qji,qj->qi", M, ctr - p)  # centre in the box frame, M^T (c - p)
    q = np.clip(x, -h, h)
    off = x - q
    dist = np.linalg.norm(off, axis=1)
    inside = dist <= 0.0
    state = np.where(x > h, 1, np.where(x < -h, -1, 0))
    if np.any(inside):
        ii = np.flatnonzero(inside)
        pen = h[ii] - np.abs(x[ii])
        ax = np.argmin(pen, axis=1)
        sgn = np.where(x[ii, ax] >= 0.0, 1.0, -1.0)
        off[ii] = 0.0
        off[ii, ax] = sgn  # unit outward normal in the box frame
        q[ii, ax] = sgn * h[ii, ax]
        dist[ii] = -pen[np.arange(ii.size), ax]  # negative: the centre is below the face
        state[ii] = 0
        state[ii, ax] = sgn.astype(state.dtype)
    unit = off / np.where(inside, 1.0, np.where(dist > 0.0, dist, 1.0))[:, None]
    depth = r - dist
    keep = np.flatnonzero(-depth < margin)
    out_w = np.einsum("qij,qj->qi", M[keep], unit[keep])  # box's outward normal, world
    box_pt = p[keep] + np.einsum("qij,qj->qi", M[keep], q[keep])
    ball_pt = ctr[keep] - out_w * r[keep, None]
    feature = ((state[keep] + 1) * (3 ** np.arange(n))).sum(axis=1).astype(np.int64)
    return ManifoldPoints(keep.astype(np.int64), -out_w, 0.5 * (box_pt + ball_pt), depth[keep], feature)


def _reduce(tangent: Array, depth: Array, valid: NDArray[np.bool_], cap: int,
            directions: Array | None = None) -> NDArray[np.bool_]:
    """At most ``cap`` of the valid slots per row, by :func:`clip.select_points`: with no
    ``directions`` (the default) the deepest, then farthest-point sampling; with directions the
    extremes along them, then farthest-point sampling, with near-ties
    going to the lower vertex index, so that a resting face keeps the same corners every step (exact
    ties resolved by the last bit made them flicker).

    tangent: (Q, V, d) coordinates in the contact plane; depth, valid: (Q, V). Rows with at most ``cap``
    valid slots keep them all. Loops over the cap (<= 8), vectorised over rows.
    """
    from .clip import select_points

    valid = valid.copy()
    over = np.flatnonzero(valid.sum(axis=1) > cap)
    if over.size == 0:
        return valid
    T = tangent[over]
    V = T.shape[1]
    codes = np.broadcast_to(np.arange(V, dtype=np.int64), (over.size, V))
    ext = np.max(np.abs(T), axis=(1, 2))
    if directions is None:
        directions = np.zeros((0, T.shape[2]))
    if directions.shape[0] == 0:
        valid[over] = select_points(T, valid[over], codes, cap, directions, 1e-9 * ext, depth[over])
        return valid
    # with directions (a box face) the deepest is not taken first on a resting face, as in box/box:
    # there the deepest corner changes with every wobble, and with it the kept set and the
    # warm-start keys. It is on a tilted one (depths over the face spread more than _TILTED of its
    # extent): a 6-D box with a corner dipped 165 mm into a half-space kept 8 shallow corners,
    # none deeper than 3.5 mm, and stayed dipped
    v_over = valid[over]
    dv = depth[over]
    spread = np.max(np.where(v_over, dv, -np.inf), axis=1) - np.min(np.where(v_over, dv, np.inf), axis=1)
    tilted = spread > _TILTED * ext
    chosen = np.empty_like(v_over)
    for rows, dep in ((np.flatnonzero(~tilted), None), (np.flatnonzero(tilted), dv)):
        if rows.size:
            chosen[rows] = select_points(T[rows], v_over[rows], codes[rows], cap, directions,
                                         1e-9 * ext[rows], None if dep is None else dep[rows])
    valid[over] = chosen
    return valid


def _incident_facet(s: Array, normals: Array, member: NDArray[np.bool_], u: Array) -> IntArray:
    """Each row's incident facet (Q,): among the facets through the deepest vertex (lowest height
    s (Q, V), lowest index on ties), the one whose outward normal (normals (Q, F, n), world) is most
    anti-parallel to the plane normal u (Q, n); member (F, V) says which vertices lie on which facet.

    This is the incident face of the reference-face/incident-face construction of box/box
    (:mod:`.sat`), with the half-space as the reference: only the facet facing the plane gives
    support points. Taking every vertex below the margin instead let a thin body's upper vertices,
    which project onto the same tangent points as its lower ones, tie with them in the point
    selection, and a manifold of upper (speculative) corners holds nothing up: a resting slab sank.
    """
    deepest = np.argmin(s, axis=1)
    dots = np.einsum("qfi,qi->qf", normals, u)
    dots = np.where(member[:, deepest].T, dots, np.inf)
    return np.argmin(dots, axis=1).astype(np.int64)


def _plane_points(world: Array, s: Array, u: Array, valid: NDArray[np.bool_], tangent: Array, cap: int,
                  directions: Array | None = None) -> ManifoldPoints:
    """Candidate vertices (Q, V, n) at heights s (Q, V) above planes u (Q, n), the vertex body being
    A, reduced to ``cap`` by :func:`_reduce` in the tangent coordinates ``tangent`` (Q, V, d).

    Point x - u s / 2 (midway to the plane), depth -s, normal -u, feature = vertex index.
    """
    valid = _reduce(tangent, -s, valid, cap, directions)
    q, v = np.nonzero(valid)
    sv = s[q, v]
    point = world[q, v] - u[q] * (0.5 * sv)[:, None]
    return ManifoldPoints(q.astype(np.int64), -u[q], point, -sv, v.astype(np.int64))


def _box_facets(n: int) -> tuple[Array, NDArray[np.bool_]]:
    """Facet 2i + b of a box is the face x_i = (2b - 1) h_i: local outward normals (2n, n) and
    vertex sets (2n, 2^n) (vertex v has +h_i where bit i of v is set)."""
    bits = (np.arange(1 << n)[None, :] >> np.arange(n)[:, None]) & 1  # (n, 2^n)
    member = np.stack([bits == 0, bits == 1], axis=1).reshape(2 * n, 1 << n)
    normals = np.repeat(np.eye(n), 2, axis=0) * np.tile([-1.0, 1.0], n)[:, None]
    return normals, member


def box_halfspace(c: Colliders, A: IntArray, B: IntArray, margin: Array) -> ManifoldPoints:
    """Box (A) on a half-space (B): the corners of the incident face (:func:`_incident_facet`) below
    the margin; when there are more than the cap (n >= 5), the corners along the
    :func:`clip.diagonal_directions` of the face's own axes, as box/box does (vertex v has +h_i
    where bit i of v is set)."""
    from .clip import diagonal_directions

    n = c.pos.shape[1]
    u, d = _world_planes(c, B)
    bits = (np.arange(1 << n)[:, None] >> np.arange(n)[None, :]) & 1
    signs = np.where(bits == 1, 1.0, -1.0)  # (2^n, n), the Box.vertices order
    local = signs[None] * c.half[A][:, None, :]
    world = c.pos[A][:, None, :] + np.einsum("qij,qvj->qvi", c.rot[A], local)
    s = np.einsum("qvi,qi->qv", world, u) - d[:, None]
    fn, member = _box_facets(n)
    f = _incident_facet(s, np.einsum("qij,fj->qfi", c.rot[A], fn), member, u)
    valid = (s < margin[:, None]) & member[f]
    # tangent coordinates: the face's own axes (every box axis but the face's, ascending)
    tax = np.argsort(np.arange(n)[None, :] == (f // 2)[:, None], axis=1, kind="stable")[:, : n - 1]
    tangent = np.take_along_axis(local, np.broadcast_to(tax[:, None, :], local.shape[:2] + (n - 1,)), axis=2)
    cap = manifold_cap(n)
    return _plane_points(world, s, u, valid, tangent, cap, diagonal_directions(n - 1, cap))


_MEMBERS: weakref.WeakKeyDictionary[Any, NDArray[np.bool_]] = weakref.WeakKeyDictionary()


def _facet_members(shape: Any) -> NDArray[np.bool_]:
    """(F, V) table of which vertices lie on which facet of a polytope, built once per shape
    (shapes are immutable)."""
    got = _MEMBERS.get(shape)
    if got is None:
        got = np.zeros((len(shape.facet_vertices), len(shape.vertices)), dtype=bool)
        for j, fv in enumerate(shape.facet_vertices):  # a loop over the facets of one shape, once
            got[j, fv] = True
        _MEMBERS[shape] = got
    return got


def polytope_halfspace(c: Colliders, A: IntArray, B: IntArray, margin: Array,
                       store: ShapeStore) -> ManifoldPoints:
    """Convex polytope (A) on a half-space (B): the vertices of its incident facet
    (:func:`_incident_facet`) below the margin, reduced by farthest-point sampling in the
    Householder basis of the plane normal (:func:`clip.tangent_basis`), a fixed frame for a fixed
    plane; grouped per shape (a loop over shapes)."""
    from .clip import tangent_basis

    n = c.pos.shape[1]
    u, d = _world_planes(c, B)
    keys = c.key[A]
    parts, offsets = [], []
    for k in np.unique(keys):
        sel = np.flatnonzero(keys == k)
        shape = store.get(int(k))
        V = np.asarray(shape.vertices)
        member = _facet_members(shape)
        a = A[sel]
        world = c.pos[a][:, None, :] + np.einsum("qij,vj->qvi", c.rot[a], V)
        s = np.einsum("qvi,qi->qv", world, u[sel]) - d[sel][:, None]
        normals = np.einsum("qij,fj->qfi", c.rot[a], np.asarray(shape.facet_normals))
        valid = (s < margin[sel][:, None]) & member[_incident_facet(s, normals, member, u[sel])]
        tangent = np.einsum("qvi,qki->qvk", world, tangent_basis(u[sel]))
        mp = _plane_points(world, s, u[sel], valid, tangent, manifold_cap(n))
        parts.append(mp._replace(pair=sel[mp.pair]))
        offsets.append(0)
    return ManifoldPoints.concat(parts, offsets, n)


def _box_box(alg: Algebra, c: Colliders, A: IntArray, B: IntArray, margin: Array,
             compiled: bool = False) -> ManifoldPoints:
    from .sat import box_box, box_box_compiled

    fn = box_box_compiled if compiled else box_box
    return fn(alg, c.pos[A], c.rot[A], c.half[A], c.pos[B], c.rot[B], c.half[B], margin)


_PACKED: weakref.WeakKeyDictionary[Any, tuple[Any, ...]] = weakref.WeakKeyDictionary()
_TABLES_MAX = 16


def _packed_shape(shape: Any) -> tuple[Any, ...]:
    """One polytope's data in the flat layout of the compiled convex kernel, built once per shape:
    vertices (V, n), facet normals (F, n) and offsets (F,), edges per facet (F,) with the edges
    (E, 2) (local vertex indices), side planes per facet (F,) with their normals (S, n) and offsets
    (S,) (:func:`gjk._side_planes`), neighbours per vertex (V,) with the neighbour lists (2 E',)
    (the polytope's edges: the union of the facet edges)."""
    got = _PACKED.get(shape)
    if got is None:
        from .gjk import _side_planes

        n = shape.dim
        sides = _side_planes(shape)
        fe = [np.asarray(e, dtype=np.int64).reshape(-1, 2) for e in shape.facet_edges]
        nv = len(shape.vertices)
        allfe = np.concatenate(fe) if fe else np.zeros((0, 2), np.int64)
        und = np.unique(np.sort(allfe, axis=1), axis=0)
        both = np.concatenate([und, und[:, ::-1]])
        both = both[np.lexsort((both[:, 1], both[:, 0]))]  # by vertex, neighbours ascending
        got = (np.ascontiguousarray(shape.vertices, dtype=np.float64),
               np.ascontiguousarray(shape.facet_normals, dtype=np.float64),
               np.ascontiguousarray(shape.facet_offsets, dtype=np.float64),
               np.array([len(e) for e in fe], dtype=np.int64),
               np.concatenate(fe) if fe else np.zeros((0, 2), np.int64),
               np.array([len(o) for _, o in sides], dtype=np.int64),
               np.concatenate([S for S, _ in sides]).reshape(-1, n) if sides else np.zeros((0, n)),
               np.concatenate([o for _, o in sides]) if sides else np.zeros(0),
               np.bincount(both[:, 0], minlength=nv).astype(np.int64), np.ascontiguousarray(both[:, 1]))
        _PACKED[shape] = got
    return got


def _offsets(counts: list[int] | IntArray) -> IntArray:
    return np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)


def _convex_table(shapes: list[Any], cache: dict[str, Any]) -> tuple[IntArray, ...]:
    """The packed table of the compiled convex kernel for these shapes (table slot = list index):
    verts, v_off, fnorm, foff, f_off, fe, fe_off, spn, spd, sp_off, adj, a_off. Cached by the shapes'
    identities (the entry holds the shapes, so the identities stay valid); a loop over distinct shapes."""
    tables = cache.setdefault("convex_tables", {})
    ident = tuple(id(s) for s in shapes)
    hit = tables.get(ident)
    # the identities must be checked: a deep copy of the cache keeps the originals' ids, which
    # Python gives to new objects once the originals are freed
    if hit is not None and all(a is b for a, b in zip(hit[0], shapes, strict=True)):
        return hit[1]
    parts = [_packed_shape(s) for s in shapes]
    table = (np.concatenate([p[0] for p in parts]), _offsets([len(p[0]) for p in parts]),
             np.concatenate([p[1] for p in parts]), np.concatenate([p[2] for p in parts]),
             _offsets([len(p[1]) for p in parts]),
             np.ascontiguousarray(np.concatenate([p[4] for p in parts])),
             _offsets(np.concatenate([p[3] for p in parts])), np.concatenate([p[6] for p in parts]),
             np.concatenate([p[7] for p in parts]), _offsets(np.concatenate([p[5] for p in parts])),
             np.concatenate([p[9] for p in parts]), _offsets(np.concatenate([p[8] for p in parts])))
    if len(tables) >= _TABLES_MAX:
        tables.clear()
    tables[ident] = (tuple(shapes), table)
    return table


def _convex_pairs_compiled(alg: Algebra, c: Colliders, A: IntArray, B: IntArray, margin: Array,
                           store: ShapeStore) -> ManifoldPoints:
    """:func:`_convex_pairs` through the compiled ``convex`` kernel family: one call for all pairs."""
    from .. import kernels

    mod = kernels.load("convex", alg.n)
    ball = c.kind[A] == SHAPE_BALL
    kb = c.key[B]
    ka = c.key[A]
    uk = np.unique(np.concatenate([ka[~ball], kb]))
    table = _convex_table([store.get(int(k)) for k in uk], store.cache)  # a loop over distinct shapes
    sa = np.where(ball, 0, np.searchsorted(uk, ka)).astype(np.int64)
    sb = np.searchsorted(uk, kb).astype(np.int64)
    pair, normal, point, depth, feature = mod.convex_batch(
        np.ascontiguousarray(ball), sa, sb, np.ascontiguousarray(c.pos[A]), np.ascontiguousarray(c.rot[A]),
        np.ascontiguousarray(c.radius[A], dtype=np.float64), np.ascontiguousarray(c.pos[B]),
        np.ascontiguousarray(c.rot[B]), np.ascontiguousarray(margin, dtype=np.float64), *table)
    return ManifoldPoints(pair, normal, point, depth, feature)


def _convex_pairs(alg: Algebra, c: Colliders, A: IntArray, B: IntArray, margin: Array,
                  store: ShapeStore, settings: Any = None) -> ManifoldPoints:
    """Ball, box or polytope (A) against a box or polytope (B): the compiled kernel when
    ``kernels.use_compiled(settings)``, else pair by pair through gjk (the numpy path)."""
    from .. import kernels
    from .gjk import ball_convex, convex_pair

    if A.size and kernels.use_compiled(settings):
        return _convex_pairs_compiled(alg, c, A, B, margin, store)

    parts, offsets = [], []
    for q in range(A.size):  # a loop over these pairs is allowed: GJK/EPA dominates their cost
        a, b = int(A[q]), int(B[q])
        sb = store.get(int(c.key[b]))
        if c.kind[a] == SHAPE_BALL:
            mp = ball_convex(alg, c.pos[a], float(c.radius[a]), sb, c.pos[b], c.rot[b], float(margin[q]))
        else:
            mp = convex_pair(alg, store.get(int(c.key[a])), c.pos[a], c.rot[a], sb, c.pos[b], c.rot[b],
                             float(margin[q]))
        parts.append(mp._replace(pair=mp.pair + q))
        offsets.append(0)
    return ManifoldPoints.concat(parts, offsets, alg.n)


def collide_colliders(alg: Algebra, c: Colliders, ia: IntArray, ib: IntArray, margin: Array,
                      store: ShapeStore, settings: Any = None) -> ManifoldPoints:
    """Contact points of collider pairs (ia, ib) (Q,) with margins (Q,); pair = index into ia.

    Normals point from ``ia`` to ``ib`` whatever the kind order used inside. ``settings`` selects
    the compiled kernels (``kernels.use_compiled``; None: the default, compiled when available).
    """
    n = alg.n
    Q = ia.size
    if Q == 0:
        return ManifoldPoints.empty(n)
    ka, kb = c.kind[ia].astype(np.int64), c.kind[ib].astype(np.int64)
    swap = ka > kb
    A = np.where(swap, ib, ia)
    B = np.where(swap, ia, ib)
    code = np.minimum(ka, kb) * _NKINDS + np.maximum(ka, kb)
    # ball, box or polytope against a polytope: one group (one call of the convex kernel)
    code = np.where(np.maximum(ka, kb) == SHAPE_POLYTOPE, SHAPE_POLYTOPE * (_NKINDS + 1), code)
    parts, offsets = [], []
    for cd in np.unique(code):  # loop over the few kind pairs present
        sel = np.flatnonzero(code == cd)
        a, b, m = A[sel], B[sel], margin[sel]
        lo, hi = divmod(int(cd), _NKINDS)
        if lo == SHAPE_BALL and hi == SHAPE_BALL:
            mp = ball_ball(c, a, b, m)
        elif lo == SHAPE_BALL and hi == SHAPE_BOX:
            mp = ball_box(c, a, b, m)
        elif lo == SHAPE_BALL and hi == SHAPE_HALFSPACE:
            mp = ball_halfspace(c, a, b, m)
        elif lo == SHAPE_BOX and hi == SHAPE_HALFSPACE:
            mp = box_halfspace(c, a, b, m)
        elif lo == SHAPE_POLYTOPE and hi == SHAPE_HALFSPACE:
            mp = polytope_halfspace(c, a, b, m, store)
        elif lo == SHAPE_BOX and hi == SHAPE_BOX:
            mp = _box_box(alg, c, a, b, m, _kernels.use_compiled(settings))
        elif hi == SHAPE_POLYTOPE:  # ball, box or polytope against a polytope
            mp = _convex_pairs(alg, c, a, b, m, store, settings)
        else:  # half-space/half-space: no contact
            continue
        parts.append(mp._replace(pair=sel[mp.pair]))
        offsets.append(0)
    out = ManifoldPoints.concat(parts, offsets, n)
    flip = swap[out.pair]
    normal = np.where(flip[:, None], -out.normal, out.normal)
    order = np.argsort(out.pair, kind="stable")
    return ManifoldPoints(out.pair[order], normal[order], out.point[order], out.depth[order],
                          out.feature[order])


def _mix_pieces(feature: IntArray, piece_a: IntArray, piece_b: IntArray) -> IntArray:
    """Feature ids made unique across compound piece pairs (64-bit multiply-xorshift of the pieces)."""
    with np.errstate(over="ignore"):
        x = (piece_a + 1).astype(np.uint64) * np.uint64(0xD6E8FEB86659FD93)
        x ^= (piece_b + 1).astype(np.uint64) * np.uint64(0xA0761D6478BD642F) + (x >> np.uint64(29))
        x ^= x >> np.uint64(32)
    mixed = feature.astype(np.uint64) ^ x
    plain = (piece_a < 0) & (piece_b < 0)
    return np.where(plain, feature, mixed.view(np.int64))


def pair_margins(bodies: Bodies, a: IntArray, b: IntArray, settings: Any, dt: float) -> Array:
    """Speculative margins (P,): ``speculative_margin + dt (|v_a| + |v_b| + |w_a| e_a + |w_b| e_b)``."""
    reach = bodies.radius + np.linalg.norm(bodies.local_centroid, axis=1)
    reach = np.where(np.isfinite(reach), reach, 0.0)  # a half-space's rotation is not bounded here
    speed = np.linalg.norm(bodies.velocity, axis=1) + np.linalg.norm(bodies.angular_velocity, axis=1) * reach
    return float(settings.speculative_margin) + dt * (speed[a] + speed[b])


def _carry_inert(bodies: Bodies, cache: dict[str, Any], name: str, now: IntArray) -> IntArray:
    """Add to ``now`` the pairs of last step's list ``name`` whose bodies are both still inert and
    still at the same rows (they were not collided, so nothing about them changed)."""
    prev = cache.get(name)
    N = bodies.count
    if prev is not None and len(prev[0]):
        rows, handles = prev
        ok = np.all(rows < N, axis=1)
        rows, handles = rows[ok], handles[ok]
        h = bodies.handle
        ok = np.all(h[rows] == handles, axis=1)
        inert = (bodies.kind == STATIC) | ~bodies.awake
        ok &= inert[rows[:, 0]] & inert[rows[:, 1]]
        if np.any(ok):
            both = np.concatenate([now, rows[ok]])
            key = np.unique(np.minimum(both[:, 0], both[:, 1]) * N + np.maximum(both[:, 0], both[:, 1]))
            now = np.stack([key // N, key % N], axis=1).astype(np.int64)
    cache[name] = (now, bodies.handle[now] if len(now) else np.zeros((0, 2), np.int64))
    return now


def find_contacts(alg: Algebra, bodies: Bodies, pairs: IntArray, shapes: list[Any], settings: Any,
            caches: dict[str, Any], dt: float) -> tuple[ContactSet, IntArray, IntArray]:
    """Contact manifolds of the candidate pairs (P, 2) of body rows.

    Returns:
        contacts: the :class:`ContactSet`, rows sorted by pair; ``manifold`` numbers the pairs that
            have points, in pair order.
        touching: (T, 2) int rows of non-sensor pairs with a point of depth >= 0.
        sensor_touching: (S, 2) int rows of pairs with a sensor body that overlap (depth >= 0).
    """
    n = alg.n
    cache = caches.setdefault(_CACHE_KEY, {})
    store = ShapeStore(shapes, cache)
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    if len(pairs) == 0:
        touching = _carry_inert(bodies, cache, "touching", _empty_rows())
        sensors = _carry_inert(bodies, cache, "sensor_touching", _empty_rows())
        return ContactSet.empty(n), touching, sensors
    ra, rb = pairs[:, 0], pairs[:, 1]
    margin = pair_margins(bodies, ra, rb, settings, dt)
    rows = np.unique(pairs)
    col, start, count = colliders_of_rows(bodies, store, rows)
    sa, sb = np.searchsorted(rows, ra), np.searchsorted(rows, rb)
    na, nb = count[sa], count[sb]
    # each body pair expands into the product of its colliders (one each unless a compound)
    vcount = na * nb
    vp = np.repeat(np.arange(len(pairs)), vcount)
    t = np.arange(vp.size) - (np.cumsum(vcount) - vcount)[vp]
    ia = start[sa][vp] + t // nb[vp]
    ib = start[sb][vp] + t % nb[vp]
    mp = collide_colliders(alg, col, ia, ib, margin[vp], store, settings)
    pair = vp[mp.pair]
    feature = _mix_pieces(mp.feature, col.piece[ia[mp.pair]], col.piece[ib[mp.pair]])

    sensor = bodies.sensor[ra] | bodies.sensor[rb]
    deepest = np.full(len(pairs), -np.inf)
    np.maximum.at(deepest, pair, mp.depth)
    overlap = deepest >= 0.0
    touching = _carry_inert(bodies, cache, "touching", pairs[overlap & ~sensor])
    sensors = _carry_inert(bodies, cache, "sensor_touching", pairs[overlap & sensor])

    keep = np.flatnonzero(~sensor[pair])  # points come sorted by pair already
    pair, feature = pair[keep], feature[keep]
    a, b = ra[pair], rb[pair]
    has = np.zeros(len(pairs), dtype=bool)
    has[pair] = True
    manifold = (np.cumsum(has) - 1)[pair]
    h = bodies.handle
    contacts = ContactSet(
        body_a=a, body_b=b, normal=mp.normal[keep], point=mp.point[keep], depth=mp.depth[keep],
        feature=feature, manifold=manifold.astype(np.int64), key=contact_keys(h[a], h[b], feature),
        friction=combine_friction(bodies.friction[a], bodies.friction[b]),
        restitution=combine_restitution(bodies.restitution[a], bodies.restitution[b]))
    return contacts, touching, sensors
