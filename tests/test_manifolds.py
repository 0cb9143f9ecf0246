"""Hand-checked contact manifolds (common practice), through both kernels: the box/box SAT
(core/collision/sat.py) and the polytope path (core/collision/gjk.py, with Box shapes).

* A box resting face-down on a larger box touches at the corners of its bottom face: 2, 4, 8 points
  in 2-D, 3-D, 4-D (in 5-D the manifold is capped at 8 of the 16 corners).
* Crossed features give one point: an edge of A across a ridge ((n-2)-face) of B spanning the
  complementary directions (3-D: two crossed edges); in 2-D, a corner on a face.
* Normals point from A to B; speculative points (negative depth) appear within the margin and not
  beyond; feature ids do not change when the pose changes a little.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.algebra import Algebra
from ndrigid.core.collision.gjk import convex_pair
from ndrigid.core.collision.sat import box_box
from ndrigid.core.geometry.shapes import Box
from ndrigid.core.state.contacts import ManifoldPoints

Kernel = Callable[[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, float],
                  ManifoldPoints]


def via_sat(n: int, pa: np.ndarray, Ra: np.ndarray, ha: np.ndarray, pb: np.ndarray, Rb: np.ndarray,
            hb: np.ndarray, margin: float) -> ManifoldPoints:
    return box_box(Algebra(n), pa[None], Ra[None], ha[None], pb[None], Rb[None], hb[None], margin)


def via_gjk(n: int, pa: np.ndarray, Ra: np.ndarray, ha: np.ndarray, pb: np.ndarray, Rb: np.ndarray,
            hb: np.ndarray, margin: float) -> ManifoldPoints:
    return convex_pair(Algebra(n), Box(ha), pa, Ra, Box(hb), pb, Rb, margin)


KERNELS = pytest.mark.parametrize("kernel", [via_sat, via_gjk], ids=["sat", "gjk"])


def plane_rotation(n: int, i: int, j: int, angle: float) -> np.ndarray:
    """Rotation by ``angle`` in the (e_i, e_j) plane, e_i toward e_j."""
    R = np.eye(n)
    c, s = math.cos(angle), math.sin(angle)
    R[i, i] = R[j, j] = c
    R[j, i], R[i, j] = s, -s
    return R


def edge_down(n: int) -> np.ndarray:
    """A rotation whose box has its lowest feature along e_0 (an edge) for n >= 3, a corner for n = 2.

    Row 1 of R (the world "up" axis read in the box frame) is t = (0, 1, ..., 1)/sqrt(n-1): every box
    axis but e_0 is tilted, so the box's support along -e_1 is the edge along e_0. Built as the
    Householder reflection swapping e_1 and t, with one more row negated to make det +1.
    """
    t = np.ones(n)
    if n >= 3:
        t[0] = 0.0
    t /= np.linalg.norm(t)
    w = np.eye(n)[1] - t
    H = np.eye(n) - 2.0 * np.outer(w, w) / (w @ w)
    H[-1 if n >= 3 else 0] *= -1.0
    assert np.isclose(np.linalg.det(H), 1.0) and np.allclose(H[1], t)
    return H


def resting(n: int, gap: float) -> tuple[np.ndarray, ...]:
    """Small box (half 0.5) face-down on a big one (half 1) with its bottom ``gap`` above the top."""
    pa = np.zeros(n)
    pb = np.zeros(n)
    pb[1] = 1.0 + 0.5 + gap
    return pa, np.eye(n), np.ones(n), pb, np.eye(n), np.full(n, 0.5)


@KERNELS
@dims()
def test_face_down_gives_the_corners(dim: int, kernel: Kernel) -> None:
    """Corners of the small box's bottom face, midway between the surfaces (depth 0.01), normal +e_1."""
    n = dim
    pa, Ra, ha, pb, Rb, hb = resting(n, -0.01)
    mp = kernel(n, pa, Ra, ha, pb, Rb, hb, 0.02)
    expect = min(2 ** (n - 1), 8)
    assert len(mp.pair) == expect
    assert np.allclose(mp.normal, np.eye(n)[1])
    assert np.allclose(mp.depth, 0.01)
    assert np.allclose(mp.point[:, 1], 1.0 - 0.005)
    tangent = np.delete(mp.point, 1, axis=1)
    assert np.allclose(np.abs(tangent), 0.5)  # every point is a corner of the 0.5 face
    assert len(np.unique(np.round(tangent, 9), axis=0)) == expect
    if n <= 4:  # all corners: the sign patterns cover every combination
        assert np.allclose(np.sort(np.round(tangent @ (2.0 ** np.arange(n - 1)), 9)),
                           np.sort(0.5 * (np.array(np.meshgrid(*[[-1, 1]] * (n - 1))).reshape(n - 1, -1).T
                                          @ (2.0 ** np.arange(n - 1)))))
    # the other order: the same points with the normal reversed (from A to B)
    mq = kernel(n, pb, Rb, hb, pa, Ra, ha, 0.02)
    assert np.allclose(mq.normal, -np.eye(n)[1])
    assert np.allclose(np.sort(mq.point, axis=0), np.sort(mp.point, axis=0))


