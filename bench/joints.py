"""Joint figures: the chain scene behind the joint pass defaults, a long chain and a ragdoll pile.

    python -m ndrigid.bench.joints passes              # 4-D chain of 10, seven pass settings
    python -m ndrigid.bench.joints chain --links 100   # 4-D chain of 100, ms per step, both paths
    python -m ndrigid.bench.joints ragdolls            # 4-D pile of 20 ragdolls, ms per step, both paths

The chain: boxes of 0.2 x 0.04 (x 0.04 ...) m, 0.5 kg, joined end to end by point joints, the
first to the world, released horizontally under gravity at 120 Hz, sleeping off. The error is the
worst anchor separation of any joint from 1 s to 3 s, per link length.

The ragdolls: figures of ten parts (a box torso, a ball head, box upper and lower arms and legs;
point joints at the neck, shoulders and hips, limited hinges at the elbows and knees, all in the
figure's own e_0 ^ e_1 plane), turned at random and dropped in columns onto a half-space floor at
60 Hz, so that they fall onto one another and pile.

``--kernels numpy|compiled|both`` (default both) picks the paths timed (``Settings(compiled=...)``);
the figures are medians over the steps (the first step, which loads the kernels, is left out).
"""

from __future__ import annotations

import argparse
import os
import time
from typing import Any

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
from ndrigid.core import Ball, Box, HalfSpace, Settings, Simulation  # noqa: E402

PATHS = {"compiled": (True,), "numpy": (False,), "both": (False, True)}


def _path_name(compiled: bool) -> str:
    return "compiled" if compiled else "numpy"


def chain_run(dim: int, links: int, hz: float, passes: tuple[int, int, int], seconds: float = 3.0,
              compiled: bool = True, release: float = 90.0) -> tuple[float, list[float]]:
    """(worst joint error per link after the first second, ms of every step) of the chain scene;
    ``passes``: joint_passes, joint_passes_after, joint_position_passes; ``release``: the straight
    chain's angle from hanging at rest, in degrees (90: held out horizontally, the default)."""
    g = np.zeros(dim)
    g[1] = -9.81
    sim = Simulation(dim, gravity=g, settings=Settings(dt=1.0 / hz, sleep_enabled=False, compiled=compiled,
                                                       joint_passes=passes[0], joint_passes_after=passes[1],
                                                       joint_position_passes=passes[2]))
    link = 0.2
    half = np.full(dim, 0.02)
    half[0] = link / 2
    a = np.radians(release)
    along = np.sin(a) * np.eye(dim)[0] - np.cos(a) * np.eye(dim)[1]
    turn = np.eye(dim)  # the box's long axis e_0 turned onto ``along``, in the e_0 e_1 plane
    turn[:2, :2] = [[np.sin(a), np.cos(a)], [-np.cos(a), np.sin(a)]]
    prev = None
    joints = []
    for i in range(links):
        b = sim.add_body(Box(half), position=(i + 0.5) * link * along, rotation=turn, mass=0.5)
        joints.append(sim.add_joint("point", b, prev, anchor=i * link * along))
        prev = b
    worst = 0.0
    times = []
    steps = int(round(seconds * hz))
    for s in range(steps):
        t0 = time.perf_counter()
        sim.step()
        times.append(1e3 * (time.perf_counter() - t0))
        if s >= hz:
            worst = max(worst, max(sim.joint_error(j) for j in joints))
    return worst / link, times


def chain(dim: int, links: int, hz: float, passes: tuple[int, int, int],
          seconds: float = 3.0, compiled: bool = True) -> tuple[float, float]:
    """(worst joint error per link after the first second, mean ms per step) of the chain scene."""
    err, times = chain_run(dim, links, hz, passes, seconds, compiled)
    return err, float(np.mean(times))


# -- ragdolls ----------------------------------------------------------------------------------------

