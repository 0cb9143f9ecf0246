"""Shared n-D clipping and contact-manifold reduction for the narrowphase kernels.

Both the box/box kernel (:mod:`.sat`) and the polytope kernel (:mod:`.gjk`) build a face contact the
same way: the edges of one facet are clipped against the side half-spaces of the other facet, the
surviving segment ends become candidate points, and a bounded subset of them is kept. This module
holds the two array kernels of that recipe; each works on a *padded* layout ``(P, K, ...)`` (P pairs,
K candidate slots per pair with a ``valid`` mask), so a batch of pairs is handled with no Python loop
over pairs or points.

Clipping (:func:`clip_segments`). Sutherland-Hodgman clipping (Sutherland and Hodgman, CACM 1974)
generalises to any dimension when the clipped face is kept as an edge list: a plane cuts an edge
where its signed distance changes sign. Clipping every edge against *all* planes at once is the
parametric (Liang-Barsky) form of the same idea: each plane raises the entry parameter or lowers the
exit parameter of the segment, and the segment survives while entry <= exit. The caller passes the
signed plane values at the two ends (it knows the cheapest way to get them: for a box slab they are
coordinates minus half-extents), so the kernel is one pass of elementwise work. The plane that set
the entry/exit is returned too: it is the stable feature id of a clipped end.

Invariant: a segment end is either an original end (parameter exactly 0 or 1, plane -1) or lies on
the plane that clipped it; no end lies outside any plane by more than rounding.

Reduction (:func:`reduce_points`). Keep the deepest point, then greedily the candidate farthest
(in the tangent space of the contact) from every point kept so far, up to a cap (farthest-point
sampling). This keeps the extent of the contact patch, which is what stops a resting body from
rocking: for a box face it picks the face corners first. Alternatives rejected: extremes along a
fixed set of tangent directions (the corners of a face turned 45 degrees about the normal tie on the
diagonal directions, and ties made the kept set flicker between steps); the area-maximising 3-D
rule (Gregorius, GDC 2015) does not state itself in n-D without a hull of the candidates.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]
BoolArray = NDArray[np.bool_]

__all__ = ["clip_segments", "manifold_cap", "reduce_points", "tangent_basis"]


def manifold_cap(n: int) -> int:
    """Most points kept per face contact in dimension n: 2^(n-1) (the corners of a box facet), at most 8."""
    return min(1 << (n - 1), 8)


def clip_segments(f0: Array, f1: Array) -> tuple[Array, Array, IntArray, IntArray, BoolArray]:
    """Clip segments against half-spaces given by signed plane values at the two ends.

    Args:
        f0: (..., K) float, signed value of each of K planes at the start of each segment
            (<= 0 inside); a plane that does not apply carries a negative constant at both ends.
        f1: (..., K) float, the same at the end of each segment.

    Returns:
        t_in: (...,) float, entry parameter in [0, 1] (0 when no plane clips the start).
        t_out: (...,) float, exit parameter in [0, 1] (1 when no plane clips the end).
        plane_in: (...,) int, index of the plane that set ``t_in``, or -1.
        plane_out: (...,) int, index of the plane that set ``t_out``, or -1.
        ok: (...,) bool, the clipped segment is not empty.
    """
    out0 = f0 > 0.0
    out1 = f1 > 0.0
    denom = f0 - f1
    # the crossing parameter is only read where exactly one end is outside, so denom != 0 there
    with np.errstate(divide="ignore", invalid="ignore"):
        t = f0 / np.where(out0 != out1, denom, 1.0)
    t_enter = np.where(out0 & ~out1, t, -1.0)
    t_exit = np.where(~out0 & out1, t, 2.0)
    plane_in = np.argmax(t_enter, axis=-1)
    plane_out = np.argmin(t_exit, axis=-1)
    t_in = np.take_along_axis(t_enter, plane_in[..., None], axis=-1)[..., 0]
    t_out = np.take_along_axis(t_exit, plane_out[..., None], axis=-1)[..., 0]
    clipped_in = t_in >= 0.0
    clipped_out = t_out <= 1.0
    t_in = np.where(clipped_in, t_in, 0.0)
    t_out = np.where(clipped_out, t_out, 1.0)
    ok = ~np.any(out0 & out1, axis=-1) & (t_in <= t_out)
    return (t_in, t_out, np.where(clipped_in, plane_in, -1).astype(np.int64),
            np.where(clipped_out, plane_out, -1).astype(np.int64), ok)


def reduce_points(tangent: Array, depth: Array, valid: BoolArray, cap: int, tol: Array | float,
                  codes: IntArray | None = None) -> BoolArray:
    """Choose at most ``cap`` points per pair: the deepest, then farthest-point sampling.

    Args:
        tangent: (P, K, d) float, tangent-space coordinates of the candidates.
        depth: (P, K) float, their depths (larger is deeper).
        valid: (P, K) bool, which slots hold candidates.
        cap: most points kept per pair.
        tol: float or (P,) float; a candidate closer than this to a kept point is a duplicate and is
            never kept (clipped ends often coincide with vertices).
        codes: optional (P, K) int feature codes; slots repeating a code of their pair (a vertex
            reached from several edges) are dropped before sampling, which shrinks the work.

    Returns:
        keep: (P, K) bool, the chosen slots (a subset of ``valid``).
    """
    P, K = depth.shape
    keep = np.zeros((P, K), dtype=bool)
    if P == 0 or K == 0:
        return keep
    rows = np.arange(P)
    valid = valid.copy()
    if codes is not None:
        # invalid slots get distinct negative codes so that they never pair up with anything
        c = np.where(valid, codes, -1 - np.arange(K, dtype=np.int64)[None, :])
        order = np.argsort(c, axis=1, kind="stable")
        cs = np.take_along_axis(c, order, axis=1)
        dup = np.zeros((P, K), dtype=bool)
        dup[:, 1:] = cs[:, 1:] == cs[:, :-1]
        valid[rows[:, None], order] &= ~dup
    # compact: valid slots first, then drop the columns no pair uses
    slot = np.argsort(~valid, axis=1, kind="stable")
    width = int(valid.sum(axis=1).max())
    if width == 0:
        return keep
    slot = slot[:, :width]
    v = np.take_along_axis(valid, slot, axis=1)
    t = np.take_along_axis(tangent, slot[..., None], axis=1)
    dp = np.take_along_axis(depth, slot, axis=1)
    pick = np.zeros((P, width), dtype=bool)
    tol2 = np.broadcast_to(np.asarray(tol, dtype=np.float64) ** 2, (P,))
    first = np.argmax(np.where(v, dp, -np.inf), axis=1)
    has = v[rows, first]
    pick[rows, first] = has
    # squared tangent distance of every candidate to its nearest kept point
    mind = np.where(v, np.sum((t - t[rows, first][:, None, :]) ** 2, axis=-1), -1.0)
    for _ in range(min(cap, width) - 1):  # a loop over the (few) points of a manifold, vectorised over pairs
        nxt = np.argmax(mind, axis=1)
        take = has & (mind[rows, nxt] > tol2)
        if not np.any(take):
            break
        pick[rows[take], nxt[take]] = True
        dist = np.sum((t - t[rows, nxt][:, None, :]) ** 2, axis=-1)
        mind = np.where(take[:, None], np.minimum(mind, dist), mind)
    keep[rows[:, None], slot] = pick
    return keep


def tangent_basis(normal: Array) -> Array:
    """Orthonormal bases of the hyperplanes orthogonal to unit normals: (P, n) -> (P, n-1, n).

    A Householder reflection H = I - 2 w w^T / (w.w) with w = u + s e_j (j the largest component of
    u, s its sign) maps e_j to -s u; its other columns are an orthonormal basis of u's complement.
    Adding (not subtracting) s e_j keeps w.w = 2 + 2 |u_j| >= 2, so there is no cancellation.
    """
    P, n = normal.shape
    j = np.argmax(np.abs(normal), axis=1)
    s = np.where(normal[np.arange(P), j] >= 0.0, 1.0, -1.0)
    w = normal.copy()
    w[np.arange(P), j] += s
    H = np.eye(n)[None] - 2.0 * w[:, :, None] * w[:, None, :] / np.sum(w * w, axis=1)[:, None, None]
    # rows of H (H is symmetric) other than row j; row j is -s u
    keep = np.ones((P, n), dtype=bool)
    keep[np.arange(P), j] = False
    return H[keep].reshape(P, n - 1, n)
