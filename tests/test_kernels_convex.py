"""Compiled convex narrowphase (core/kernels/convex_tpl.py) in lockstep with the numpy path.

Reference: the project's own numpy path, ``gjk.convex_pair`` and ``gjk.ball_convex`` (themselves
checked against outside references in test_gjk.py), pair by pair. Every pair of a dimension goes
through one call of the compiled batch kernel, and each pair's rows must match the numpy rows:
same count, same features, normals, points and depths within 1e-9.

Poses: random rotations; B placed at a random offset (overlapping or separated), then moved along
the numpy contact normal to touching, to a gap inside the margin and to a gap beyond it; and face
on face (B's rotation = A's, B shifted along one of A's facet normals so that the facets touch),
the resting case of the game. Both paths make the same discrete decisions except at exact ties
that rounding breaks (the last bits of BLAS and serial sums differ); random poses avoid those, and
the face-on-face poses are offset by a random tangent shift so that no vertex lies exactly on a
side plane.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import kernels
from ndrigid.core.algebra import Algebra
from ndrigid.core.collision import narrowphase as nph
from ndrigid.core.collision.gjk import ball_convex, convex_pair
from ndrigid.core.geometry import polytopes
from ndrigid.core.geometry.shapes import Ball, Box, ConvexPolytope
from scipy.stats import special_ortho_group

pytestmark = pytest.mark.skipif(not kernels.available(), reason="numba is not available")

MARGIN = 0.05
TOL = 1e-9


def _shapes(n: int, rng: np.random.Generator) -> list[ConvexPolytope]:
    out: list[ConvexPolytope] = [polytopes.hypercube(n, edge=0.8), polytopes.regular_simplex(n, edge=1.2),
                                 polytopes.orthoplex(n, circumradius=0.7), Box(rng.uniform(0.2, 0.6, n)),
                                 ConvexPolytope(rng.normal(size=(n + 6, n)) * 0.5)]
    if n == 4:  # the 600-cell exercises the pruned facet-normal candidates (600 facets, 120 vertices)
        out += [polytopes.cell_24(circumradius=0.7), polytopes.cell_600(circumradius=0.6)]
    return out


def _rot(n: int, rng: np.random.Generator) -> np.ndarray:
    return special_ortho_group.rvs(n, random_state=rng)


def _expm_skew(S: np.ndarray) -> np.ndarray:
    """Rotation exp(S) of a skew matrix S."""
    from scipy.linalg import expm

    return expm(S)


def _cases(n: int, rng: np.random.Generator, shapes: list[ConvexPolytope], count: int) -> list[tuple]:
    """(A, pa, Ra, B, pb, Rb) poses: A a polytope or a Ball."""
    alg = Algebra(n)
    out = []
    for _ in range(count):
        A = shapes[rng.integers(len(shapes))]
        B = shapes[rng.integers(len(shapes))]
        Ra, Rb = _rot(n, rng), _rot(n, rng)
        pa = rng.normal(size=n) * 0.3
        u = rng.normal(size=n)
        u /= np.linalg.norm(u)
        pb = pa + u * rng.uniform(0.1, 1.2) * (A.bounding_radius + B.bounding_radius)
        out.append((A, pa, Ra, B, pb, Rb))
        mp = convex_pair(alg, A, pa, Ra, B, pb, Rb, MARGIN)
        if len(mp.depth):  # move B along the normal: touching, inside the margin, beyond it
            d, nrm = float(np.max(mp.depth)), mp.normal[0]
            for extra in (0.0, 0.5 * MARGIN, 2.0 * MARGIN):
                out.append((A, pa, Ra, B, pb + nrm * (d + extra), Rb))
        # nearly face on face: B turned from A's rotation by a small random angle (an exact copy of
        # the rotation makes symmetric ties: equal depths, equally anti-parallel facets), resting on
        # A's facet f with a small gap or overlap, shifted along the facet
        f = rng.integers(len(A.facet_normals))
        nf = Ra @ A.facet_normals[f]
        X = rng.normal(size=(n, n)) * 0.01
        Rb2 = _expm_skew(X - X.T) @ Ra
        gap = rng.choice([0.0, -0.01, 0.02])
        shift = rng.normal(size=n) * 0.05
        shift -= (shift @ nf) * nf
        hb = float(np.max(-(B.vertices @ (Rb2.T @ nf))))  # B's extent below its centre along -n_f
        pb2 = pa + nf * (A.facet_offsets[f] + hb + gap) + shift
        out.append((A, pa, Ra, B, pb2, Rb2))
    for _ in range(count // 2):  # balls against polytopes: outside, near, centre inside
        B = shapes[rng.integers(len(shapes))]
        Rb = _rot(n, rng)
        pb = rng.normal(size=n) * 0.3
        u = rng.normal(size=n)
        u /= np.linalg.norm(u)
        r = rng.uniform(0.1, 0.5)
        c = pb + u * rng.uniform(0.0, 1.3) * (B.bounding_radius + r)
        out.append((Ball(n, r), c, np.eye(n), B, pb, Rb))
    return out


def _numpy(alg: Algebra, case: tuple):
    A, pa, Ra, B, pb, Rb = case
    if isinstance(A, Ball):
        return ball_convex(alg, pa, A.radius, B, pb, Rb, MARGIN)
    return convex_pair(alg, A, pa, Ra, B, pb, Rb, MARGIN)


def _compiled(n: int, cases: list[tuple]):
    """All cases through one call of the batch kernel, with the narrowphase's packed shape table."""
    mod = kernels.load("convex", n)
    poly = list({id(s): s for c in cases for s in (c[0], c[3]) if not isinstance(s, Ball)}.values())
    slot = {id(s): i for i, s in enumerate(poly)}
    table = nph._convex_table(poly, {})
    ball = np.array([isinstance(c[0], Ball) for c in cases])
    sa = np.array([0 if isinstance(c[0], Ball) else slot[id(c[0])] for c in cases], dtype=np.int64)
    sb = np.array([slot[id(c[3])] for c in cases], dtype=np.int64)
    rad = np.array([c[0].radius if isinstance(c[0], Ball) else 0.0 for c in cases])
    pa = np.array([c[1] for c in cases])
    Ra = np.array([c[2] for c in cases])
    pb = np.array([c[4] for c in cases])
    Rb = np.array([c[5] for c in cases])
    return mod.convex_batch(ball, sa, sb, pa, Ra, rad, pb, Rb, np.full(len(cases), MARGIN), *table)


