"""Box/box separating-axis test (core/collision/sat.py) against references outside the project.

References:
* candidate axes: scipy.linalg.null_space of the n-1 spanning directions (the hyperplane normal);
* overlap verdict: scipy.optimize.linprog, one block-diagonal LP over all pairs that maximises the
  radius t of a ball inside both boxes (the halfspace systems N_A x + t <= o_A, N_B x + t <= o_B);
  t > 0 exactly when the interiors intersect;
* depth along the returned normal u: the support functions h_A(u) + h_B(-u), brute force over the
  2^n box vertices;
* minimality of the depth: brute force over random unit directions (no direction may show a smaller
  overlap than the SAT minimum).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import scipy.sparse as sp
from conftest import dims
from ndrigid.core.algebra import Algebra
from ndrigid.core.collision.sat import _MIXED_FLAG, box_axes, box_axis_count, box_box, box_sat
from ndrigid.core.errors import InputError
from scipy.linalg import null_space
from scipy.optimize import linprog
from scipy.stats import special_ortho_group


def random_pairs(rng: np.random.Generator, n: int, P: int, spread: float = 0.9) -> tuple[np.ndarray, ...]:
    """P random box pairs: rotations from scipy's Haar-random SO(n), sizes 0.2..1, offsets ~ N(0, spread)."""
    Ra = special_ortho_group.rvs(n, size=P, random_state=rng).reshape(P, n, n)
    Rb = special_ortho_group.rvs(n, size=P, random_state=rng).reshape(P, n, n)
    ha = rng.uniform(0.2, 1.0, (P, n))
    hb = rng.uniform(0.2, 1.0, (P, n))
    pa = rng.normal(size=(P, n)) * 0.1
    pb = pa + rng.normal(size=(P, n)) * spread
    return pa, Ra, ha, pb, Rb, hb


def box_vertices(pos: np.ndarray, rot: np.ndarray, half: np.ndarray) -> np.ndarray:
    """(P, 2^n, n) world vertices, by enumeration of the sign patterns."""
    n = pos.shape[1]
    signs = np.array(list(itertools.product((-1.0, 1.0), repeat=n)))
    return pos[:, None, :] + np.einsum("pij,pvj->pvi", rot, signs[None] * half[:, None, :])


def support(verts: np.ndarray, u: np.ndarray) -> np.ndarray:
    """h(u) = max over vertices of u . v, (P, V, n) x (P, n) -> (P,)."""
    return np.max(np.einsum("pvi,pi->pv", verts, u), axis=1)


def chebyshev_lp(normals_a: list[np.ndarray], offs_a: list[np.ndarray], normals_b: list[np.ndarray],
                 offs_b: list[np.ndarray]) -> np.ndarray:
    """Largest t with a ball of radius t inside both solids N x <= o, per pair, by one sparse LP (HiGHS)."""
    P = len(normals_a)
    n = normals_a[0].shape[1]
    blocks, rhs = [], []
    for Na, oa, Nb, ob in zip(normals_a, offs_a, normals_b, offs_b, strict=True):
        N = np.vstack([Na, Nb])
        blocks.append(np.hstack([N, np.linalg.norm(N, axis=1, keepdims=True)]))
        rhs.append(np.concatenate([oa, ob]))
    A = sp.block_diag(blocks, format="csr")
    c = np.zeros(P * (n + 1))
    c[n::n + 1] = -1.0  # maximise every t
    bounds = [(None, None)] * n + [(-10.0, 1.0)]
    res = linprog(c, A_ub=A, b_ub=np.concatenate(rhs), bounds=bounds * P, method="highs")
    assert res.status == 0, res.message
    return res.x[n::n + 1]


def box_halfspaces(pos: np.ndarray, rot: np.ndarray, half: np.ndarray
                   ) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """World halfspace systems N x <= o of P boxes (rows: +-R e_i, offsets +-R e_i . p + h_i)."""
    normals, offs = [], []
    for p, R, h in zip(pos, rot, half, strict=True):
        N = np.vstack([R.T, -R.T])
        normals.append(N)
        offs.append(N @ p + np.concatenate([h, h]))
    return normals, offs


@dims()
def test_candidate_axes_are_the_hyperplane_normals(dim: int, rng: np.random.Generator) -> None:
    """Every mixed axis is the normal of span(e_S, c_T): compared with scipy.linalg.null_space, and the
    count of candidates is C(2n, n-1) (the facet-normal count of the Minkowski difference of two boxes)."""
    n = dim
    R = special_ortho_group.rvs(n, random_state=rng)
    U = box_axes(n, R[None])[0]
    assert U.shape == (math.comb(2 * n, n - 1), n) == (box_axis_count(n), n)
    expected = []
    for k in range(n - 1, -1, -1):
        for S in itertools.combinations(range(n), k):
            for T in itertools.combinations(range(n), n - 1 - k):
                span = np.column_stack([np.eye(n)[:, list(S)], R[:, list(T)]])
                expected.append(null_space(span.T)[:, 0])
    E = np.array(expected)
    # same set up to sign and order: every computed axis matches exactly one reference normal
    cos = np.abs(U @ E.T)
    assert np.allclose(np.sort(cos.max(axis=1)), 1.0, atol=1e-9)
    assert np.allclose(np.linalg.norm(U, axis=1), 1.0, atol=1e-12)
    assert len(np.unique(np.argmax(cos, axis=1))) == len(E)


