"""The scalar reference path: every collision and solver stage written plainly, one item at a time.

This module states each algorithm of the vectorised stages once more, as plain Python loops over
bodies, pairs and contacts, with small numpy only for the vector algebra of one item (an n-vector,
the n x n rotation of one body, the k x k inverse inertia of one body, the n x (n + k) Jacobian of
one contact row). It is the readable statement of what the batched kernels compute and the
yardstick they are tested against (tests/test_reference.py: same contact keys, points, normals,
depths and accumulated impulses to 1e-9 on small scenes in 2-D to 5-D). It is not meant to be fast;
``python -m ndrigid.bench pile --compare`` prints how much faster the vectorised path is.

:func:`use_reference_stages` swaps these in for a Simulation's stages:

* ``accelerate`` / ``advance_poses``: body by body, the same semi-implicit Euler
  step and the same one-Newton-step implicit gyroscopic update (core/dynamics/integrate.py);
* ``find_pairs``: every pair of bounded bodies by their fattened bounding boxes (all pairs, no
  grid), every half-space against every bounded body, the same fattening and filter rules
  (core/collision/broadphase.py);
* ``find_contacts``: pair by pair, the kernel of the pair's kind written for one pair: ball/ball,
  ball/half-space, ball/box, box/half-space, polytope/half-space, and box/box by the separating-axis
  test over all C(2n, n-1) candidate axes (the mixed axes as generalised cross products, i.e.
  determinants, rather than the vectorised path's minor tables), with the same coherence
  preference, the same clipping of the incident and reference face edges, the same 2-face
  crossings in 5-D, the same plane-set feature ids and the same stable selection of the kept
  points (core/collision/narrowphase.py, core/collision/sat.py, core/collision/clip.py). Pairs
  involving a general convex polytope call :func:`gjk.convex_pair` / :func:`gjk.ball_convex`,
  which are per pair already;
* ``solve_impulses``: contact by contact, the same sequence (core/dynamics/solver.py): prepare each row
  (normal and Householder tangent basis, Jacobians, split effective masses, soft-constraint bias
  with the spring's rest point moved up by the manifold's mean load deflection),
  warm start by key (else by the nearest last-step point of the same pair), biased iterations and
  bias-free passes per batch in colour order (per row: the normal impulse, then the friction
  vector from the tangent speeds after it, kept on the ball mu lambda_n, along the slip for a
  sliding point), the per-manifold stick/slide decision, one restitution pass, and the position
  push by dt times the velocity the bias-free passes took out.

Invariants kept equal to the vectorised path, so that results agree to rounding:

* Iteration orders: pairs in the broadphase's sorted order, collider pairs of a compound in
  row-major order, points of a pair in the kernel's slot order; solver rows sorted by (colour,
  manifold, row), as the vectorised ``np.lexsort`` does.
* Within a solver batch every row reads the body velocities as they were at the start of the batch
  and the per-row velocity changes are summed per manifold before they are added: this is the mass
  splitting of the vectorised solver stated literally (for the "point" batching each manifold
  segment is one row). For "manifold" and "point" batching no dynamic body appears in two
  segments of a batch, so this is also plain Gauss-Seidel across segments.
* The colouring (which rows share a batch) is the same greedy Luby rule, written as loops over the
  items, on the same priorities (the ranks of the contact keys XOR the per-step salt of the step
  counter kept in ``caches["solver"]["step"]``); it decides the order only. Reused, not
  restated: bookkeeping with no physics in it, namely :func:`broadphase.shape_cloud` (the cached
  local point cloud of a polytope, mesh or compound),
  :class:`narrowphase.ShapeStore` (compound piece tables and mesh hulls), and
  :func:`sleep.wake_touched` (waking sleeping islands hit by awake bodies).

Choices: exact ties between candidate axes are broken by "first in order" as ``argmin`` does.
The point selections round their scores (relative to the best, at ``clip.SELECT_QUANTUM``) and
give ties to the lowest feature code, so a rounding step of difference between the two paths does
not change the kept set. A face contact often offers the same corner twice (an incident vertex,
and the clipped end of a reference edge through it); both copies carry the same plane-set feature
id and the first slot is kept, so the paths agree on it (measured on 160 random scenes, 3,175
points in 2-D..5-D: 0 points whose key differs; it was about 3 % of the box/box points in 2-D and
3-D with construction ids). Rejected: calling the vectorised kernels with batches of one (it
would test nothing), and a shared helper layer between the two paths (a bug in it would hide from
the comparison).
"""

from __future__ import annotations

import itertools
from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from .algebra import Algebra

# tuning constants are shared with the vectorised modules (comments where they are used)
from .collision.clip import SELECT_QUANTUM as _SELECT_QUANTUM
from .collision.narrowphase import _TILTED
from .collision.sat import (
    _DEGENERATE,
    _FACE_ABS,
    _FACE_REL,
    _FEATURE_TOL,
    _MIXED_ABS,
    _MIXED_FLAG,
    _MIXED_REL,
)
from .dynamics.solver import (
    _COUPLE_PASSES,
    _MATCH_DISTANCE,
    _RELAX_EXTRA,
    _RELAX_PUSH,
    _RELAX_TOL,
    _SHOCK_PASSES,
    _SHOCK_RATIO,
    _SLIP_SPEED,
    _SPEC_FAST,
    _SPEC_TOL,
    _STICK_TOL,
    _TILT_DEADBAND,
)
from .dynamics.solver import HERTZ_CAP as _HERTZ_CAP
from .errors import InputTypeError
from .state.components import (
    DYNAMIC,
    KINEMATIC,
    SHAPE_BALL,
    SHAPE_BOX,
    SHAPE_COMPOUND,
    SHAPE_HALFSPACE,
    SHAPE_MESH,
    SHAPE_POLYTOPE,
    STATIC,
    Bodies,
)
from .state.contacts import ContactSet

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

__all__ = [
    "collide_reference",
    "advance_poses_reference",
    "accelerate_reference",
    "solve_impulses_reference",
    "find_pairs_reference",
    "use_reference_stages",
]

_MASK64 = (1 << 64) - 1


def _empty_pairs() -> IntArray:
    return np.zeros((0, 2), dtype=np.int64)


# =============================================================================================
# integration (core/dynamics/integrate.py), body by body
# =============================================================================================


def _gyroscopic_one(alg: Algebra, w: Array, inertia: Array, tau: Array, dt: float, mode: str) -> Array:
    """Body-frame angular velocity (k,) after one step of I dw/dt = w x (I w) + tau."""
    if mode == "none":
        return w + dt * tau / inertia
    if mode == "explicit":
        return w + dt * (alg.commutator(w, inertia * w) + tau) / inertia
    # implicit: torque first, then one Newton step on f(w2) = I (w2 - w1) - h w2 x (I w2)
    w1 = w + dt * tau / inertia
    L1 = inertia * w1
    f = -dt * alg.commutator(w1, L1)
    J = -dt * (alg.commutator_matrix(w1) * inertia[None, :] - alg.commutator_matrix(L1))
    J[np.arange(alg.k), np.arange(alg.k)] += inertia
    w2 = w1 - np.linalg.solve(J, f)
    # the momentum turned exactly by the Newton estimate's rotation, energy never raised
    L2 = alg.rotate_bivectors(alg.rotor(-dt * w2), L1)
    w2 = L2 / inertia
    E1, E2 = float(L1 @ w1), float(L2 @ w2)
    return w2 * np.sqrt(min(1.0, E1 / (E2 if E2 > 0.0 else 1.0)))


def accelerate_reference(alg: Algebra, b: Bodies, gravity: Array, dt: float,
                                   gyroscopic: str = "implicit") -> None:
    """Gravity, forces, damping and the gyroscopic term, body by body (awake dynamic bodies)."""
    for i in range(b.count):
        if b.kind[i] != DYNAMIC or not b.awake[i]:
            continue
        v = b.velocity[i] + dt * (gravity + b.inv_mass[i] * b.force[i])
        b.velocity[i] = v * (1.0 / (1.0 + dt * b.linear_damping[i]))
        inv_i = b.inv_inertia[i]
        if not np.any(inv_i > 0.0):
            continue
        C = alg.rotor_to_compound(alg.rotor_mul(b.rotor[i], b.principal_rotor[i]))  # (k, k)
        w_body = C.T @ b.angular_velocity[i]
        tau_body = C.T @ b.torque[i]
        # a locked plane (zero inverse inertia) keeps zero velocity
        locked = inv_i <= 0.0
        inertia = np.where(locked, 1.0, 1.0 / np.where(locked, 1.0, inv_i))
        w_body = np.where(locked, 0.0, w_body)
        tau_body = np.where(locked, 0.0, tau_body)
        w2 = np.where(locked, 0.0, _gyroscopic_one(alg, w_body, inertia, tau_body, dt, gyroscopic))
        w2 = w2 * (1.0 / (1.0 + dt * b.angular_damping[i]))
        b.angular_velocity[i] = C @ w2


def advance_poses_reference(alg: Algebra, b: Bodies, dt: float) -> None:
    """Centre of mass by h v, rotor by exp(-h/2 B) R, body by body (awake dynamic and kinematic)."""
    for i in range(b.count):
        if b.kind[i] not in (DYNAMIC, KINEMATIC) or not b.awake[i]:
            continue
        c_local = b.local_centroid[i]
        com = b.position[i] + b.rotation[i] @ c_local + dt * b.velocity[i]
        R = alg.rotor_normalize(alg.rotor_mul(alg.rotor(dt * b.angular_velocity[i]), b.rotor[i]), steps=1)
        M = alg.rotor_to_matrix(R)
        b.rotor[i] = R
        b.rotation[i] = M
        b.position[i] = com - M @ c_local


# =============================================================================================
# broadphase (core/collision/broadphase.py): all pairs by fattened boxes
# =============================================================================================


def _world_box(bodies: Bodies, shapes: list[Any], caches: dict[str, Any], i: int) -> tuple[Array, Array]:
    """Tight world bounding box (lo, hi), each (n,), of body i; half-spaces are unbounded."""
    from .collision.broadphase import shape_cloud

    kind = int(bodies.shape_kind[i])
    p, M = bodies.position[i], bodies.rotation[i]
    if kind == SHAPE_HALFSPACE:
        inf = np.full(p.shape[0], np.inf)
        return -inf, inf
    if kind == SHAPE_BALL:
        r = float(bodies.radius[i])
        return p - r, p + r
    if kind == SHAPE_BOX:
        # along world axis a the rotated box reaches sum_j |M_aj| h_j from its centre
        ext = np.abs(M) @ bodies.half_extents[i]
        return p - ext, p + ext
    sid = int(bodies.shape_id[i])
    P, rad = shape_cloud(shapes[sid], caches, sid)
    lo = np.full(p.shape[0], np.inf)
    hi = np.full(p.shape[0], -np.inf)
    for x, r in zip(P, rad, strict=True):  # loop over the shape's cloud points
        w = M @ x
        lo = np.minimum(lo, w - r)
        hi = np.maximum(hi, w + r)
    centre = p + 0.5 * (hi + lo)
    ext = 0.5 * (hi - lo)
    return centre - ext, centre + ext


def _reach(bodies: Bodies, i: int) -> float:
    """Distance from the centre of mass that bounds body i (infinite for a half-space)."""
    return float(bodies.radius[i]) + float(np.linalg.norm(bodies.local_centroid[i]))


