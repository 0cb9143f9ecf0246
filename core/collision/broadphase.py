"""Broadphase: bounding boxes of every collider and the candidate pairs whose boxes overlap.

Invariants and choices:

* World axis-aligned bounding boxes are built in one vectorised pass per shape kind from
  ``bodies.rotation``: a ball is ``centre +- r``; a box is ``centre +- |M| h`` (the exact bound of
  a rotated box); polytopes, meshes and compounds are bounded through a per-shape "cloud" of local
  points with radii (polytope and mesh vertices with radius 0; compound pieces contribute their
  rotated vertices, or a ball piece its centre with its radius), cached per shape id (shapes are
  immutable, ids never reused). One loop over the distinct cloud shapes, vectorised over bodies.
* Fattening: each box grows by ``max(broadphase_margin, speculative_margin / 2)`` plus the distance
  any point of the body can travel in one step, ``dt (|v| + |w| e)`` with ``e`` the reach of the
  body from its centre of mass (|W r| <= |B| |r| for a bivector B: its spectral norm is at most
  its Euclidean norm). Two fattened boxes then overlap whenever the narrowphase's speculative
  margin ``speculative_margin + dt (|v_a| + |v_b| + |w_a| e_a + |w_b| e_b)`` could keep a
  contact, because the gap between two shapes is never smaller than the gap between their boxes.
* Half-spaces are unbounded: they take no part in the box test. Each half-space is paired, in one
  (H, N) vectorised test, with every body whose fattened box reaches its fattened plane (the
  box's lowest point along the world normal, centre . u - |u| . e, lies below the plane).
* Candidate pairs come from :func:`grid_pairs`: a uniform grid over n - 1 axes with an exact
  sweep along the axis of largest spread inside each cell (vectorised: one packed integer sort,
  then the in-cell runs walked one offset at a time, a loop over run lengths, never over bodies
  or pairs). A pure one-axis sweep-and-prune
  (:func:`sweep_and_prune_pairs`) is kept for measurement: it must enumerate every pair whose
  intervals overlap on the sorted axis, a fraction (w/L) of all pairs where the true pairs are a
  fraction (w/L)^n, so in 4-D it meets hundreds of candidates per body. A full n-axis grid meets
  about 2^n candidates per true pair; sweeping one of the axes halves that. Measured on 10,000
  moving 4-D balls and boxes (22,000 pairs; ``python -m ndrigid.bench.collision``, one core of a
  2-core machine shared with other jobs, so figures drift by +-20 % between runs):
  ``find_pairs`` 8.6-9.0 ms median (grid 6.2-6.4 ms, boxes 1.2 ms); sweep-and-prune 240 ms; a
  full 4-axis grid (the first version) 22 ms for the grid alone. ``python -m ndrigid.bench
  broadphase --dim 4 --bodies 10000`` (a uniform cloud): ``find_pairs`` 7.6-8.2 ms. The
  previous grid (a ``searchsorted`` of every run end, a repeat-based run expansion, boolean-mask
  compaction, an (N, 2^m) entry mask) gave 14.1 ms (grid 11.2 ms) and 12.4 ms on the same two
  benchmarks; run side by side in one process on the same boxes the new ``find_pairs`` takes
  0.58 of its time in 4-D (0.59 in 2-D, 0.57 in 3-D, 0.65 in 5-D, 10,000 bodies each). Where the
  time went, by line profile: boolean-mask indexing ``a[m]`` with an unpredictable mask (4.5
  times a ``flatnonzero`` plus integer gathers), the unsorted-needle ``searchsorted`` (2.5 ms on
  43k entries), ``np.var`` and ``np.linalg.norm`` on short rows, reductions over (N, 3) along
  axis 0 (hence the axis-major (m, N) grid bounds), and ``argsort(kind="stable")`` (0.58 ms
  against 0.10 ms). Tried and kept out: int32 indices (gathers with them cost 2.5 times more:
  numpy converts them); another grid cell (default 1.6 m on the benchmark, median box 1.09 m:
  1.7 and 1.8 m no faster, 2.0 m and 2.4 m slower; 1.3 m sends 2.3 % of the boxes to the dense
  path, 82 ms).
* Grid cell: the largest box size over the grid axes not above 2.5 times the median, so a box
  covers 1 or 2 cells per axis and its cells are an offset bit pattern; a body spanning more than
  2 cells (much larger than the rest) is tested against all boxes directly (dense, chunked), so
  one huge platform does not flood the grid.
* Each candidate pair is reported once, by the cell holding the lower corner of the two boxes'
  overlap (that cell lies in both boxes' cell ranges): no deduplication pass. Cell keys are exact
  mixed-radix integers while the occupied range fits in 62 bits, else hashes (a hash collision
  costs at most a wasted candidate or a duplicate, which the final sort drops).
* Filtering, applied to candidate pairs: (layer_a & mask_b) and (layer_b & mask_a) non-zero; no
  pair of two "inert" bodies (static or asleep: static-static, static-asleep, asleep-asleep); and
  at least one body dynamic or a sensor (kinematic-static and kinematic-kinematic pairs are
  skipped since neither body responds; a kinematic or static sensor still sees a kinematic body).
* No persistent pair cache: it would have to re-test every cached pair against this step's boxes
  and still find the new pairs of every body that left its enlarged box (most steps, with 10,000
  moving bodies, some body does), so it was not built (a judgement, not measured); the figures
  above are full rebuilds.
* The returned pairs are sorted lexicographically with a < b, so the step is deterministic.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..algebra import Algebra
from ..state.components import (
    DYNAMIC,
    SHAPE_BALL,
    SHAPE_BOX,
    SHAPE_COMPOUND,
    SHAPE_HALFSPACE,
    SHAPE_MESH,
    SHAPE_POLYTOPE,
    STATIC,
    Bodies,
)

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

__all__ = [
    "fat_aabbs",
    "filter_pairs",
    "grid_pairs",
    "halfspace_planes",
    "shape_cloud",
    "sweep_and_prune_pairs",
    "find_pairs",
    "world_aabbs",
]

# Element budget of one chunk of the dense big-body test (booleans of shape (chunk, N, n)).
_DENSE_CHUNK = 4_000_000
_CLOUD_KEY = "shape_clouds"


def _empty_pairs() -> IntArray:
    return np.zeros((0, 2), dtype=np.int64)


def shape_cloud(shape: Any, caches: dict[str, Any] | None = None,
                sid: int | None = None) -> tuple[Array, Array]:
    """Local points (P, n) and radii (P,) whose inflated union bounds ``shape`` (cached by ``sid``).

    Polytopes and meshes give their vertices with radius 0; a compound gives, per piece, the
    piece's vertices in the compound frame, or a ball piece's centre with its radius.
    """
    store: dict[int, tuple[Array, Array]] | None = None
    if caches is not None and sid is not None:
        store = caches.setdefault(_CLOUD_KEY, {})
        hit = store.get(sid)
        if hit is not None:
            return hit
    from ..geometry import shapes as S

    if isinstance(shape, S.Compound):
        pts, rad = [], []
        for piece, t, M in zip(shape.shapes, shape.positions, shape.rotations, strict=True):
            if isinstance(piece, S.Ball):
                pts.append(np.asarray(t)[None, :])
                rad.append(np.array([piece.radius]))
            else:
                V = np.asarray(piece.vertices)  # type: ignore[attr-defined]  # convex pieces only
                pts.append(t + V @ np.asarray(M).T)
                rad.append(np.zeros(len(V)))
        out = (np.concatenate(pts), np.concatenate(rad))
    elif isinstance(shape, S.SimplexMesh):
        V = np.asarray(shape.vertices)[np.unique(shape.cells)]
        out = (V, np.zeros(len(V)))
    elif isinstance(shape, S.Ball):
        out = (np.zeros((1, shape.dim)), np.array([shape.radius]))
    else:  # ConvexPolytope (Box included)
        V = np.asarray(shape.vertices)
        out = (V, np.zeros(len(V)))
    if store is not None and sid is not None:
        store[sid] = out
    return out


def world_aabbs(alg: Algebra, bodies: Bodies, shapes: list[Any],
                caches: dict[str, Any] | None = None) -> tuple[Array, Array]:
    """Tight world bounding boxes ``(lo, hi)``, each (N, n) float, of every body's collider.

    Half-space rows get ``-inf`` / ``+inf`` (they are handled apart, see :func:`halfspace_planes`).
    """
    n = alg.n
    N = bodies.count
    pos = bodies.position
    M = bodies.rotation
    kind = bodies.shape_kind
    ext = np.zeros((N, n))
    centre = pos.copy()
    ball = kind == SHAPE_BALL
    ext[ball] = bodies.radius[ball, None]
    box = np.flatnonzero(kind == SHAPE_BOX)
    if box.size:
        # the half-size of a rotated box's bound along world axis i is sum_j |M_ij| h_j
        ext[box] = np.einsum("bij,bj->bi", np.abs(M[box]), bodies.half_extents[box])
    cloud = np.flatnonzero((kind == SHAPE_POLYTOPE) | (kind == SHAPE_COMPOUND) | (kind == SHAPE_MESH))
    if cloud.size:
        sids = bodies.shape_id[cloud]
        for sid in np.unique(sids):  # loop over distinct shapes, vectorised over their bodies
            rows = cloud[sids == sid]
            P, r = shape_cloud(shapes[int(sid)], caches, int(sid))
            W = M[rows] @ P.T  # (B, n, P): world offsets of the cloud points
            hi = (W + r).max(axis=2)
            lo = (W - r).min(axis=2)
            centre[rows] = pos[rows] + 0.5 * (hi + lo)
            ext[rows] = 0.5 * (hi - lo)
    half = kind == SHAPE_HALFSPACE
    ext[half] = np.inf
    return centre - ext, centre + ext


def halfspace_planes(bodies: Bodies, shapes: list[Any], rows: IntArray) -> tuple[Array, Array]:
    """World planes of half-space rows: unit normals (H, n) and offsets (H,); solid is u . x <= d.

    A local plane (u, d) of a body at (p, M) becomes u_w = M u, d_w = d + u_w . p.
    """
    n = bodies.position.shape[1]
    if rows.size == 0:
        return np.zeros((0, n)), np.zeros(0)
    sids = bodies.shape_id[rows]
    u = np.empty((rows.size, n))
    d = np.empty(rows.size)
    for sid in np.unique(sids):  # loop over distinct half-space shapes (few)
        sel = sids == sid
        s = shapes[int(sid)]
        u[sel] = np.asarray(s.normal)
        d[sel] = float(s.offset)
    uw = np.einsum("hij,hj->hi", bodies.rotation[rows], u)
    dw = d + np.einsum("hi,hi->h", uw, bodies.position[rows])
    return uw, dw


def _row_norms(x: Array) -> Array:
    """Euclidean norms (N,) of the rows of x (N, c), summed column by column.

    The same sums in the same order as ``np.linalg.norm(x, axis=1)`` (bit-identical), 3.7 times
    faster on (10k, 6): a reduction along a short row pays a per-row loop set-up.
    """
    s = x[:, 0] * x[:, 0]
    for i in range(1, x.shape[1]):  # loop over columns
        s += x[:, i] * x[:, i]
    return np.sqrt(s)


def _fattening(bodies: Bodies, settings: Any, dt: float) -> Array:
    """Per-body growth (N,) of the bounding boxes: margin plus the reach of one step's motion."""
    margin = max(float(settings.broadphase_margin), 0.5 * float(settings.speculative_margin))
    reach = bodies.radius + _row_norms(bodies.local_centroid)
    v = _row_norms(bodies.velocity)
    w = _row_norms(bodies.angular_velocity)
    # a half-space has infinite reach but never gets here with w != 0 in practice; 0 * inf is nan
    spin = np.where(w > 0.0, w * np.where(np.isfinite(reach), reach, 0.0), 0.0)
    return margin + dt * (v + spin)


