"""Orchard: a small esper game that adds ndrigid physics to its own components and processors.

Fruit trees drop fruit; a basket that the game steers catches what it can; fruit that lands on the
ground bruises and rots after a while. The game's own parts are plain esper: ``Tree``, ``Fruit``,
``Basket`` and ``Ground`` components, and processors that grow fruit, steer the basket, harvest
and report. Physics is added with three things only:

1. ``PhysicsProcessor(dim)`` added to the world (priority 0: growth and steering run before it,
   harvest and reports after it);
2. ``RigidBody`` / ``Transform`` / ``Velocity`` components on the entities that should move;
3. handlers for ``CONTACT_BEGIN`` (``esper.set_handler``), called with the two entities.

The dimension is the one setting (``--dim``); the same game code runs in 2-D to 5-D: the orchard's
row runs along e_0, "up" is e_1, and the extra axes only get a little jitter. Headless::

    python -m ndrigid.demo.esper_game --dim 3 --frames 120
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from typing import Any

import esper
import numpy as np
from ndrigid.adapters.esper import CONTACT_BEGIN, PhysicsProcessor, RigidBody, Transform, Velocity
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace

FRAME = 1.0 / 60.0


# -- the game's own components --------------------------------------------------------------------


@dataclass
class Tree:
    """A fruit tree at ``x`` along the row: drops a fruit every ``period`` seconds."""

    x: float
    period: float
    timer: float = 0.0
    fruit_left: int = 12


@dataclass
class Fruit:
    """A fruit; ``ground_time`` counts seconds spent bruised on the ground."""

    variety: str
    bruised: bool = False
    ground_time: float = 0.0


@dataclass
class Basket:
    """The player's basket (a kinematic box the game steers)."""

    speed: float
    caught: int = 0


class Ground:
    """Marker of the orchard floor."""


@dataclass
class Tally:
    spawned: int = 0
    caught: int = 0
    rotted: int = 0
    lost: int = 0


# -- the game's processors ------------------------------------------------------------------------


class Growth(esper.Processor):
    """Trees drop fruit: new entities with a RigidBody appear mid-run."""

    def __init__(self, dim: int, tally: Tally, rng: np.random.Generator) -> None:
        self.dim, self.tally, self.rng = dim, tally, rng
        self.fruit_shape = Ball(dim, 0.12)  # one shape object shared by every fruit

    def process(self, frame_seconds: float = FRAME) -> None:
        for _, tree in esper.get_component(Tree):
            tree.timer += frame_seconds
            if tree.timer < tree.period or tree.fruit_left == 0:
                continue
            tree.timer -= tree.period
            tree.fruit_left -= 1
            start = np.zeros(self.dim)
            start[0] = tree.x + self.rng.uniform(-0.4, 0.4)
            start[1] = 2.5
            start[2:] = self.rng.uniform(-0.1, 0.1, self.dim - 2)
            variety = str(self.rng.choice(["apple", "pear", "plum"]))
            esper.create_entity(Fruit(variety), RigidBody(self.fruit_shape, density=600.0, restitution=0.3),
                                Transform(position=start))
            self.tally.spawned += 1


class Steering(esper.Processor):
    """The basket chases the lowest fruit still in the air: game code assigns a Velocity."""

    def process(self, frame_seconds: float = FRAME) -> None:
        falling = [(t.position[1], t.position[0]) for _, (_, t) in esper.get_components(Fruit, Transform)
                   if t.bound and t.position[1] > 0.5]
        for _, (basket, t, vel) in esper.get_components(Basket, Transform, Velocity):
            target = min(falling)[1] if falling else 0.0
            v = np.zeros(t.dim)
            v[0] = np.clip(4.0 * (target - t.position[0]), -basket.speed, basket.speed)
            vel.linear = v