def _fattening(bodies: Bodies, settings: Any, dt: float, i: int) -> float:
    """Margin plus the distance any point of body i can travel in one step."""
    margin = max(float(settings.broadphase_margin), 0.5 * float(settings.speculative_margin))
    reach = _reach(bodies, i)
    v = float(np.linalg.norm(bodies.velocity[i]))
    w = float(np.linalg.norm(bodies.angular_velocity[i]))
    spin = w * (reach if np.isfinite(reach) else 0.0) if w > 0.0 else 0.0
    return margin + dt * (v + spin)


def _passes_filter(bodies: Bodies, a: int, b: int) -> bool:
    """Layer/mask bits both ways, not two inert bodies, and at least one body that responds."""
    if a == b:
        return False
    if not (int(bodies.layer[a]) & int(bodies.mask[b])) or not (int(bodies.layer[b]) & int(bodies.mask[a])):
        return False
    inert_a = bodies.kind[a] == STATIC or not bodies.awake[a]
    inert_b = bodies.kind[b] == STATIC or not bodies.awake[b]
    if inert_a and inert_b:
        return False
    responds_a = bodies.kind[a] == DYNAMIC or bool(bodies.sensor[a])
    responds_b = bodies.kind[b] == DYNAMIC or bool(bodies.sensor[b])
    return responds_a or responds_b


def _world_plane(bodies: Bodies, shape: Any, i: int) -> tuple[Array, float]:
    """World unit normal (n,) and offset of half-space body i: u_w = M u, d_w = d + u_w . p."""
    u = bodies.rotation[i] @ np.asarray(shape.normal)
    return u, float(shape.offset) + float(u @ bodies.position[i])


def find_pairs_reference(alg: Algebra, bodies: Bodies, shapes: list[Any], settings: Any,
                           caches: dict[str, Any], dt: float) -> IntArray:
    """Candidate pairs (P, 2) int64 of body rows (a < b), sorted: every pair of fattened boxes that
    overlap on every axis, and every (body, half-space) whose fattened box reaches the fattened plane."""
    N = bodies.count
    if N < 2:
        return _empty_pairs()
    n = alg.n
    lo, hi, fat = [], [], []
    for i in range(N):
        tlo, thi = _world_box(bodies, shapes, caches, i)
        f = _fattening(bodies, settings, dt, i)
        lo.append(tlo - f)
        hi.append(thi + f)
        fat.append(f)
    is_half = [int(bodies.shape_kind[i]) == SHAPE_HALFSPACE for i in range(N)]
    bounded = [i for i in range(N) if not is_half[i]]
    found: set[tuple[int, int]] = set()
    for x, i in enumerate(bounded):
        for j in bounded[x + 1:]:
            if all(max(lo[i][ax] - hi[j][ax], lo[j][ax] - hi[i][ax]) <= 0.0 for ax in range(n)) \
                    and _passes_filter(bodies, i, j):
                found.add((min(i, j), max(i, j)))
    for h in range(N):
        if not is_half[h]:
            continue
        u, d = _world_plane(bodies, shapes[int(bodies.shape_id[h])], h)
        for i in bounded:
            c = 0.5 * (lo[i] + hi[i])
            e = 0.5 * (hi[i] - lo[i])
            low = float(c @ u - e @ np.abs(u))  # the box's lowest point along the plane normal
            if low <= d + fat[h] and _passes_filter(bodies, i, h):
                found.add((min(i, h), max(i, h)))
    if not found:
        return _empty_pairs()
    return np.array(sorted(found), dtype=np.int64).reshape(-1, 2)


# =============================================================================================
# narrowphase (core/collision/narrowphase.py, core/collision/sat.py, core/collision/clip.py): pair by pair
# =============================================================================================


class _Collider(NamedTuple):
    """One convex collider of a body: a whole body, or one compound piece posed in the world."""

    kind: int
    pos: Array  # (n,) world position of its local origin
    rot: Array  # (n, n) local -> world
    radius: float
    half: Array  # (n,) box half-extents
    plane_u: Array  # (n,) local half-space normal
    plane_d: float
    key: int  # shape key in the ShapeStore
    piece: int  # compound piece index, -1 for a whole body


class _Point(NamedTuple):
    """One contact point: unit normal (n,) from A to B, point (n,), depth (> 0 overlap), feature id."""

    normal: Array
    point: Array
    depth: float
    feature: int


def _colliders_of_body(bodies: Bodies, store: Any, i: int) -> list[_Collider]:
    """The colliders of body i: one, or one per compound piece (x = p + M (t + M_piece y))."""
    n = bodies.position.shape[1]
    kind = int(bodies.shape_kind[i])
    sid = int(bodies.shape_id[i])
    p, M = bodies.position[i].copy(), bodies.rotation[i].copy()
    zero = np.zeros(n)
    if kind == SHAPE_COMPOUND:
        kinds, t, Mp, radii, half, keys = store.pieces(sid)
        out = []
        for q in range(len(kinds)):  # loop over the compound's pieces
            out.append(_Collider(int(kinds[q]), p + M @ t[q], M @ Mp[q], float(radii[q]), half[q].copy(),
                                 zero, 0.0, int(keys[q]), q))
        return [_with_plane(c, store) for c in out]
    if kind == SHAPE_MESH:  # a mesh collides as its convex hull
        return [_Collider(SHAPE_POLYTOPE, p, M, float(bodies.radius[i]), bodies.half_extents[i].copy(), zero,
                          0.0, int(store.hull_key(sid)), -1)]
    whole = _Collider(kind, p, M, float(bodies.radius[i]), bodies.half_extents[i].copy(), zero, 0.0, sid, -1)
    return [_with_plane(whole, store)]


def _with_plane(c: _Collider, store: Any) -> _Collider:
    if c.kind != SHAPE_HALFSPACE:
        return c
    s = store.get(c.key)
    return c._replace(plane_u=np.asarray(s.normal, dtype=np.float64), plane_d=float(s.offset))


def _plane_of(c: _Collider) -> tuple[Array, float]:
    u = np.einsum("ij,j->i", c.rot, c.plane_u)
    return u, c.plane_d + float(np.einsum("i,i->", u, c.pos))


def _ball_ball(A: _Collider, B: _Collider, margin: float) -> list[_Point]:
    """Normal along the centre line (+e_1 for coincident centres); the point midway between surfaces."""
    d = B.pos - A.pos
    dist = float(np.linalg.norm(d))
    if dist > 0.0:
        nrm = d / dist
    else:
        nrm = np.zeros_like(d)
        nrm[1] = 1.0
    depth = A.radius + B.radius - dist
    if not -depth < margin:
        return []
    return [_Point(nrm, 0.5 * (A.pos + B.pos + nrm * (A.radius - B.radius)), depth, 0)]


def _ball_halfspace(A: _Collider, B: _Collider, margin: float) -> list[_Point]:
    """Ball A on half-space B: normal -u, depth r - (u . c - d), point midway to the plane."""
    u, d = _plane_of(B)
    s = float(u @ A.pos) - d  # height of the centre above the plane
    depth = A.radius - s
    if not -depth < margin:
        return []
    return [_Point(-u, A.pos - u * (0.5 * (A.radius + s)), depth, 0)]


def _ball_box(A: _Collider, B: _Collider, margin: float) -> list[_Point]:
    """Ball A against box B: clamp the centre into the box (its frame); a centre inside leaves
    through the face of least penetration. Feature: base-3 code of the per-axis state."""
    n = A.pos.shape[0]
    h = B.half
    x = B.rot.T @ (A.pos - B.pos)
    q = np.clip(x, -h, h)
    off = x - q
    dist = float(np.linalg.norm(off))
    state = [1 if x[i] > h[i] else (-1 if x[i] < -h[i] else 0) for i in range(n)]
    if dist <= 0.0:  # centre inside the box
        pen = h - np.abs(x)
        ax = int(np.argmin(pen))
        sgn = 1.0 if x[ax] >= 0.0 else -1.0
        unit = np.zeros(n)
        unit[ax] = sgn
        q[ax] = sgn * h[ax]
        dist = -float(pen[ax])
        state = [0] * n
        state[ax] = int(sgn)
    else:
        unit = off / dist
    depth = A.radius - dist
    if not -depth < margin:
        return []
    out_w = B.rot @ unit
    box_pt = B.pos + B.rot @ q
    ball_pt = A.pos - out_w * A.radius
    feature = sum((state[i] + 1) * 3 ** i for i in range(n))
    return [_Point(-out_w, 0.5 * (box_pt + ball_pt), depth, feature)]


def _vertex_cap(n: int) -> int:
    return min(1 << (n - 1), 8)


def _plane_basis(u: Array) -> Array:
    """Orthonormal basis (n-1, n) of the complement of a unit normal u (n,): the rows other than row
    j of the Householder reflection H = I - 2 w w^T / (w . w), w = u + s e_j (j: the largest
    component of u, s its sign), the fixed frame in which a plane's tangent coordinates are taken."""
    n = u.shape[0]
    j = int(np.argmax(np.abs(u)))
    w = u.copy()
    w[j] += 1.0 if u[j] >= 0.0 else -1.0
    H = np.eye(n) - 2.0 * np.outer(w, w) / float(np.sum(w * w))
    return np.delete(H, j, axis=0)


def _incident_facet(s: list[float], normals: list[Array], member: list[list[bool]], u: Array) -> int:
    """Among the facets through the deepest vertex (lowest s, lowest index on ties), the one whose
    outward normal (world) is most anti-parallel to u (lowest index on ties): the incident facet
    (core/collision/narrowphase.py ``_incident_facet``); member[f][v]: vertex v lies on facet f."""
    deepest = min(range(len(s)), key=lambda v: (s[v], v))
    best, best_dot = -1, np.inf
    for f, nf in enumerate(normals):
        if member[f][deepest]:
            dot = float(np.einsum("i,i->", nf, u))
            if dot < best_dot:
                best, best_dot = f, dot
    return best


def _vertices_plane(world: Array, u: Array, d: float, margin: float, cap: int, normals: list[Array],
                    member: list[list[bool]], tangent: list[Array] | None = None,
                    directions: list[Array] | None = None) -> list[_Point]:
    """Vertices (V, n) of A against the plane (u, d) of B: those of the incident facet
    (:func:`_incident_facet`) whose height s is below the margin, at most ``cap`` of them: with
    no ``directions`` the deepest, else the extremes along them; then farthest-point sampling
    in the tangent coordinates (the plane's Householder basis by default), near-ties going to the
    lower vertex index (:func:`_select_points`), so a resting face keeps the same corners every step.

    The products (corners, heights, tangent coordinates) are evaluated by ``np.einsum`` one item at
    a time, which sums in the same order as the vectorised kernel's einsums.
    """
    V = world.shape[0]
    s = [float(np.einsum("i,i->", world[v], u)) - d for v in range(V)]
    f = _incident_facet(s, normals, member, u)
    valid = [s[v] < margin and member[f][v] for v in range(V)]
    if sum(valid) > cap:
        if tangent is None:
            basis = _plane_basis(u)
            tang = [np.einsum("i,ki->k", world[v], basis) for v in range(V)]
        else:
            tang = tangent
        ext = max(float(np.max(np.abs(t))) for t in tang)
        # with directions (a box face) the deepest goes first only on a tilted face: depths of
        # the candidates spread over more than _TILTED of the extent (narrowphase._reduce)
        heights = [s[v] for v in range(V) if valid[v]]
        tilted = bool(directions) and max(heights) - min(heights) > _TILTED * ext
        valid = _select_points(tang, valid, list(range(V)), cap, directions or [], 1e-9 * ext,
                               None if directions and not tilted else [-x for x in s])
    return [_Point(-u, world[v] - u * (0.5 * s[v]), -s[v], v) for v in range(V) if valid[v]]


