"""Soak run: a large pile stepped for a long time, to show that memory stays flat, the world stays
finite and the pile comes to rest.

``python -m ndrigid.bench.soak`` (defaults: 4-D, 1,000 bodies, 20,000 steps of 1/60 s, sleeping
on) prints, every ``--every`` steps, the resident memory of the process, the memory numpy and
Python hold (traced allocations are not used: tracing would slow the run), the kinetic energy,
the awake bodies and the mean step time since the last line; then a summary: memory at the start
(after the first step) and at the end, the kinetic energy once settled (the last line) and the
largest kinetic energy seen after settling began. ``--json FILE`` writes the lines.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
from dataclasses import replace
from typing import Any

import numpy as np

from .scenes import build_pile


def resident_mb() -> float:
    """Resident memory of this process now, MB (Linux /proc; else the peak from getrusage)."""
    try:
        with open("/proc/self/statm", encoding="ascii") as fh:
            pages = int(fh.read().split()[1])
        return pages * os.sysconf("SC_PAGE_SIZE") / 1e6
    except (OSError, ValueError, IndexError):
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        return peak / 1e3 if sys.platform != "darwin" else peak / 1e6


def soak(dim: int, bodies: int, steps: int, every: int, seed: int = 0) -> list[dict[str, Any]]:
    sim, _ = build_pile(dim, bodies, seed)
    sim.settings = replace(sim.settings, sleep_enabled=True)
    dyn = sim.bodies.kind == sim.bodies.kind[sim.row(int(sim.handles[-1]))]
    rows: list[dict[str, Any]] = []
    t0 = time.perf_counter()
    sim.step()
    rows.append({"step": 1, "time_s": round(sim.time, 3), "rss_mb": round(resident_mb(), 1),
                 "kinetic_energy_j": sim.kinetic_energy(),
                 "awake": int(np.count_nonzero(sim.bodies.awake[dyn])),
                 "mean_step_ms": round(1e3 * (time.perf_counter() - t0), 3)})
    print(json.dumps(rows[-1]), flush=True)
    t0 = time.perf_counter()
    last = 1
    for k in range(2, steps + 1):
        sim.step()
        if k % every == 0 or k == steps:
            now = time.perf_counter()
            rows.append({"step": k, "time_s": round(sim.time, 3), "rss_mb": round(resident_mb(), 1),
                         "kinetic_energy_j": sim.kinetic_energy(),
                         "awake": int(np.count_nonzero(sim.bodies.awake[dyn])),
                         "mean_step_ms": round(1e3 * (now - t0) / (k - last), 3)})
            print(json.dumps(rows[-1]), flush=True)
            t0, last = now, k
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m ndrigid.bench.soak", description=__doc__.split("\n")[0])
    ap.add_argument("--dim", type=int, default=4)
    ap.add_argument("--bodies", type=int, default=1000)
    ap.add_argument("--steps", type=int, default=20_000)
    ap.add_argument("--every", type=int, default=1000, help="print a line every this many steps")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--json", metavar="FILE", help="write the lines to FILE")
    a = ap.parse_args(argv)
    if a.dim < 2 or a.bodies < 1 or a.steps < 2 or a.every < 1:
        ap.error("expected --dim >= 2, --bodies >= 1, --steps >= 2 and --every >= 1")
    rows = soak(a.dim, a.bodies, a.steps, a.every, a.seed)
    start = rows[0]["rss_mb"]
    half = [r["kinetic_energy_j"] for r in rows if r["step"] > a.steps // 2]
    end = rows[-1]
    print(f"soak {a.dim}-D {a.bodies} bodies {a.steps} steps: memory {start:.1f} MB after the first step, "
          f"{end['rss_mb']:.1f} MB at the end; kinetic energy at the end {end['kinetic_energy_j']:.3g} J "
          f"(largest over the second half {max(half) if half else float('nan'):.3g} J); {end['awake']} awake")
    if a.json:
        with open(a.json, "w", encoding="utf-8") as fh:
            json.dump(rows, fh, indent=1)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
