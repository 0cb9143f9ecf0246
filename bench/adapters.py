"""Adapter overhead: what the esper and tcod-ecs adapters add to a physics step, as a share of it.

A floor and ``bodies`` balls and boxes dropped in a loose grid, run through each ECS adapter for
``steps`` frames of exactly one fixed step, in three phases of equal length:

* ``quiet``: nothing changes between frames (the adapter only scatters poses);
* ``velocity``: game code assigns ``Velocity.linear`` on 10 % of the entities every frame;
* ``churn``: 1 % of the entities are deleted and as many new ones created every frame.

Overhead is the wall time of the adapter's frame (``esper.process`` / ``PhysicsSystem.update``,
plus the velocity assignments themselves) minus the time of the Simulation's step inside it
(``sim.timings.total``); so it counts the structural diff, ``sim.add_body`` / ``remove_body`` for
churned bodies, pending writes, the fixed-step bookkeeping and the scatter. The share is the
median overhead over the median step time. Nothing here is asserted by a test::

    python -m ndrigid.bench.adapters --bodies 1000 --dim 4 --steps 60
"""

from __future__ import annotations

import argparse
import json
import time
from collections.abc import Callable
from typing import Any

import esper
import numpy as np
import tcod.ecs
from ndrigid.adapters import RigidBody, Transform, Velocity
from ndrigid.adapters.esper import PhysicsProcessor
from ndrigid.adapters.tcod import PhysicsSystem
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace

DT = 1.0 / 60.0
PHASES = ("quiet", "velocity", "churn")


