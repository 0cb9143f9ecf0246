"""Compile and cache ndrigid's kernels ahead of time, with a progress bar.

    python -m ndrigid.compile --dim 2 3 4 5

A game that starts with a warm cache loads each dimension's kernels in well under a second; a
cold start compiles them (tens of seconds per dimension) and says so in one line per family.
"""

from __future__ import annotations

import argparse
import sys
import time


def main(argv: list[str] | None = None) -> int:
    from ndrigid.core import kernels

    ap = argparse.ArgumentParser(prog="python -m ndrigid.compile", description=__doc__.splitlines()[0])
    ap.add_argument("--dim", type=int, nargs="+", default=[2, 3, 4, 5], help="dimensions (default 2 3 4 5)")
    ap.add_argument("--families", nargs="+", default=None, help="kernel families (default: all)")
    ap.add_argument("--where", action="store_true", help="print the cache folder and exit")
    args = ap.parse_args(argv)
    if args.where:
        print(kernels.cache_dir())
        return 0
    bad = [d for d in args.dim if d < 2]
    if bad:
        ap.error(f"--dim: expected dimensions >= 2, got {bad}")
    if not kernels.available():
        print("ndrigid: numba is not available or NDRIGID_KERNELS=numpy is set; nothing to compile",
              file=sys.stderr)
        return 1
    fams = args.families or list(kernels.all_families())
    unknown = sorted(set(fams) - set(kernels.all_families()))
    if unknown:
        ap.error(f"--families: unknown {unknown}; expected some of {list(kernels.all_families())}")
    t0 = time.perf_counter()
    width = 30

    def progress(family: str, n: int, done: int, total: int) -> None:
        fill = int(width * done / total)
        sys.stderr.write(f"\r[{'#' * fill}{'.' * (width - fill)}] {done}/{total}  {n}-D {family:<12}")
        sys.stderr.flush()

    times = kernels.precompile(args.dim, fams, progress)
    sys.stderr.write("\n")
    for n in args.dim:
        total = sum(t for (f, d), t in times.items() if d == n)
        print(f"{n}-D: {total:6.1f} s")
    print(f"cache: {kernels.cache_dir()}  ({time.perf_counter() - t0:.1f} s in all)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
