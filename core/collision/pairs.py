"""Collision of two posed shapes without a Simulation: overlap, distance and closest points, the
contact manifold, and a ray against one shape.

Poses, here as everywhere at the public edge: a ``position`` (n,) and a unit ``rotor``
(2**(n-1),); a rotation matrix (n, n) is accepted instead under the explicit keyword
``rotation``. Omitted, the position is the origin and the orientation the identity.

The functions run the simulation's own narrowphase (the same kernels, compiled when available), so
what they report is what a step would see:

* :func:`contact_manifold` -- the contact points the narrowphase keeps for the pair (normals from
  A toward B, depth > 0 for overlap, and within ``margin`` also speculative points, depth < 0).
* :func:`overlap` -- whether the solids share a point (touching counts).
* :func:`distance` -- the signed distance with witness points: the gap and the closest points of
  the two solids when apart, found by GJK on their vertex sets (Gilbert, Johnson and Keerthi,
  IEEE J. Robotics and Automation 1988; a ball is its centre with the radius taken off, a
  half-space is exact); when they overlap, minus the penetration depth, the minimum translation
  distance, by the expanding polytope algorithm (EPA) on the Minkowski difference (van den
  Bergen, Collision Detection in Interactive 3D Environments, Morgan Kaufmann 2003), with the
  deepest points of each solid.
  Compounds: the smallest over their pieces (the deepest overlap).
* :func:`raycast_shape` -- the first hit of a ray on one shape (the scene query's code).
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from ..algebra import Algebra
from ..errors import InputError, InputTypeError, as_float_array, vector
from ..state.components import SHAPE_BALL, SHAPE_BOX, SHAPE_HALFSPACE
from . import narrowphase as nph
from .gjk import gjk_distance, penetration

Array = NDArray[np.float64]


def read_pose(alg: Algebra, position: Any = None, rotor: Any = None, rotation: Any = None,
              prefix: str = "") -> tuple[Array, Array, Array]:
    """Validate a public pose: returns (position (n,), unit rotor, rotation matrix (n, n)).

    ``rotor`` and ``rotation`` are alternatives (at most one); ``prefix`` is put before the
    argument names in error messages (``rotor_a`` ...).
    """
    n = alg.n
    p_name, r_name, m_name = f"position{prefix}", f"rotor{prefix}", f"rotation{prefix}"
    p = np.zeros(n) if position is None else vector(p_name, position, n)
    if p.shape != (n,):
        raise InputError(f"{p_name}: expected shape ({n},), got {p.shape}")
    if rotor is not None and rotation is not None:
        raise InputError(f"{r_name}, {m_name}: expected at most one of a rotor and a rotation matrix, "
                         "got both")
    if rotation is not None:
        M = as_float_array(m_name, rotation, (n, n))
        if M.shape != (n, n):
            raise InputError(f"{m_name}: expected shape ({n}, {n}), got {M.shape}")
        R = alg.matrix_to_rotor(M, name=m_name)
        return p, R, alg.rotor_to_matrix(R)
    if rotor is None:
        R = alg.identity_rotor()
    else:
        R = alg.check_rotor(rotor, r_name, single=True)
        if R.shape != (alg.even_size,):
            raise InputError(f"{r_name}: expected shape ({alg.even_size},), got {R.shape}")
        R = alg.rotor_normalize(R, 2)
    return p, R, alg.rotor_to_matrix(R)


class ContactPoints(NamedTuple):
    """Contact points of one pair of shapes (P points).

    point: (P, n) world points, midway between the surfaces.
    normal: (P, n) unit normals from A toward B.
    depth: (P,) overlap (> 0), or minus the gap of a speculative point (< 0).
    """

    point: Array
    normal: Array
    depth: Array


class Separation(NamedTuple):
    """Signed distance of two solids: ``distance`` > 0 is the gap between ``point_a`` on A and
    ``point_b`` on B (their closest points); < 0 is minus the penetration depth, with the points
    the deepest contact's points on each surface. ``normal`` (n,) is the unit direction from A
    toward B along which they separate (``point_b - point_a`` over the distance when apart)."""

    distance: float
    point_a: Array
    point_b: Array
    normal: Array


class ShapeRayHit(NamedTuple):
    """Where a ray enters a shape: world ``point``, outward unit ``normal`` there, ``distance``
    along the (normalised) ray; a ray that starts inside hits at 0 with normal ``-direction``."""

    point: Array
    normal: Array
    distance: float


def _shape(name: str, shape: Any, n: int | None = None) -> Any:
    sdim = getattr(shape, "dim", None)
    if sdim is None or not hasattr(shape, "support"):
        raise InputTypeError(f"{name}: expected an ndrigid shape, got {type(shape).__name__}")
    if n is not None and sdim != n:
        raise InputError(f"{name}: expected a shape of dimension {n} like shape_a, got one of dimension "
                         f"{sdim}")
    return shape


class _Placed:
    """Both shapes expanded into colliders in one private shape store."""

    def __init__(self, shape_a: Any, pose_a: tuple[Any, Any, Any], shape_b: Any,
                 pose_b: tuple[Any, Any, Any]) -> None:
        _shape("shape_a", shape_a)
        n = shape_a.dim
        _shape("shape_b", shape_b, n)
        self.alg = Algebra(n)
        self.pa, _, self.Ma = read_pose(self.alg, *pose_a, prefix="_a")
        self.pb, _, self.Mb = read_pose(self.alg, *pose_b, prefix="_b")
        self.store = nph.ShapeStore([], {})
        ca = nph.colliders_of_shape(self.alg, self.store, shape_a, self.pa, self.Ma, owner=0)
        cb = nph.colliders_of_shape(self.alg, self.store, shape_b, self.pb, self.Mb, owner=1)
        self.c = nph.Colliders.concat([ca, cb])
        A, B = ca.count, cb.count
        self.ia = np.repeat(np.arange(A), B)
        self.ib = A + np.tile(np.arange(B), A)

    def manifold(self, margin: float) -> ContactPoints:
        mp = nph.collide_colliders(self.alg, self.c, self.ia, self.ib, np.full(self.ia.size, margin),
                                   self.store)
        keep = mp.depth >= -margin
        return ContactPoints(mp.point[keep], mp.normal[keep], mp.depth[keep])


def _margin(value: Any) -> float:
    try:
        m = float(value)
    except (TypeError, ValueError):
        raise InputTypeError(f"margin: expected a number >= 0 (m), got {type(value).__name__}") from None
    if isinstance(value, bool) or not np.isfinite(m) or m < 0.0:
        raise InputError(f"margin: expected a finite number >= 0 (m), got {value!r}")
    return m


def contact_manifold(shape_a: Any, position_a: Any, shape_b: Any, position_b: Any, *, rotor_a: Any = None,
                     rotor_b: Any = None, rotation_a: Any = None, rotation_b: Any = None,
                     margin: float = 0.0) -> ContactPoints:
    """The narrowphase's contact points of two posed shapes (see :class:`ContactPoints`); with a
    ``margin`` > 0, also the speculative points of a gap up to the margin. Empty when apart.

    >>> from ndrigid.core import Ball, HalfSpace
    >>> m = contact_manifold(HalfSpace.below(3, 1), None, Ball(3, 0.5), [0, 0.4, 0])
    >>> m.normal.round(6).tolist(), m.depth.round(6).tolist()
    ([[0.0, 1.0, 0.0]], [0.1])
    """
    pl = _Placed(shape_a, (position_a, rotor_a, rotation_a), shape_b, (position_b, rotor_b, rotation_b))
    return pl.manifold(_margin(margin))


def overlap(shape_a: Any, position_a: Any, shape_b: Any, position_b: Any, *, rotor_a: Any = None,
            rotor_b: Any = None, rotation_a: Any = None, rotation_b: Any = None) -> bool:
    """Whether two posed solids share a point (touching counts).

    >>> from ndrigid.core import Box
    >>> square = Box([1, 1])
    >>> overlap(square, [0, 0], square, [1.9, 0]), overlap(square, [0, 0], square, [2.1, 0])
    (True, False)
    """
    pl = _Placed(shape_a, (position_a, rotor_a, rotation_a), shape_b, (position_b, rotor_b, rotation_b))
    return bool(np.any(pl.manifold(0.0).depth >= 0.0))


def _vertices(c: nph.Colliders, store: nph.ShapeStore, i: int) -> tuple[Array, float]:
    """World vertex set of collider i and the radius to take off (a ball is its centre)."""
    kind = int(c.kind[i])
    if kind == SHAPE_BALL:
        return c.pos[i][None], float(c.radius[i])
    if kind == SHAPE_BOX:
        n = c.pos.shape[1]
        corners = np.array(np.meshgrid(*[[-1.0, 1.0]] * n, indexing="ij")).reshape(n, -1).T * c.half[i]
        return c.pos[i] + corners @ c.rot[i].T, 0.0
    verts = np.asarray(store.get(int(c.key[i])).vertices, dtype=np.float64)
    return c.pos[i] + verts @ c.rot[i].T, 0.0


def _gap_to_halfspace(c: nph.Colliders, store: nph.ShapeStore, i: int, h: int) -> tuple[float, Array, Array]:
    """Distance of collider i from the half-space collider h: (gap, point on i, point on h)."""
    u = c.rot[h] @ c.plane_u[h]
    d = float(c.plane_d[h] + u @ c.pos[h])
    V, r = _vertices(c, store, i)
    s = V @ u
    j = int(np.argmin(s))
    low = V[j] - r * u  # the lowest point of i along the half-space's outward normal
    gap = float(low @ u - d)
    return gap, low, low - gap * u


def _penetration(pl: _Placed, mp: Any) -> Separation:
    """Minus the penetration depth of overlapping shapes: the largest over their overlapping piece
    pairs of the minimum translation distance, by EPA on the Minkowski difference of the vertex
    sets for convex pieces (a ball is its centre plus the radius), exact from the contact points
    where a half-space or two balls meet."""
    c, store = pl.c, pl.store
    best: tuple[float, Array, Array, Array] | None = None
    for q in np.unique(mp.pair[mp.depth >= 0.0]).tolist():  # loop over overlapping piece pairs
        i, j = int(pl.ia[q]), int(pl.ib[q])
        rows = np.flatnonzero(mp.pair == q)
        k = rows[int(np.argmax(mp.depth[rows]))]
        dep, nrm, mid = float(mp.depth[k]), mp.normal[k].copy(), mp.point[k]
        wa, wb = mid + 0.5 * dep * nrm, mid - 0.5 * dep * nrm
        kinds = (int(c.kind[i]), int(c.kind[j]))
        if SHAPE_HALFSPACE not in kinds and kinds != (SHAPE_BALL, SHAPE_BALL):
            Va, ra = _vertices(c, store, i)
            Vb, rb = _vertices(c, store, j)
            core, v, w, sa, sb = gjk_distance(Va, Vb)
            if core > 0.0:  # a ball's centre outside the other solid: the gap of the cores
                u = -v / core  # from A's core toward B's
                dep, nrm = ra + rb - core, u
                wa, wb = w @ Va[sa] + ra * u, w @ Vb[sb] - rb * u
            else:
                epa = penetration(Va, Vb, sa, sb)
                if epa is not None:
                    d_e, n_e, lam, ea, eb = epa
                    dep, nrm = d_e + ra + rb, n_e
                    wa, wb = lam @ Va[ea] + ra * n_e, lam @ Vb[eb] - rb * n_e
        if best is None or dep > best[0]:
            best = (dep, wa, wb, nrm)
    assert best is not None
    dep, wa, wb, nrm = best
    return Separation(-float(dep), wa, wb, nrm)


def distance(shape_a: Any, position_a: Any, shape_b: Any, position_b: Any, *, rotor_a: Any = None,
             rotor_b: Any = None, rotation_a: Any = None, rotation_b: Any = None) -> Separation:
    """Signed distance and closest points of two posed solids (see :class:`Separation`).

    >>> from ndrigid.core import Ball
    >>> s = distance(Ball(4, 1.0), [0, 0, 0, 0], Ball(4, 0.5), [3, 0, 0, 0])
    >>> round(s.distance, 9), s.point_a.tolist(), s.point_b.tolist()
    (1.5, [1.0, 0.0, 0.0, 0.0], [2.5, 0.0, 0.0, 0.0])
    """
    pl = _Placed(shape_a, (position_a, rotor_a, rotation_a), shape_b, (position_b, rotor_b, rotation_b))
    c, store = pl.c, pl.store
    if np.all(c.kind[pl.ia] == SHAPE_HALFSPACE) and np.all(c.kind[pl.ib] == SHAPE_HALFSPACE):
        raise InputError("shape_a, shape_b: the distance of two half-spaces is not defined (they overlap "
                         "unless parallel); expected at most one HalfSpace")
    mp = nph.collide_colliders(pl.alg, c, pl.ia, pl.ib, np.zeros(pl.ia.size), store)
    if mp.depth.size and mp.depth.max() >= 0.0:
        return _penetration(pl, mp)
    best: tuple[float, Array, Array] | None = None
    for i, j in zip(pl.ia.tolist(), pl.ib.tolist(), strict=True):  # loop over compound piece pairs
        ki, kj = int(c.kind[i]), int(c.kind[j])
        if ki == SHAPE_HALFSPACE and kj == SHAPE_HALFSPACE:
            continue
        if kj == SHAPE_HALFSPACE:
            gap, qa, qb = _gap_to_halfspace(c, store, i, j)
        elif ki == SHAPE_HALFSPACE:
            gap, qb, qa = _gap_to_halfspace(c, store, j, i)
        else:
            Va, ra = _vertices(c, store, i)
            Vb, rb = _vertices(c, store, j)
            core, _, w, wa, wb = gjk_distance(Va, Vb)
            qa, qb = w @ Va[wa], w @ Vb[wb]
            u = (qb - qa) / core if core > 0.0 else np.zeros_like(qa)
            qa, qb = qa + ra * u, qb - rb * u
            gap = core - ra - rb
        if best is None or gap < best[0]:
            best = (gap, qa, qb)
    assert best is not None
    gap, qa, qb = best
    diff = qb - qa
    nrm = diff / np.linalg.norm(diff) if np.linalg.norm(diff) > 0.0 else np.zeros_like(diff)
    return Separation(float(gap), qa, qb, nrm)


def raycast_shape(shape: Any, origin: Any, direction: Any, max_distance: Any = np.inf, *,
                  position: Any = None, rotor: Any = None, rotation: Any = None) -> ShapeRayHit | None:
    """First hit of the ray ``origin + t direction`` (direction normalised, 0 <= t <= max_distance) on
    one posed shape, or None.

    >>> from ndrigid.core import Box
    >>> hit = raycast_shape(Box([1, 1, 1]), [-5, 0, 0], [1, 0, 0], position=[0, 0, 0])
    >>> hit.distance, hit.normal.tolist()
    (4.0, [-1.0, 0.0, 0.0])
    """
    from ..world.queries import _ray_colliders

    _shape("shape", shape)
    alg = Algebra(shape.dim)
    n = alg.n
    p, _, M = read_pose(alg, position, rotor, rotation)
    o = as_float_array("origin", origin, (n,))
    d = as_float_array("direction", direction, (n,))
    if o.shape != (n,) or d.shape != (n,):
        raise InputError(f"origin, direction: expected shapes ({n},), got {o.shape} and {d.shape}")
    norm = float(np.linalg.norm(d))
    if not norm > 0.0:
        raise InputError("direction: expected a non-zero vector, got zeros")
    d = d / norm
    try:
        tmax = float(max_distance)
    except (TypeError, ValueError):
        raise InputTypeError(f"max_distance: expected a number >= 0, got {type(max_distance).__name__}"
                             ) from None
    if isinstance(max_distance, bool) or np.isnan(tmax) or tmax < 0.0:
        raise InputError(f"max_distance: expected a number >= 0, got {max_distance!r}")
    store = nph.ShapeStore([], {})
    c = nph.colliders_of_shape(alg, store, shape, p, M)
    t, nrm = _ray_colliders(c, store, o, d)
    j = int(np.argmin(t))
    if not (np.isfinite(t[j]) and t[j] <= tmax):
        return None
    return ShapeRayHit(o + t[j] * d, nrm[j], float(t[j]))


__all__ = ["ContactPoints", "Separation", "ShapeRayHit", "contact_manifold", "distance", "overlap",
           "raycast_shape", "read_pose"]
