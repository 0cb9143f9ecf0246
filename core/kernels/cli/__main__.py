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
    ap.add_argument("--jobs", type=int, default=1,
                    help="compile this many dimensions at once in worker processes (default 1)")
    ap.add_argument("--verbose", action="store_true", help="print the seconds of every family")
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
    if args.jobs < 1:
        ap.error(f"--jobs: expected a positive integer, got {args.jobs}")
    t0 = time.perf_counter()
    if args.jobs > 1 and len(args.dim) > 1:
        return _parallel(args.dim, fams, args.jobs, t0)
    width = 30

    def progress(family: str, n: int, done: int, total: int) -> None:
        fill = int(width * done / total)
        sys.stderr.write(f"\r[{'#' * fill}{'.' * (width - fill)}] {done}/{total}  {n}-D {family:<12}")
        sys.stderr.flush()

    times = kernels.precompile(args.dim, fams, progress)
    sys.stderr.write("\n")
    for n in args.dim:
        total = sum(t for (f, d), t in times.items() if d == n)
        detail = ", ".join(f"{f} {t:.1f}" for (f, d), t in times.items() if d == n) if args.verbose else ""
        print(f"{n}-D: {total:6.1f} s" + (f"  ({detail})" if detail else ""))
    print(f"cache: {kernels.cache_dir()}  ({time.perf_counter() - t0:.1f} s in all)")
    return 0


def _parallel(dims: list[int], fams: list[str], jobs: int, t0: float) -> int:
    """Compile each dimension in its own worker process, ``jobs`` at a time (numba compiles on one
    core; the cache is a folder of files, one per family and dimension, so workers never collide)."""
    import subprocess

    from ndrigid.core import kernels

    pending = list(dims)
    running: list[tuple[int, subprocess.Popen[str], float]] = []
    failed = 0
    while pending or running:
        while pending and len(running) < jobs:
            n = pending.pop(0)
            cmd = [sys.executable, "-m", "ndrigid.compile", "--dim", str(n), "--families", *fams]
            running.append((n, subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                                                text=True), time.perf_counter()))
        time.sleep(0.2)
        for item in list(running):
            n, proc, started = item
            if proc.poll() is not None:
                running.remove(item)
                ok = proc.returncode == 0
                failed += not ok
                print(f"{n}-D: {time.perf_counter() - started:6.1f} s{'' if ok else '  FAILED'}", flush=True)
    print(f"cache: {kernels.cache_dir()}  ({time.perf_counter() - t0:.1f} s in all, {jobs} workers)")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