@KERNELS
@dims()
def test_crossed_features_give_one_point(dim: int, kernel: Kernel) -> None:
    """The upper box's lowest edge (corner in 2-D) across the lower box's top ridge, overlapping by
    0.01: one point on the vertical through both, depth 0.01, normal +e_1 (A is the lower box)."""
    n = dim
    Ra = edge_down(n)
    ha = np.full(n, 0.5)
    Rb = plane_rotation(n, 0, 1, math.pi / 4) if n >= 3 else np.eye(n)
    hb = np.ones(n)
    top = math.sqrt(2.0) if n >= 3 else 1.0  # B's highest point
    low = 0.5 * np.abs(Ra[1]).sum()  # A's support along -e_1
    pa = np.zeros(n)
    pa[1] = top + low - 0.01
    mp = kernel(n, np.zeros(n), Rb, hb, pa, Ra, ha, 0.05)  # the lower box is passed first (A)
    assert len(mp.pair) == 1
    assert np.allclose(mp.normal[0], np.eye(n)[1], atol=1e-9)
    assert np.isclose(mp.depth[0], 0.01, atol=1e-9)
    expect = np.zeros(n)
    expect[1] = top - 0.005
    assert np.allclose(mp.point[0], expect, atol=1e-7)


@KERNELS
@dims()
def test_speculative_points_within_the_margin_only(dim: int, kernel: Kernel) -> None:
    """A gap of 0.03 with margin 0.05 gives the corner points with depth -0.03; a gap of 0.06 none."""
    n = dim
    mp = kernel(n, *resting(n, 0.03), 0.05)
    assert len(mp.pair) == min(2 ** (n - 1), 8)
    assert np.allclose(mp.depth, -0.03)
    assert np.allclose(mp.normal, np.eye(n)[1])
    assert len(kernel(n, *resting(n, 0.06), 0.05).pair) == 0


@KERNELS
@dims()
def test_feature_ids_are_stable_under_small_motion(dim: int, kernel: Kernel,
                                                  rng: np.random.Generator) -> None:
    """A small turn (1e-3 rad in a random plane) and shift (1e-4) keep the contact's feature ids; the ids
    are unique within the pair."""
    n = dim
    pa, Ra, ha, pb, Rb, hb = resting(n, -0.01)
    # start from a generic pose: turned a little about the normal, shifted off-centre
    Rb = plane_rotation(n, 0, n - 1, 0.3) if n >= 3 else plane_rotation(n, 0, 1, 0.05)
    pb = pb + np.r_[0.2, 0.0, 0.1 * np.ones(n - 2)]
    before = kernel(n, pa, Ra, ha, pb, Rb, hb, 0.02)
    i, j = rng.choice(n, 2, replace=False)
    Rb2 = plane_rotation(n, int(i), int(j), 1e-3) @ Rb
    pb2 = pb + rng.normal(size=n) * 1e-4
    after = kernel(n, pa, Ra, ha, pb2, Rb2, hb, 0.02)
    assert len(before.pair) >= 2
    assert len(np.unique(before.feature)) == len(before.feature)
    assert sorted(before.feature.tolist()) == sorted(after.feature.tolist())
    # the same feature sits at nearly the same place
    ob, oa = np.argsort(before.feature), np.argsort(after.feature)
    assert np.allclose(before.point[ob], after.point[oa], atol=5e-3)