def fat_aabbs(alg: Algebra, bodies: Bodies, shapes: list[Any], settings: Any, dt: float,
              caches: dict[str, Any] | None = None) -> tuple[Array, Array, Array]:
    """Fattened boxes ``(lo, hi)`` (N, n) and the per-body fattening (N,) used by :func:`find_pairs`."""
    lo, hi = world_aabbs(alg, bodies, shapes, caches)
    fat = _fattening(bodies, settings, dt)
    return lo - fat[:, None], hi + fat[:, None], fat


def filter_pairs(bodies: Bodies, a: IntArray, b: IntArray) -> NDArray[np.bool_]:
    """Mask (P,) of the candidate pairs (a, b) that pass the layer and activity rules (module notes)."""
    layer, mask = bodies.layer, bodies.mask
    ok = ((layer[a] & mask[b]) != 0) & ((layer[b] & mask[a]) != 0) & (a != b)
    kind = bodies.kind
    inert = (kind == STATIC) | ~bodies.awake
    responds = (kind == DYNAMIC) | bodies.sensor
    return ok & ~(inert[a] & inert[b]) & (responds[a] | responds[b])


def _runs(counts: IntArray) -> tuple[IntArray, IntArray]:
    """Pairs (i, j) with i in 0..K-1 and j = i + 1 .. i + counts[i], as two (C,) arrays.

    ``j = slot + (i + 1 - start_i)``: two repeats and one add, no gather over the C slots.
    """
    K = counts.size
    i = np.repeat(np.arange(K), counts)
    shift = np.arange(1, K + 1) - (np.cumsum(counts) - counts)
    return i, np.arange(i.size) + np.repeat(shift, counts)