def _box_corners(c: _Collider) -> Array:
    """The 2^n world corners of a box collider; vertex v has +h_i where bit i of v is set."""
    n = c.pos.shape[0]
    out = np.empty((1 << n, n))
    for v in range(1 << n):
        local = np.array([c.half[i] if (v >> i) & 1 else -c.half[i] for i in range(n)])
        out[v] = c.pos + np.einsum("ij,j->i", c.rot, local)
    return out


def _box_halfspace(A: _Collider, B: _Collider, margin: float) -> list[_Point]:
    """The corners of A's incident face; over the cap, the deepest, then the corners along the
    diagonals of the face's own axes (tangent coordinates: the local corner coordinates on every
    axis but the face's)."""
    u, d = _plane_of(B)
    n = A.pos.shape[0]
    world = _box_corners(A)
    V = 1 << n
    # facet 2i + b is the face x_i = (2b - 1) h_i
    normals, member = [], []
    for i in range(n):
        for b in (0, 1):
            normals.append(np.einsum("ij,j->i", A.rot, np.eye(n)[i] * (2.0 * b - 1.0)))
            member.append([((v >> i) & 1) == b for v in range(V)])
    s = [float(np.einsum("i,i->", world[v], u)) - d for v in range(V)]
    axis = _incident_facet(s, normals, member, u) // 2
    local = [np.array([A.half[i] if (v >> i) & 1 else -A.half[i] for i in range(n)]) for v in range(V)]
    tang = [np.array([x[i] for i in range(n) if i != axis]) for x in local]
    cap = _vertex_cap(n)
    return _vertices_plane(world, u, d, margin, cap, normals, member, tang, _diagonals(n - 1, cap))


def _polytope_halfspace(A: _Collider, B: _Collider, margin: float, store: Any) -> list[_Point]:
    u, d = _plane_of(B)
    shape = store.get(A.key)
    V = np.asarray(shape.vertices)
    world = np.array([A.pos + np.einsum("ij,j->i", A.rot, x) for x in V])
    normals = [np.einsum("ij,j->i", A.rot, nf) for nf in np.asarray(shape.facet_normals)]
    member = [[v in set(int(x) for x in fv) for v in range(len(V))] for fv in shape.facet_vertices]
    return _vertices_plane(world, u, d, margin, _vertex_cap(A.pos.shape[0]), normals, member)


def _convex(alg: Algebra, A: _Collider, B: _Collider, margin: float, store: Any) -> list[_Point]:
    """Ball, box or polytope A against a box or polytope B: the per-pair GJK/EPA kernel."""
    from .collision.gjk import ball_convex, convex_pair

    sb = store.get(B.key)
    if A.kind == SHAPE_BALL:
        mp = ball_convex(alg, A.pos, A.radius, sb, B.pos, B.rot, margin)
    else:
        mp = convex_pair(alg, store.get(A.key), A.pos, A.rot, sb, B.pos, B.rot, margin)
    return [_Point(mp.normal[j], mp.point[j], float(mp.depth[j]), int(mp.feature[j]))
            for j in range(len(mp.pair))]


# -- box/box: separating axes, clipped face manifolds --------------------------------------------

# the box/box constants come from core/collision/sat.py (imported above): coherence tolerances of the axis
# choice (A's faces over B's by 2 % + 1e-5, faces over mixed axes by 5 % + 1e-4), the length below
# which a mixed axis's raw cross product counts as degenerate, and the flag bit of mixed features


def _mixed_axis_sets(n: int) -> list[tuple[tuple[int, ...], tuple[int, ...]]]:
    """(S, T) of every mixed candidate axis, in the kernel's order: k axes S of A, n-1-k of B."""
    return [(S, T) for k in range(n - 2, 0, -1) for S in itertools.combinations(range(n), k)
            for T in itertools.combinations(range(n), n - 1 - k)]


def _cross(span: Array) -> Array:
    """Generalised cross product (n,) of n-1 vectors, the columns of ``span`` (n, n-1):
    u_m = det[span, e_m] (the Hodge dual of their wedge)."""
    n = span.shape[0]
    return np.array([np.linalg.det(np.column_stack([span, np.eye(n)[:, m]])) for m in range(n)])


def _face_edges(n: int, j: int) -> list[tuple[Array, int]]:
    """Edges of the facet orthogonal to axis j: (start sign pattern (n,), axis it runs along).

    In the kernel's order: run axis a != j ascending, then the signs of the other tangent axes in
    lexicographic order of (-1, +1); the start has -1 on its own axis, 0 on axis j.
    """
    out = []
    for a in range(n):
        if a == j:
            continue
        others = [c for c in range(n) if c not in (a, j)]
        for signs in itertools.product((-1.0, 1.0), repeat=len(others)):
            v = np.zeros(n)
            v[a] = -1.0
            v[others] = signs
            out.append((v, a))
    return out


def _clip_one(f0: list[float], f1: list[float]) -> tuple[float, float, int, int, bool]:
    """Clip one segment against half-spaces given by signed plane values at its ends (<= 0 inside):
    entry and exit parameters, the planes that set them (-1: not clipped) and whether anything is left."""
    t_in, t_out, p_in, p_out = -1.0, 2.0, 0, 0
    empty = False
    for q, (a, b) in enumerate(zip(f0, f1, strict=True)):
        out0, out1 = a > 0.0, b > 0.0
        if out0 and out1:
            empty = True
        elif out0:  # enters through this plane
            t = a / (a - b)
            if t > t_in:
                t_in, p_in = t, q
        elif out1:  # leaves through this plane
            t = a / (a - b)
            if t < t_out:
                t_out, p_out = t, q
    if t_in < 0.0:
        t_in, p_in = 0.0, -1
    if t_out > 1.0:
        t_out, p_out = 1.0, -1
    return t_in, t_out, p_in, p_out, (not empty) and t_in <= t_out


def _slab_clip(x0: Array, x1: Array, half: Array, skip: int) -> tuple[float, float, bool]:
    """Clip the segment x0 -> x1 against |x_i| <= h_i for every axis i but ``skip``: planes 2i
    (x_i - h_i) and 2i + 1 (-x_i - h_i); returns t_in, t_out and whether anything is left."""
    n = x0.shape[0]
    f0: list[float] = []
    f1: list[float] = []
    for i in range(n):
        if i == skip:  # the normal axis bounds nothing
            f0 += [-1.0, -1.0]
            f1 += [-1.0, -1.0]
        else:
            f0 += [x0[i] - half[i], -x0[i] - half[i]]
            f1 += [x1[i] - half[i], -x1[i] - half[i]]
    t_in, t_out, _, _, ok = _clip_one(f0, f1)
    return t_in, t_out, ok


def _plane_code(x: Array, half: Array, skip: int, tol: float, shift: int) -> int:
    """Bits of the facet side planes the point x (n,) lies on within ``tol``, axis ``skip`` left out:
    bit shift + 2i for x_i >= h_i - tol, bit shift + 2i + 1 for x_i <= -(h_i - tol)."""
    code = 0
    for i in range(x.shape[0]):
        if i == skip:
            continue
        lim = half[i] - tol
        if x[i] >= lim:
            code += 1 << (shift + 2 * i)
        if x[i] <= -lim:
            code += 1 << (shift + 2 * i + 1)
    return code


def _best_by_code(score: list[float], codes: list[int], live: list[bool], quantum: float) -> int:
    """The slot of the largest score among live slots, -1 if none: scores that round to the best at
    ``quantum`` (relative to the best) tie, and a tie goes to the lowest code."""
    cands = [q for q in range(len(score)) if live[q]]
    if not cands:
        return -1
    best = max(score[q] for q in cands)
    ties = [q for q in cands if np.rint((score[q] - best) / quantum) == 0.0]
    return min(ties, key=lambda q: codes[q])


def _diagonals(d: int, cap: int) -> list[Array]:
    """Sign patterns over d tangent axes: all 2^d (pattern q has +1 on axis i where bit i of q is
    set) when they fit under ``cap``, else those with an even number of +1, the first ``cap``."""
    pats = [np.array([1.0 if (q >> i) & 1 else -1.0 for i in range(d)]) for q in range(1 << d)]
    if len(pats) > cap:
        pats = [pats[q] for q in range(1 << d) if bin(q).count("1") % 2 == 0]
    if len(pats) > cap and d < cap:
        # rows of a Sylvester-Hadamard matrix of order cap on the columns 1, 2, 4, 7, 3, 5, 6 (cap 8)
        powers = [1 << i for i in range(cap.bit_length() - 1)]
        first = powers + ([cap - 1] if cap - 1 not in powers else [])
        cols = (first + [c for c in range(1, cap) if c not in first])[:d]
        pats = [np.array([1.0 if bin(q & c).count("1") % 2 else -1.0 for c in cols]) for q in range(cap)]
    return pats[:cap]


def _select_points(tang: list[Array], valid: list[bool], codes: list[int], cap: int, directions: list[Array],
                   tol: float, depth: list[float] | None = None) -> list[bool]:
    """At most ``cap`` candidates (core/collision/clip.py ``select_points`` stated one pair at a time).

    The first slot of each feature code; then, with depths, the deepest (depths rounded to the
    selection quantum times the patch diagonal, ties to the lowest code); then for each direction
    the candidate with the largest direction . z, z the tangent coordinates scaled to the patch's
    bounding box, ties (at the quantum) to the lowest code; then while fewer than ``cap`` are kept,
    the candidate farthest from every kept one if farther than ``tol`` (distances squared, rounded
    to the quantum times the squared diagonal, ties to the lowest code).
    """
    K = len(valid)
    seen: set[int] = set()
    live: list[int] = []
    for q in range(K):  # slots repeating a code of the pair are the same corner reached twice
        if valid[q] and codes[q] not in seen:
            seen.add(codes[q])
            live.append(q)
    keep = [False] * K
    if not live:
        return keep
    L = len(live)
    d = tang[live[0]].shape[0]
    lo = [min(float(tang[q][i]) for q in live) for i in range(d)]
    hi = [max(float(tang[q][i]) for q in live) for i in range(d)]
    half = [max(0.5 * (hi[i] - lo[i]), tol + 1e-300) for i in range(d)]
    z = [np.array([(tang[q][i] - 0.5 * (hi[i] + lo[i])) / half[i] for i in range(d)]) for q in live]
    ext = float(np.sqrt(sum((hi[i] - lo[i]) ** 2 for i in range(d))))
    lc = [codes[q] for q in live]
    on = [True] * L

    def dist2(p: int, r: int) -> float:
        return float(sum((tang[live[p]][i] - tang[live[r]][i]) ** 2 for i in range(d)))

    picked: list[int] = []
    mind = [np.inf] * L
    if depth is not None:
        first = _best_by_code([depth[q] for q in live], lc, on, _SELECT_QUANTUM * max(ext, 1e-300))
        picked.append(first)
        mind = [dist2(p, first) for p in range(L)]
    for direction in directions:
        best = _best_by_code([float(z[p] @ direction) for p in range(L)], lc, on, _SELECT_QUANTUM)
        if best not in picked and len(picked) < cap:
            picked.append(best)
            mind = [min(mind[p], dist2(p, best)) for p in range(L)]
    ext2 = max(ext * ext, 1e-300)
    while len(picked) < cap:
        gap = [-1.0 if p in picked else mind[p] for p in range(L)]
        nxt = _best_by_code(gap, lc, [g > tol * tol for g in gap], _SELECT_QUANTUM * ext2)
        if nxt < 0:
            break
        picked.append(nxt)
        mind = [min(mind[p], dist2(p, nxt)) for p in range(L)]
    for p in picked:
        keep[live[p]] = True
    return keep


