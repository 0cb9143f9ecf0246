"""Benchmark of the hard narrowphase kernels: box/box SAT with manifolds, and polytope GJK/EPA.

* :func:`run_boxbox_bench`: one call of :func:`ndrigid.core.collision.sat.box_box` on ``pairs`` random box
  pairs per dimension (Haar-random rotations, half-extents 0.2..1, centre offsets ~ N(0, 0.8), so
  that about two thirds of the pairs touch), manifolds included. Reported as pairs per second.
* :func:`run_polytope_bench`: :func:`ndrigid.core.collision.gjk.convex_pair` on overlapping and on separated
  pairs of 4-D regular polytopes (24-cell, 600-cell), in milliseconds per pair.

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


def run_polytope_bench(pairs: int = 20, *, repeats: int = 3, seed: int = 0) -> list[dict[str, Any]]:
    """GJK/EPA + manifold time per pair of 4-D regular polytopes (circumradius 1), overlapping (centres
    1.6 apart: EPA runs) and separated (2.1 apart: GJK only). One row per (shape, case). Prints nothing."""
    rng = np.random.default_rng(seed)
    alg = Algebra(4)
    rows: list[dict[str, Any]] = []
    for name, shape in (("24-cell", cell_24(circumradius=1.0)), ("600-cell", cell_600(circumradius=1.0))):
        for case, dist in (("overlapping", 1.6), ("separated", 2.1)):
            R = special_ortho_group.rvs(4, size=2 * pairs, random_state=rng).reshape(2 * pairs, 4, 4)
            d = rng.normal(size=(pairs, 4))
            d *= dist / np.linalg.norm(d, axis=1, keepdims=True)

            def call(shape: Any = shape, R: np.ndarray = R, d: np.ndarray = d) -> int:
                total = 0
                for i in range(pairs):  # a loop over polytope pairs, as the dispatcher does
                    mp = convex_pair(alg, shape, np.zeros(4), R[2 * i], shape, d[i], R[2 * i + 1], 0.02)
                    total += len(mp.pair)
                return total

            pts = call()
            t = _best(call, repeats)
            rows.append({"shape": name, "case": case, "pairs": pairs, "points": pts,
                         "ms_per_pair": 1e3 * t / pairs})
    return rows


def main() -> None:
    for r in run_boxbox_bench():
        print(f"box/box {r['dim']}-D: {r['pairs_per_s']:>9.0f} pairs/s ({r['us_per_pair']:.1f} us/pair, "
              f"{r['touching']} of {r['pairs']} touching, {r['points']} points)")
    for r in run_polytope_bench():
        print(f"{r['shape']:>8} {r['case']:>11}: {r['ms_per_pair']:.2f} ms/pair ({r['points']} points "
              f"over {r['pairs']} pairs)")


if __name__ == "__main__":
    main()