def _overlapping(loT: Array, hiT: Array, a: IntArray, b: IntArray) -> tuple[IntArray, IntArray]:
    """The pairs among (a, b) whose closed boxes overlap on every axis.

    ``loT``, ``hiT`` are (n, N) (axis-major, so each gather is 1-D); the pair set is compacted after
    each axis, so later axes test only the survivors. Measured on 108k random 3-D pairs: 1.1 ms,
    against 9.3 ms for gathering (P, 2n) box rows and reducing with ``all(axis=1)``. The survivors
    are compacted by ``flatnonzero`` and integer gathers: a boolean-mask index ``a[m]`` with an
    unpredictable mask costs about 4.5 times as much (0.46 against 0.10 ms on 108k slots).
    """
    for i in range(loT.shape[0]):  # loop over axes
        lo_i, hi_i = loT[i], hiT[i]
        m = np.flatnonzero((lo_i[a] <= hi_i[b]) & (lo_i[b] <= hi_i[a]))
        a, b = a[m], b[m]
    return a, b


def _cell_runs(group: IntArray, slo: Array, shi: Array, pattern: NDArray[Any]) -> tuple[IntArray, IntArray]:
    """Entry pairs (i, j), i < j, sharing a cell and overlapping on the sweep axis, corner cell only.

    Entries (T,) are sorted by cell ``group`` and, inside a cell, by sweep lower bound ``slo``, so
    the partners of entry i are the run i + 1, i + 2, ... of entries in its cell whose lower bound
    is <= ``shi[i]``. The runs are walked together, one offset k per pass over the still-open
    entries (a loop over run lengths, a few tens at most: 19 passes on the benchmark), emitting
    (i, i + k) where the two offset patterns are disjoint (the corner-cell rule). Measured on the
    benchmark's 43k entries: 1.8 ms, where the previous route took 1.4 ms (line profile) for a
    ``searchsorted`` of every run's end (its needles are unsorted), 1.7 ms for the expansion with
    :func:`_runs`, and about 2 ms more for the corner mask and its boolean-mask compaction.
    """
    T = group.size
    lpad = np.append(slo, np.inf)  # a sentinel ends the last run
    starts = np.flatnonzero(np.append(True, group[1:] != group[:-1]))
    sizes = np.diff(np.append(starts, T))
    stop = np.repeat(starts + sizes, sizes)  # (T,) end of each entry's cell
    act = np.arange(T)
    top = shi
    firsts, offsets = [], []
    k = 1
    while act.size:  # loop over run offsets
        j = act + k
        m = np.flatnonzero((j < stop) & (lpad[j] <= top))
        act, top, stop = act[m], top[m], stop[m]
        c = np.flatnonzero((pattern[act] & pattern[act + k]) == 0)
        firsts.append(act[c])
        offsets.append(k)
        k += 1
    i = np.concatenate(firsts)
    step = np.repeat(np.array(offsets, dtype=np.int64), [f.size for f in firsts])
    return i, i + step