class Harvest(esper.Processor):
    """Contact events decide the fruit's fate: caught by the basket, or bruised on the ground."""

    def __init__(self, tally: Tally) -> None:
        self.tally = tally
        esper.set_handler(CONTACT_BEGIN, self.on_touch)  # held weakly by esper: the processor lives on

    def on_touch(self, a: Any, b: Any, sensor: bool) -> None:
        for fruit_ent, other in ((a, b), (b, a)):
            fruit = esper.try_component(fruit_ent, Fruit) if fruit_ent is not None else None
            if fruit is None or other is None or not esper.entity_exists(fruit_ent):
                continue
            basket = esper.try_component(other, Basket)
            if basket is not None:
                basket.caught += 1
                self.tally.caught += 1
                esper.delete_entity(fruit_ent)  # its body goes before the next step
            elif esper.has_component(other, Ground):
                fruit.bruised = True

    def process(self, frame_seconds: float = FRAME) -> None:
        for ent, (fruit, t) in esper.get_components(Fruit, Transform):
            if fruit.bruised:
                fruit.ground_time += frame_seconds
            if fruit.ground_time > 1.5:
                esper.delete_entity(ent)
                self.tally.rotted += 1
            elif t.position is not None and t.position[1] < -2.0:  # fell out of the world
                esper.delete_entity(ent)
                self.tally.lost += 1


class Report(esper.Processor):
    """Prints a line every ``every`` frames."""

    def __init__(self, every: int, out: list[str]) -> None:
        self.every, self.out, self.frame = every, out, 0

    def process(self, frame_seconds: float = FRAME) -> None:
        self.frame += 1
        if self.frame % self.every:
            return
        fruit = [t.position for _, (_, t) in esper.get_components(Fruit, Transform) if t.bound]
        _, (basket, bt) = esper.get_components(Basket, Transform)[0]
        line = (f"frame {self.frame:4d}: {len(fruit):2d} fruit in play, basket at x = {bt.position[0]:+.2f}, "
                f"caught {basket.caught}")
        self.out.append(line)
        print(line)


# -- setting up and running -----------------------------------------------------------------------


def build_orchard(dim: int, seed: int = 7,
                  report_every: int = 30) -> tuple[PhysicsProcessor, Tally, list[str]]:
    """Create the orchard's entities and processors in the current esper world."""
    rng = np.random.default_rng(seed)
    tally, lines = Tally(), list[str]()
    physics = PhysicsProcessor(dim)
    esper.add_processor(Growth(dim, tally, rng), priority=20)
    esper.add_processor(Steering(), priority=10)
    esper.add_processor(physics, priority=0)
    esper.add_processor(Harvest(tally), priority=-10)
    esper.add_processor(Report(report_every, lines), priority=-20)
    up = np.zeros(dim)
    up[1] = 1.0
    esper.create_entity(Ground(), RigidBody(HalfSpace(up, 0.0), kind="static", friction=0.8))
    half = np.full(dim, 0.45)
    half[1] = 0.1
    esper.create_entity(Basket(speed=3.0), RigidBody(Box(half), kind="kinematic"),
                        Transform(position=up * 0.1), Velocity())
    for x, period in ((-2.0, 0.7), (0.0, 0.5), (2.0, 0.9)):
        esper.create_entity(Tree(x, period))
    return physics, tally, lines


def main(argv: list[str] | None = None) -> dict[str, Any]:
    """Run the orchard headless; prints progress and a summary, and returns the summary."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--dim", type=int, default=3, help="spatial dimension, 2 to 5 (default 3)")
    ap.add_argument("--frames", type=int, default=120, help="frames of 1/60 s to run (default 120)")
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args(argv)
    previous = esper.current_world
    name = f"orchard-{args.dim}d"
    esper.switch_world(name)
    try:
        physics, tally, lines = build_orchard(args.dim, args.seed)
        for _ in range(args.frames):
            esper.process(FRAME)
        fruit = sorted((e, np.round(t.position, 3).tolist())
                       for e, (_, t) in esper.get_components(Fruit, Transform) if t.bound)
        summary = {"dim": args.dim, "frames": args.frames, "steps": physics.bridge.stepper.steps,
                   "bodies": physics.sim.count, "spawned": tally.spawned, "caught": tally.caught,
                   "rotted": tally.rotted, "lost": tally.lost, "fruit": fruit, "lines": lines}
        print(f"orchard in {args.dim}-D after {args.frames} frames ({summary['steps']} physics steps): "
              f"{tally.spawned} fruit dropped, {tally.caught} caught, {tally.rotted} rotted, "
              f"{tally.lost} lost, {len(fruit)} still in play, {physics.sim.count} bodies")
        for ent, pos in fruit:
            print(f"  fruit {ent}: position {pos}")
        return summary
    finally:
        esper.event_registry.clear()  # handlers of this world go with it
        esper.switch_world(previous)
        esper.delete_world(name)


if __name__ == "__main__":
    main()
