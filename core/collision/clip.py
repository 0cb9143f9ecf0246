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

Reduction (:func:`reduce_points`, used by the polytope kernel). Keep the deepest point, then
greedily the candidate farthest (in the tangent space of the contact) from every point kept so far,
up to a cap (farthest-point sampling). This keeps the extent of the contact patch, which is what
stops a resting body from rocking. An area-maximising rule (common practice in 3-D) does not
state itself in n-D without a hull of the candidates.

Selection (:func:`select_points`, used by the box kernels). Farthest-point sampling picks edge
points over corners once the patch is 3-D (4-D box faces), and both rules resolve the exact ties of
symmetric resting poses by the last rounding bit, so the kept set, hence the warm-start keys,
flickered from step to step. Here the candidates are first the extremes along diagonal sign
patterns of the tangent axes (the corners of a box patch), then farthest-point fill; every score is
rounded relative to the row's best at ``SELECT_QUANTUM`` and ties go to the lowest feature code.
(An earlier try of extremes along fixed directions was rejected for flicker on faces turned by 45
degrees; the rounding with code ties is what removes it.)
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]
BoolArray = NDArray[np.bool_]

__all__ = ["clip_segments", "diagonal_directions", "manifold_cap", "reduce_points", "select_points",
           "tangent_basis"]

# Quantum of the selection scores of :func:`select_points`: scores closer than this (a fraction of the
# patch's half-width, or of its squared extent) count as tied and the lower feature code wins. Exact
# ties are the rule in resting contacts (symmetric poses); without the quantum the last bit of a
# rounding error picks the winner and the kept set, hence the warm-start keys, flicker every step.
SELECT_QUANTUM = 1e-3


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


def _first_of_each_code(valid: BoolArray, codes: IntArray) -> BoolArray:
    """``valid`` with every slot that repeats an earlier valid slot's code (same pair) cleared.

    Invalid slots get distinct negative codes so that they never pair up with anything; the sort is
    stable, so the first slot of each code is the one kept.
    """
    P, K = valid.shape
    c = np.where(valid, codes, -1 - np.arange(K, dtype=np.int64)[None, :])
    order = np.argsort(c, axis=1, kind="stable")
    cs = np.take_along_axis(c, order, axis=1)
    dup = np.zeros((P, K), dtype=bool)
    dup[:, 1:] = cs[:, 1:] == cs[:, :-1]
    out = valid.copy()
    out[np.arange(P)[:, None], order] &= ~dup
    return out


def _compact(valid: BoolArray) -> tuple[IntArray | None, BoolArray]:
    """Slot order with valid slots first, cut to the widest pair's count: ``(slot (P, W), valid
    (P, W))``, or ``(None, valid)`` when no pair has a valid slot."""
    slot = np.argsort(~valid, axis=1, kind="stable")
    width = int(valid.sum(axis=1).max())
    if width == 0:
        return None, valid
    slot = slot[:, :width]
    return slot, np.take_along_axis(valid, slot, axis=1)


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
    valid = valid.copy() if codes is None else _first_of_each_code(valid, codes)
    slot, v = _compact(valid)
    if slot is None:
        return keep
    width = slot.shape[1]
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