def _widest_axis(lo: Array, hi: Array) -> int:
    """The axis along which the box centres (N, n bounds) spread most (largest variance).

    Computed as sum(x^2) - (sum x)^2 / N (its cancellation only blurs near-ties, where either axis
    serves): 0.17 ms on (10k, 4), against 0.43 ms for ``np.var``.
    """
    x = lo + hi
    s = x.sum(axis=0)
    return int(np.argmax(np.einsum("ij,ij->j", x, x) - s * s / x.shape[0]))


def sweep_and_prune_pairs(lo: Array, hi: Array) -> IntArray:
    """Pairs (P, 2) of overlapping boxes by one sort on the axis of largest spread.

    After sorting by lower bound on that axis, box i overlaps (on that axis) exactly the boxes j > i
    whose lower bound is <= hi_i: a contiguous run found by ``searchsorted``. The runs are expanded
    into pairs and the other axes tested vectorised.
    """
    N = lo.shape[0]
    if N < 2:
        return _empty_pairs()
    axis = _widest_axis(lo, hi)
    order = np.argsort(lo[:, axis], kind="stable")
    ls = lo[order, axis]
    end = np.searchsorted(ls, hi[order, axis], side="right")
    i, j = _runs(np.maximum(end - np.arange(N) - 1, 0))
    a, b = _overlapping(np.ascontiguousarray(lo.T), np.ascontiguousarray(hi.T), order[i], order[j])
    return np.stack([a, b], axis=1).astype(np.int64)