def _nearest_face_is_simplex(case: tuple, normal: np.ndarray) -> bool:
    """Whether the face of A - B nearest the origin along a one-point contact's normal is a simplex.

    That face is the sum of A's support face along the normal and B's along its opposite (vertices
    within a small tolerance of the extreme). Its points a_i - b_j are |F_A| |F_B| in number; the
    face is a simplex (and GJK's / EPA's final simplex, hence the witness weights and the vertex
    sets of the feature id, unique) exactly when one support face is a single vertex and the other
    an affinely independent set.
    """
    A, pa, Ra, B, pb, Rb = case
    Vb = pb + B.vertices @ Rb.T
    Va = pa[None] if isinstance(A, Ball) else pa + A.vertices @ Ra.T
    size = float(np.max(np.abs(Va)) + np.max(np.abs(Vb)))
    tol = 1e-8 * size
    ha, hb = Va @ normal, Vb @ normal
    FA, FB = Va[ha >= ha.max() - tol], Vb[hb <= hb.min() + tol]
    ra = np.linalg.matrix_rank(FA - FA[0], tol=tol) if len(FA) > 1 else 0
    rb = np.linalg.matrix_rank(FB - FB[0], tol=tol) if len(FB) > 1 else 0
    return min(len(FA), len(FB)) == 1 and len(FA) * len(FB) == ra + rb + 1