@dims()
def test_tangent_basis_of_axis_normals_regression(dim: int, rng: np.random.Generator) -> None:
    """Regression (axis-aligned normals divided by zero): the basis is orthonormal and orthogonal to
    the normal for +-e_i and for random unit normals (checked against the identity Q Q^T = I - u u^T)."""
    from ndrigid.core.collision.clip import tangent_basis

    n = dim
    U = np.vstack([np.eye(n), -np.eye(n), rng.normal(size=(5, n))])
    U /= np.linalg.norm(U, axis=1, keepdims=True)
    Q = tangent_basis(U)
    assert np.all(np.isfinite(Q))
    assert np.allclose(np.einsum("pki,pli->pkl", Q, Q), np.eye(n - 1))
    assert np.allclose(np.einsum("pki,pkj->pij", Q, Q), np.eye(n) - U[:, :, None] * U[:, None, :])


def test_4d_face_manifold_is_face_corners_regression() -> None:
    """Regression (farthest-point reduction kept edge points): a 4-D box resting face-down on an equal
    box, shifted by ~2 mm and turned by ~2 mrad in random planes, keeps one point at each of the 8
    corners of the nearly square patch: every point within 1 cm of a corner of the top face, all 8
    corners covered (hand-checked geometry: the overlap of two nearly aligned equal faces is the face
    up to the shift plus the turn times the half-diagonal, ~3 mm; common practice: a resting face
    is held at its corners). The old rule kept points up to 0.49 m from any corner."""
    n = 4
    corners = np.array(np.meshgrid(*[[-0.5, 0.5]] * (n - 1), indexing="ij")).reshape(n - 1, -1).T
    for seed in range(5):
        rng = np.random.default_rng(seed)
        pa, Ra, ha = np.zeros(n), np.eye(n), np.full(n, 0.5)
        shift = np.delete(np.eye(n), 1, axis=0).T @ rng.normal(size=n - 1) * 2e-3  # tangent, ~2 mm
        pb = np.r_[0.0, 1.0 - 0.001, 0.0, 0.0] + shift
        i, j = rng.choice(n, 2, replace=False)
        Rb = plane_rotation(n, int(i), int(j), 2e-3)
        mp = via_sat(n, pa, Ra, ha, pb, Rb, ha, 0.02)
        assert len(mp.pair) == 8
        tangent = np.delete(mp.point, 1, axis=1)
        dist = np.linalg.norm(tangent[:, None, :] - corners[None], axis=2)  # (8 points, 8 corners)
        assert dist.min(axis=1).max() < 0.01, seed
        assert len(set(dist.argmin(axis=1).tolist())) == 8, seed


def test_5d_face_crossings_regression() -> None:
    """Regression (2-face crossings not generated in 5-D): a 5-D unit box on an equal one, turned by 45
    degrees in the (e0, e2) and (e3, e4) planes, 1 mm deep. The overlap patch is the product of two
    regular octagons (a square cut by its 45-degree turn: vertices at radius 0.5 / cos(22.5 deg), at
    22.5 + 45 k degrees; elementary geometry), and its 64 corners are crossings of 2-faces of one
    facet with 2-faces of the other, which no edge clipping finds (the old kernel fell back to one
    point). Expected: the cap of 8 points, all at patch corners, at depth 1 mm with normal +e1, a
    centrally symmetric set (common practice: a resting face is held around its centre)."""
    n = 5
    R = plane_rotation(n, 0, 2, math.pi / 4) @ plane_rotation(n, 3, 4, math.pi / 4)
    h = np.full(n, 0.5)
    pb = np.r_[0.0, 1.0 - 0.001, 0.0, 0.0, 0.0]
    mp = via_sat(n, np.zeros(n), np.eye(n), h, pb, R, h, 0.02)
    assert len(mp.pair) == 8
    assert np.allclose(mp.normal, np.eye(n)[1], atol=1e-12)
    assert np.allclose(mp.depth, 0.001, atol=1e-12)
    radius = 0.5 / math.cos(math.pi / 8)
    for a, b in ((0, 2), (3, 4)):
        x, y = mp.point[:, a], mp.point[:, b]
        assert np.allclose(np.hypot(x, y), radius, atol=1e-9)
        ang = np.degrees(np.arctan2(y, x)) - 22.5
        assert np.allclose((ang + 1e-9) % 45.0, 0.0, atol=1e-6)
    tangent = np.round(np.delete(mp.point, 1, axis=1), 9)
    assert len(np.unique(tangent, axis=0)) == 8
    assert {tuple(t) for t in tangent.tolist()} == {tuple(t) for t in (-tangent + 0.0).tolist()}