def _box_box(A: _Collider, B: _Collider, margin: float) -> list[_Point]:
    """Separating-axis test of one box pair over all C(2n, n-1) axes, then its manifold.

    Works in A's frame, where A's axes are the basis and B's axes are the columns of C = R_A^T R_B.
    """
    n = A.pos.shape[0]
    ha, hb = A.half, B.half
    C = np.matmul(A.rot.T, B.rot)
    d = np.einsum("ji,j->i", A.rot, B.pos - A.pos)
    # face axes: overlap r_A + r_B - |u . d| for u = e_i (A) and u = c_j (B)
    over_a = [ha[i] + sum(abs(C[i, j]) * hb[j] for j in range(n)) - abs(d[i]) for i in range(n)]
    over_b = [hb[j] + sum(abs(C[i, j]) * ha[i] for i in range(n)) - abs(float(C[:, j] @ d)) for j in range(n)]
    ia = min(range(n), key=lambda i: (over_a[i], i))
    ib = min(range(n), key=lambda j: (over_b[j], j))
    da, db = over_a[ia], over_b[ib]
    use_b = db < da - (_FACE_REL * abs(da) + _FACE_ABS)
    dface = db if use_b else da
    # mixed axes: the normal of span(e_S, c_T) by the generalised cross product
    best_m, dm, u_m, gn_m = -1, np.inf, np.zeros(n), 0.0
    for ax, (S, T) in enumerate(_mixed_axis_sets(n)):
        span = np.column_stack([np.eye(n)[:, list(S)], C[:, list(T)]])
        u = _cross(span)
        u[list(S)] = 0.0  # exactly zero on its own spanning axes (a repeated column)
        gn = float(np.linalg.norm(u))
        if not gn > _DEGENERATE:  # nearly parallel directions: a duplicate of a face axis
            continue
        w = C.T @ u
        w[list(T)] = 0.0
        over = (float(ha @ np.abs(u)) + float(hb @ np.abs(w)) - abs(float(u @ d))) / gn
        if over < dm:
            best_m, dm, u_m, gn_m = ax, over, u, gn
    use_m = best_m >= 0 and dm < dface - (_MIXED_REL * abs(dface) + _MIXED_ABS)
    depth = dm if use_m else dface
    if not depth > -margin:  # separated by more than the margin along some axis
        return []
    if use_m:
        return _box_box_mixed(A, B, C, d, best_m, u_m / gn_m, dm)
    return _box_box_face(A, B, C, d, use_b, ia, ib, margin)


def _box_box_mixed(A: _Collider, B: _Collider, C: Array, d: Array, ax: int, u: Array,
                   depth: float) -> list[_Point]:
    """One point midway between the closest points of the two support faces (A's frame)."""
    n = A.pos.shape[0]
    S, T = _mixed_axis_sets(n)[ax]
    w = C.T @ u
    w[list(T)] = 0.0
    if float(u @ d) < 0.0:  # from A to B
        u, w = -u, -w
    ha, hb = A.half, B.half
    sa = np.where(u >= 0.0, 1.0, -1.0)  # A's support face along +u
    sb = np.where(w > 0.0, -1.0, 1.0)  # B's support face along -u
    in_a = np.isin(np.arange(n), S)
    in_b = np.isin(np.arange(n), T)
    a0 = np.where(in_a, 0.0, sa * ha)
    b0 = d + C @ np.where(in_b, 0.0, sb * hb)
    # a0 + E_S alpha - (b0 + C_T beta) = lam u, for (alpha, beta, lam)
    Mx = np.column_stack([np.eye(n)[:, list(S)], -C[:, list(T)], -u])
    sol = np.linalg.solve(Mx, b0 - a0)
    alpha = np.zeros(n)
    beta = np.zeros(n)
    alpha[list(S)] = np.clip(sol[: len(S)], -ha[list(S)], ha[list(S)])
    beta[list(T)] = np.clip(sol[len(S): n - 1], -hb[list(T)], hb[list(T)])
    pa = a0 + alpha
    pb = b0 + C @ beta
    point = A.pos + A.rot @ (0.5 * (pa + pb))
    code_a = sum(1 << i for i in range(n) if sa[i] > 0)
    code_b = sum(1 << i for i in range(n) if sb[i] > 0)
    feature = int(_MIXED_FLAG) + (ax << (2 * n)) + (code_a << n) + code_b
    return [_Point(A.rot @ u, point, depth, feature)]


def _box_box_face(A: _Collider, B: _Collider, C: Array, d: Array, flip: bool, ia: int, ib: int,
                  margin: float) -> list[_Point]:
    """Clipped face manifold of one box pair, in the reference box's frame (see core/collision/sat.py).

    Candidates: the incident face's edges clipped against the reference face's side slab, the
    reference face's edges slid onto the incident face's hyperplane and clipped against its slab,
    and (n >= 5) the crossings of j-faces of the reference facet with (n-1-j)-faces of the incident
    one, 2 <= j <= n-3. Each candidate's feature code is the set of side planes of both facets it
    lies on (within ``_FEATURE_TOL`` of the smaller box's largest half-extent), whichever construction found
    it; the edge ends of each face are transformed together, as an (Ne, n) matrix product, with
    the frame products in the kernel's ``np.einsum`` index form.
    """
    n = A.pos.shape[0]
    # reference frame: Q = R_ref^T R_inc (incident axes as columns), e = incident centre
    if flip:
        Q, e, h_ref, h_inc, m = C.T, -np.einsum("ij,i->j", C, d), B.half, A.half, ib
    else:
        Q, e, h_ref, h_inc, m = C, d, A.half, B.half, ia
    s = 1.0 if e[m] >= 0.0 else -1.0  # the reference normal s e_m points at the incident box
    qm = Q[m]  # the reference axis in incident coordinates
    jn = int(np.argmax(np.abs(qm)))  # the incident axis most aligned with the normal
    sig = -1.0 if s * qm[jn] > 0.0 else 1.0  # its face that looks back at the reference face
    nref = np.zeros(n)
    nref[m] = s
    pts: list[Array] = []  # midway points, reference frame
    inc: list[Array] = []  # the same points on the incident facet, incident frame
    dep: list[float] = []
    ok: list[bool] = []
    # incident face edges clipped against the reference face's side slab
    ins, outs = [], []
    edges = _face_edges(n, jn)
    Y0 = np.array([np.where(np.arange(n) == jn, sig, st) * h_inc for st, _ in edges])
    Y1 = Y0.copy()
    for q, (_, run) in enumerate(edges):
        Y1[q, run] = -Y0[q, run]
    X0, X1 = e + Y0 @ Q.T, e + Y1 @ Q.T
    for edge in range(len(edges)):
        x0, x1, y0, y1 = X0[edge], X1[edge], Y0[edge], Y1[edge]
        t_in, t_out, okk = _slab_clip(x0, x1, h_ref, m)
        ins.append((x0 + t_in * (x1 - x0), y0 + t_in * (y1 - y0), okk))
        outs.append((x0 + t_out * (x1 - x0), y0 + t_out * (y1 - y0), okk))
    for end, y, okk in ins + outs:
        dp = h_ref[m] - s * end[m]
        pts.append(end + 0.5 * dp * nref)
        inc.append(y)
        dep.append(float(dp))
        ok.append(okk)
    # reference face edges slid along the normal onto the incident face's plane, clipped there
    qn = s * qm
    target = sig * h_inc[jn]
    ins_r: list[tuple[Array, Array, float, bool]] = []
    outs_r: list[tuple[Array, Array, float, bool]] = []
    edges = _face_edges(n, m)
    R0 = np.array([np.where(np.arange(n) == m, s, st) * h_ref for st, _ in edges])
    R1 = R0.copy()
    for q, (_, run) in enumerate(edges):
        R1[q, run] = -R0[q, run]
    G0, G1 = (R0 - e) @ Q, (R1 - e) @ Q
    for edge in range(len(edges)):
        r0, r1, g0, g1 = R0[edge], R1[edge], G0[edge], G1[edge]
        t0 = (target - g0[jn]) / qn[jn]
        t1 = (target - g1[jn]) / qn[jn]
        g0, g1 = g0 + t0 * qn, g1 + t1 * qn
        u_in, u_out, okk = _slab_clip(g0, g1, h_inc, jn)
        ins_r.append((r0 + u_in * (r1 - r0), g0 + u_in * (g1 - g0), t0 + u_in * (t1 - t0), okk))
        outs_r.append((r0 + u_out * (r1 - r0), g0 + u_out * (g1 - g0), t0 + u_out * (t1 - t0), okk))
    for end, y, height, okk in ins_r + outs_r:
        pts.append(end + 0.5 * height * nref)  # the incident surface lies |height| below
        inc.append(y)
        dep.append(float(-height))
        ok.append(okk)
    # n >= 5: crossings of j-faces of the reference facet with (n-1-j)-faces of the incident facet
    tax = [i for i in range(n) if i != m]
    tinc = [i for i in range(n) if i != jn]
    for x, y, dp, okk in _crossings(Q, e, h_ref, h_inc, m, s, jn, sig, tax, tinc):
        pts.append(x + 0.5 * dp * nref)
        inc.append(y)
        dep.append(dp)
        ok.append(okk)
    ok = [o and dp > -margin for o, dp in zip(ok, dep, strict=True)]
    ftol = _FEATURE_TOL * min(float(np.max(h_ref)), float(np.max(h_inc)))
    code = [_plane_code(x, h_ref, m, ftol, 0) + _plane_code(y, h_inc, jn, ftol, 2 * n)
            for x, y in zip(pts, inc, strict=True)]
    tang = [np.delete(p, m) for p in pts]
    cap = _vertex_cap(n)
    keep = _select_points(tang, ok, code, cap, _diagonals(n - 1, cap), 1e-6 * float(np.max(h_ref)))
    chosen = [(pts[q], dep[q], code[q]) for q in range(len(pts)) if keep[q]]
    if not chosen:  # no candidate survived (rounding at grazing poses)
        x, dp = _fallback_point(Q, e, h_ref, h_inc, m, s, jn, sig)
        if dp > -margin:
            chosen = [(x, dp, 0)]
    ref_face = m + (n if s < 0 else 0)
    inc_face = jn + (n if sig < 0 else 0)
    head = ((2 * n if flip else 0) + ref_face) * 2 * n + inc_face
    pos_r, rot_r = (B.pos, B.rot) if flip else (A.pos, A.rot)
    normal = rot_r[:, m] * (s * (-1.0 if flip else 1.0))
    return [_Point(normal, pos_r + np.einsum("ij,j->i", rot_r, x), dp, (head << (4 * n)) + cc)
            for x, dp, cc in chosen]