def diagonal_directions(d: int, cap: int) -> Array:
    """Sign patterns (+-1 on each of d tangent axes) along which :func:`select_points` takes extremes.

    All 2^d patterns when they fit under ``cap`` (the corners of a box patch); else the patterns of
    even parity (2^(d-1) of them, the vertices of a demicube: they still span every tangent direction
    and are centrally symmetric for d >= 2). When even those are too many (d >= 5 under a cap of 8),
    the rows of a Sylvester-Hadamard matrix of order ``cap`` restricted to d of its non-constant
    columns (pattern q has +1 on axis k where q & c_k has an odd number of set bits, columns
    c = 1, 2, 4, 7, 3, 5, 6, ...): the columns are orthogonal and sum to zero, so the patterns
    average to the origin and span all d axes, and the origin (the middle of the patch) is inside
    their hull. (The first ``cap`` even patterns in lexicographic order, the rule before, all had -1
    on the last axis for d = 5: a 6-D box face kept the corners of one half only and tipped over.)
    For d = 4 under a cap of 8 the construction gives the same 8 even patterns.
    (D, d) float, D <= cap.
    """
    if d == 0:
        return np.zeros((1, 0))
    bits = (np.arange(1 << d)[:, None] >> np.arange(d)[None, :]) & 1
    signs = np.where(bits == 1, 1.0, -1.0)
    if len(signs) > cap:
        signs = signs[bits.sum(axis=1) % 2 == 0]
    if len(signs) > cap and d < cap:
        cols = _hadamard_columns(cap)[:d]
        odd = np.array([[bin(q & c).count("1") % 2 for c in cols] for q in range(cap)])
        signs = np.where(odd == 1, 1.0, -1.0)
    return signs[:cap]


def _hadamard_columns(cap: int) -> list[int]:
    """Non-zero column indices < ``cap`` (a power of 2): the powers of two, then their full parity
    (``cap - 1``), then the rest ascending: for 8, ``[1, 2, 4, 7, 3, 5, 6]``."""
    powers = [1 << i for i in range(cap.bit_length() - 1)]
    first = powers + ([cap - 1] if cap - 1 not in powers else [])
    return first + [c for c in range(1, cap) if c not in first]


def _argmax_by_code(score: Array, codes: IntArray, live: BoolArray, quantum: Array | float) -> IntArray:
    """Per row, the slot of the largest ``score`` among ``live`` slots; scores within about ``quantum``
    (float or (P,)) of the best tie, and ties go to the lowest code.

    The rounding is relative to the row's best score, not to a fixed grid: on a fixed grid a score
    that sits on a cell boundary (a resting depth equal to half a cell, say) flips cells with every
    rounding error, which is exactly the flicker the quantum is there to remove.
    """
    best = np.max(np.where(live, score, -np.inf), axis=1, keepdims=True)
    q = np.broadcast_to(np.asarray(quantum, dtype=np.float64), (score.shape[0],))[:, None]
    tie = live & (np.rint((score - best) / q) == 0.0)
    big = np.iinfo(np.int64).max
    return np.argmin(np.where(tie, codes, big), axis=1)