#: parts of a figure in its own frame: name, shape ("box" half extents along e_0, e_1 or "ball"
#: radius), centre (e_0, e_1), mass (kg). Thickness along the other axes: 0.06 m half.
PARTS: tuple[tuple[str, str, tuple[float, ...], tuple[float, float], float], ...] = (
    ("torso", "box", (0.15, 0.25), (0.0, 0.0), 10.0),
    ("head", "ball", (0.1,), (0.0, 0.37), 4.0),
    ("upper_arm_l", "box", (0.11, 0.04), (-0.27, 0.2), 2.0),
    ("upper_arm_r", "box", (0.11, 0.04), (0.27, 0.2), 2.0),
    ("lower_arm_l", "box", (0.1, 0.035), (-0.5, 0.2), 1.5),
    ("lower_arm_r", "box", (0.1, 0.035), (0.5, 0.2), 1.5),
    ("thigh_l", "box", (0.055, 0.15), (-0.08, -0.42), 5.0),
    ("thigh_r", "box", (0.055, 0.15), (0.08, -0.42), 5.0),
    ("shin_l", "box", (0.045, 0.15), (-0.08, -0.75), 3.5),
    ("shin_r", "box", (0.045, 0.15), (0.08, -0.75), 3.5),
)
#: joints of a figure: kind, part A, part B, anchor (e_0, e_1) in the figure's frame, hinge limits
FIGURE_JOINTS: tuple[tuple[str, str, str, tuple[float, float], tuple[float, float] | None], ...] = (
    ("point", "torso", "head", (0.0, 0.26), None),
    ("point", "torso", "upper_arm_l", (-0.155, 0.2), None),
    ("point", "torso", "upper_arm_r", (0.155, 0.2), None),
    ("hinge", "upper_arm_l", "lower_arm_l", (-0.39, 0.2), (-2.3, 0.1)),
    ("hinge", "upper_arm_r", "lower_arm_r", (0.39, 0.2), (-0.1, 2.3)),
    ("point", "torso", "thigh_l", (-0.08, -0.26), None),
    ("point", "torso", "thigh_r", (0.08, -0.26), None),
    ("hinge", "thigh_l", "shin_l", (-0.08, -0.585), (-0.1, 2.4)),
    ("hinge", "thigh_r", "shin_r", (0.08, -0.585), (-0.1, 2.4)),
)
THICKNESS = 0.06


def add_ragdoll(sim: Simulation, origin: Any, rotor: Any) -> tuple[list[int], list[int]]:
    """Add one figure (:data:`PARTS`, :data:`FIGURE_JOINTS`) with its frame at ``origin`` turned by
    ``rotor``; returns its body and joint handles."""
    n, alg = sim.dim, sim.alg
    origin = np.asarray(origin, dtype=float)
    M = alg.rotor_to_matrix(np.asarray(rotor, dtype=float))

    def world(p: tuple[float, float]) -> np.ndarray:
        local = np.zeros(n)
        local[:2] = p
        return origin + M @ local

    body: dict[str, int] = {}
    for name, shape, size, centre, mass in PARTS:
        if shape == "ball":
            s: Any = Ball(n, size[0])
        else:
            half = np.full(n, THICKNESS)
            half[:2] = size
            s = Box(half)
        body[name] = sim.add_body(s, position=world(centre), rotor=rotor, mass=mass)
    p = alg.pairs
    e0, e1 = M[:, 0], M[:, 1]
    plane = e0[p[:, 0]] * e1[p[:, 1]] - e0[p[:, 1]] * e1[p[:, 0]]  # the figure's e_0 ^ e_1, turned
    joints = []
    for kind, a, b, at, limits in FIGURE_JOINTS:
        if kind == "hinge":
            assert limits is not None
            joints.append(sim.add_joint("hinge", body[a], body[b], anchor=world(at), plane=plane,
                                        lower=limits[0], upper=limits[1]))
        else:
            joints.append(sim.add_joint(kind, body[a], body[b], anchor=world(at)))
    return list(body.values()), joints


