"""Joint figures: the chain scene behind the ``joint_passes`` defaults, and a long-chain timing.

    python -m ndrigid.bench.joints passes            # 4-D chain of 10, four pass settings
    python -m ndrigid.bench.joints chain --links 100 # 4-D chain of 100, ms per step

The chain: boxes of 0.2 x 0.04 (x 0.04 ...) m, 0.5 kg, joined end to end by point joints, the
first to the world, released horizontally under gravity at 120 Hz, sleeping off. The error is the
worst anchor separation of any joint from 1 s to 3 s, per link length.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from ndrigid.core import Box, Settings, Simulation


def chain(dim: int, links: int, hz: float, passes: tuple[int, int],
          seconds: float = 3.0) -> tuple[float, float]:
    """(worst joint error per link after the first second, mean ms per step) of the chain scene."""
    g = np.zeros(dim)
    g[1] = -9.81
    sim = Simulation(dim, gravity=g, settings=Settings(dt=1.0 / hz, sleep_enabled=False,
                                                       joint_passes=passes[0], joint_passes_after=passes[1]))
    link = 0.2
    half = np.full(dim, 0.02)
    half[0] = link / 2
    e0 = np.eye(dim)[0]
    prev = None
    joints = []
    for i in range(links):
        b = sim.add_body(Box(half), position=(i + 0.5) * link * e0, mass=0.5)
        joints.append(sim.add_joint("point", b, prev, anchor=i * link * e0))
        prev = b
    worst, spent = 0.0, 0.0
    steps = int(round(seconds * hz))
    for s in range(steps):
        t0 = time.perf_counter()
        sim.step()
        spent += time.perf_counter() - t0
        if s >= hz:
            worst = max(worst, max(sim.joint_error(j) for j in joints))
    return worst / link, 1e3 * spent / steps


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(prog="python -m ndrigid.bench.joints", description=__doc__.split("\n")[0])
    ap.add_argument("what", choices=["passes", "chain"])
    ap.add_argument("--dim", type=int, default=4)
    ap.add_argument("--links", type=int, default=10)
    ap.add_argument("--hz", type=float, default=120.0)
    a = ap.parse_args(argv)
    if a.what == "passes":
        for p in ((2, 1), (4, 2), (8, 4), (12, 6)):
            err, ms = chain(a.dim, a.links, a.hz, p)
            print(f"{a.dim}-D chain of {a.links}, joint_passes {p[0]} + {p[1]}: worst error "
                  f"{100 * err:.1f} % of a link, {ms:.2f} ms per step")
    else:
        err, ms = chain(a.dim, a.links, a.hz, (Settings.joint_passes, Settings.joint_passes_after), 2.0)
        print(f"{a.dim}-D chain of {a.links}: {ms:.2f} ms per step, worst error {100 * err:.1f} % of a link")


if __name__ == "__main__":
    main()