def _sampling_tie(T: np.ndarray, D: np.ndarray, valid: np.ndarray, cap: int, tol: float,
                  codes: np.ndarray) -> bool:
    """Whether clip.reduce_points, given these inputs of one pair, has to choose between candidates
    whose scores (depth, then distance to the kept set) tie within 1e-9: then rounding decides."""
    v = valid.copy()
    for i in np.flatnonzero(v):  # the first slot of each code, as reduce_points
        v[i] = not np.any(v[:i] & (codes[:i] == codes[i]))
    t, d = T[v], D[v]
    if len(d) <= cap:
        return False  # everything is kept: no choice
    if np.sum(d >= d.max() - 1e-9) > 1:
        return True
    mind = np.sum((t - t[np.argmax(d)]) ** 2, axis=1)
    for _ in range(cap - 1):
        m = mind.max()
        if not m > tol**2:
            return False
        if np.sum(mind >= m - 1e-9 * max(m, 1.0)) > 1:
            return True
        mind = np.minimum(mind, np.sum((t - t[np.argmax(mind)]) ** 2, axis=1))
    return False


@dims(2, 3, 4, 5)
def test_convex_kernel_lockstep(dim: int, rng: np.random.Generator, monkeypatch: pytest.MonkeyPatch) -> None:
    """Count and normals always equal; depths, points and features equal except at two kinds of
    exact ties, where rounding decides in both paths alike and the test checks what is determined:

    * one-point (mixed) contacts where the face of A - B nearest the origin is not a simplex (two
      edges meeting in 3-D make a parallelogram of four points of A - B; a box facet has 2^(n-1)
      vertices): several subsets of the simplex are equally near the origin, and which one
      Johnson's sub-algorithm keeps sets the vertex sets of the feature id and, after the drop of
      a flat full simplex, the weights of the witness point. Checked: the depth.
    * face manifolds whose farthest-point reduction meets equal scores (the corners of a box facet
      are symmetric: two corners are equally far from the kept ones, whatever the pose). Checked:
      the deepest depth, and every kept point is one of the numpy path's candidates (its code).

    Ties that made the paths differ are counted and must stay a minority.
    """
    from ndrigid.core.collision import gjk

    seen: list[tuple] = []
    original = gjk.reduce_points

    def spy(T, D, valid, cap, tol, codes=None):  # type: ignore[no-untyped-def]
        seen.append((T[0], D[0], valid[0], cap, float(tol), codes[0]))
        return original(T, D, valid, cap, tol, codes)

    monkeypatch.setattr(gjk, "reduce_points", spy)
    n = dim
    alg = Algebra(n)
    cases = _cases(n, rng, _shapes(n, rng), 60)
    pair, normal, point, depth, feature = _compiled(n, cases)
    kinds = {"points": 0, "face": 0, "one": 0, "empty": 0, "one_tie": 0, "face_tie": 0}
    for q, case in enumerate(cases):
        seen.clear()
        ref = _numpy(alg, case)
        sel = pair == q
        msg = f"case {q}"
        assert sel.sum() == len(ref.depth), (q, sel.sum(), len(ref.depth))
        np.testing.assert_allclose(normal[sel], ref.normal, rtol=0, atol=TOL, err_msg=msg)
        kinds["points"] += len(ref.depth)
        same = (np.array_equal(feature[sel], ref.feature)
                and np.allclose(point[sel], ref.point, rtol=0, atol=TOL)
                and np.allclose(depth[sel], ref.depth, rtol=0, atol=TOL))
        if not same and len(ref.depth) == 1 and not _nearest_face_is_simplex(case, ref.normal[0]):
            kinds["one_tie"] += 1
            np.testing.assert_allclose(depth[sel], ref.depth, rtol=0, atol=TOL, err_msg=msg)
            continue
        if not same and len(ref.depth) > 1 and seen and _sampling_tie(*seen[-1]):
            kinds["face_tie"] += 1
            np.testing.assert_allclose(depth[sel].max(), ref.depth.max(), rtol=0, atol=TOL, err_msg=msg)
            head = ref.feature[0] >> 20 << 20  # reference body, reference and incident facets
            cand = head + seen[-1][5][seen[-1][2]]
            assert np.all(np.isin(feature[sel], cand)), msg
            continue
        np.testing.assert_array_equal(feature[sel], ref.feature, err_msg=msg)
        np.testing.assert_allclose(point[sel], ref.point, rtol=0, atol=TOL, err_msg=msg)
        np.testing.assert_allclose(depth[sel], ref.depth, rtol=0, atol=TOL, err_msg=msg)
        kinds["empty" if len(ref.depth) == 0 else "one" if len(ref.depth) == 1 else "face"] += 1
    # the poses exercise every outcome (else the comparison above would prove little)
    assert kinds["empty"] and kinds["one"] and kinds["face"], kinds
    assert kinds["one_tie"] + kinds["face_tie"] <= 0.2 * len(cases), kinds
    assert np.all(np.diff(pair) >= 0)