def _part_spheres(dim: int, origin: np.ndarray, M: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """World centres (10, n) and radii (10,) of spheres around the parts of a figure."""
    centres = np.zeros((len(PARTS), dim))
    radii = np.zeros(len(PARTS))
    for i, (_name, shape, size, centre, _mass) in enumerate(PARTS):
        local = np.zeros(dim)
        local[:2] = centre
        centres[i] = origin + M @ local
        squares = sum(v * v for v in size) + (dim - 2) * THICKNESS ** 2
        radii[i] = size[0] if shape == "ball" else np.sqrt(squares)
    return centres, radii


def ragdoll_pile(dim: int, count: int, seed: int = 0, settings: Settings | None = None) -> Simulation:
    """``count`` figures turned at random above a half-space floor at height 0: figure i over one of
    four cells 1 m apart (2 in 2-D), from 1 m up and 0.45 m higher per figure, lifted further where
    its parts' bounding spheres would touch a figure placed before it or the floor."""
    g = np.zeros(dim)
    g[1] = -9.81
    sim = Simulation(dim, gravity=g, settings=settings)
    up = np.eye(dim)[1]
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    rng = np.random.default_rng(seed)
    across = [i for i in range(dim) if i != 1]
    cells = 2 ** min(len(across), 2)
    placed_c = np.zeros((0, dim))
    placed_r = np.zeros(0)
    height = 1.0
    for i in range(count):
        column = i % cells
        while True:
            origin = height * up
            for bit, axis in enumerate(across[:2]):
                origin[axis] = 0.5 * (1 if (column >> bit) & 1 else -1)
            origin[across] += rng.uniform(-0.05, 0.05, len(across))
            rotor = sim.alg.rotor(rng.normal(size=sim.alg.k))
            c, r = _part_spheres(dim, origin, sim.alg.rotor_to_matrix(rotor))
            gap = (np.linalg.norm(c[:, None, :] - placed_c[None, :, :], axis=2)
                   - r[:, None] - placed_r[None, :])
            if np.all(c[:, 1] - r > 0.01) and (gap.size == 0 or gap.min() > 0.01):
                break
            height += 0.1
        add_ragdoll(sim, origin, rotor)
        placed_c = np.concatenate([placed_c, c])
        placed_r = np.concatenate([placed_r, r])
        height += 0.45
    return sim


def ragdoll_run(dim: int, count: int, steps: int, compiled: bool, seed: int = 0) -> dict[str, Any]:
    """Time ``steps`` steps of the ragdoll pile: ms of every step and the mean ms of each stage."""
    sim = ragdoll_pile(dim, count, seed, Settings(compiled=compiled))
    times, stages = [], {}
    for _ in range(steps):
        t0 = time.perf_counter()
        sim.step()
        times.append(1e3 * (time.perf_counter() - t0))
        for k, v in sim.timings.stages.items():
            stages[k] = stages.get(k, 0.0) + 1e3 * v / steps
    ys = np.array([sim.position(int(h))[1] for h in sim.handles])
    contacts = 0 if sim.contacts is None else int(sim.contacts.count)
    awake = int(np.sum(sim.bodies.awake[: sim.bodies.count] & (sim.bodies.kind[: sim.bodies.count] == 0)))
    return {"times": times, "stages": stages, "bodies": len(ys) - 1, "joints": int(sim.joints.count),
            "contacts": contacts, "top": float(ys.max()), "awake": awake}


def _median(times: list[float]) -> float:
    return float(np.median(times[1:] if len(times) > 1 else times))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m ndrigid.bench.joints", description=__doc__.split("\n")[0])
    ap.add_argument("what", choices=["passes", "chain", "ragdolls"])
    ap.add_argument("--dim", type=int, default=4)
    ap.add_argument("--links", type=int, default=10, help="chain: links (default 10)")
    ap.add_argument("--hz", type=float, default=120.0, help="chain: steps per second (default 120)")
    ap.add_argument("--seconds", type=float, default=2.0, help="chain: simulated seconds (default 2)")
    ap.add_argument("--release", type=float, default=90.0,
                    help="chain: the straight chain's angle from hanging, degrees (default 90: horizontal)")
    ap.add_argument("--count", type=int, default=20, help="ragdolls: figures (default 20)")
    ap.add_argument("--steps", type=int, default=240, help="ragdolls: steps at 60 Hz (default 240)")
    ap.add_argument("--kernels", choices=list(PATHS), default="both",
                    help="chain, ragdolls: the paths timed (default both)")
    a = ap.parse_args(argv)
    if a.dim < 2:
        ap.error(f"--dim: expected a dimension >= 2, got {a.dim}")
    if a.what == "passes":
        for p in ((8, 4, 0), (2, 1, 6), (4, 2, 6), (8, 4, 2), (8, 4, 4), (8, 4, 6), (8, 4, 8)):
            err, ms = chain(a.dim, a.links, a.hz, p)
            print(f"{a.dim}-D chain of {a.links}, joint_passes {p[0]} + {p[1]}, joint_position_passes "
                  f"{p[2]}: worst error {err:.2e} of a link, {ms:.2f} ms per step")
        return 0
    print(f"{'path':<9} {'median ms':>10} {'mean ms':>9} {'p90 ms':>8}  scene")
    if a.what == "chain":
        passes = (Settings.joint_passes, Settings.joint_passes_after, Settings.joint_position_passes)
        for compiled in PATHS[a.kernels]:
            err, times = chain_run(a.dim, a.links, a.hz, passes, a.seconds, compiled, a.release)
            t = times[1:] if len(times) > 1 else times
            print(f"{_path_name(compiled):<9} {_median(times):10.2f} {np.mean(t):9.2f} "
                  f"{np.percentile(t, 90):8.2f}  {a.dim}-D chain of {a.links} released at {a.release:g} deg, "
                  f"{len(times)} steps, "
                  f"worst error {err:.2e} of a link")
        return 0
    for compiled in PATHS[a.kernels]:
        r = ragdoll_run(a.dim, a.count, a.steps, compiled)
        t = r["times"][1:] if len(r["times"]) > 1 else r["times"]
        print(f"{_path_name(compiled):<9} {_median(r['times']):10.2f} {np.mean(t):9.2f} "
              f"{np.percentile(t, 90):8.2f}  {a.dim}-D pile of {a.count} ragdolls ({r['bodies']} bodies, "
              f"{r['joints']} joints), {a.steps} steps; at the end {r['contacts']} contact points, "
              f"{r['awake']} awake, top {r['top']:.2f} m")
        print("          stage means (ms): " + ", ".join(f"{k} {v:.2f}" for k, v in r["stages"].items()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