def _hash_keys(c: IntArray) -> IntArray:
    """int64 hash (T,) of integer cell coordinates (T, n) (wrapping multiply-xorshift)."""
    with np.errstate(over="ignore"):
        h = np.zeros(c.shape[0], dtype=np.uint64)
        for i in range(c.shape[1]):  # loop over axes
            h ^= (c[:, i].astype(np.uint64) + np.uint64(0x9E3779B97F4A7C15)
                  + (h << np.uint64(6)) + (h >> np.uint64(2)))
            h *= np.uint64(0xBF58476D1CE4E5B9)
        h ^= h >> np.uint64(31)
    return h.view(np.int64)


def _cell_keys(c_lo: IntArray, body: IntArray, pattern: IntArray, bits: IntArray) -> IntArray:
    """Keys (T,) of the cells ``c_lo[body] + bits[pattern]`` (``c_lo`` (S, m) int), for cell
    ranges too wide for :func:`grid_pairs`'s packed sort.

    Exact keys are mixed-radix integers in [0, prod(extent)) (a base per body plus a constant per
    offset pattern) when the occupied cell range fits in 62 bits; otherwise hashes of the
    coordinates (a collision costs a wasted candidate, or a duplicate the final sort drops).
    """
    cmin = c_lo.min(axis=0)
    extent = c_lo.max(axis=0) - cmin + 2
    if float(np.prod(extent.astype(np.float64))) < 2.0**62:
        stride = np.concatenate([[1], np.cumprod(extent[:-1])]).astype(np.int64)
        base = (c_lo - cmin) @ stride
        return np.asarray(base[body] + (bits @ stride)[pattern], dtype=np.int64)
    return _hash_keys(c_lo[body] + bits[pattern])


