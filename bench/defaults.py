"""Why each default of :class:`~ndrigid.core.world.simulation.Settings` (and of the two couple
coefficients of a body's material) is what it is: the scenes
and figures it was chosen by, one variant per line.

Run ``python -m ndrigid.bench.defaults`` (all groups, 2-D to 5-D) or pass group names
(``stack``, ``bounce``, ``spin``, ``deep``, ``sleep``, ``heavy``, ``piles``, ``margins``) and
``--dims``. Each line is
one setting changed from the defaults (``defaults`` is none changed), with the figures of the
group's scene:

* ``stack``: ten unit boxes (1000 kg) on a floor at 60 Hz, sleeping off; after a 1 s settle, over
  10 s: the deepest overlap at any contact (mm; the allowance is 5 mm), the drift of the top box
  (cm) and the peak kinetic energy per kg (J/kg), and the mean time per step (ms);
* ``bounce``: a ball (radius 0.2 m, restitution 0.5) dropped from 1 m onto the floor: the error of
  the first three bounce heights against e^(2k) h (Newton's law of restitution, % of h) and the
  time until its speed stays below 1 cm/s (s);
* ``spin``: a free box (half-widths 0.1, 0.2, ..., no gravity) spinning 10 rad/s mostly in one
  plane: relative drift of the kinetic energy and of the world angular momentum over 10 s
  (torque-free motion conserves both, Euler's equations);
* ``deep``: a box created 0.2 m deep in the floor: steps until its overlap is within the
  allowance plus 1 mm, and the largest speed it reaches (m/s);
* ``sleep``: the stack of ten with sleeping on: time until every box sleeps (s; "never" within
  10 s);
* ``heavy``: a 1 kg box (half-width 0.25 m) on a floor under a box 10, 100 and 1,000 times
  heavier, after 10 s: the height error of each against the stacked half extents (mm);
* ``piles``: the benchmark's 4-D bin of 200 balls and boxes (seed 0) with sleeping on, the
  variants setting a material coefficient (``rolling_resistance``, ``spin_friction``) on every
  body instead of a setting: how long
  after its kinetic energy first fell below 1 % of its peak 90 % of the bodies sleep (s; "never"
  within 30 s), and the lowest point of any body then (mm; the floor is at 0);
* ``margins``: a ball at 50 m/s onto a 5 cm slab (passes through or stops), and a 3-D pile of 100
  boxes and balls over its first 3 s (falling and settling): contact rows and candidate pairs per
  step and the broadphase and narrowphase time per step (ms).

The figures quoted in the Settings docstring come from this command; timings are this machine's
and vary with load, the physical figures are deterministic.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import replace
from typing import Any

import numpy as np
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace
from ndrigid.core.world.simulation import Settings, Simulation


def _up(dim: int) -> np.ndarray:
    u = np.zeros(dim)
    u[1] = 1.0
    return u


def stack(dim: int, **changes: Any) -> str:
    sim = Simulation(dim, settings=replace(Settings(sleep_enabled=False), **changes))
    up = _up(dim)
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    top = -1
    for level in range(10):
        top = sim.add_body(Box(np.full(dim, 0.5)), position=(0.5 + level) * up, friction=0.6)
    for _ in range(60):
        sim.step()
    x1 = sim.position(top)
    peak = deepest = 0.0
    t0 = time.perf_counter()
    for _ in range(600):
        sim.step()
        peak = max(peak, sim.kinetic_energy() / 1e4)
        if sim.contacts is not None and sim.contacts.count:
            deepest = max(deepest, float(sim.contacts.depth.max()))
    ms = (time.perf_counter() - t0) / 600 * 1e3
    drift = float(np.linalg.norm(sim.position(top) - x1))
    return (f"overlap {deepest * 1e3:6.2f} mm  drift {drift * 100:6.2f} cm  peak KE {peak:8.1e} J/kg"
            f"  {ms:5.2f} ms/step")


def bounce(dim: int, **changes: Any) -> str:
    sim = Simulation(dim, settings=replace(Settings(sleep_enabled=False), **changes))
    up = _up(dim)
    sim.add_body(HalfSpace(up, 0.0), kind="static", restitution=0.5)
    r, h = 0.2, 1.0
    ball = sim.add_body(Ball(dim, r), position=(r + h) * up, restitution=0.5)
    heights: list[float] = []
    rising = False
    prev = sim.position(ball)[1]
    still_since = None
    rest_at = None
    for i in range(1200):
        sim.step()
        y = sim.position(ball)[1]
        if y > prev:
            rising = True
        elif rising and y < prev:
            heights.append(prev - r)
            rising = False
        prev = y
        speed = float(np.linalg.norm(sim.velocity(ball)))
        if speed < 0.01:
            still_since = i if still_since is None else still_since
            if rest_at is None and i - still_since >= 30:
                rest_at = (still_since + 1) * sim.settings.dt
        else:
            still_since = None
    want = [h * 0.5 ** (2 * k) for k in range(1, 4)]
    err = [abs(g - w) / h * 100 for g, w in zip(heights[:3], want, strict=False)]
    errs = " ".join(f"{e:4.1f}" for e in err) + " --" * (3 - len(err))
    rest = f"{rest_at:5.2f} s" if rest_at is not None else "never"
    return f"bounce height error {errs} % of h  at rest after {rest}"


def spin(dim: int, **changes: Any) -> str:
    sim = Simulation(dim, gravity=np.zeros(dim), settings=replace(Settings(), **changes))
    box = sim.add_body(Box(0.1 * np.arange(1, dim + 1)))
    w = np.zeros(sim.alg.k)
    w[: min(3, sim.alg.k)] = [0.3, 10.0, 0.2][: min(3, sim.alg.k)]
    sim.set_velocity(box, angular_velocity=w)
    e0 = sim.kinetic_energy()
    L0 = sim.angular_momentum(box)
    for _ in range(600):
        sim.step()
    dL = float(np.linalg.norm(sim.angular_momentum(box) - L0) / np.linalg.norm(L0))
    return (f"kinetic energy drift {(sim.kinetic_energy() - e0) / e0 * 100:+8.3f} %, angular momentum"
            f" error {dL * 100:7.3f} % in 10 s")


def freebody(dim: int, **changes: Any) -> str:
    """A generic free box (extents 0.15..0.5 m, random spin, seed = dim) over 10,000 steps."""
    sim = Simulation(dim, gravity=np.zeros(dim), settings=replace(Settings(sleep_enabled=False), **changes))
    box = sim.add_body(Box(np.linspace(0.15, 0.5, dim)), mass=1.0,
                       angular_velocity=np.random.default_rng(dim).normal(size=sim.alg.k) * 3.0)
    e0, L0 = sim.kinetic_energy(box), sim.angular_momentum(box)
    worst = 0.0
    t0 = time.perf_counter()
    for _ in range(10_000):
        sim.step()
        worst = max(worst, float(np.abs(sim.angular_momentum(box) - L0).max() / np.abs(L0).max()))
    ms = (time.perf_counter() - t0) / 10_000 * 1e3
    return (f"kinetic energy {(sim.kinetic_energy(box) - e0) / e0 * 100:+8.3f} %, world momentum error up to "
            f"{worst:.1e} over 10,000 steps; {ms:.2f} ms per step")


def deep(dim: int, **changes: Any) -> str:
    sim = Simulation(dim, settings=replace(Settings(sleep_enabled=False), **changes))
    up = _up(dim)
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    box = sim.add_body(Box(np.full(dim, 0.5)), position=0.3 * up)
    top = 0.0
    out = None
    for i in range(300):
        sim.step()
        top = max(top, float(np.linalg.norm(sim.velocity(box))))
        c = sim.contacts
        limit = sim.settings.overlap_allowance + 1e-3
        if out is None and c is not None and c.count and c.depth.max() <= limit:
            out = i + 1
    steps = f"{out:3d} steps" if out is not None else "not out"
    return f"out of the floor after {steps}  top speed {top:5.2f} m/s"


def sleep_time(dim: int, **changes: Any) -> str:
    sim = Simulation(dim, settings=replace(Settings(), **changes))
    up = _up(dim)
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    boxes = [sim.add_body(Box(np.full(dim, 0.5)), position=(0.5 + lv) * up, friction=0.6) for lv in range(10)]
    for i in range(600):
        sim.step()
        if not any(sim.is_awake(b) for b in boxes):
            return f"asleep after {(i + 1) * sim.settings.dt:5.2f} s"
    return "asleep: never within 10 s"


def margins(dim: int, **changes: Any) -> str:
    st = replace(Settings(sleep_enabled=False), **changes)
    sim = Simulation(dim, settings=st)
    up = _up(dim)
    sim.add_body(Box(np.r_[1.0, 0.025, np.ones(dim - 2)]), kind="static")
    ball = sim.add_body(Ball(dim, 0.1), position=1.0 * up, velocity=-50.0 * up)
    for _ in range(30):
        sim.step()
    through = sim.position(ball)[1] < 0.0
    from .scenes import build_pile

    pile, _ = build_pile(3, 100, 0)
    pile.settings = replace(pile.settings, **changes)
    rows = pairs = 0
    spent = {"find_pairs": 0.0, "find_contacts": 0.0}
    steps = 180  # the fall and the first settling, while the bodies move
    for _ in range(steps):
        pile.step()
        rows += pile.contacts.count if pile.contacts is not None else 0
        pairs += len(pile.pairs)
        for name in spent:
            spent[name] += pile.timings.stages.get(name, 0.0)
    return (f"fast ball {'passes through' if through else 'stops'}; falling 3-D pile of 100, per step:"
            f" {rows / steps:5.0f} rows {pairs / steps:5.0f} pairs, broadphase"
            f" {spent['find_pairs'] / steps * 1e3:5.2f} ms,"
            f" narrowphase {spent['find_contacts'] / steps * 1e3:5.2f} ms")


def heavy(dim: int, **changes: Any) -> str:
    out = []
    for ratio in (10.0, 100.0, 1000.0):
        sim = Simulation(dim, settings=replace(Settings(), **changes))
        up = _up(dim)
        sim.add_body(HalfSpace(up, 0.0), kind="static")
        light = sim.add_body(Box(np.full(dim, 0.25)), position=0.25 * up, mass=1.0)
        top = sim.add_body(Box(np.full(dim, 0.25)), position=0.75 * up, mass=ratio)
        for _ in range(600):
            sim.step()
        out.append(f"{ratio:5.0f}:1 {1e3 * (sim.position(light)[1] - 0.25):6.2f} / "
                   f"{1e3 * (sim.position(top)[1] - 0.75):7.2f} mm")
    return "light / heavy box against stacked half extents: " + ", ".join(out)


def piles(dim: int, **changes: Any) -> str:
    from .scenes import build_pile, lowest_point, settle_asleep

    sim, _ = build_pile(dim, 200, 0)
    material = {k: changes.pop(k) for k in ("rolling_resistance", "spin_friction") if k in changes}
    for h in sim.handles:
        sim.set_material(int(h), **material)
    sim.settings = replace(sim.settings, sleep_enabled=True, **changes)
    t_low, t_asleep = settle_asleep(sim, 30.0)
    low = lowest_point(sim)
    when = f"{t_asleep - t_low:5.2f} s" if t_low is not None and t_asleep is not None else "never within 30 s"
    return f"90 % asleep {when} after the energy fell below 1 %; lowest point {low * 1e3:6.2f} mm"


GROUPS: dict[str, tuple[Any, list[dict[str, Any]]]] = {
    "stack": (stack, [{}, {"solver_passes": 6, "bias_free_passes": 2}, {"bias_free_passes": 0},
                      {"warm_start": False}, {"spring_frequency": 15.0}, {"spring_damping_ratio": 1.0},
                      {"spring_damping_ratio": 3.0}, {"spring_damping_ratio": 30.0},
                      {"overlap_allowance": 0.002}, {"overlap_allowance": 0.01}, {"substeps": 2},
                      {"speculative_margin": 0.0}, {"speculative_margin": 0.02}]),
    "bounce": (bounce, [{}, {"bounce_threshold": 0.5}, {"bounce_threshold": 0.2},
                        {"bounce_threshold": 2.0}]),
    "spin": (spin, [{}, {"gyroscopic": "split"}, {"gyroscopic": "explicit"}, {"gyroscopic": "none"}]),
    "freebody": (freebody, [{}, {"gyroscopic": "split"}]),
    "deep": (deep, [{}, {"separation_speed_cap": 1.0}, {"separation_speed_cap": 10.0}]),
    "sleep": (sleep_time, [{}, {"rest_speed": 0.02}, {"rest_speed": 0.01}, {"rest_time": 1.0}]),
    "heavy": (heavy, [{}]),
    # material coefficients, set on every body of the pile (floor and walls included)
    "piles": (piles, [{}, {"rolling_resistance": 0.0}, {"rolling_resistance": 0.0005},
                      {"rolling_resistance": 0.002}, {"spin_friction": 0.0},
                      {"spin_friction": 0.004}, {"spin_friction": 0.008}, {"spin_friction": 0.024}]),
    "margins": (margins, [{}, {"speculative_margin": 0.0}, {"speculative_margin": 0.3},
                          {"broadphase_margin": 0.0}, {"broadphase_margin": 0.02},
                          {"broadphase_margin": 0.2}]),
}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m ndrigid.bench.defaults", description=__doc__.split("\n")[0])
    ap.add_argument("groups", nargs="*", help="groups to run (default: all)")
    ap.add_argument("--dims", type=int, nargs="+", default=[2, 3, 4, 5], help="dimensions (default 2 3 4 5)")
    args = ap.parse_args(argv)
    for name in args.groups or list(GROUPS):
        fn, variants = GROUPS[name]
        dims = [3] if name == "margins" else [4] if name == "piles" else args.dims
        print(f"== {name}", flush=True)
        for changes in variants:
            label = ", ".join(f"{k}={v}" for k, v in changes.items()) or "defaults"
            for dim in dims:
                print(f"{label:40s} {dim}-D  {fn(dim, **changes)}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