def select_points(tangent: Array, valid: BoolArray, codes: IntArray, cap: int, directions: Array,
                  tol: Array | float, depth: Array | None = None, quantum: float = SELECT_QUANTUM
                  ) -> BoolArray:
    """Choose at most ``cap`` points per pair that keep the extent of the contact patch, stably.

    1. Slots repeating a feature code of their pair are dropped (the same corner reached twice).
       With ``depth`` given, the deepest candidate is kept first (depths rounded to ``quantum``
       times the patch diagonal, ties to the lowest code), so a tilted body never loses its
       deepest corner to the cap.
    2. Extremes: for each direction (rows of ``directions``, sign patterns over the tangent axes) the
       candidate with the largest ``direction . z``, z the tangent coordinates scaled to the patch's
       bounding box ([-1, 1] per axis). For a box-shaped patch these are exactly its corners, and for
       a slightly turned or tilted one the points nearest them. (Farthest-point sampling, the rule
       before this one, picks edge points over corners once the patch is 3-D: after two opposite
       corners of a cube, a point on a far edge is farther from both than any other corner.)
    3. Fill: while fewer than ``cap`` are kept, the candidate farthest from every kept point (in raw
       tangent coordinates), if farther than ``tol``.

    Scores are rounded to ``quantum`` (relative) and ties go to the lowest code, so a symmetric
    pose, where extremes tie exactly, keeps the same points every step. In a
    resting contact all depths tie, and the rounding turns that noise into a tie that the codes
    break. The kept set does not depend on
    the order of the slots, only on positions, depths and codes.

    Args:
        tangent: (P, K, d) float, tangent coordinates of the candidates.
        valid: (P, K) bool, which slots hold candidates.
        codes: (P, K) int feature codes (>= 0), unique per feature within a pair.
        cap: most points kept per pair.
        directions: (D, d) float sign patterns, D <= cap (see :func:`diagonal_directions`).
        tol: float or (P,) float, a candidate nearer than this to a kept one is never added by the fill.
        depth: optional (P, K) float depths (larger is deeper).
        quantum: relative rounding of the scores.

    Returns:
        keep: (P, K) bool, a subset of ``valid``.
    """
    P, K = valid.shape
    keep = np.zeros((P, K), dtype=bool)
    if P == 0 or K == 0:
        return keep
    rows = np.arange(P)
    # 1. duplicates of a code: keep the first slot of each
    valid = _first_of_each_code(valid, codes)
    slot, v = _compact(valid)
    if slot is None:
        return keep
    width = slot.shape[1]
    t = np.take_along_axis(tangent, slot[..., None], axis=1)
    cd = np.take_along_axis(codes, slot, axis=1)
    has: BoolArray = np.any(v, axis=1)
    # 2. extremes along the directions, in coordinates scaled to the patch's bounding box
    lo = np.min(np.where(v[..., None], t, np.inf), axis=1, keepdims=True)
    hi = np.max(np.where(v[..., None], t, -np.inf), axis=1, keepdims=True)
    lo = np.where(has[:, None, None], lo, 0.0)
    hi = np.where(has[:, None, None], hi, 0.0)
    tol_a = np.broadcast_to(np.asarray(tol, dtype=np.float64), (P,))
    half = np.maximum(0.5 * (hi - lo), tol_a[:, None, None] + 1e-300)
    z = (t - 0.5 * (hi + lo)) / half
    pick = np.zeros((P, width), dtype=bool)
    score = z @ directions.T  # (P, width, D)
    # squared tangent distance of every candidate to its nearest kept point, for the fill
    mind = np.full((P, width), np.inf)
    ext = np.sqrt(np.sum((hi - lo)[:, 0] ** 2, axis=1))  # patch diagonal
    if depth is not None:
        dp = np.take_along_axis(depth, slot, axis=1)
        first = _argmax_by_code(dp, cd, v, quantum * np.maximum(ext, 1e-300))
        pick[rows[has], first[has]] = True
        mind = np.where(has[:, None], np.sum((t - t[rows, first][:, None, :]) ** 2, axis=-1), mind)
    count = pick.sum(axis=1)
    for k in range(directions.shape[0]):  # a loop over the (<= cap) directions, vectorised over pairs
        best = _argmax_by_code(score[:, :, k], cd, v, quantum)
        new = has & ~pick[rows, best] & (count < cap)
        count += new
        pick[rows[new], best[new]] = True
        d2 = np.sum((t - t[rows, best][:, None, :]) ** 2, axis=-1)
        mind = np.where(new[:, None], np.minimum(mind, d2), mind)
    # 3. fill by farthest-point sampling from the kept set
    ext2 = np.maximum(ext**2, 1e-300)
    mind = np.where(v & ~pick, mind, -1.0)
    tol2 = tol_a**2
    for _ in range(cap - int(count.min())):  # at most cap rounds, vectorised over pairs
        nxt = _argmax_by_code(mind, cd, mind > tol2[:, None], quantum * ext2)
        take = (count < cap) & (mind[rows, nxt] > tol2)
        if not np.any(take):
            break
        pick[rows[take], nxt[take]] = True
        count += take
        d2 = np.sum((t - t[rows, nxt][:, None, :]) ** 2, axis=-1)
        mind = np.where(take[:, None], np.minimum(mind, d2), mind)
        mind[rows[take], nxt[take]] = -1.0
    keep[rows[:, None], slot] = pick & v
    return keep