@dims(3, 4)
def test_collide_colliders_routes_convex_pairs_in_lockstep(dim: int, rng: np.random.Generator) -> None:
    """The hook: collide_colliders with compiled kernels against the numpy path (Settings(compiled=
    False)) on one table of colliders (balls, boxes, hulls, a half-space) in random poses, every pair
    in both orders (A/B swaps and normal flips are the narrowphase's). Reference: the numpy path.
    Same rows per pair with equal normals and depths; points and features equal where the nearest
    face of A - B is a simplex (see the test above for the ties)."""
    from ndrigid.core import Settings
    from ndrigid.core.geometry.shapes import HalfSpace

    n = dim
    alg = Algebra(n)
    shapes = [Ball(n, 0.3), Box(rng.uniform(0.2, 0.5, n)), ConvexPolytope(rng.normal(size=(n + 6, n)) * 0.5),
              ConvexPolytope(rng.normal(size=(n + 8, n)) * 0.4), polytopes.orthoplex(n, circumradius=0.6)]
    store = nph.ShapeStore([], {})
    parts, poses = [], []
    for i in range(14):
        s = shapes[i % len(shapes)]
        p, R = rng.normal(size=n) * 0.45, _rot(n, rng)
        parts.append(nph.colliders_of_shape(alg, store, s, p, R, owner=i))
        poses.append((s, p, R))
    up = np.zeros(n)
    up[-1] = 1.0
    parts.append(nph.colliders_of_shape(alg, store, HalfSpace(up, -0.6), np.zeros(n), np.eye(n), owner=14))
    c = nph.Colliders.concat(parts)
    ia, ib = np.nonzero(~np.eye(c.count, dtype=bool))
    margin = np.full(ia.size, MARGIN)
    fast = nph.collide_colliders(alg, c, ia, ib, margin, store, Settings())
    slow = nph.collide_colliders(alg, c, ia, ib, margin, store, Settings(compiled=False))
    np.testing.assert_array_equal(fast.pair, slow.pair)
    np.testing.assert_allclose(fast.normal, slow.normal, rtol=0, atol=TOL)
    np.testing.assert_allclose(fast.depth, slow.depth, rtol=0, atol=TOL)
    checked = 0
    for q in np.unique(slow.pair):
        sel = slow.pair == q
        a, b = int(ia[q]), int(ib[q])
        if a >= len(poses) or b >= len(poses):
            continue  # the half-space: not a convex pair
        if sel.sum() == 1:
            (sa, pa, Ra), (sb, pb, Rb) = poses[a], poses[b]
            if isinstance(sb, Ball):  # the numpy path puts the ball first: look at the pair that way
                (sa, pa, Ra), (sb, pb, Rb) = (sb, pb, Rb), (sa, pa, Ra)
                nrm = -slow.normal[sel][0]
            else:
                nrm = slow.normal[sel][0]
            if not _nearest_face_is_simplex((sa, pa, Ra, sb, pb, Rb), nrm):
                continue
        np.testing.assert_array_equal(fast.feature[sel], slow.feature[sel], err_msg=f"pair {q}")
        np.testing.assert_allclose(fast.point[sel], slow.point[sel], rtol=0, atol=TOL, err_msg=f"pair {q}")
        checked += 1
    assert checked >= 10, checked
