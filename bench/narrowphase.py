"""Benchmark of the hard narrowphase kernels: box/box SAT with manifolds, and polytope GJK/EPA.

* :func:`run_boxbox_bench`: one call of :func:`ndrigid.core.collision.sat.box_box` on ``pairs`` random box
  pairs per dimension (Haar-random rotations, half-extents 0.2..1, centre offsets ~ N(0, 0.8), so
  that about two thirds of the pairs touch), manifolds included. Reported as pairs per second.
* :func:`run_polytope_bench`: :func:`ndrigid.core.collision.gjk.convex_pair` (the numpy path, pair
  by pair) and the compiled ``convex`` kernel (all pairs in one call, with the narrowphase's packed
  shape table) on overlapping, touching (face on face, turned by about 0.01 rad, overlap 0.001) and
  separated pairs of 4-D regular polytopes (24-cell, 600-cell), in milliseconds per pair.

Each case is timed with ``time.perf_counter``; the best of ``repeats`` runs counts (the minimum is
the least disturbed by other processes), after one untimed warm-up call that builds the tables.

Run ``python -m ndrigid.bench.narrowphase`` for a table.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from ndrigid.core.algebra import Algebra
from ndrigid.core.collision.gjk import convex_pair
from ndrigid.core.collision.sat import box_box
from ndrigid.core.geometry.polytopes import cell_24, cell_600
from scipy.stats import special_ortho_group

__all__ = ["run_boxbox_bench", "run_polytope_bench"]


def _best(fn: Callable[[], Any], repeats: int) -> float:
    fn()
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def run_boxbox_bench(dims: Sequence[int] = (3, 4, 5), pairs: int = 2000, *, repeats: int = 5,
                     seed: int = 0) -> list[dict[str, Any]]:
    """Box/box pairs per second including manifolds; one row ``{dim, pairs, touching, points,
    seconds, pairs_per_s, us_per_pair}`` per dimension. Prints nothing."""
    rng = np.random.default_rng(seed)
    rows: list[dict[str, Any]] = []
    for n in dims:
        alg = Algebra(n)
        Ra = special_ortho_group.rvs(n, size=pairs, random_state=rng).reshape(pairs, n, n)
        Rb = special_ortho_group.rvs(n, size=pairs, random_state=rng).reshape(pairs, n, n)
        ha = rng.uniform(0.2, 1.0, (pairs, n))
        hb = rng.uniform(0.2, 1.0, (pairs, n))
        pa = rng.normal(size=(pairs, n)) * 0.1
        pb = pa + rng.normal(size=(pairs, n)) * 0.8
        margin = np.full(pairs, 0.02)

        def call(alg: Algebra = alg, args: tuple[np.ndarray, ...] = (pa, Ra, ha, pb, Rb, hb, margin)) -> Any:
            return box_box(alg, *args)

        mp = call()
        t = _best(call, repeats)
        rows.append({"dim": n, "pairs": pairs, "touching": int(len(np.unique(mp.pair))),
                     "points": int(len(mp.pair)), "seconds": t, "pairs_per_s": pairs / t,
                     "us_per_pair": 1e6 * t / pairs})
    return rows


def _touching_poses(shape: Any, pairs: int, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    """Face-on-face poses: B turned from A by a small random rotation, resting on one of A's facets
    with overlap 0.001, shifted a little along it."""
    from scipy.linalg import expm

    Ra = special_ortho_group.rvs(4, size=pairs, random_state=rng).reshape(pairs, 4, 4)
    Rb = np.empty_like(Ra)
    pb = np.empty((pairs, 4))
    for i in range(pairs):  # building the poses, not timed
        X = rng.normal(size=(4, 4)) * 0.01
        Rb[i] = expm(X - X.T) @ Ra[i]
        f = rng.integers(len(shape.facet_normals))
        nf = Ra[i] @ shape.facet_normals[f]
        hb = float(np.max(-(shape.vertices @ (Rb[i].T @ nf))))
        shift = rng.normal(size=4) * 0.05
        pb[i] = nf * (shape.facet_offsets[f] + hb - 1e-3) + shift - (shift @ nf) * nf
    return Ra, Rb, pb


def run_polytope_bench(pairs: int = 20, *, repeats: int = 3, seed: int = 0) -> list[dict[str, Any]]:
    """GJK/EPA + manifold time per pair of 4-D regular polytopes (circumradius 1), overlapping (centres
    1.6 apart: EPA runs), touching (see :func:`_touching_poses`) and separated (2.1 apart: GJK only),
    by the numpy path and, where numba is available, by the compiled kernel. One row per (shape,
    case, path). Prints nothing."""
    from ndrigid.core import kernels
    from ndrigid.core.collision.narrowphase import _convex_table

    rng = np.random.default_rng(seed)
    alg = Algebra(4)
    rows: list[dict[str, Any]] = []
    for name, shape in (("24-cell", cell_24(circumradius=1.0)), ("600-cell", cell_600(circumradius=1.0))):
        for case, dist in (("overlapping", 1.6), ("touching", 0.0), ("separated", 2.1)):
            if case == "touching":
                Ra, Rb, d = _touching_poses(shape, pairs, rng)
            else:
                R = special_ortho_group.rvs(4, size=2 * pairs, random_state=rng).reshape(2 * pairs, 4, 4)
                Ra, Rb = R[0::2].copy(), R[1::2].copy()
                d = rng.normal(size=(pairs, 4))
                d *= dist / np.linalg.norm(d, axis=1, keepdims=True)

            def call(shape: Any = shape, Ra: np.ndarray = Ra, Rb: np.ndarray = Rb, d: np.ndarray = d) -> int:
                total = 0
                for i in range(pairs):  # a loop over polytope pairs, as the numpy path does
                    mp = convex_pair(alg, shape, np.zeros(4), Ra[i], shape, d[i], Rb[i], 0.02)
                    total += len(mp.pair)
                return total

            pts = call()
            t = _best(call, repeats)
            rows.append({"shape": name, "case": case, "path": "numpy", "pairs": pairs, "points": pts,
                         "ms_per_pair": 1e3 * t / pairs})
            if not kernels.available():
                continue
            mod = kernels.load("convex", 4)
            table = _convex_table([shape], {})
            args = (np.zeros(pairs, bool), np.zeros(pairs, np.int64), np.zeros(pairs, np.int64),
                    np.zeros((pairs, 4)), np.ascontiguousarray(Ra), np.zeros(pairs), np.ascontiguousarray(d),
                    np.ascontiguousarray(Rb), np.full(pairs, 0.02)) + table

            def batch(args: tuple[Any, ...] = args, mod: Any = mod) -> int:
                return len(mod.convex_batch(*args)[0])

            pts = batch()
            t = _best(batch, max(repeats, 5))
            rows.append({"shape": name, "case": case, "path": "compiled", "pairs": pairs, "points": pts,
                         "ms_per_pair": 1e3 * t / pairs})
    return rows


def main() -> None:
    for r in run_boxbox_bench():
        print(f"box/box {r['dim']}-D: {r['pairs_per_s']:>9.0f} pairs/s ({r['us_per_pair']:.1f} us/pair, "
              f"{r['touching']} of {r['pairs']} touching, {r['points']} points)")
    for r in run_polytope_bench():
        print(f"{r['shape']:>8} {r['case']:>11} {r['path']:>8}: {r['ms_per_pair']:.3f} ms/pair "
              f"({r['points']} points over {r['pairs']} pairs)")


if __name__ == "__main__":
    main()