def _crossings(Q: Array, e: Array, h_ref: Array, h_inc: Array, m: int, s: float, jn: int, sig: float,
               tax: list[int], tinc: list[int]) -> list[tuple[Array, Array, float, bool]]:
    """Where a j-face of the reference facet crosses an (n-1-j)-face of the incident facet (n >= 5).

    In tangent coordinates (reference axes ``tax``, incident axes ``tinc``, ascending) the incident
    facet seen along the normal is x = x0 + P y. Fixing x_A = +-h_A (a j-face of the reference
    facet) and y_B = +-g_B (an (n-1-j)-face of the incident one) leaves the j coordinates y_F (F the
    positions not in B), solved from P[A, F] y_F = +-h_A - x0_A - P[A, B] y_B. Returns, in the
    kernel's slot order (j, A, B, signs of A, signs of B), the point on the incident facet (reference
    frame), its incident-frame coordinates, its depth, and whether it lies inside both facets.
    """
    n = e.shape[0]
    P = Q[np.ix_(tax, tinc)]
    x0 = e[tax] + Q[tax, jn] * (sig * h_inc[jn])
    hr, gi = h_ref[tax], h_inc[tinc]
    slack = 1e-9 * float(np.max(h_ref))
    pos = range(n - 1)
    out = []
    for j in range(2, n - 2):
        for cA in itertools.combinations(pos, j):
            for cB in itertools.combinations(pos, n - 1 - j):
                cF = [q for q in pos if q not in cB]
                Mx = P[np.ix_(cA, cF)]
                good = abs(float(np.linalg.det(Mx))) > _DEGENERATE
                for sA in itertools.product((-1.0, 1.0), repeat=j):
                    for sB in itertools.product((-1.0, 1.0), repeat=n - 1 - j):
                        yB = gi[list(cB)] * np.array(sB)
                        rhs = hr[list(cA)] * np.array(sA) - x0[list(cA)] - P[np.ix_(cA, cB)] @ yB
                        Y = np.zeros(n - 1)
                        Y[list(cB)] = yB
                        Y[cF] = np.linalg.solve(Mx, rhs) if good else rhs
                        x = x0 + P @ Y
                        inside = good and bool(np.all(np.abs(Y) <= gi + slack)
                                               and np.all(np.abs(x) <= hr + slack))
                        y = np.zeros(n)
                        y[tinc] = Y
                        y[jn] = sig * h_inc[jn]
                        X = e + Q @ y
                        out.append((X, y, float(h_ref[m] - s * X[m]), inside))
    return out


def _fallback_point(Q: Array, e: Array, h_ref: Array, h_inc: Array, m: int, s: float, jn: int, sig: float
                    ) -> tuple[Array, float]:
    """One point of the incident face inside the reference prism by 16 alternating projections."""
    lim = h_ref.copy()
    lim[m] = np.inf
    ilo, ihi = -h_inc.copy(), h_inc.copy()
    ilo[jn] = ihi[jn] = sig * h_inc[jn]
    x = e.copy()
    for _ in range(16):
        x = np.clip(x, -lim, lim)
        y = np.clip(Q.T @ (x - e), ilo, ihi)
        x = e + Q @ y
    dep = float(h_ref[m] - s * x[m])
    met = bool(np.all(np.abs(x) <= lim + 1e-6 * float(np.max(h_ref))))
    if not (met or dep > 0.0):
        return x, -np.inf
    x = x.copy()
    x[m] += 0.5 * s * dep
    return x, dep


# -- dispatch, features, keys ---------------------------------------------------------------------


def _collide_pair(alg: Algebra, ca: _Collider, cb: _Collider, margin: float, store: Any) -> list[_Point]:
    """Contact points of one collider pair, normals from ``ca`` to ``cb``: the lower kind code is
    A inside, and the normals of a swapped pair are negated."""
    swap = ca.kind > cb.kind
    A, B = (cb, ca) if swap else (ca, cb)
    lo, hi = A.kind, B.kind
    if lo == SHAPE_BALL and hi == SHAPE_BALL:
        pts = _ball_ball(A, B, margin)
    elif lo == SHAPE_BALL and hi == SHAPE_BOX:
        pts = _ball_box(A, B, margin)
    elif lo == SHAPE_BALL and hi == SHAPE_HALFSPACE:
        pts = _ball_halfspace(A, B, margin)
    elif lo == SHAPE_BOX and hi == SHAPE_HALFSPACE:
        pts = _box_halfspace(A, B, margin)
    elif lo == SHAPE_POLYTOPE and hi == SHAPE_HALFSPACE:
        pts = _polytope_halfspace(A, B, margin, store)
    elif lo == SHAPE_BOX and hi == SHAPE_BOX:
        pts = _box_box(A, B, margin)
    elif hi == SHAPE_POLYTOPE:
        pts = _convex(alg, A, B, margin, store)
    else:  # two half-spaces
        pts = []
    if swap:
        pts = [p._replace(normal=-p.normal) for p in pts]
    return pts


def _to_int64(x: int) -> int:
    x &= _MASK64
    return x - (1 << 64) if x >= 1 << 63 else x


def _mix_pieces(feature: int, piece_a: int, piece_b: int) -> int:
    """Feature id made unique across compound piece pairs (64-bit multiply-xorshift of the pieces)."""
    if piece_a < 0 and piece_b < 0:
        return feature
    x = ((piece_a + 1) * 0xD6E8FEB86659FD93) & _MASK64
    x ^= ((piece_b + 1) * 0xA0761D6478BD642F + (x >> 29)) & _MASK64
    x ^= x >> 32
    return _to_int64((feature & _MASK64) ^ x)


def _contact_key(ha: int, hb: int, feature: int) -> int:
    """Persistent int64 key of a contact point from the two handles and its feature id (the
    splitmix-style mix of contacts.contact_keys, in Python integers)."""
    x = (ha * 0x9E3779B97F4A7C15) & _MASK64
    x ^= (hb + 0x632BE59BD9B4E019 + ((x << 6) & _MASK64) + (x >> 2)) & _MASK64
    x ^= ((feature & _MASK64) * 0xBF58476D1CE4E5B9) & _MASK64
    x ^= x >> 31
    x = (x * 0x94D049BB133111EB) & _MASK64
    x ^= x >> 29
    return _to_int64(x)


def _pair_margin(bodies: Bodies, a: int, b: int, settings: Any, dt: float) -> float:
    """speculative_margin + dt (|v_a| + |v_b| + |w_a| e_a + |w_b| e_b)."""
    speed = []
    for i in (a, b):
        reach = _reach(bodies, i)
        reach = reach if np.isfinite(reach) else 0.0  # a half-space's spin is not bounded here
        speed.append(float(np.linalg.norm(bodies.velocity[i]))
                     + float(np.linalg.norm(bodies.angular_velocity[i])) * reach)
    return float(settings.speculative_margin) + dt * (speed[0] + speed[1])


def _carry_inert(bodies: Bodies, cache: dict[str, Any], name: str, now: list[tuple[int, int]]) -> IntArray:
    """Add to ``now`` last step's pairs in list ``name`` whose bodies are both still inert and at
    the same rows (they were not collided this step, so they still touch)."""
    N = bodies.count
    out = list(now)
    prev = cache.get(name)
    carried = []
    if prev is not None:
        for (ra, rb), (ha, hb) in zip(prev[0].tolist(), prev[1].tolist(), strict=True):
            if ra >= N or rb >= N or bodies.handle[ra] != ha or bodies.handle[rb] != hb:
                continue
            if all(bodies.kind[r] == STATIC or not bodies.awake[r] for r in (ra, rb)):
                carried.append((ra, rb))
    if carried:
        out = sorted({(min(p), max(p)) for p in out + carried})
    rows = np.array(out, dtype=np.int64).reshape(-1, 2)
    handles = np.array([[bodies.handle[r] for r in p] for p in out], dtype=np.int64).reshape(-1, 2)
    cache[name] = (rows, handles)
    return rows


def collide_reference(alg: Algebra, bodies: Bodies, pairs: IntArray, shapes: list[Any], settings: Any,
                      caches: dict[str, Any], dt: float) -> tuple[ContactSet, IntArray, IntArray]:
    """Contact manifolds of the candidate pairs (P, 2), pair by pair (returns as narrowphase.find_contacts).

    Returns the ContactSet (rows in pair order, ``manifold`` numbering the pairs with points), the
    touching non-sensor pairs (T, 2) and the overlapping sensor pairs (S, 2).
    """
    from .collision.narrowphase import ShapeStore

    n = alg.n
    cache = caches.setdefault("narrowphase", {})
    store = ShapeStore(shapes, cache)
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    colliders: dict[int, list[_Collider]] = {}
    touching: list[tuple[int, int]] = []
    sensing: list[tuple[int, int]] = []
    rows: list[tuple[int, int, _Point, int]] = []  # (a, b, point, manifold)
    manifold = 0
    for a, b in pairs.tolist():
        margin = _pair_margin(bodies, a, b, settings, dt)
        for r in (a, b):
            if r not in colliders:
                colliders[r] = _colliders_of_body(bodies, store, r)
        pts: list[_Point] = []
        for ca in colliders[a]:  # the product of the two bodies' colliders, row-major
            for cb in colliders[b]:
                for p in _collide_pair(alg, ca, cb, margin, store):
                    pts.append(p._replace(feature=_mix_pieces(p.feature, ca.piece, cb.piece)))
        sensor = bool(bodies.sensor[a]) or bool(bodies.sensor[b])
        if pts and max(p.depth for p in pts) >= 0.0:
            (sensing if sensor else touching).append((a, b))
        if pts and not sensor:
            rows += [(a, b, p, manifold) for p in pts]
            manifold += 1
    touching_rows = _carry_inert(bodies, cache, "touching", touching)
    sensor_rows = _carry_inert(bodies, cache, "sensor_touching", sensing)
    if not rows:
        return ContactSet.empty(n), touching_rows, sensor_rows
    h = bodies.handle
    contacts = ContactSet(
        body_a=np.array([r[0] for r in rows], dtype=np.int64),
        body_b=np.array([r[1] for r in rows], dtype=np.int64),
        normal=np.array([r[2].normal for r in rows]).reshape(-1, n),
        point=np.array([r[2].point for r in rows]).reshape(-1, n),
        depth=np.array([r[2].depth for r in rows], dtype=np.float64),
        feature=np.array([r[2].feature for r in rows], dtype=np.int64),
        manifold=np.array([r[3] for r in rows], dtype=np.int64),
        key=np.array([_contact_key(int(h[r[0]]), int(h[r[1]]), r[2].feature) for r in rows], dtype=np.int64),
        # materials: geometric mean of the frictions, the larger restitution (common practice)
        friction=np.array([np.sqrt(bodies.friction[r[0]] * bodies.friction[r[1]]) for r in rows]),
        restitution=np.array([max(bodies.restitution[r[0]], bodies.restitution[r[1]]) for r in rows]))
    return contacts, touching_rows, sensor_rows


# =============================================================================================
# solver (core/dynamics/solver.py): contact by contact
# =============================================================================================

# the solver's tuning constants come from core/dynamics/solver.py (imported above, so that a retune there
# keeps the two paths comparable): a tangent impulse beyond the ball by less than _STICK_TOL (relative) is on
# it; a manifold slipping slower than _SLIP_SPEED (m/s) after the solve sticks; the stiffness is
# capped at _HERTZ_CAP times the step rate; _MATCH_DISTANCE (m) is the warm-start match radius


def _tangent_basis(d: Array) -> Array:
    """Orthonormal basis (n-1, n) of the complement of a unit normal d (n,): the rows other than
    row j of the Householder reflection H = I - 2 v v^T / (v . v), v = d - s e_j (j: the largest
    component of d, s its sign), which maps d to s e_j."""
    n = d.shape[0]
    j = int(np.argmax(np.abs(d)))
    s = 1.0 if d[j] >= 0.0 else -1.0
    v = d.copy()
    v[j] -= s
    vv = float(v @ v)
    coef = 2.0 / vv if vv > 1e-300 else 0.0  # v = 0 only when d = s e_j: then H = I is right
    H = np.eye(n) - coef * np.outer(v, v)
    return np.delete(H, j, axis=0)


def _wedge(alg: Algebra, r: Array, u: Array) -> Array:
    """Bivector (k,) r ^ u: component (i, j) is r_i u_j - r_j u_i."""
    return np.array([r[i] * u[j] - r[j] * u[i] for i, j in alg.pairs])


def _soft(hertz: float, zeta: float, dt: float) -> tuple[float, float, float]:
    """Bias rate, mass scale and impulse scale of a soft constraint (an implicit spring-damper)."""
    w = 2.0 * np.pi * hertz
    a = dt * w * (2.0 * zeta + dt * w)
    return w / (2.0 * zeta + dt * w), a / (1.0 + a), 1.0 / (1.0 + a)