def _spawn_specs(dim: int, count: int, rng: np.random.Generator, start: int = 0) -> list[tuple[Any, ...]]:
    """(RigidBody, Transform, Velocity) for ``count`` bodies on a loose grid above the floor."""
    ball, box = Ball(dim, 0.25), Box(np.full(dim, 0.2))
    side = int(np.ceil(count ** (1.0 / (dim - 1))))
    out = []
    for i in range(start, start + count):
        cell = np.array(np.unravel_index(i % side ** (dim - 1), (side,) * (dim - 1)), dtype=float)
        pos = np.zeros(dim)
        pos[0], pos[2:] = cell[0] * 0.7, cell[1:] * 0.7
        pos[1] = 0.5 + 0.6 * (i // side ** (dim - 1)) + rng.uniform(0.0, 0.2)
        out.append((RigidBody(ball if i % 2 else box), Transform(position=pos),
                    Velocity(linear=rng.uniform(-0.2, 0.2, dim))))
    return out


class _Game:
    """What the bench needs from an ECS: create, delete, list velocities, run one frame."""

    sim: Any

    def create(self, parts: tuple[Any, ...]) -> Any:
        raise NotImplementedError

    def delete(self, entity: Any) -> None:
        raise NotImplementedError

    def velocity(self, entity: Any) -> Velocity:
        raise NotImplementedError

    def frame(self) -> None:
        raise NotImplementedError


class _EsperGame(_Game):
    def __init__(self, dim: int) -> None:
        esper.switch_world("ndrigid-bench-adapters")
        esper.clear_database()
        self.proc = PhysicsProcessor(dim)
        self.sim = self.proc.sim
        esper.add_processor(self.proc)

    def create(self, parts: tuple[Any, ...]) -> int:
        return esper.create_entity(*parts)

    def delete(self, entity: int) -> None:
        esper.delete_entity(entity)

    def velocity(self, entity: int) -> Velocity:
        return esper.component_for_entity(entity, Velocity)

    def frame(self) -> None:
        esper.process(DT)

    def close(self) -> None:
        esper.switch_world("default")
        esper.delete_world("ndrigid-bench-adapters")


class _TcodGame(_Game):
    def __init__(self, dim: int) -> None:
        self.registry = tcod.ecs.Registry()
        self.system = PhysicsSystem(self.registry, dim)
        self.sim = self.system.sim

    def create(self, parts: tuple[Any, ...]) -> tcod.ecs.Entity:
        return self.registry.new_entity({type(p): p for p in parts})

    def delete(self, entity: tcod.ecs.Entity) -> None:
        entity.clear()

    def velocity(self, entity: tcod.ecs.Entity) -> Velocity:
        return entity.components[Velocity]

    def frame(self) -> None:
        self.system.update(DT)

    def close(self) -> None:
        pass


def _run(make: Callable[[int], Any], bodies: int, dim: int, steps: int, seed: int) -> dict[str, Any]:
    rng = np.random.default_rng(seed)
    game = make(dim)
    up = np.zeros(dim)
    up[1] = 1.0
    game.create((RigidBody(HalfSpace(up, 0.0), kind="static"), Transform(), Velocity()))
    ents = [game.create(p) for p in _spawn_specs(dim, bodies, rng)]
    t0 = time.perf_counter()
    game.frame()  # the first frame makes every body: reported apart
    spawn = time.perf_counter() - t0 - game.sim.timings.total
    per_phase = max(1, steps // len(PHASES))
    out: dict[str, Any] = {"spawn_ms": 1e3 * spawn, "spawn_us_per_body": 1e6 * spawn / bodies}
    made = bodies
    for phase in PHASES:
        over, step = [], []
        for _ in range(per_phase):
            t_write = 0.0
            if phase == "velocity":
                pick = rng.choice(len(ents), size=max(1, len(ents) // 10), replace=False)
                comps = [game.velocity(ents[i]) for i in pick]  # ECS lookups: game-side work
                v = rng.uniform(-1.0, 1.0, (len(pick), dim))
                tw = time.perf_counter()
                for c, vi in zip(comps, v, strict=True):
                    c.linear = vi
                t_write = time.perf_counter() - tw
            elif phase == "churn":
                n = max(1, len(ents) // 100)
                for i in sorted(rng.choice(len(ents), size=n, replace=False), reverse=True):
                    game.delete(ents.pop(int(i)))
                ents += [game.create(p) for p in _spawn_specs(dim, n, rng, start=made)]
                made += n
            t0 = time.perf_counter()
            game.frame()
            total = time.perf_counter() - t0
            step.append(game.sim.timings.total)
            over.append(total - game.sim.timings.total + t_write)
        ms_over, ms_step = 1e3 * float(np.median(over)), 1e3 * float(np.median(step))
        out[phase] = {"overhead_ms": ms_over, "step_ms": ms_step, "share": ms_over / ms_step}
    out["bodies"] = game.sim.count
    game.close()
    return out


def run_adapter_bench(bodies: int = 1000, dim: int = 4, steps: int = 60, seed: int = 1) -> dict[str, Any]:
    """Adapter overhead per frame as a share of the step time, for esper and tcod-ecs.

    Returns ``{"esper": {...}, "tcod": {...}, "bodies", "dim", "steps"}`` where each adapter has
    ``spawn_ms`` (making every body on the first frame) and, per phase ("quiet", "velocity",
    "churn"), ``overhead_ms``, ``step_ms`` and ``share`` (overhead / step).
    """
    return {"bodies": bodies, "dim": dim, "steps": steps,
            "esper": _run(_EsperGame, bodies, dim, steps, seed),
            "tcod": _run(_TcodGame, bodies, dim, steps, seed)}


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Command line: print a table (and optionally write JSON)."""
    ap = argparse.ArgumentParser(description="adapter overhead as a share of step time")
    ap.add_argument("--bodies", type=int, default=1000)
    ap.add_argument("--dim", type=int, default=4)
    ap.add_argument("--steps", type=int, default=60)
    ap.add_argument("--json", default=None, help="write the result to this file")
    args = ap.parse_args(argv)
    res = run_adapter_bench(args.bodies, args.dim, args.steps)
    print(f"adapter overhead, {args.bodies} bodies, {args.dim}-D, {args.steps} frames of one step")
    for name in ("esper", "tcod"):
        r = res[name]
        print(f"  {name:6s} spawn {r['spawn_ms']:8.1f} ms ({r['spawn_us_per_body']:.0f} us/body)")
        for phase in PHASES:
            p = r[phase]
            print(f"  {name:6s} {phase:9s} overhead {p['overhead_ms']:7.3f} ms / step {p['step_ms']:8.2f} ms"
                  f" = {100 * p['share']:5.2f} %")
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(res, fh, indent=2)
    return res


if __name__ == "__main__":
    main()
