"""Bounces at the default step (60 Hz) follow Newton's law of restitution at every speed above the
threshold, and a resting body stops bouncing and sleeps whatever the threshold, in 2-D to 5-D.

References: Newton's law of restitution (the separating speed is e times the approach speed at
impact) and free flight under gravity (a bounce at speed v lasts 2 v / g), any mechanics text.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from ndrigid.core import Ball, HalfSpace, Settings, Simulation

G = 9.81
DIMS = [2, 3, 4, 5]


def _bounces(dim: int, e: float, h: float, steps: int, **settings: float):  # type: ignore[no-untyped-def]
    sim = Simulation(dim, settings=Settings(**settings)) if settings else Simulation(dim)
    up = np.eye(dim)[1]
    ground = sim.add_body(HalfSpace.below(dim, 1, 0.0), kind="static", restitution=e, friction=0.0)
    ball = sim.add_body(Ball(dim, 0.1), position=(h + 0.1) * up, restitution=e, friction=0.0)
    hits = []
    for i in range(steps):
        sim.step()
        hits += [(i, ev.approach_speed) for ev in sim.events if ev.kind == "begin"
                 and {ev.handle_a, ev.handle_b} == {ground, ball}]
    return sim, ball, hits


@pytest.mark.parametrize("e", [0.5, 0.8])
@pytest.mark.parametrize("dim", DIMS)
def test_every_bounce_above_the_threshold_keeps_the_asked_restitution(dim: int, e: float) -> None:
    """Successive impact speeds fall by e within 3 % down to the threshold (before: 0.495, 0.510,
    0.585, 0.629, 0.660 asked 0.5, the last bounces too lively), and the first impact comes at the
    free-fall speed sqrt(2 g h) within 2 %."""
    sim, _, hits = _bounces(dim, e, 2.0, 900)
    thr = sim.settings.bounce_threshold
    speeds = [v for _, v in hits]
    assert speeds[0] == pytest.approx(math.sqrt(2 * G * 2.0), rel=0.02)
    fast = [v for v in speeds if v > thr]
    assert len(fast) >= (3 if e == 0.5 else 8)
    ratios = np.array(fast[1:]) / np.array(fast[:-1])
    np.testing.assert_allclose(ratios, e, rtol=0.03)


@pytest.mark.parametrize("dim", DIMS)
def test_bounce_series_lasts_the_ballistic_time(dim: int) -> None:
    """From the first impact to the last one above the threshold, e = 0.8 from 2 m: the sum of the
    flights 2 e^j v0 / g within 3 %."""
    e = 0.8
    sim, _, hits = _bounces(dim, e, 2.0, 900)
    thr = sim.settings.bounce_threshold
    v0 = math.sqrt(2 * G * 2.0)
    k = int(math.floor(math.log(thr / v0) / math.log(e)))  # last bounce index with e^k v0 > thr
    expected = sum(2.0 * e ** j * v0 / G for j in range(1, k + 1))
    fast = [i for i, v in hits if v > thr]
    assert len(fast) == k + 1
    measured = (fast[-1] - fast[0]) * sim.settings.dt
    assert measured == pytest.approx(expected, rel=0.03)


@pytest.mark.parametrize("threshold", [0.05, 0.5, 1.0])
@pytest.mark.parametrize("dim", [3, 4])
def test_a_ball_stops_bouncing_and_sleeps_whatever_the_threshold(dim: int, threshold: float) -> None:
    """A threshold below g dt (0.16 m/s at 60 Hz) used to leave a resting ball bouncing 0.6 mm up
    for ever; now the impact speed is judged at the time of impact, so a resting contact never
    bounces: the ball rests one radius up (within the overlap allowance) and falls asleep."""
    sim, ball, _ = _bounces(dim, 0.5, 0.5, 600, bounce_threshold=threshold)
    assert not sim.is_awake(ball)
    assert sim.position(ball)[1] == pytest.approx(0.1, abs=sim.settings.overlap_allowance + 1e-4)
