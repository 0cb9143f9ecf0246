"""Polytope contacts (core/collision/gjk.py: GJK, EPA, clipped manifolds) against outside references.

References:
* overlap verdict: scipy.optimize.linprog, the largest ball inside both halfspace systems (one
  block-diagonal LP over all pairs); its radius is > 0 exactly when the interiors intersect;
* depth along the returned normal u: support functions h_A(u) + h_B(-u) from the vertices;
* minimality: brute force over random unit directions;
* ball closest point: scipy.optimize.minimize (SLSQP) on the facet halfspaces N x <= o.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from conftest import dims
from ndrigid.core.algebra import Algebra
from ndrigid.core.collision.gjk import ball_convex, convex_pair, gjk_distance
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.shapes import Ball, Box, ConvexPolytope
from scipy.optimize import linprog, minimize
from scipy.stats import special_ortho_group

PAIRS = {3: 500, 4: 500, 5: 500}


@pytest.fixture(scope="module")
def pools() -> dict[int, list[ConvexPolytope]]:
    """A few random hulls per dimension (qhull is the slow part; poses vary per pair)."""
    rng = np.random.default_rng(7)
    out: dict[int, list[ConvexPolytope]] = {}
    for n in (2, 3, 4, 5):
        out[n] = [ConvexPolytope(rng.normal(size=(n + 5 + i, n)) * 0.5) for i in range(3)] + \
            [Box(rng.uniform(0.2, 0.6, n))]
    return out


def world(shape: ConvexPolytope, pos: np.ndarray, rot: np.ndarray
          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """World vertices and halfspace system N x <= o."""
    N = shape.facet_normals @ rot.T
    return pos + shape.vertices @ rot.T, N, shape.facet_offsets + N @ pos


def chebyshev_lp(systems: list[tuple[np.ndarray, np.ndarray]], n: int) -> np.ndarray:
    """Per pair the largest radius t of a ball inside N x <= o (both bodies stacked), by one LP (HiGHS)."""
    blocks = [sp.csr_matrix(np.hstack([N, np.ones((len(N), 1))])) for N, _ in systems]
    rhs = np.concatenate([o for _, o in systems])
    P = len(systems)
    c = np.zeros(P * (n + 1))
    c[n::n + 1] = -1.0
    res = linprog(c, A_ub=sp.block_diag(blocks, format="csr"), b_ub=rhs,
                  bounds=([(None, None)] * n + [(-10.0, 1.0)]) * P, method="highs")
    assert res.status == 0, res.message
    return res.x[n::n + 1]


@dims(3, 4, 5)
def test_polytope_verdict_depth_and_minimality(dim: int, rng: np.random.Generator,
                                               pools: dict[int, list[ConvexPolytope]]) -> None:
    """500 random pairs: contact verdict vs linprog (outside a 1e-6 band), deepest point depth equals
    h_A(u) + h_B(-u) along the normal (vertex brute force) for face contacts and is bounded by it
    otherwise, and no sampled direction overlaps less than the depth minus the 5 % coherence band."""
    n, P = dim, PAIRS[dim]
    alg = Algebra(n)
    pool = pools[n]
    margin = 0.02
    systems, results, verts = [], [], []
    for _ in range(P):  # a loop over pairs is the caller's business (the kernel takes one pair)
        A, B = pool[rng.integers(len(pool))], pool[rng.integers(len(pool))]
        Ra, Rb = special_ortho_group.rvs(n, size=2, random_state=rng)
        pa = rng.normal(size=n) * 0.1
        pb = pa + rng.normal(size=n) * 0.5
        Va, Na, oa = world(A, pa, Ra)
        Vb, Nb, ob = world(B, pb, Rb)
        systems.append((np.vstack([Na, Nb]), np.concatenate([oa, ob])))
        verts.append((Va, Vb))
        results.append(convex_pair(alg, A, pa, Ra, B, pb, Rb, margin))
    t = chebyshev_lp(systems, n)
    depth = np.array([r.depth.max() if len(r.pair) else -np.inf for r in results])
    assert np.all(depth[t > 1e-6] > 0.0)  # LP says overlap: a contact with positive depth
    assert np.all(depth[t < -1e-6] < 1e-6)  # LP says apart: no overlapping contact
    assert 50 < (t > 1e-6).sum() < P - 50
    W = rng.normal(size=(2000, n))
    W /= np.linalg.norm(W, axis=1, keepdims=True)
    for r, (Va, Vb) in zip(results, verts, strict=True):
        if not len(r.pair):
            # no contact: then the bodies are apart by more than the margin along some direction
            sep = np.max(np.maximum((Vb @ W.T).min(0) - (Va @ W.T).max(0),
                                    (Va @ W.T).min(0) - (Vb @ W.T).max(0)))
            assert sep > -1e-9 or gjk_distance(Va, Vb)[0] > margin
            continue
        u = r.normal[0]
        assert np.allclose(r.normal, u) and abs(np.linalg.norm(u) - 1) < 1e-9
        pen = (Va @ u).max() - (Vb @ u).min()
        assert r.depth.max() <= pen + 1e-6
        if len(r.pair) == 1 and r.feature[0] >= (1 << 60):
            assert abs(r.depth[0] - pen) <= 1e-6  # one-point contact: depth is the EPA/GJK value along u
        over = np.minimum((Va @ W.T).max(0) - (Vb @ W.T).min(0), (Va @ -W.T).max(0) - (Vb @ -W.T).min(0))
        if pen > 0:
            assert pen <= over.min() * 1.05 + 1e-4 + 1e-9


@dims()
def test_gjk_distance_matches_slsqp(dim: int, rng: np.random.Generator,
                                    pools: dict[int, list[ConvexPolytope]]) -> None:
    """Distance between separated hulls vs scipy SLSQP minimising |x - y|^2 over both halfspace systems."""
    n = dim
    pool = pools[n]
    checked = 0
    for _ in range(12):
        A, B = pool[rng.integers(len(pool))], pool[rng.integers(len(pool))]
        Ra, Rb = special_ortho_group.rvs(n, size=2, random_state=rng)
        pa = np.zeros(n)
        pb = rng.normal(size=n)
        pb *= 2.5 / np.linalg.norm(pb)
        Va, Na, oa = world(A, pa, Ra)
        Vb, Nb, ob = world(B, pb, Rb)
        dist = gjk_distance(Va, Vb)[0]
        cons = [{"type": "ineq", "fun": lambda z, N=Na, o=oa: o - N @ z[:n]},
                {"type": "ineq", "fun": lambda z, N=Nb, o=ob: o - N @ z[n:]}]
        res = minimize(lambda z: np.sum((z[:n] - z[n:]) ** 2), np.concatenate([Va.mean(0), Vb.mean(0)]),
                       constraints=cons, method="SLSQP", options={"ftol": 1e-14, "maxiter": 500})
        assert res.success
        if np.sqrt(res.fun) > 1e-3:
            assert abs(dist - np.sqrt(res.fun)) < 1e-5
            checked += 1
    assert checked >= 6


@dims()
def test_ball_closest_point_matches_slsqp(dim: int, rng: np.random.Generator,
                                          pools: dict[int, list[ConvexPolytope]]) -> None:
    """Ball centre outside: the contact sits midway between the ball surface and the closest polytope
    point, which SLSQP finds on the halfspaces; inside: the facet of least penetration (max N c - o)."""
    n = dim
    alg = Algebra(n)
    for shape in pools[n]:
        R = special_ortho_group.rvs(n, random_state=rng)
        p = rng.normal(size=n) * 0.1
        V, N, o = world(shape, p, R)
        for _ in range(4):
            c = p + rng.normal(size=n) * 0.8
            r = 0.3
            mp = ball_convex(alg, c, r, shape, p, R, 10.0)
            assert len(mp.pair) == 1
            s = N @ c - o
            if s.max() <= 0:  # inside
                f = int(np.argmax(s))
                assert np.allclose(mp.normal[0], -N[f])
                assert np.isclose(mp.depth[0], r - s[f])
                continue
            res = minimize(lambda x, c=c: np.sum((x - c) ** 2), V.mean(0), method="SLSQP",
                           constraints=[{"type": "ineq", "fun": lambda x, N=N, o=o: o - N @ x}],
                           options={"ftol": 1e-14, "maxiter": 500})
            q, d = res.x, np.sqrt(res.fun)
            assert np.isclose(mp.depth[0], r - d, atol=1e-6)
            assert np.allclose(mp.normal[0], (q - c) / d, atol=1e-5)
            assert np.allclose(mp.point[0], 0.5 * (q + c + r * (q - c) / d), atol=1e-5)
    # beyond the margin: nothing
    far = ball_convex(alg, np.full(n, 10.0), 0.1, pools[n][0], np.zeros(n), np.eye(n), 0.05)
    assert len(far.pair) == 0


def test_bad_input_names_the_argument() -> None:
    alg = Algebra(3)
    box = Box([0.5, 0.5, 0.5])
    with pytest.raises(InputTypeError, match="shape_b"):
        convex_pair(alg, box, np.zeros(3), np.eye(3), Ball(3, 1.0), np.zeros(3), np.eye(3), 0.1)
    with pytest.raises(InputError, match="shape_a"):
        convex_pair(alg, Box([1.0, 1.0]), np.zeros(3), np.eye(3), box, np.zeros(3), np.eye(3), 0.1)
    with pytest.raises(InputError, match="rot_b"):
        convex_pair(alg, box, np.zeros(3), np.eye(3), box, np.zeros(3), np.eye(4), 0.1)
    with pytest.raises(InputError, match="radius"):
        ball_convex(alg, np.zeros(3), -1.0, box, np.zeros(3), np.eye(3), 0.1)
