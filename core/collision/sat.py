"""Box/box contact in n dimensions: separating-axis test over all candidate axes, then the manifold.

Method: the separating-axis test (Gottschalk, Lin and Manocha, "OBBTree", SIGGRAPH 1996; Ericson,
Real-Time Collision Detection, 2005, ch. 5), stated for any n, then a reference face clipped by
Sutherland-Hodgman:

* Candidate axes are the facet normals of the Minkowski difference. For two boxes these are the
  normals of the hyperplanes spanned by k axes of A and n-1-k axes of B, k = 0..n-1: C(2n, n-1) in
  all (4, 15, 56, 210 for n = 2..5). k = n-1 gives A's face normals, k = 0 B's, the rest are "mixed".
* Everything is done in A's frame, where A's axes are the basis and B's axes are the columns of
  C = R_A^T R_B. The normal of span(e_S, c_T) (generalised cross product, u_m = det[e_S, c_T, e_m])
  has u_m = 0 for m in S and otherwise u_m = +-det C[rows R_m, cols T] with R_m the rows not in S
  and not m. So every candidate is a vector of signed minors of C. The minors of each size are built
  from the smaller ones by Laplace expansion, all pairs at once, from index tables made once per n;
  the axes are then one gather. (Rejected: stacking the n-1 spanning vectors and taking
  determinants per axis, measured at ~30 us per 4-D pair; with the minor tables the whole kernel,
  manifolds included, runs at 8 / 10-17 / 35-50 us per pair in 3-D / 4-D / 5-D in batches of 2000,
  ``python -m ndrigid.bench.narrowphase``, on a shared core.) The B-frame components of each
  mixed axis are minors too (see ``_tables``), so no per-axis matrix product is needed either.
* Projection radius of a box on a unit u (its own frame): sum_i h_i |u_i|; overlap along u is
  r_A + r_B - |u . d|. The axis of least overlap wins, with a preference for coherence: A's faces
  over B's faces, and faces over mixed axes, unless the other is better by 5 % (2 % for B over A)
  plus a small absolute slop. Mixed axes from nearly parallel directions (tiny cross-product norm)
  are masked out: they duplicate a face axis and their normal is noise.
* Face contact: the reference face is the face whose normal is the axis; the incident face is the
  other box's face most anti-parallel to it. Work in the reference box's frame. The incident face's
  edges are clipped against the reference face's side slab |x_i| <= h_i (i tangent) with
  :func:`clip.clip_segments`, and symmetrically the reference face's edges, projected along the
  normal onto the incident face's hyperplane, are clipped against the incident face's side slab.
  The ends of both sets are candidates, and in n >= 5 so are the crossings of the j-faces of the
  reference facet with the (n-1-j)-faces of the incident one, 2 <= j <= n-3 (each a j x j solve,
  see ``_crossings``). Patch corners are where a j-face of one facet meets a complementary face
  of the other; the two edge sets cover j = 0, 1 and their mirrors, which is all of them while
  n - 1 <= 3, and the crossings cover the rest (5-D: 2-faces with 2-faces). Candidates within
  the margin below the reference face are reduced by :func:`clip.select_points` along the
  diagonal directions of the tangent axes, so a face-to-face patch keeps its corners (at most the
  cap; in 5-D the 8 even corners of the 16). If no candidate survives (rounding at grazing poses)
  one point is found by alternating projections onto the two faces.
* Mixed contact: one point, midway between the closest points of the two support faces (affine
  flats; one n x n solve per pair for the two flats' parameters and the distance along the axis).
* Speculative contacts: a pair separated along its best axis by less than the margin still gives
  points, with negative depth; points more than the margin above the reference face are dropped.

Feature ids (int64) of face contacts: (reference box, reference face, incident face) in the high
bits, and below them the set of side planes of both facets the point lies on (bit 2i / 2i + 1 for
the +/- plane of axis i of the reference facet, the same shifted by 2n for the incident facet),
within ``_FEATURE_TOL`` of the smaller box's largest half-extent. That set names a corner of the
overlap patch whichever construction found it, so the same corner reached as an incident vertex
and as a clipped reference edge end is one feature, and a resting box keeps its ids. (Rejected:
ids from the construction, vertex bits or (edge, clip plane): the two twins carried different ids,
rounding decided which was kept, and 8-19 % of the keys of a resting 10-box stack changed every
step; with plane sets 0.02-0.1 %.) Mixed contacts: (axis, support-face signs of A and B).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from functools import cache
from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from ..algebra import Algebra
from ..errors import InputError
from ..state.contacts import ManifoldPoints
from .clip import clip_segments, diagonal_directions, manifold_cap, select_points

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

__all__ = ["BoxSat", "box_axes", "box_axis_count", "box_box", "box_box_compiled", "box_sat", "kernel_tables"]

# Coherence tolerances (relative, absolute in metres): a face axis wins over a mixed one within 5 %,
# A's faces over B's within 2 % (chosen on our resting stacks: fewer flips of the reference face).
_MIXED_REL, _MIXED_ABS = 0.05, 1e-4
_FACE_REL, _FACE_ABS = 0.02, 1e-5
# A mixed axis whose unnormalised cross product is shorter than this (the sine of the angle between
# the directions, roughly) is a near-duplicate of a face axis: skipped.
_DEGENERATE = 1e-5
_MIXED_FLAG = np.int64(1) << np.int64(40)
# A corner of a face manifold lies on a side plane of a facet when within this fraction of the
# smaller box's largest half-extent: coincident corners of the two facets then share one feature id
# (see _plane_code), and a resting box that jitters by less than this keeps its ids.
_FEATURE_TOL = 1e-3


def box_axis_count(n: int) -> int:
    """Number of candidate separating axes of two n-D boxes: C(2n, n-1)."""
    from math import comb

    return comb(2 * n, n - 1)


@dataclass(frozen=True)
class _Tables:
    """Index tables of one dimension n (see the module notes)."""

    n: int
    # minors: flat storage M[:, 0] = 0, M[:, 1] = 1 (the empty minor), then C's entries, then the
    # larger minors; size s (2 <= s <= n-2) is a sum of s terms: sign * C[r0, c_j] * M[sub_j]
    minor_terms: tuple[tuple[IntArray, IntArray, Array], ...]  # (c_flat (N,s), sub (N,s), sign (s,))
    n_minors: int
    mixed_idx: IntArray  # (Nm, 2n) index into M of each component of each mixed axis, A's then B's frame
    mixed_sign: Array  # (Nm, 2n)
    mixed_src: IntArray  # (Nm, n-1) spanning directions: i < n is A's axis i, n + j is B's axis j
    mixed_in_a: NDArray[np.bool_]  # (Nm, n) A's axis i spans the axis
    mixed_in_b: NDArray[np.bool_]  # (Nm, n) B's axis j spans the axis
    # faces: for face axis j (0..n-1), the edges of the facet orthogonal to j
    edge_start: Array  # (n, Ne, n) signs +-1 of the start vertex on the tangent axes, 0 on axis j
    edge_axis: IntArray  # (n, Ne) the axis each edge runs along
    # crossings of a j-face of the reference facet with an (n-1-j)-face of the incident facet,
    # 2 <= j <= n-3 (only n >= 5), by tangent position (0..n-2, the facet's axes in ascending order):
    # one tuple per j of (fixed reference positions A (NAB, j), free incident positions F (NAB, j),
    # fixed incident positions B (NAB, n-1-j), signs of A (NSA, j), signs of B (NSB, n-1-j))
    crossings: tuple[tuple[IntArray, IntArray, IntArray, Array, Array], ...]


@cache
def _tables(n: int) -> _Tables:
    rows_all = range(n)
    index: dict[tuple[tuple[int, ...], tuple[int, ...]], int] = {}
    for r in range(n):
        for c in range(n):
            index[((r,), (c,))] = 2 + r * n + c
    nxt = 2 + n * n
    terms = []
    for s in range(2, n - 1):
        rc = list(itertools.combinations(rows_all, s))
        c_flat = np.zeros((len(rc) ** 2, s), dtype=np.int64)
        sub = np.zeros((len(rc) ** 2, s), dtype=np.int64)
        e = 0
        for R in rc:
            for Cc in rc:
                for j in range(s):
                    c_flat[e, j] = R[0] * n + Cc[j]
                    sub[e, j] = index[(R[1:], Cc[:j] + Cc[j + 1:])]
                index[(R, Cc)] = nxt + e
                e += 1
        sign = np.where(np.arange(s) % 2 == 0, 1.0, -1.0)
        terms.append((c_flat, sub, sign))
        nxt += e
    # mixed axes: k axes S of A, n-1-k axes T of B, 1 <= k <= n-2. The components of u in A's frame
    # and of w = C^T u in B's frame are both signed minors of C: C^T (e_S x c_T) = (r_S x e_T) for a
    # rotation C (the cross product is SO(n)-equivariant; r_s is row s of C), so w_j = 0 for j in T
    # and otherwise +-det C[S, not T and not j]. The signs are read off one random rotation X.
    rng = np.random.default_rng(12345)
    X, _ = np.linalg.qr(rng.normal(size=(n, n)))
    if np.linalg.det(X) < 0:
        X[:, 0] *= -1.0
    eye = np.eye(n)
    idx, sgn, src, in_a, in_b = [], [], [], [], []
    for k in range(n - 2, 0, -1):
        for S in itertools.combinations(rows_all, k):
            for T in itertools.combinations(rows_all, n - 1 - k):
                row_i = np.zeros(2 * n, dtype=np.int64)  # index 0 of M is the constant 0
                row_s = np.zeros(2 * n)
                span = np.column_stack([eye[:, list(S)], X[:, list(T)]])
                u = np.array([np.linalg.det(np.column_stack([span, eye[:, m]])) for m in rows_all])
                w = X.T @ u
                for m in rows_all:
                    if m not in S:
                        R = tuple(r for r in rows_all if r not in S and r != m)
                        row_i[m] = index[(R, T)]
                        row_s[m] = np.sign(u[m] / np.linalg.det(X[np.ix_(R, T)]))
                    if m not in T:
                        cols = tuple(c for c in rows_all if c not in T and c != m)
                        row_i[n + m] = index[(S, cols)]
                        row_s[n + m] = np.sign(w[m] / np.linalg.det(X[np.ix_(S, cols)]))
                idx.append(row_i)
                sgn.append(row_s)
                src.append(list(S) + [n + t for t in T])
                mask_a = np.zeros(n, dtype=bool)
                mask_a[list(S)] = True
                mask_b = np.zeros(n, dtype=bool)
                mask_b[list(T)] = True
                in_a.append(mask_a)
                in_b.append(mask_b)
    # edges of the facet orthogonal to axis j: run along axis a != j, other tangent signs free
    starts, axes = [], []
    for j in rows_all:
        st, ax = [], []
        for a in rows_all:
            if a == j:
                continue
            others = [c for c in rows_all if c not in (a, j)]
            for signs in itertools.product((-1.0, 1.0), repeat=len(others)):
                v = np.zeros(n)
                v[a] = -1.0
                v[others] = signs
                st.append(v)
                ax.append(a)
        starts.append(st)
        axes.append(ax)
    crossings = []
    pos = range(n - 1)
    for j in range(2, n - 2):
        A_, F_, B_ = [], [], []
        for A in itertools.combinations(pos, j):
            for B in itertools.combinations(pos, n - 1 - j):
                A_.append(A)
                B_.append(B)
                F_.append([q for q in pos if q not in B])
        sa = np.array(list(itertools.product((-1.0, 1.0), repeat=j)))
        sb = np.array(list(itertools.product((-1.0, 1.0), repeat=n - 1 - j)))
        crossings.append((np.array(A_, dtype=np.int64), np.array(F_, dtype=np.int64),
                          np.array(B_, dtype=np.int64), sa, sb))
    nm = len(idx)
    return _Tables(
        n=n,
        minor_terms=tuple(terms),
        n_minors=nxt,
        mixed_idx=np.array(idx, dtype=np.int64).reshape(nm, 2 * n),
        mixed_sign=np.array(sgn).reshape(nm, 2 * n),
        mixed_src=np.array(src, dtype=np.int64).reshape(nm, n - 1),
        mixed_in_a=np.array(in_a, dtype=bool).reshape(nm, n),
        mixed_in_b=np.array(in_b, dtype=bool).reshape(nm, n),
        edge_start=np.array(starts).reshape(n, -1, n),
        edge_axis=np.array(axes, dtype=np.int64).reshape(n, -1),
        crossings=tuple(crossings),
    )


@cache
def kernel_tables(n: int) -> tuple[Any, ...]:
    """The tables of dimension n flattened for the compiled kernel (``kernels/boxbox_tpl.py``):
    padded arrays in place of the per-size and per-crossing tuples, and the selection directions."""
    tab = _tables(n)
    w = max(n, 1)
    rows_c, rows_s, lens = [], [], []
    for c_flat, sub, _sign in tab.minor_terms:
        for e in range(c_flat.shape[0]):
            rc = np.zeros(w, np.int64)
            rs = np.zeros(w, np.int64)
            rc[: c_flat.shape[1]] = c_flat[e]
            rs[: sub.shape[1]] = sub[e]
            rows_c.append(rc)
            rows_s.append(rs)
            lens.append(c_flat.shape[1])
    mt_c = np.array(rows_c, np.int64).reshape(-1, w)
    mt_sub = np.array(rows_s, np.int64).reshape(-1, w)
    mt_len = np.array(lens, np.int64)
    G = len(tab.crossings)
    nab = max([c[0].shape[0] for c in tab.crossings], default=1)
    nsa = max([c[3].shape[0] for c in tab.crossings], default=1)
    nsb = max([c[4].shape[0] for c in tab.crossings], default=1)
    cr_j = np.zeros(G, np.int64)
    cr_nab = np.zeros(G, np.int64)
    cr_nsa = np.zeros(G, np.int64)
    cr_nsb = np.zeros(G, np.int64)
    cr_A = np.zeros((G, nab, w), np.int64)
    cr_F = np.zeros((G, nab, w), np.int64)
    cr_B = np.zeros((G, nab, w), np.int64)
    cr_sA = np.zeros((G, nsa, w))
    cr_sB = np.zeros((G, nsb, w))
    for g, (cA, cF, cB, sA, sB) in enumerate(tab.crossings):
        cr_j[g] = cA.shape[1]
        cr_nab[g], cr_nsa[g], cr_nsb[g] = cA.shape[0], sA.shape[0], sB.shape[0]
        cr_A[g, : cA.shape[0], : cA.shape[1]] = cA
        cr_F[g, : cF.shape[0], : cF.shape[1]] = cF
        cr_B[g, : cB.shape[0], : cB.shape[1]] = cB
        cr_sA[g, : sA.shape[0], : sA.shape[1]] = sA
        cr_sB[g, : sB.shape[0], : sB.shape[1]] = sB
    cap = manifold_cap(n)
    dirs = np.ascontiguousarray(diagonal_directions(n - 1, cap), dtype=np.float64)
    nm = tab.mixed_idx.shape[0]
    return (mt_c, mt_sub, mt_len, int(tab.n_minors), np.ascontiguousarray(tab.mixed_idx),
            np.ascontiguousarray(tab.mixed_sign, dtype=np.float64).reshape(nm, 2 * n),
            np.ascontiguousarray(tab.mixed_src).reshape(nm, n - 1), np.ascontiguousarray(tab.mixed_in_a),
            np.ascontiguousarray(tab.mixed_in_b), np.ascontiguousarray(tab.edge_start, dtype=np.float64),
            np.ascontiguousarray(tab.edge_axis), cr_j, cr_nab, cr_A, cr_F, cr_B, cr_nsa, cr_sA, cr_nsb, cr_sB,
            dirs, int(cap))


def box_box_compiled(alg: Algebra, pos_a: Array, rot_a: Array, half_a: Array, pos_b: Array, rot_b: Array,
                     half_b: Array, margin: Array) -> ManifoldPoints:
    """:func:`box_box` by the compiled kernel (same rows in the same order; inputs already checked)."""
    from .. import kernels

    n = alg.n
    if pos_a.shape[0] == 0:
        return ManifoldPoints.empty(n)
    k = kernels.load("boxbox", n)
    c = np.ascontiguousarray
    pair, normal, point, depth, feature = k.box_box(
        c(pos_a, dtype=np.float64), c(rot_a, dtype=np.float64), c(half_a, dtype=np.float64),
        c(pos_b, dtype=np.float64), c(rot_b, dtype=np.float64), c(half_b, dtype=np.float64),
        c(np.broadcast_to(margin, (pos_a.shape[0],)), dtype=np.float64), *kernel_tables(n))
    return ManifoldPoints(pair, normal, point, depth, feature)


def _mixed_axes(tab: _Tables, C: Array) -> Array:
    """Unnormalised mixed candidate axes: (P, n, n) -> (P, Nm, 2n), in A's frame then in B's frame."""
    P, n = C.shape[0], tab.n
    M = np.empty((P, tab.n_minors))
    M[:, 0] = 0.0
    M[:, 1] = 1.0
    M[:, 2:2 + n * n] = C.reshape(P, n * n)
    Cf = M[:, 2:2 + n * n]
    at = 2 + n * n
    for c_flat, sub, sign in tab.minor_terms:  # one pass per minor size (at most n - 3 sizes)
        cnt = c_flat.shape[0]
        M[:, at:at + cnt] = (Cf[:, c_flat] * M[:, sub]) @ sign
        at += cnt
    return M[:, tab.mixed_idx] * tab.mixed_sign


def box_axes(n: int, C: Any) -> Array:
    """All C(2n, n-1) candidate axes (unit, A's frame) for relative rotations C = R_A^T R_B.

    Order: A's faces e_0..e_{n-1}, B's faces (columns of C), then the mixed axes. Degenerate mixed
    axes come back as zero vectors. (P, n, n) -> (P, C(2n, n-1), n). For tests and tools; the kernel
    works on the parts directly.
    """
    C = np.asarray(C, dtype=np.float64)
    tab = _tables(n)
    P = C.shape[0]
    U = _mixed_axes(tab, C)[..., :n]
    norm = np.linalg.norm(U, axis=-1, keepdims=True)
    U = np.where(norm > _DEGENERATE, U / np.where(norm > 0, norm, 1.0), 0.0)
    faces_a = np.broadcast_to(np.eye(n), (P, n, n))
    faces_b = np.swapaxes(C, 1, 2)
    return np.concatenate([faces_a, faces_b, U], axis=1)


def _check(name: str, arr: Any, shape: tuple[int, ...]) -> Array:
    a = np.asarray(arr, dtype=np.float64)
    if a.shape != shape:
        raise InputError(f"{name}: expected shape {shape}, got {a.shape}")
    return a


class BoxSat(NamedTuple):
    """Separating-axis verdict of P box pairs.

    depth: (P,) overlap along the chosen axis (> 0 overlap, < 0 gap along it).
    normal: (P, n) world unit axis from A to B.
    axis: (P,) index of the chosen axis in :func:`box_axes` order.
    min_depth: (P,) least overlap over all candidate axes, before the coherence preference.
    """

    depth: Array
    normal: Array
    axis: IntArray
    min_depth: Array


def _validate(n: int, pos_a: Any, rot_a: Any, half_a: Any, pos_b: Any, rot_b: Any, half_b: Any
              ) -> tuple[Array, Array, Array, Array, Array, Array]:
    pos_a = np.asarray(pos_a, dtype=np.float64)
    if pos_a.ndim != 2 or pos_a.shape[1] != n:
        raise InputError(f"pos_a: expected shape (P, {n}), got {pos_a.shape}")
    P = pos_a.shape[0]
    return (pos_a, _check("rot_a", rot_a, (P, n, n)), _check("half_a", half_a, (P, n)),
            _check("pos_b", pos_b, (P, n)), _check("rot_b", rot_b, (P, n, n)),
            _check("half_b", half_b, (P, n)))


class _Sat(NamedTuple):
    C: Array
    d: Array
    ia: IntArray
    ib: IntArray
    use_b: NDArray[np.bool_]
    im: IntArray
    use_m: NDArray[np.bool_]
    depth: Array
    min_depth: Array
    G: Array
    gnorm: Array


def _sat(tab: _Tables, pos_a: Array, rot_a: Array, half_a: Array, pos_b: Array, rot_b: Array,
         half_b: Array) -> _Sat:
    """All candidate axes of P pairs and the chosen one (see the module notes)."""
    P, n = pos_a.shape
    rows = np.arange(P)
    C = np.matmul(np.swapaxes(rot_a, 1, 2), rot_b)  # B's axes in A's frame (columns)
    d = np.einsum("pji,pj->pi", rot_a, pos_b - pos_a)  # B's centre in A's frame
    absC = np.abs(C)
    # face axes: A's (u = e_i) and B's (u = c_j), overlap r_A + r_B - |u . d|
    over_a = half_a + np.einsum("pij,pj->pi", absC, half_b) - np.abs(d)
    over_b = half_b + np.einsum("pij,pi->pj", absC, half_a) - np.abs(np.einsum("pij,pi->pj", C, d))
    ia = np.argmin(over_a, axis=1)
    ib = np.argmin(over_b, axis=1)
    da = over_a[rows, ia]
    db = over_b[rows, ib]
    use_b = db < da - (_FACE_REL * np.abs(da) + _FACE_ABS)
    dface = np.where(use_b, db, da)
    if len(tab.mixed_idx):
        G = _mixed_axes(tab, C)
        gnorm = np.sqrt(np.einsum("pmi,pmi->pm", G[..., :n], G[..., :n]))
        ok = gnorm > _DEGENERATE
        inv = 1.0 / np.where(ok, gnorm, 1.0)
        # overlap is 1-homogeneous in the axis: evaluate on the raw axis, divide by its length once
        hab = np.concatenate([half_a, half_b], axis=1)[:, :, None]
        over_m = ((np.abs(G) @ hab)[..., 0] - np.abs((G[..., :n] @ d[:, :, None])[..., 0])) * inv
        over_m = np.where(ok, over_m, np.inf)
        im = np.argmin(over_m, axis=1)
        dm = over_m[rows, im]
        use_m = dm < dface - (_MIXED_REL * np.abs(dface) + _MIXED_ABS)
    else:
        G = np.zeros((P, 0, 2 * n))
        gnorm = np.zeros((P, 0))
        dm = np.full(P, np.inf)
        im = np.zeros(P, dtype=np.int64)
        use_m = np.zeros(P, dtype=bool)
    min_depth = np.minimum(dm, np.minimum(da, db))
    return _Sat(C, d, ia, ib, use_b, im, use_m, np.where(use_m, dm, dface), min_depth, G, gnorm)


def box_sat(alg: Algebra, pos_a: Any, rot_a: Any, half_a: Any, pos_b: Any, rot_b: Any, half_b: Any) -> BoxSat:
    """Separating-axis test of P box pairs without the manifold (arguments as in :func:`box_box`)."""
    n = alg.n
    pos_a, rot_a, half_a, pos_b, rot_b, half_b = _validate(n, pos_a, rot_a, half_a, pos_b, rot_b, half_b)
    P = pos_a.shape[0]
    tab = _tables(n)
    r = _sat(tab, pos_a, rot_a, half_a, pos_b, rot_b, half_b)
    rows = np.arange(P)
    u = np.zeros((P, n))
    u[rows, r.ia] = 1.0  # A's face axis
    ub = np.swapaxes(r.C, 1, 2)[rows, r.ib]
    u = np.where(r.use_b[:, None], ub, u)
    axis = np.where(r.use_b, n + r.ib, r.ia)
    if r.G.shape[1]:
        um = r.G[rows, r.im, :n] / np.where(r.gnorm[rows, r.im] > 0, r.gnorm[rows, r.im], 1.0)[:, None]
        u = np.where(r.use_m[:, None], um, u)
        axis = np.where(r.use_m, 2 * n + r.im, axis)
    u = u * np.where(np.einsum("pi,pi->p", u, r.d) < 0.0, -1.0, 1.0)[:, None]
    return BoxSat(r.depth, np.einsum("pij,pj->pi", rot_a, u), axis.astype(np.int64), r.min_depth)


def box_box(alg: Algebra, pos_a: Any, rot_a: Any, half_a: Any, pos_b: Any, rot_b: Any, half_b: Any,
            margin: Any) -> ManifoldPoints:
    """Contact points of P box pairs (vectorised; no loop over pairs).

    Args:
        alg: the algebra of dimension n.
        pos_a, pos_b: (P, n) float, box centres (world).
        rot_a, rot_b: (P, n, n) float, rotation matrices (proper: det +1; local -> world: x = pos + R y).
        half_a, half_b: (P, n) float, half-extents.
        margin: (P,) float or a scalar, speculative distance: points whose gap is below it are kept.

    Returns:
        ManifoldPoints with pair indices 0..P-1 (sorted), normals from A to B, depth > 0 for overlap.
        A face contact gives at most :func:`clip.manifold_cap` points, a mixed-axis contact one.
    """
    n = alg.n
    pos_a, rot_a, half_a, pos_b, rot_b, half_b = _validate(n, pos_a, rot_a, half_a, pos_b, rot_b, half_b)
    P = pos_a.shape[0]
    if np.ndim(margin) == 0:
        margin = np.full(P, float(margin))
    else:
        margin = _check("margin", margin, (P,))
    if P == 0:
        return ManifoldPoints.empty(n)
    tab = _tables(n)
    r = _sat(tab, pos_a, rot_a, half_a, pos_b, rot_b, half_b)
    live = r.depth > -margin  # separated by more than the margin along some axis: no contact
    parts: list[ManifoldPoints] = []
    face = np.flatnonzero(live & ~r.use_m)
    if len(face):
        parts.append(_face_contacts(tab, face, r.use_b, r.ia, r.ib, r.C, r.d, pos_a, rot_a, half_a,
                                    pos_b, rot_b, half_b, margin))
    mixed = np.flatnonzero(live & r.use_m)
    if len(mixed):
        parts.append(_mixed_contacts(tab, mixed, r, pos_a, rot_a, half_a, half_b))
    if len(parts) == 1:
        return parts[0]
    out = ManifoldPoints.concat(parts, [0] * len(parts), n)
    order = np.argsort(out.pair, kind="stable")
    return ManifoldPoints(out.pair[order], out.normal[order], out.point[order], out.depth[order],
                          out.feature[order])


def _edge_ends(tab: _Tables, axis: IntArray, sign: Array, half: Array
               ) -> tuple[Array, Array, Array, IntArray]:
    """Edges of the facet ``sign * e_axis`` of boxes with half-extents ``half``, in the box's frame.

    Returns start (S, Ne, n), end (S, Ne, n), the start's sign pattern (S, Ne, n) and the axis each
    edge runs along (S, Ne). Every edge starts at -h on its own axis and ends at +h.
    """
    S = len(axis)
    st = tab.edge_start[axis].copy()
    st[np.arange(S), :, axis] = sign[:, None]
    run = tab.edge_axis[axis]
    p0 = st * half[:, None, :]
    p1 = p0.copy()
    np.put_along_axis(p1, run[..., None], -np.take_along_axis(p0, run[..., None], axis=-1), axis=-1)
    return p0, p1, st, run


def _slab_clip(x0: Array, x1: Array, half: Array, skip: IntArray
               ) -> tuple[Array, Array, NDArray[np.bool_]]:
    """Clip segments (S, Ne, n) against the slab |x_i| <= h_i for every axis i except ``skip``.

    Returns t_in, t_out and ok (S, Ne): the entry and exit parameters and whether anything is left.
    """
    S, Ne, n = x0.shape
    lo = np.empty((S, Ne, 2 * n))
    hi = np.empty((S, Ne, 2 * n))
    lo[..., 0::2] = x0 - half[:, None, :]
    lo[..., 1::2] = -x0 - half[:, None, :]
    hi[..., 0::2] = x1 - half[:, None, :]
    hi[..., 1::2] = -x1 - half[:, None, :]
    rs = np.arange(S)
    for f in (lo, hi):  # the normal axis bounds nothing
        f[rs, :, 2 * skip] = -1.0
        f[rs, :, 2 * skip + 1] = -1.0
    t_in, t_out, _, _, ok = clip_segments(lo, hi)
    return t_in, t_out, ok


def _plane_code(x: Array, half: Array, skip: IntArray, tol: Array, shift: int) -> IntArray:
    """Bits of the facet side planes a point lies on, within ``tol``: (S, K, n) -> (S, K) int.

    Bit shift + 2i: x_i >= h_i - tol; bit shift + 2i + 1: x_i <= -h_i + tol; axis ``skip`` (the
    facet's normal axis) is left out. This is the feature id of a corner of the overlap patch: the
    planes that meet there, whichever construction (vertex, clipped edge, crossing) found it.
    """
    S, K, n = x.shape
    lim = (half - tol[:, None])[:, None, :]
    w = np.int64(1) << (shift + 2 * np.arange(n, dtype=np.int64))
    w = np.broadcast_to(w, (S, n)).copy()
    w[np.arange(S), skip] = 0
    return (np.einsum("pki,pi->pk", (x >= lim).astype(np.int64), w)
            + np.einsum("pki,pi->pk", (x <= -lim).astype(np.int64), 2 * w))


def _take(a: Array, idx: IntArray) -> Array:
    """a[p, k, idx[p]] for (S, K, n) a and (S,) idx -> (S, K)."""
    return np.take_along_axis(a, idx[:, None, None], axis=-1)[..., 0]


def _face_contacts(tab: _Tables, sel: IntArray, use_b: NDArray[np.bool_], ia: IntArray, ib: IntArray,
                   C: Array, d: Array, pos_a: Array, rot_a: Array, half_a: Array, pos_b: Array, rot_b: Array,
                   half_b: Array, margin: Array) -> ManifoldPoints:
    """Clipped face manifolds of the pairs ``sel`` (see the module notes), built in the reference frame."""
    n = tab.n
    S = len(sel)
    rs = np.arange(S)
    flip = use_b[sel]  # the reference face belongs to B
    Cs, ds = C[sel], d[sel]
    # reference-frame data: Q = R_ref^T R_inc (incident axes as columns), e = incident centre
    Q = np.where(flip[:, None, None], np.swapaxes(Cs, 1, 2), Cs)
    e = np.where(flip[:, None], -np.einsum("pij,pi->pj", Cs, ds), ds)
    h_ref = np.where(flip[:, None], half_b[sel], half_a[sel])
    h_inc = np.where(flip[:, None], half_a[sel], half_b[sel])
    m = np.where(flip, ib[sel], ia[sel])
    s = np.where(e[rs, m] >= 0.0, 1.0, -1.0)  # the reference normal s e_m points at the incident box
    # incident face: the incident axis most aligned with the normal, on the side facing back
    qm = Q[rs, m]  # (S, n) = Q^T n_ref / s: the normal in incident coordinates
    jn = np.argmax(np.abs(qm), axis=1)
    sig = np.where(s * qm[rs, jn] > 0.0, -1.0, 1.0)
    h_m = h_ref[rs, m]
    margin_s = margin[sel]

    # -- incident face edges clipped against the reference slab (reference coordinates) -----------
    y0, y1, st, run = _edge_ends(tab, jn, sig, h_inc)
    QT = np.swapaxes(Q, 1, 2)
    x0 = e[:, None, :] + y0 @ QT
    x1 = e[:, None, :] + y1 @ QT
    t_in, t_out, ok_i = _slab_clip(x0, x1, h_ref, m)
    ends = np.concatenate([x0 + t_in[..., None] * (x1 - x0), x0 + t_out[..., None] * (x1 - x0)], axis=1)
    inc_i = np.concatenate([y0 + t_in[..., None] * (y1 - y0), y0 + t_out[..., None] * (y1 - y0)], axis=1)
    dep_i = h_m[:, None] - s[:, None] * _take(ends, m)
    nref = s[:, None] * np.eye(n)[m]  # (S, n) reference normal, reference coordinates
    mid_i = ends + 0.5 * dep_i[..., None] * nref[:, None, :]
    ok_i = np.concatenate([ok_i, ok_i], axis=1)

    # -- reference face edges, slid along the normal onto the incident hyperplane, clipped there -----
    r0, r1, rst, rrun = _edge_ends(tab, m, s, h_ref)
    qn = s[:, None] * qm  # the reference normal in incident coordinates
    g0 = (r0 - e[:, None, :]) @ Q  # incident coordinates y = Q^T (x - e)
    g1 = (r1 - e[:, None, :]) @ Q
    target = (sig * h_inc[rs, jn])[:, None]
    # |qn[jn]| >= 1/sqrt(n): jn is the incident axis most aligned with the normal
    t0 = (target - _take(g0, jn)) / qn[rs, jn][:, None]
    t1 = (target - _take(g1, jn)) / qn[rs, jn][:, None]
    g0 = g0 + t0[..., None] * qn[:, None, :]
    g1 = g1 + t1[..., None] * qn[:, None, :]
    u_in, u_out, ok_r = _slab_clip(g0, g1, h_inc, jn)
    ends_r = np.concatenate([r0 + u_in[..., None] * (r1 - r0), r0 + u_out[..., None] * (r1 - r0)], axis=1)
    inc_r = np.concatenate([g0 + u_in[..., None] * (g1 - g0), g0 + u_out[..., None] * (g1 - g0)], axis=1)
    height = np.concatenate([t0 + u_in * (t1 - t0), t0 + u_out * (t1 - t0)], axis=1)
    dep_r = -height  # the incident surface lies |height| below the reference face
    mid_r = ends_r + 0.5 * height[..., None] * nref[:, None, :]
    ok_r = np.concatenate([ok_r, ok_r], axis=1)

    # tangent axes: every axis but the normal one, ascending (reference and incident facets)
    tax = np.argsort(np.arange(n)[None, :] == m[:, None], axis=1, kind="stable")[:, : n - 1]
    tinc = np.argsort(np.arange(n)[None, :] == jn[:, None], axis=1, kind="stable")[:, : n - 1]
    parts_p, parts_d, parts_ok, parts_y = [mid_i, mid_r], [dep_i, dep_r], [ok_i, ok_r], [inc_i, inc_r]
    # -- n >= 5: crossings of j-faces of the reference facet with (n-1-j)-faces of the incident one ---
    for cross in tab.crossings:
        cp, cd, cok, cy = _crossings(cross, Q, e, h_ref, h_inc, m, s, jn, sig, tax, tinc, nref)
        parts_p.append(cp)
        parts_d.append(cd)
        parts_ok.append(cok)
        parts_y.append(cy)

    pts = np.concatenate(parts_p, axis=1)  # (S, K, n), reference frame
    dep = np.concatenate(parts_d, axis=1)
    inc = np.concatenate(parts_y, axis=1)  # the same points on the incident facet, incident frame
    ok = np.concatenate(parts_ok, axis=1) & (dep > -margin_s[:, None])
    # canonical feature codes: the side planes of both facets each candidate lies on (module notes)
    ftol = _FEATURE_TOL * np.minimum(np.max(h_ref, axis=1), np.max(h_inc, axis=1))
    code = _plane_code(pts, h_ref, m, ftol, 0) + _plane_code(inc, h_inc, jn, ftol, 2 * n)
    tang = np.take_along_axis(pts, tax[:, None, :], axis=-1)
    cap = manifold_cap(n)
    keep = select_points(tang, ok, code, cap, diagonal_directions(n - 1, cap), 1e-6 * np.max(h_ref, axis=1))

    # fallback: no candidate survived though the SAT says contact (rounding at grazing poses)
    empty = np.flatnonzero(~np.any(keep, axis=1))
    fb_pts, fb_dep = _fallback_point(Q[empty], e[empty], h_ref[empty], h_inc[empty], m[empty], s[empty],
                                     jn[empty], sig[empty])
    fb = fb_dep > -margin_s[empty]
    empty, fb_pts, fb_dep = empty[fb], fb_pts[fb], fb_dep[fb]

    p_idx, k_idx = np.nonzero(keep)
    loc = np.concatenate([p_idx, empty])
    x_ref = np.concatenate([pts[p_idx, k_idx], fb_pts])
    depth = np.concatenate([dep[p_idx, k_idx], fb_dep])
    codes = np.concatenate([code[p_idx, k_idx], np.zeros(len(empty), dtype=np.int64)])
    ref_face = m + n * (s < 0)
    inc_face = jn + n * (sig < 0)
    head = (flip.astype(np.int64) * 2 * n + ref_face) * 2 * n + inc_face
    feature = (head[loc] << np.int64(4 * n)) + codes

    # to world, by the reference box's pose; the normal from A to B is -n_ref when B is the reference
    pair = sel[loc]
    flip_l = flip[loc]
    pos_r = np.where(flip_l[:, None], pos_b[pair], pos_a[pair])
    rot_r = np.where(flip_l[:, None, None], rot_b[pair], rot_a[pair])
    point = pos_r + np.einsum("pij,pj->pi", rot_r, x_ref)
    normal = rot_r[np.arange(len(pair)), :, m[loc]] * (s[loc] * np.where(flip_l, -1.0, 1.0))[:, None]
    return ManifoldPoints(pair.astype(np.int64), normal, point, depth, feature.astype(np.int64))


def _crossings(cross: tuple[IntArray, IntArray, IntArray, Array, Array], Q: Array, e: Array, h_ref: Array,
               h_inc: Array, m: IntArray, s: Array, jn: IntArray, sig: Array, tax: IntArray, tinc: IntArray,
               nref: Array) -> tuple[Array, Array, NDArray[np.bool_], Array]:
    """Corners where a j-face of the reference facet crosses an (n-1-j)-face of the incident facet.

    Seen along the reference normal, the incident facet is x = x0 + P y over its tangent
    coordinates y (P = Q[tangent axes of the reference, tangent axes of the incident facet]). Fixing
    the reference coordinates x_A = +-h_A and the incident coordinates y_B = +-g_B leaves the j
    free incident coordinates y_F, from the j x j system P[A, F] y_F = +-h_A - x0_A - P[A, B] y_B.
    A solution inside both facets is a corner of the overlap patch. Returns the candidates as the
    other parts of :func:`_face_contacts` do: midway points (S, K, n) in the reference frame, depths,
    validity and the incident-frame points (S, K, n), K = NAB * NSA * NSB.
    """
    cA, cF, cB, sA, sB = cross
    S, n = e.shape
    rs = np.arange(S)
    P = Q[rs[:, None, None], tax[:, :, None], tinc[:, None, :]]  # (S, n-1, n-1)
    x0 = (np.take_along_axis(e, tax, axis=1)
          + Q[rs[:, None], tax, jn[:, None]] * (sig * h_inc[rs, jn])[:, None])
    hr = np.take_along_axis(h_ref, tax, axis=1)
    gi = np.take_along_axis(h_inc, tinc, axis=1)
    M = P[:, cA[:, :, None], cF[:, None, :]]  # (S, NAB, j, j)
    det = np.linalg.det(M)
    good = np.abs(det) > _DEGENERATE
    Minv = np.linalg.inv(np.where(good[..., None, None], M, np.eye(M.shape[-1])))
    yB = gi[:, cB][:, :, None, :] * sB[None, None]  # (S, NAB, NSB, b)
    hA = hr[:, cA][:, :, None, :] * sA[None, None]  # (S, NAB, NSA, j)
    PAB = P[:, cA[:, :, None], cB[:, None, :]]  # (S, NAB, j, b)
    rhs = ((hA - x0[:, cA][:, :, None, :])[:, :, :, None, :]
           - np.einsum("pajb,pasb->pasj", PAB, yB)[:, :, None])
    yF = np.einsum("pajk,pastk->pastj", Minv, rhs)  # (S, NAB, NSA, NSB, j)
    NAB, NSA, NSB = cA.shape[0], sA.shape[0], sB.shape[0]
    eye = np.eye(n - 1)
    # tangent incident coordinates: y_B fixed, y_F solved (one-hot scatter by the per-crossing tables)
    Y = (np.einsum("pastj,ajq->pastq", yF, eye[cF])
         + np.einsum("pasb,abq->pasq", yB, eye[cB])[:, :, None])
    Y = Y.reshape(S, NAB * NSA * NSB, n - 1)
    x = x0[:, None, :] + Y @ np.swapaxes(P, 1, 2)
    slack = 1e-9 * np.max(h_ref, axis=1)[:, None, None]
    inside = (np.all(np.abs(Y) <= gi[:, None, :] + slack, axis=2)
              & np.all(np.abs(x) <= hr[:, None, :] + slack, axis=2))
    inside &= np.repeat(good, NSA * NSB, axis=1)
    inc = np.zeros((S, Y.shape[1], n))
    np.put_along_axis(inc, np.broadcast_to(tinc[:, None, :], Y.shape), Y, axis=2)
    inc[rs, :, jn] = (sig * h_inc[rs, jn])[:, None]
    X = e[:, None, :] + inc @ np.swapaxes(Q, 1, 2)  # on the incident facet, reference frame
    dep = h_ref[rs, m][:, None] - s[:, None] * _take(X, m)
    return X + 0.5 * dep[..., None] * nref[:, None, :], dep, inside, inc


def _fallback_point(Q: Array, e: Array, h_ref: Array, h_inc: Array, m: IntArray, s: Array, jn: IntArray,
                    sig: Array) -> tuple[Array, Array]:
    """One point of the incident face inside the reference prism, by alternating projections.

    Alternating projections between two intersecting convex sets converge to a point of both (von
    Neumann); a few rounds suffice for a usable contact point. Returns midway points (F, n) and
    their depths (F,), reference frame; -inf where a gap has no point.
    """
    F, n = e.shape
    rs = np.arange(F)
    x = e.copy()
    lim = h_ref.copy()
    lim[rs, m] = np.inf  # the reference prism: the slab of the tangent axes only
    ilo = -h_inc.copy()
    ihi = h_inc.copy()
    ilo[rs, jn] = ihi[rs, jn] = sig * h_inc[rs, jn]  # the incident face: its normal coordinate fixed
    for _ in range(16):  # a fixed small number of rounds, vectorised over the pairs
        x = np.clip(x, -lim, lim)
        y = np.clip(np.einsum("pij,pi->pj", Q, x - e), ilo, ihi)
        x = e + np.einsum("pij,pj->pi", Q, y)
    dep = h_ref[rs, m] - s * x[rs, m]
    # a speculative point only when the projections met (the faces overlap seen along the normal):
    # otherwise the boxes approach edge to edge or corner to corner and the face gap is not the gap
    met = np.all(np.abs(x) <= lim + 1e-6 * np.max(h_ref, axis=1)[:, None], axis=1)
    dep = np.where(met | (dep > 0.0), dep, -np.inf)
    x = x.copy()
    x[rs, m] += 0.5 * s * np.where(np.isfinite(dep), dep, 0.0)
    return x, dep


def _mixed_contacts(tab: _Tables, sel: IntArray, r: _Sat, pos_a: Array, rot_a: Array, half_a: Array,
                    half_b: Array) -> ManifoldPoints:
    """One point per pair: midway between the closest points of the two support faces (A's frame)."""
    n = tab.n
    S = len(sel)
    ax = r.im[sel]
    g = r.G[sel, ax] / r.gnorm[sel, ax][:, None]
    u = g[:, :n]  # (S, n) unit, A's frame
    w = g[:, n:]  # the same axis in B's frame
    Cs, ds = r.C[sel], r.d[sel]
    flipu = np.where(np.einsum("pi,pi->p", u, ds) < 0.0, -1.0, 1.0)
    u = u * flipu[:, None]  # from A to B
    w = w * flipu[:, None]
    in_a = tab.mixed_in_a[ax]
    in_b = tab.mixed_in_b[ax]
    ha, hb = half_a[sel], half_b[sel]
    sa = np.where(u >= 0.0, 1.0, -1.0)  # A's support face along +u
    sb = np.where(w > 0.0, -1.0, 1.0)  # B's support face along -u
    a0 = np.where(in_a, 0.0, sa * ha)
    b0 = ds + np.einsum("pij,pj->pi", Cs, np.where(in_b, 0.0, sb * hb))
    # solve a0 + E_S alpha - (b0 + C_T beta) = lam u for (alpha, beta, lam): columns [E_S, -C_T, -u]
    basis = np.concatenate([np.broadcast_to(np.eye(n), (S, n, n)), -Cs], axis=2)  # (S, n, 2n)
    src = tab.mixed_src[ax]  # (S, n-1)
    Mx = np.concatenate([np.take_along_axis(basis, src[:, None, :], axis=2), -u[:, :, None]], axis=2)
    sol = np.linalg.solve(Mx, (b0 - a0)[..., None])[..., 0]  # (S, n)
    coef = sol[:, : n - 1]
    # scatter the parameters back onto the axes they move, clamped to the faces
    alpha = np.zeros((S, 2 * n))
    np.put_along_axis(alpha, src, coef, axis=1)
    lim = np.concatenate([ha, hb], axis=1)
    alpha = np.clip(alpha, -lim, lim)
    pa = a0 + np.where(in_a, alpha[:, :n], 0.0)
    pb = b0 + np.einsum("pij,pj->pi", Cs, np.where(in_b, alpha[:, n:], 0.0))
    mid = 0.5 * (pa + pb)
    point = pos_a[sel] + np.einsum("pij,pj->pi", rot_a[sel], mid)
    normal = np.einsum("pij,pj->pi", rot_a[sel], u)
    bits = np.int64(1) << np.arange(n, dtype=np.int64)
    code_a = (sa > 0).astype(np.int64) @ bits
    code_b = (sb > 0).astype(np.int64) @ bits
    feat = _MIXED_FLAG + (ax.astype(np.int64) << np.int64(2 * n)) + (code_a << np.int64(n)) + code_b
    return ManifoldPoints(sel.astype(np.int64), normal, point, r.depth[sel], feat.astype(np.int64))