def grid_pairs(lo: Array, hi: Array, cell: float | None = None) -> IntArray:
    """Pairs (P, 2) of overlapping boxes: a hashed grid over n - 1 axes, a sweep along the last.

    The sweep axis is the axis of largest spread; the grid covers the other n - 1 axes. Its cell
    edge is at least the size of every "small" box, so a small box covers 1 or 2 cells per grid
    axis: its cells are ``c_lo + o`` for the offset bit patterns o in {0, 1}^(n-1) allowed by its
    span (a loop-free (N, 2^(n-1)) mask). Inside a cell the entries are ordered by their lower bound
    on the sweep axis, so the partners of an entry that overlap it on that axis are the run of
    following entries of its cell whose lower bound is <= its upper bound (:func:`_cell_runs`; the
    same float comparison as the brute-force test, so the pair set is exact). A pair is reported
    in its corner cell
    ``max(c_lo_a, c_lo_b)`` only, i.e. where no axis has both offsets 1: ``o_a & o_b == 0``. Boxes
    spanning more than 2 cells on some grid axis (much larger than the rest) are tested against
    every box directly.

    Args:
        lo, hi: (N, n) finite box bounds.
        cell: cell edge; default the largest box size (over the grid axes) not above 2.5 times the
            median size.
    """
    N, n = lo.shape
    if N < 2:
        return _empty_pairs()
    sweep = _widest_axis(lo, hi)
    grid = np.array([i for i in range(n) if i != sweep], dtype=np.int64)
    m = grid.size
    # axis-major (m, N) grid bounds: every per-axis pass below reads one contiguous row
    loT, hiT = np.ascontiguousarray(lo.T[grid]), np.ascontiguousarray(hi.T[grid])
    size = (hiT - loT).max(axis=0)
    if cell is None:
        med = float(np.median(size))
        cell = float(np.max(size[size <= 2.5 * med]))
    cell = max(cell, 1e-9 * max(1.0, float(np.max(np.abs(hiT)))))
    c_lo = np.floor(loT / cell).astype(np.int64)  # (m, N)
    span2 = np.floor(hiT / cell).astype(np.int64) - c_lo  # 0 or 1 for small boxes
    big = np.any(span2 > 1, axis=0)
    out = []
    small = np.flatnonzero(~big)
    if small.size > 1:
        S = small.size
        P = 1 << m
        # default (unstable) sort: ties may fall either way, the pair set does not depend on it;
        # measured 0.10 ms against 0.58 ms for kind="stable" on 10k floats
        ranked = small[np.argsort(lo[small, sweep])]  # small boxes by sweep lower bound
        bits = (np.arange(P)[:, None] >> np.arange(m)[None, :]) & 1  # (2^m, m) offset patterns
        cr = np.take(c_lo, ranked, axis=1)  # (m, S) lower cells by sweep rank
        sr = np.take(span2, ranked, axis=1)
        two = np.zeros(S, dtype=np.int64)  # grid axes on which the box covers 2 cells, as bits
        for ax in range(m):  # loop over grid axes
            two |= sr[ax] << ax
        cmin = cr.min(axis=1)
        extent = cr.max(axis=1) - cmin + 2
        sb = max(1, int(S - 1).bit_length())  # rank bits
        shift = sb + m
        room = float(np.prod(extent.astype(np.float64)))  # exact cell keys lie in [0, room)
        if room * float(1 << shift) < 2.0**62:
            # exact mixed-radix cell keys, packed with (rank, pattern) into one int64 and sorted
            # plainly (cheaper than a stable argsort plus gathers). The packed entry of (rank r,
            # pattern o) is head[r] + tail[o]: the fields do not carry into each other, so each
            # pattern's entries are one gather of head plus a constant (no (S, 2^m) mask, no
            # nonzero, no per-entry shifts); a loop over the 2^m patterns.
            stride = np.concatenate([[1], np.cumprod(extent[:-1])]).astype(np.int64)
            base = np.zeros(S, dtype=np.int64)
            for ax in range(m):  # loop over grid axes (an integer matmul has no BLAS: 3x slower)
                base += (cr[ax] - cmin[ax]) * stride[ax]
            head = (base << shift) | (np.arange(S, dtype=np.int64) << m)
            tail = ((bits @ stride) << shift) | np.arange(P)
            parts = [head + tail[0]]
            for o in range(1, P):  # loop over offset patterns
                parts.append(head[np.flatnonzero((two & o) == o)] + tail[o])
            packed = np.sort(np.concatenate(parts))
            pattern = packed & (P - 1)
            rank = (packed >> m) & ((1 << sb) - 1)
            group = packed >> shift
        else:
            ok = (np.arange(P)[None, :] & ~two[:, None]) == 0
            owner, pattern = np.nonzero(ok)  # owner = sweep rank; entries come out in rank order
            key = _cell_keys(np.ascontiguousarray(cr.T), owner, pattern, bits)
            order = np.argsort(key, kind="stable")  # by cell, and by sweep rank within a cell
            ks = key[order]
            rank = owner[order]
            pattern = pattern[order]
            first = np.ones(ks.size, dtype=bool)
            first[1:] = ks[1:] != ks[:-1]
            group = np.cumsum(first) - 1  # cell group index
        body = ranked[rank]
        po = pattern.astype(np.uint8 if m <= 8 else np.int64)
        i, j = _cell_runs(group, lo[body, sweep], hi[body, sweep], po)
        # the grid-axis test on entry indices (entry-ordered bounds: j is near i, and the body
        # gather is left to the survivors)
        i, j = _overlapping(np.take(loT, body, axis=1), np.take(hiT, body, axis=1), i, j)
        a, b = body[i], body[j]
        out.append(np.stack([a, b], axis=1))
    bigs = np.flatnonzero(big)
    if bigs.size:
        chunk = max(1, _DENSE_CHUNK // max(1, N * n))
        for s in range(0, bigs.size, chunk):  # loop over chunks of the few big bodies
            g = bigs[s:s + chunk]
            hit = np.all((lo[g][:, None, :] <= hi[None]) & (lo[None] <= hi[g][:, None, :]), axis=2)
            gi, j = np.nonzero(hit)
            a = g[gi]
            keep = (a != j) & (~big[j] | (j > a))  # a big-big pair once, from its lower row
            out.append(np.stack([a[keep], j[keep]], axis=1))
    if not out:
        return _empty_pairs()
    return (out[0] if len(out) == 1 else np.concatenate(out)).astype(np.int64, copy=False)


def _sorted_unique_pairs(a: IntArray, b: IntArray, N: int) -> IntArray:
    lo_, hi_ = np.minimum(a, b), np.maximum(a, b)
    key = np.sort(lo_ * N + hi_)
    if key.size > 1:  # duplicates arise only from hashed-cell collisions; drop them after the sort
        key = key[np.flatnonzero(np.append(True, key[1:] != key[:-1]))]
    first, second = np.divmod(key, N)
    return np.stack([first, second], axis=1).astype(np.int64)


def find_pairs(alg: Algebra, bodies: Bodies, shapes: list[Any], settings: Any, caches: dict[str, Any],
                 dt: float) -> IntArray:
    """Candidate pairs (P, 2) int64 of body rows (a < b), sorted, whose fattened boxes overlap.

    Applies the layer/mask and activity filters (module notes). Half-spaces are paired with every
    body whose fattened box reaches their fattened plane.
    """
    N = bodies.count
    if N < 2:
        return _empty_pairs()
    lo, hi, fat = fat_aabbs(alg, bodies, shapes, settings, dt, caches)
    kind = bodies.shape_kind
    is_half = kind == SHAPE_HALFSPACE
    bounded = np.flatnonzero(~is_half)
    parts = []
    lob, hib = lo[bounded], hi[bounded]
    if bounded.size > 1:
        p = grid_pairs(lob, hib)
        parts.append(bounded[p])
    halves = np.flatnonzero(is_half)
    if halves.size and bounded.size:
        u, d = halfspace_planes(bodies, shapes, halves)
        c = 0.5 * (lob + hib)
        e = 0.5 * (hib - lob)
        low = c @ u.T - e @ np.abs(u).T  # (B, H): lowest point of each box along each plane normal
        bi, hj = np.nonzero(low <= (d + fat[halves])[None, :])
        parts.append(np.stack([bounded[bi], halves[hj]], axis=1))
    if not parts:
        return _empty_pairs()
    pairs = np.concatenate(parts)
    a, b = pairs[:, 0], pairs[:, 1]
    keep = np.flatnonzero(filter_pairs(bodies, a, b))
    return _sorted_unique_pairs(a[keep], b[keep], N)