def _colour(item_a: list[int], item_b: list[int], slot_a: list[bool], slot_b: list[bool],
            priority: list[int]) -> list[int]:
    """Greedy colouring of items touching bodies a and b: no body with a slot twice in a colour.

    Each colour is built by rounds of Luby's rule: a candidate joins when its priority is the
    largest among the remaining candidates on each of its slotted bodies; candidates that share a
    body with a new member drop out of this colour. Items left over start the next colour.
    """
    colour = [-1] * len(item_a)
    remaining = list(range(len(item_a)))
    c = 0
    while remaining:
        used: set[int] = set()
        cand = remaining
        while cand:
            best: dict[int, int] = {}
            for i in cand:
                for body, slot in ((item_a[i], slot_a[i]), (item_b[i], slot_b[i])):
                    if slot:
                        best[body] = max(best.get(body, -1), priority[i])
            win = [i for i in cand if (not slot_a[i] or best[item_a[i]] == priority[i])
                   and (not slot_b[i] or best[item_b[i]] == priority[i])]
            for i in win:
                colour[i] = c
                if slot_a[i]:
                    used.add(item_a[i])
                if slot_b[i]:
                    used.add(item_b[i])
            cand = [i for i in cand if colour[i] != c and not (slot_a[i] and item_a[i] in used)
                    and not (slot_b[i] and item_b[i] in used)]
        remaining = [i for i in remaining if colour[i] < 0]
        c += 1
    return colour


def _ranks(values: list[int]) -> list[int]:
    """Distinct priorities: the rank of each value in a stable sort."""
    r = [0] * len(values)
    for rank, i in enumerate(sorted(range(len(values)), key=lambda i: values[i])):
        r[i] = rank
    return r


def _row_colours(batching: str, a: list[int], b: list[int], sa: list[bool], sb: list[bool], key: list[int],
                 man: list[int]) -> list[int]:
    """Batch of every row: one batch ("jacobi"), coloured points, or coloured manifolds."""
    M = len(a)
    if batching == "jacobi":
        return [0] * M
    if batching == "point":
        return _colour(a, b, sa, sb, _ranks(key))
    ids = sorted(set(man))
    first = {m: min(i for i in range(M) if man[i] == m) for m in ids}
    mkey = [max(key[i] for i in range(M) if man[i] == m) for m in ids]
    f = [first[m] for m in ids]
    col = _colour([a[i] for i in f], [b[i] for i in f], [sa[i] for i in f], [sb[i] for i in f], _ranks(mkey))
    by_id = dict(zip(ids, col, strict=True))
    return [by_id[man[i]] for i in range(M)]


class _Row:
    """The prepared data of one contact row (directions, Jacobians, masses, bias) and its impulses."""

    i: int  # contact index
    a: int
    b: int
    colour: int
    manifold: int
    D: Array  # (n, n) normal, then the tangent basis
    G: Array  # (n, 2(n + k)) speeds along D from [X_A, X_B]
    H: Array  # (n, 2(n + k)) change of [X_A, X_B] per unit impulse along D
    K01: Array  # (n-1,) normal/tangent coupling of the split effective-mass matrix
    Kt_inv: Array  # (n-1, n-1) inverse of its tangent block
    mass_n: float
    mu: float
    roll_c: float  # combined rolling resistance and spin friction coefficients, m
    spin_c: float
    bias_on: float
    bias_off: float
    keep_on: float
    gain_on: float
    e: float
    vn0: float
    gn: float  # change of the normal speed by this step's gravity
    sep: float
    k_unsplit: float
    ka0: float  # side A's and side B's part of the normal's inverse effective mass
    kb0: float
    lam_n: float
    lam_t: Array  # (n-1,) tangent impulse in the tangent basis
    max_n: float
    lam_warm: float  # last step's normal impulse (the load of the rolling and spin couples)
    sliding: bool  # slid last step (kinetic friction)
    slides_now: bool
    bounces: bool
    tau: float  # time of impact as a fraction of the step (speculative rows; 0 when touching)
    target: float  # normal speed the bounce leaves with
    vn_toi: float  # normal speed at the time of impact

    def __init__(self, **values: Any) -> None:
        self.__dict__.update(values)


def _warm_start_values(contacts: ContactSet, pair: list[int], old: dict[str, Any], warm: bool
                       ) -> tuple[list[float], list[Array], list[bool]]:
    """Last step's normal impulse, world tangent impulse and sliding flag of every row: by key, or
    else from the nearest last-step row of the same body pair within the match distance."""
    M, n = contacts.count, contacts.normal.shape[1]
    lam_n = [0.0] * M
    lam_t = [np.zeros(n) for _ in range(M)]
    sliding = [False] * M
    okeys = old["key"].tolist()
    if not okeys:
        return lam_n, lam_t, sliding
    by_key: dict[int, int] = {}
    for j, k in enumerate(okeys):
        by_key.setdefault(k, j)  # the first of equal keys, as searchsorted finds it
    by_pair: dict[int, list[int]] = {}
    for j in old["by_pair"].tolist() if "by_pair" in old else []:
        by_pair.setdefault(int(old["pair"][j]), []).append(j)
    for i in range(M):
        src = by_key.get(int(contacts.key[i]), -1)
        if src < 0:
            best, best_d2 = -1, np.inf
            for j in by_pair.get(pair[i], []):
                d2 = float(np.sum((old["point"][j] - contacts.point[i]) ** 2))
                if d2 < best_d2:
                    best, best_d2 = j, d2
            if best >= 0 and best_d2 <= _MATCH_DISTANCE ** 2:
                src = best
        if src < 0:
            continue
        sliding[i] = bool(old["sliding"][src])
        if warm:
            lam_n[i] = float(old["normal"][src])
            t = old["tangent"][src]
            dn = contacts.normal[i]
            lam_t[i] = t - float(t @ dn) * dn  # re-projected onto the new tangent plane
    return lam_n, lam_t, sliding


def solve_impulses_reference(alg: Algebra, bodies: Bodies, contacts: ContactSet | None, dt: float,
                             settings: Any, caches: dict[str, Any], gravity: Any = None) -> None:
    """Resolve one step's contact rows contact by contact (arguments as in solver.solve_impulses).

    Updates the velocities of awake dynamic bodies (and pushes their poses) in place and keeps the
    accumulated impulses in ``caches["solver"]`` in the vectorised solver's layout, so either
    solver can warm-start from the other.
    """
    n = alg.n
    if contacts is None or contacts.count == 0:
        z = np.zeros(0, np.int64)
        caches["solver"] = {"key": z, "normal": np.zeros(0), "tangent": np.zeros((0, n)),
                            "sliding": np.zeros(0, bool), "pair": z.copy(), "point": np.zeros((0, n)),
                            "by_pair": z.copy()}
        return
    from .dynamics.sleep import wake_touched

    wake_touched(bodies, contacts, caches)  # a sleeping body hit by an awake one joins this solve
    M = contacts.count
    dyn = [bool(bodies.kind[i] == DYNAMIC and bodies.awake[i]) for i in range(bodies.count)]
    h = bodies.handle
    pair = [(int(h[contacts.body_a[i]]) << 32) | int(h[contacts.body_b[i]]) for i in range(M)]
    old = caches.get("solver") or {"key": np.zeros(0, np.int64)}
    lam_n, lam_t, sliding = _warm_start_values(contacts, pair, old, bool(settings.warm_start))
    active = [i for i in range(M) if dyn[contacts.body_a[i]] or dyn[contacts.body_b[i]]]
    # the step counter salts the batch order: step times the golden-ratio odd constant, modulo 2^64,
    # as a signed 64-bit value (a Weyl sequence, so the order changes every step)
    step = int(old.get("step", 0)) + 1
    salt = (step * 0x9E3779B97F4A7C15) % (1 << 64)
    salt = _to_int64(salt)
    if active:
        g = np.zeros(n) if gravity is None else np.asarray(gravity, dtype=np.float64)
        grav_n = {i: dt * float(contacts.normal[i] @ g) * (float(dyn[contacts.body_b[i]])
                                                            - float(dyn[contacts.body_a[i]])) for i in active}
        _solve_rows(alg, bodies, contacts, active, dyn, lam_n, lam_t, sliding, dt, settings, salt, grav_n)
    contacts.normal_impulse = np.array(lam_n, dtype=np.float64).reshape(M)
    contacts.tangent_impulse = np.array(lam_t, dtype=np.float64).reshape(M, n)
    order = sorted(range(M), key=lambda i: int(contacts.key[i]))
    pair_sorted = [pair[i] for i in order]
    caches["solver"] = {
        "key": contacts.key[order].copy(), "normal": np.array([lam_n[i] for i in order]),
        "tangent": np.array([lam_t[i] for i in order]).reshape(M, n),
        "sliding": np.array([sliding[i] for i in order], dtype=bool),
        "pair": np.array(pair_sorted, dtype=np.int64), "point": contacts.point[order].copy(),
        "by_pair": np.array(sorted(range(M), key=lambda j: pair_sorted[j]), dtype=np.int64),
        "step": np.int64(step)}


