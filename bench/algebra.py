"""Micro-benchmark of the geometric-algebra kernel: the three rotor operations on the hot path.

* ``rotor_mul``: batched rotor product R1 R2 (:meth:`Algebra.rotor_mul`);
* ``rotor_to_matrix``: rotor -> rotation matrix (:meth:`Algebra.rotor_to_matrix`);
* ``rotor``: bivector exponential exp(-B/2) (:meth:`Algebra.rotor`).

Each is timed on one batch of ``batch`` random items with ``time.perf_counter``; the best of
``repeats`` runs is kept (the minimum is the least disturbed by other processes on the machine) and
reported as nanoseconds per item. The algebra tables are built and the inputs drawn before timing,
and one untimed warm-up call runs first, so only the operation itself is measured.

Run ``python -m ndrigid.bench.algebra`` for a table.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from functools import partial
from typing import Any

import numpy as np
from ndrigid.core.algebra import Algebra

__all__ = ["run_algebra_bench"]


def _best_ns(fn: Callable[[], Any], repeats: int) -> float:
    fn()  # warm-up: first-touch allocations, BLAS thread start
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best * 1e9


def run_algebra_bench(
    batch: int = 100_000,
    dims: Sequence[int] = (3, 4, 5),
    *,
    repeats: int = 5,
    seed: int = 0,
) -> list[dict[str, Any]]:
    """Time the rotor kernel; one row ``{op, dim, batch, ns_per_item}`` per operation and dimension.

    Args:
        batch: number of items per call.
        dims: dimensions n to time.
        repeats: timed runs per case; the fastest counts.
        seed: seed of the random inputs (random bivectors of unit-scale angles, and their rotors).

    Prints nothing.
    """
    rng = np.random.default_rng(seed)
    rows: list[dict[str, Any]] = []
    for n in dims:
        alg = Algebra(n)
        B = rng.normal(size=(batch, alg.k))
        R1 = alg.rotor(B)
        R2 = alg.rotor(rng.normal(size=(batch, alg.k)))
        cases: list[tuple[str, Callable[[], Any]]] = [
            ("rotor_mul", partial(alg.rotor_mul, R1, R2)),
            ("rotor_to_matrix", partial(alg.rotor_to_matrix, R1)),
            ("rotor", partial(alg.rotor, B)),
        ]
        for op, fn in cases:
            rows.append({"op": op, "dim": n, "batch": batch,
                         "ns_per_item": _best_ns(fn, repeats) / batch})
    return rows


def main() -> None:
    """Print the benchmark as a table."""
    rows = run_algebra_bench()
    print(f"{'op':<16} {'dim':>3} {'batch':>8} {'ns/item':>9}")
    for r in rows:
        print(f"{r['op']:<16} {r['dim']:>3} {r['batch']:>8} {r['ns_per_item']:>9.1f}")


if __name__ == "__main__":
    main()