@dims(3, 4, 5)
def test_overlap_verdict_and_depth_match_linprog_and_supports(dim: int, rng: np.random.Generator) -> None:
    """500 random pairs: SAT overlap verdict vs the linprog Chebyshev LP (no disagreement outside a
    1e-6 band), and the depth equals h_A(u) + h_B(-u) along the returned normal (vertex brute force)."""
    n, P = dim, 500
    alg = Algebra(n)
    pa, Ra, ha, pb, Rb, hb = random_pairs(rng, n, P)
    res = box_sat(alg, pa, Ra, ha, pb, Rb, hb)
    t = chebyshev_lp(*box_halfspaces(pa, Ra, ha), *box_halfspaces(pb, Rb, hb))
    deep, apart = res.depth > 1e-6, res.depth < -1e-6
    assert np.all(t[deep] > 0.0), np.flatnonzero(deep & (t <= 0))
    assert np.all(t[apart] < 0.0), np.flatnonzero(apart & (t >= 0))
    assert 50 < deep.sum() < P - 50  # both verdicts well represented
    u = res.normal
    assert np.allclose(np.linalg.norm(u, axis=1), 1.0)
    va, vb = box_vertices(pa, Ra, ha), box_vertices(pb, Rb, hb)
    pen = support(va, u) + support(vb, -u)
    assert np.allclose(res.depth, pen, atol=1e-9)
    # normal from A to B: B's centre lies on the positive side of A's centre
    assert np.all(np.einsum("pi,pi->p", pb - pa, u) >= -1e-12)


@dims()
def test_depth_is_the_least_overlap_over_directions(dim: int, rng: np.random.Generator) -> None:
    """Brute force: no random unit direction shows a smaller positive overlap than the SAT minimum; the
    reported depth exceeds the minimum at most by the coherence preference (5 % + 1e-4, common practice)."""
    n, P = dim, 300
    alg = Algebra(n)
    pa, Ra, ha, pb, Rb, hb = random_pairs(rng, n, P, spread=0.6)
    res = box_sat(alg, pa, Ra, ha, pb, Rb, hb)
    W = rng.normal(size=(3000, n))
    W /= np.linalg.norm(W, axis=1, keepdims=True)
    ra = np.einsum("pwj,pj->pw", np.abs(np.einsum("pij,wi->pwj", Ra, W)), ha)
    rb = np.einsum("pwj,pj->pw", np.abs(np.einsum("pij,wi->pwj", Rb, W)), hb)
    sampled = (ra + rb - np.abs((pb - pa) @ W.T)).min(axis=1)
    over = res.min_depth > 0
    assert over.sum() > 50
    assert np.all(res.min_depth[over] <= sampled[over] + 1e-12)
    assert np.all(res.depth <= res.min_depth + 0.05 * np.abs(res.min_depth) * 1.05 + 2e-4)
    assert np.all(res.depth >= res.min_depth - 1e-12)


@dims()
def test_manifold_points_lie_in_both_boxes_and_respect_the_margin(dim: int, rng: np.random.Generator) -> None:
    """Midway convention: each point moved half its depth along the normal lies on A (the surface point
    of A reaches into B along the normal) and moved back, on B; depths never exceed the SAT depth; all
    gaps are below the margin."""
    n, P = dim, 400
    alg = Algebra(n)
    pa, Ra, ha, pb, Rb, hb = random_pairs(rng, n, P, spread=0.7)
    margin = 0.05
    mp = box_box(alg, pa, Ra, ha, pb, Rb, hb, margin)
    res = box_sat(alg, pa, Ra, ha, pb, Rb, hb)
    assert len(mp.pair) > P // 4
    assert np.all(np.diff(mp.pair) >= 0)
    p = mp.pair
    assert np.all(mp.depth > -margin)
    assert np.all(mp.depth <= res.depth[p] + 1e-9)
    # the normal of each pair's points is the SAT normal
    assert np.allclose(mp.normal, res.normal[p], atol=1e-12)
    # a speculative mixed-axis point joins the closest points of two support faces clamped to the
    # faces, so it is only required to lie within the margin of both boxes
    exact = (mp.feature < _MIXED_FLAG) | (mp.depth > 0)
    assert (~exact).sum() < len(exact) // 10 + 5
    for sign, pos, rot, half in ((0.5, pa, Ra, ha), (-0.5, pb, Rb, hb)):
        x = mp.point + sign * mp.depth[:, None] * mp.normal
        local = np.einsum("pji,pj->pi", rot[p], x - pos[p])
        assert np.all(np.abs(local[exact]) <= half[p][exact] + 1e-7)
        local = np.einsum("pji,pj->pi", rot[p], mp.point - pos[p])
        off = np.linalg.norm(np.maximum(np.abs(local) - half[p], 0.0), axis=1)
        assert np.all(off[~exact] <= margin)
    # pairs farther apart than the margin along their best axis give nothing
    assert not np.any(np.isin(np.flatnonzero(res.depth < -margin), p))
    # feature ids are unique within each pair
    keys = p * (1 << 50) + mp.feature
    assert len(np.unique(keys)) == len(keys)


def test_bad_input_names_the_argument() -> None:
    alg = Algebra(3)
    z = np.zeros((2, 3))
    R = np.broadcast_to(np.eye(3), (2, 3, 3))
    h = np.ones((2, 3))
    with pytest.raises(InputError, match="rot_b"):
        box_box(alg, z, R, h, z, np.eye(3), h, 0.1)
    with pytest.raises(InputError, match="pos_a"):
        box_box(alg, np.zeros((2, 4)), R, h, z, R, h, 0.1)
    with pytest.raises(InputError, match="margin"):
        box_box(alg, z, R, h, z, R, h, np.zeros(3))
    assert len(box_box(alg, np.zeros((0, 3)), np.zeros((0, 3, 3)), np.zeros((0, 3)), np.zeros((0, 3)),
                       np.zeros((0, 3, 3)), np.zeros((0, 3)), 0.1).pair) == 0