def _solve_rows(alg: Algebra, bodies: Bodies, c: ContactSet, active: list[int], dyn: list[bool],
                lam_n: list[float], lam_t_world: list[Array], sliding: list[bool], dt: float,
                settings: Any, salt: int, grav_n: dict[int, float] | None = None) -> None:
    """Solve the active rows; writes their impulses and sliding flags into the given lists. The batch
    priorities are the ranks of the contact keys XOR ``salt`` (signed 64-bit); ``grav_n`` is each
    row's change of normal speed by this step's gravity (solver.py, step 5)."""
    n, k = alg.n, alg.k
    w = n + k
    batching = getattr(settings, "solver_batching", "point")
    a_of = [int(c.body_a[i]) for i in active]
    b_of = [int(c.body_b[i]) for i in active]
    colour = _row_colours(batching, a_of, b_of, [dyn[x] for x in a_of], [dyn[x] for x in b_of],
                          [int(c.key[i]) ^ salt for i in active], [int(c.manifold[i]) for i in active])
    # rows in (colour, manifold, row) order; each colour is one batch
    order = sorted(range(len(active)), key=lambda q: (colour[q], int(c.manifold[active[q]])))
    rows = [active[q] for q in order]
    row_colour = [colour[q] for q in order]
    # mass splitting: a row sees each of its bodies with 1/s of its mass, s the number of rows of
    # the same batch on that body
    share: dict[tuple[int, int], int] = {}
    for i, col in zip(rows, row_colour, strict=True):
        for body in (int(c.body_a[i]), int(c.body_b[i])):
            if dyn[body]:
                share[(col, body)] = share.get((col, body), 0) + 1

    # per-body state X = [v, B], inverse mass and world inverse inertia (zero unless dynamic and awake)
    X = np.concatenate([bodies.velocity, bodies.angular_velocity], axis=1).copy()
    inv_m: dict[int, float] = {}
    inv_I: dict[int, Array] = {}
    com: dict[int, Array] = {}
    for i in rows:
        for body in (int(c.body_a[i]), int(c.body_b[i])):
            if body in com:
                continue
            com[body] = bodies.position[body] + bodies.rotation[body] @ bodies.local_centroid[body]
            if dyn[body]:
                C2 = alg.rotor_to_compound(alg.rotor_mul(bodies.rotor[body], bodies.principal_rotor[body]))
                inv_m[body] = float(bodies.inv_mass[body])
                inv_I[body] = (C2 * bodies.inv_inertia[body][None, :]) @ C2.T
            else:
                inv_m[body] = 0.0
                inv_I[body] = np.zeros((k, k))

    hertz = min(float(settings.spring_frequency), _HERTZ_CAP / dt)
    rate, mscale, iscale = _soft(hertz, float(settings.spring_damping_ratio), dt)
    prepared: list[_Row] = []
    for i, col in zip(rows, row_colour, strict=True):
        a, b = int(c.body_a[i]), int(c.body_b[i])
        d = c.normal[i]
        D = np.vstack([d, _tangent_basis(d)])  # (n, n): the normal, then the tangents
        rA, rB = c.point[i] - com[a], c.point[i] - com[b]
        JA = np.array([_wedge(alg, rA, u) for u in D])  # (n, k): angular Jacobian r ^ u per direction
        JB = np.array([_wedge(alg, rB, u) for u in D])
        # Jacobian G (n, 2w): speeds along the directions = G [X_A, X_B]; response H (n, 2w): the
        # change of [X_A, X_B] per unit impulse along each direction (true masses)
        G = np.hstack([-D, -JA, D, JB])
        H = np.hstack([-inv_m[a] * D, -(JA @ inv_I[a].T), inv_m[b] * D, JB @ inv_I[b].T])
        KA = G[:, :w] @ H[:, :w].T
        KB = G[:, w:] @ H[:, w:].T
        s_a = float(share[(col, a)]) if dyn[a] else 1.0
        s_b = float(share[(col, b)]) if dyn[b] else 1.0
        K = s_a * KA + s_b * KB  # effective-mass matrix with the split masses
        mass_n = 1.0 / K[0, 0]
        # keep the spring at the row's true stiffness although its bodies are split
        unsplit = (KA[0, 0] + KB[0, 0]) * mass_n
        mu_k = float(c.friction[i])
        mu_s = float(np.sqrt(bodies.static_friction[a] * bodies.static_friction[b]))
        sep = -float(c.depth[i])
        spec = sep > 0.0
        soft = float(c.depth[i]) > 0.0
        X_ab = np.concatenate([X[a], X[b]])
        prepared.append(_Row(
            i=i, a=a, b=b, colour=col, manifold=int(c.manifold[i]), D=D, G=G, H=H, K01=K[0, 1:].copy(),
            Kt_inv=np.linalg.inv(K[1:, 1:]), mass_n=mass_n,
            mu=mu_k if sliding[i] else max(mu_s, mu_k),
            roll_c=float(np.sqrt(bodies.rolling_resistance[a] * bodies.rolling_resistance[b])),
            spin_c=float(np.sqrt(bodies.spin_friction[a] * bodies.spin_friction[b])),
            # speculative rows are rigid and allow closing at gap/dt in every pass; touching rows
            # push overlap beyond the slop out softly in the biased passes only
            bias_on=sep / dt, bias_off=sep / dt if spec else 0.0,
            # overlapping rows are soft in the biased passes; exactly touching rows stay rigid
            keep_on=1.0 - (iscale * unsplit if soft else 0.0), gain_on=mass_n * (mscale if soft else 1.0),
            e=float(c.restitution[i]), vn0=float(G[0] @ X_ab), gn=(grav_n or {}).get(i, 0.0),
            lam_n=lam_n[i], lam_t=D[1:] @ lam_t_world[i], max_n=lam_n[i], lam_warm=lam_n[i],
            sliding=sliding[i], slides_now=False, bounces=False, sep=sep,
            k_unsplit=float(KA[0, 0] + KB[0, 0]), ka0=float(KA[0, 0]), kb0=float(KB[0, 0])))

    # an overlapping row's spring rests at the allowance less the mean static deflection of its
    # manifold's overlapping rows under the warm-started load, lambda / (m_eff dt w^2)
    w_spring = 2.0 * np.pi * hertz
    stiff = dt * w_spring * w_spring
    # (and less the manifold's tilt: its deepest overlap less the mean of those rows' overlaps)
    defl: dict[int, list[float]] = {}
    for r in prepared:
        if r.sep < 0.0:
            acc = defl.setdefault(r.manifold, [0.0, 0.0, 0.0, 0.0])
            acc[0] += r.lam_n * r.k_unsplit / stiff
            acc[1] += 1.0
            acc[2] += -r.sep
            acc[3] = max(acc[3], -r.sep)
    for r in prepared:
        if r.sep <= 0.0:
            total, count, depth_total, deepest = defl.get(r.manifold, [0.0, 0.0, 0.0, 0.0])
            count = max(count, 1.0)
            tilt = max(deepest - depth_total / count - _TILT_DEADBAND, 0.0)
            rest_at = settings.overlap_allowance - total / count - tilt
            r.bias_on = max(rate * min(r.sep + rest_at, 0.0), -settings.separation_speed_cap)

    # warm start: apply last step's accumulated impulses once
    for r in prepared:
        X[r.a] += np.concatenate([[r.lam_n], r.lam_t]) @ r.H[:, :w]
    for r in prepared:
        X[r.b] += np.concatenate([[r.lam_n], r.lam_t]) @ r.H[:, w:]

    # batches and, inside each, the segments whose changes are summed (a manifold, or one row)
    batches: list[list[list[_Row]]] = []
    for r in prepared:
        if not batches or batches[-1][-1][0].colour != r.colour:
            batches.append([[r]])
        elif batching == "point" or batches[-1][-1][-1].manifold != r.manifold:
            batches[-1].append([r])
        else:
            batches[-1][-1].append(r)

    def row_update(r: _Row, V: Array, bias: float, keep: float, gain: float) -> Array:
        """One row's normal and friction impulse updates from its speeds V (n,); returns dlambda (n,)."""
        # normal first (friction then sees this iteration's load); the accumulated impulse stays >= 0
        new_n = max(keep * r.lam_n - gain * (V[0] + bias), 0.0)
        dl_n = new_n - r.lam_n
        r.lam_n = new_n
        r.max_n = max(r.max_n, new_n)
        # friction: one vector impulse in the tangent space, from the tangent speeds after the
        # normal impulse (K is symmetric, so K[1:, 0] = K01), kept on the ball mu lambda_n
        vt = V[1:] + r.K01 * dl_n
        new_t = r.lam_t - r.Kt_inv @ vt
        radius = r.mu * new_n
        norm = float(np.sqrt(new_t @ new_t))
        if norm > radius * (1.0 + _STICK_TOL):
            vnorm = float(np.sqrt(vt @ vt))
            if r.sliding and vnorm > 1e-9:
                new_t = -(radius / vnorm) * vt  # kinetic friction opposes the slip, on the rim
            else:
                new_t = new_t * (radius / norm)  # a sticking point is scaled back onto the ball
        dl_t = new_t - r.lam_t
        r.lam_t = new_t
        return np.concatenate([[dl_n], dl_t])

    def sweep(biased: bool) -> None:
        """One Gauss-Seidel pass over the batches; inside a batch every row reads the velocities of
        the batch start and the changes of a segment are summed before they are added."""
        for batch in batches:
            changes = []
            for seg in batch:
                total = np.zeros(2 * w)
                for r in seg:
                    V = r.G @ np.concatenate([X[r.a], X[r.b]])
                    if biased:
                        dl = row_update(r, V, r.bias_on, r.keep_on, r.gain_on)
                    else:
                        dl = row_update(r, V, r.bias_off, 1.0, r.mass_n)
                    total = total + dl @ r.H
                changes.append((seg[0].a, seg[0].b, total))
            for a, b, total in changes:
                X[a] += total[:w]
                X[b] += total[w:]

    for _ in range(int(settings.solver_passes)):
        sweep(True)

    def spec_left() -> float:
        """How much farther than its gap a fast speculative row would close within the step, m."""
        over = [-float(r.G[0] @ np.concatenate([X[r.a], X[r.b]])) * dt - r.sep
                for r in prepared if r.sep > 0.0 and r.vn0 < -_SPEC_FAST]
        return max(max(over), 0.0) if over else 0.0

    # more biased passes while a fast speculative row would still close past its gap (solver.py)
    extra = 0
    while int(settings.bias_free_passes) and extra < _RELAX_EXTRA and spec_left() > _SPEC_TOL:
        sweep(True)
        extra += 1
    X_biased = X.copy()
    for _ in range(int(settings.bias_free_passes)):
        sweep(False)

    def push_left() -> float:
        """The largest separating normal speed of a row that holds a normal impulse (0 if none)."""
        speeds = [float(r.G[0] @ np.concatenate([X[r.a], X[r.b]])) for r in prepared if r.lam_n > 0.0]
        return max(speeds) if speeds else 0.0

    # more bias-free passes while such a row still separates faster than the tolerance (push
    # velocity not yet taken out), at most _RELAX_EXTRA more
    extra = 0
    deep = any(r.sep <= 0.0 and r.bias_on < -_RELAX_PUSH for r in prepared)
    while deep and int(settings.bias_free_passes) and extra < _RELAX_EXTRA and push_left() > _RELAX_TOL:
        sweep(False)
        extra += 1


    X_unbiased = X.copy()  # the push is what the bias-free passes took out
    if int(settings.bias_free_passes) and batching == "point":
        _shock_propagation(prepared, X, dyn, w)
    if any(r.roll_c > 0.0 or r.spin_c > 0.0 for r in prepared):
        _contact_couples(alg, batches, X, inv_I, share, dyn)

    # a manifold slides (kinetic friction next step) when the sum of its points' friction impulses
    # is at the sum of their limits and some point still slips faster than the slip speed;
    # otherwise all its points stick (static next step)
    per_manifold: dict[int, list[float]] = {}  # manifold -> [max slip^2, total |lam_t|, limit]
    for r in prepared:
        slip = r.G[1:] @ np.concatenate([X[r.a], X[r.b]])
        acc = per_manifold.setdefault(r.manifold, [0.0, 0.0, 0.0])
        acc[0] = max(acc[0], float(slip @ slip))
        acc[1] += float(np.sqrt(r.lam_t @ r.lam_t))
        acc[2] += r.mu * r.lam_n
    for r in prepared:
        max_slip2, total_t, limit = per_manifold[r.manifold]
        r.slides_now = total_t >= (1.0 - 1e-3) * limit and limit > 0.0 and max_slip2 > _SLIP_SPEED ** 2

    # restitution: rows that approached faster than the threshold and took an impulse bounce
    thr = float(settings.bounce_threshold)
    for r in prepared:
        # time of impact as a fraction of the step, the approach speed then, the bounce target
        closing = -r.vn0
        spec = r.sep > 0.0
        r.tau = min(r.sep / (closing * dt), 1.0) if spec and closing > 0.0 else 0.0
        r.vn_toi = r.vn0 + r.gn * (r.tau - 0.5) if spec else r.vn0 - r.gn
        r.target = -r.e * r.vn_toi + r.gn * ((0.5 - r.tau) if spec else 0.5)
        r.bounces = r.e > 0.0 and r.vn_toi < -thr and r.max_n > 0.0
    for batch in batches:
        changes = []
        for seg in batch:
            total = np.zeros(2 * w)
            for r in seg:
                if r.bounces:
                    vn = float(r.G[0] @ np.concatenate([X[r.a], X[r.b]]))
                    new_n = max(r.lam_n - r.mass_n * (vn - r.target), 0.0)
                    total = total + (new_n - r.lam_n) * r.H[0]
                    r.lam_n = new_n
            changes.append((seg[0].a, seg[0].b, total))
        for a, b, total in changes:
            X[a] += total[:w]
            X[b] += total[w:]

    # time of impact: a bounce on a speculative row (gap g) happens when the gap closes, part of
    # the way into the step; moving the bodies apart by the position impulse -(1 + e) g m_eff
    # (shared by the manifold's bouncing speculative points) puts them where the bounce leaves them
    toi_share: dict[int, int] = {}
    for r in prepared:
        if r.bounces and r.sep > 0.0:
            toi_share[r.manifold] = toi_share.get(r.manifold, 0) + 1
    toi_move: dict[int, Array] = {}
    toi_rows = [r for r in prepared if r.bounces and r.sep > 0.0]
    for side in (0, 1):  # A's moves, then B's
        for r in toi_rows:
            # close the gap, leave at -e v_n(toi), fly the rest of the step (solver.py, step 5)
            shift = r.e * r.vn_toi * r.tau * dt - r.sep + 0.5 * r.gn * r.tau * r.tau * dt
            p_pos = shift * (1.0 / r.k_unsplit) / toi_share[r.manifold]
            body = r.b if side else r.a
            part = r.H[0, w:] if side else r.H[0, :w]
            toi_move[body] = toi_move.get(body, np.zeros(w)) + p_pos * part

    # velocities back; the push moves positions by dt x (biased - unbiased velocity)
    for body in range(bodies.count):
        if not dyn[body]:
            continue
        bodies.velocity[body] = X[body, :n]
        bodies.angular_velocity[body] = X[body, n:]
        dX = dt * (X_biased[body] - X_unbiased[body])
        if body in toi_move:
            dX = dX + toi_move[body]
        if np.any(dX != 0.0):
            _push_pose(alg, bodies, body, dX)
    for r in prepared:
        lam_n[r.i] = r.lam_n
        lam_t_world[r.i] = r.D[1:].T @ r.lam_t
        sliding[r.i] = r.slides_now


def _shock_propagation(prepared: list[_Row], X: Array, dyn: Any, w: int) -> None:
    """Shock propagation (Guendelman, Bridson and Fedkiw, SIGGRAPH 2003) on the rows that hold a
    light body under a much heavier one, and on the rows beneath them down to the ground.

    Levels: a body that is not dynamic has level 0, a dynamic one the fewest load-carrying rows
    (normal impulse > 0) to such a body. A row between two dynamic bodies whose normal inverse
    effective masses differ by more than _SHOCK_RATIO, between different levels, is taken, and so
    is every load-carrying row between levels under the lower body of a taken row. The taken rows
    are visited from the lowest level up (then by batch, then in row order) _SHOCK_PASSES times;
    each treats its lower body as fixed: its normal and friction impulses (accumulated apart from
    the solve's, and not warm-started) change only the upper body, so that the upper body cannot
    sink into the lower one whatever their mass ratio. Speculative rows still allow closing at
    gap/dt; the friction of solve and shock together stays on the ball of the total load.
    """
    N = X.shape[0]
    big = N + 1
    held = [r for r in prepared if r.lam_n > 0.0]

    def ratio(r: _Row) -> float:
        return max(r.ka0, r.kb0) / max(min(r.ka0, r.kb0), 1e-300)

    if not any(dyn[r.a] and dyn[r.b] and ratio(r) > _SHOCK_RATIO for r in held):
        return
    level = [0 if not dyn[i] else big for i in range(N)]
    changed = True
    while changed:  # shortest load-carrying path to a body that is not dynamic
        changed = False
        new = list(level)
        for r in held:
            new[r.b] = min(new[r.b], level[r.a] + 1)
            new[r.a] = min(new[r.a], level[r.b] + 1)
        for i in range(N):
            if not dyn[i]:
                new[i] = 0
        if new != level:
            level, changed = new, True
    steps = [r for r in held if level[r.a] != level[r.b] and min(level[r.a], level[r.b]) < big]
    lower = {id(r): (r.a if level[r.a] < level[r.b] else r.b) for r in steps}
    upper = {id(r): (r.b if level[r.a] < level[r.b] else r.a) for r in steps}
    taken = [r for r in steps if dyn[r.a] and dyn[r.b] and ratio(r) > _SHOCK_RATIO]
    if not taken:
        return
    under = {lower[id(r)] for r in taken}
    chosen = {id(r) for r in taken}
    grew = True
    while grew:  # the rows under them, down to the ground
        grew = False
        for r in steps:
            if id(r) not in chosen and upper[id(r)] in under:
                chosen.add(id(r))
                under.add(lower[id(r)])
                grew = True
    rows = [r for r in prepared if id(r) in chosen]  # in (colour, manifold) order
    rows.sort(key=lambda r: (min(level[r.a], level[r.b]), r.colour))
    parts = []
    for r in rows:
        up_is_b = level[r.a] < level[r.b]
        sl = slice(w, 2 * w) if up_is_b else slice(0, w)
        Hu = np.zeros_like(r.H)
        Hu[:, sl] = r.H[:, sl]
        Ku = r.G[:, sl] @ r.H[:, sl].T  # effective mass with the lower body fixed
        parts.append((r, Hu, Ku, np.linalg.inv(Ku[1:, 1:])))
    acc = {id(r): np.zeros(r.G.shape[0]) for r in rows}
    for _ in range(_SHOCK_PASSES):
        for r, Hu, Ku, Kt_inv in parts:
            V = r.G @ np.concatenate([X[r.a], X[r.b]])
            old = acc[id(r)]
            new_n = max(old[0] - (V[0] + r.bias_off) / Ku[0, 0], 0.0)
            vt = V[1:] + Ku[0, 1:] * (new_n - old[0])
            lt = r.lam_t + old[1:] - Kt_inv @ vt
            radius = r.mu * (r.lam_n + new_n)
            norm = float(np.sqrt(lt @ lt))
            if norm > radius:
                lt = lt * (radius / norm)
            new = np.concatenate([[new_n], lt - r.lam_t])
            change = (new - old) @ Hu
            X[r.a] += change[:w]
            X[r.b] += change[w:]
            acc[id(r)] = new


def _contact_couples(alg: Algebra, batches: list[list[list[_Row]]], X: Array, inv_I: dict[int, Array],
                     share: dict[tuple[int, int], int], dyn: Any) -> None:
    """Rolling resistance and spin friction at single-point contacts that carried a load last step
    (limits from that load, lam_warm), row by row: a couple against the relative angular
    velocity B_B - B_A in the planes of the contact frame, n ^ t_i (rolling, kept within
    b lambda_n: Beer and Johnston's coefficient of rolling resistance b) and t_i ^ t_j (spin, kept
    within c lambda_n, c the spin-friction coefficient: (2/3) mu a for uniform pressure over a
    patch of radius a, Johnson 1985), b and c the rows' combined material coefficients; split
    masses as for friction; ``_COUPLE_PASSES`` passes over the batches after the relax passes,
    not warm-started."""
    n = alg.n
    pairs = [(int(i), int(j)) for i, j in alg.pairs]
    planes = [(0, 1 + i) for i in range(n - 1)] + [(1 + i, 1 + j) for i in range(n - 1)
                                                    for j in range(i + 1, n - 1)]
    per_manifold: dict[int, int] = {}
    for batch in batches:
        for seg in batch:
            for r in seg:
                per_manifold[r.manifold] = per_manifold.get(r.manifold, 0) + 1
    prep: dict[int, tuple[Array, Array, Array, Array]] = {}
    for batch in batches:
        for seg in batch:
            for r in seg:
                if per_manifold[r.manifold] != 1 or r.lam_warm <= 0.0:
                    continue  # only single-point contacts that carried a load last step
                S = np.array([[r.D[u, p] * r.D[v, q] - r.D[u, q] * r.D[v, p] for p, q in pairs]
                              for u, v in planes])
                RA = S @ inv_I[r.a].T  # rows: I_A^-1 S_d
                RB = S @ inv_I[r.b].T
                s_a = float(share[(r.colour, r.a)]) if dyn[r.a] else 1.0
                s_b = float(share[(r.colour, r.b)]) if dyn[r.b] else 1.0
                Ks = s_a * S @ RA.T + s_b * S @ RB.T
                prep[id(r)] = (S, RA, RB, np.linalg.inv(Ks))
    acc = {key: np.zeros(v[0].shape[0]) for key, v in prep.items()}
    for _ in range(_COUPLE_PASSES):
        for batch in batches:
            changes = []
            for seg in batch:
                dA = np.zeros(X.shape[1])
                dB = np.zeros(X.shape[1])
                for r in seg:
                    if id(r) not in prep:
                        continue
                    S, RA, RB, Ks_inv = prep[id(r)]
                    spin = S @ (X[r.b, n:] - X[r.a, n:])
                    old = acc[id(r)]
                    new = old - Ks_inv @ spin
                    for part, limit in ((slice(0, n - 1), r.roll_c * r.lam_warm),
                                        (slice(n - 1, None), r.spin_c * r.lam_warm)):
                        norm = float(np.sqrt(new[part] @ new[part]))
                        if norm > limit:
                            new[part] = new[part] * (limit / norm)
                    acc[id(r)] = new
                    dA[n:] -= (new - old) @ RA
                    dB[n:] += (new - old) @ RB
                changes.append((seg[0].a, seg[0].b, dA, dB))
            for a, b, dA, dB in changes:
                X[a] += dA
                X[b] += dB


def _push_pose(alg: Algebra, bodies: Bodies, i: int, dX: Array) -> None:
    """Move body i by [dx, dB] (n + k,): centre of mass by dx, rotor by exp(-dB/2)."""
    n = alg.n
    c_local = bodies.local_centroid[i]
    com = bodies.position[i] + bodies.rotation[i] @ c_local + dX[:n]
    R = alg.rotor_normalize(alg.rotor_mul(alg.rotor(dX[n:]), bodies.rotor[i]), steps=1)
    M = alg.rotor_to_matrix(R)
    bodies.rotor[i] = R
    bodies.rotation[i] = M
    bodies.position[i] = com - M @ c_local


# =============================================================================================
# the stages
# =============================================================================================


def _stage_accelerate(sim: Any, dt: float) -> None:
    accelerate_reference(sim.alg, sim.bodies, sim.gravity, dt, sim.settings.gyroscopic)


def _stage_find_pairs(sim: Any, dt: float) -> None:
    sim.pairs = find_pairs_reference(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, dt)


def _stage_find_contacts(sim: Any, dt: float) -> None:
    from .world.stages import note_touching

    contacts, touching, sensors = collide_reference(sim.alg, sim.bodies, sim.pairs, sim.info.shapes,
                                                    sim.settings, sim.caches, dt)
    sim.contacts = contacts
    note_touching(sim, touching, sensors, dt)


def _stage_solve(sim: Any, dt: float) -> None:
    solve_impulses_reference(sim.alg, sim.bodies, sim.contacts, dt, sim.settings, sim.caches, sim.gravity)


def _stage_advance_poses(sim: Any, dt: float) -> None:
    advance_poses_reference(sim.alg, sim.bodies, dt)


_REFERENCE_STAGES = {
    "accelerate": _stage_accelerate,
    "find_pairs": _stage_find_pairs,
    "find_contacts": _stage_find_contacts,
    "solve_impulses": _stage_solve,
    "advance_poses": _stage_advance_poses,
}


def use_reference_stages(sim: Any) -> None:
    """Replace a Simulation's integrate, broadphase, narrowphase and solver stages by the scalar
    reference versions, in place (stage names and order unchanged; other stages, such as the
    contact events of ``report_contacts`` and the islands, are kept).

    Raises:
        InputTypeError: ``sim`` is not a Simulation (it has no ``stages`` list).
    """
    stages = getattr(sim, "stages", None)
    if not isinstance(stages, list):
        raise InputTypeError(f"sim: expected a Simulation (with a list of stages), got {type(sim).__name__}")
    sim.stages = [(name, _REFERENCE_STAGES.get(name, fn)) for name, fn in stages]
