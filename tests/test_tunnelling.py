"""Continuous collision at 200 m/s: fast small bodies against 5 mm walls do not pass through.

The reference is a fact of the trade (a solid wall stops what hits it); the scene is measured
against the wall's mid-plane: after the shot the body must still be on its side. Each shot draws
a random orientation, a spin of about 5 rad/s per plane and an aim within 0.2 m of the wall's centre
(the wall is 40 m wide, so nothing passes around it).

Known limit, measured (20 shots each at 0, 45 and 80 degrees, compiled path): 2-D to 4-D boxes
and 2-D simplices never pass; 5-D boxes pass in 2 (head-on) and 3 (80 degrees) of 20 shots, small
simplices head-on in 1 (3-D), 3 (4-D) and 6 (5-D) of 20, and 5-D ones at 45 degrees in 2. There the spin
(~16 rad/s in 5-D, a quarter radian per step) swings a vertex that no contact point covers
through the wall within one step: speculative contacts are linear in the rotation; a time of
impact that follows the rotation would be needed. Those cases are the strict xfail below.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import Ball, Box, Settings, Simulation
from ndrigid.core.geometry.polytopes import regular_simplex


def _passes(dim: int, shape, angle_deg: float, seed: int, *, dynamic_wall: bool = False) -> bool:
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, gravity=np.zeros(dim), settings=Settings(sleep_enabled=False))
    half = np.full(dim, 20.0)
    half[0] = 0.0025  # a 5 mm wall, its faces at x = -/+ 2.5 mm
    wall = sim.add_body(Box(half), kind="dynamic" if dynamic_wall else "static",
                        mass=5.0 if dynamic_wall else None)
    a = np.radians(angle_deg)
    d = np.zeros(dim)
    d[0], d[1] = np.cos(a), np.sin(a)
    start = -1.0 * d + np.r_[0.0, rng.uniform(-0.2, 0.2, dim - 1)]
    h = sim.add_body(shape, position=start, rotor=sim.alg.rotor(rng.normal(size=sim.alg.k)),
                     velocity=200.0 * d, angular_velocity=5.0 * rng.normal(size=sim.alg.k))
    for _ in range(20):
        sim.step()
    return bool(sim.centroid(h)[0] > sim.centroid(wall)[0])


def _shapes(dim: int) -> dict:
    return {"box": Box(np.full(dim, 0.1)), "ball": Ball(dim, 0.05), "simplex": regular_simplex(dim, edge=0.1)}


@dims()
@pytest.mark.parametrize("kind", ["box", "ball"])
@pytest.mark.parametrize("angle", [0.0, 45.0, 80.0])
def test_boxes_and_balls_stop_at_thin_static_walls_at_any_angle(dim: int, kind: str, angle: float) -> None:
    if dim == 5 and kind == "box":
        pytest.skip("known limit, see test_fast_spinning_bodies_can_still_swing_through_in_one_step")
    shape = _shapes(dim)[kind]
    passed = [s for s in range(10) if _passes(dim, shape, angle, s)]
    assert passed == []


@pytest.mark.xfail(strict=True, reason="speculative contacts are linear in the rotation: a fast-spinning "
                   "body can swing an uncovered vertex through a thin wall within one step")
@pytest.mark.parametrize(("dim", "kind", "angle"),
                         [(5, "box", 0.0), (5, "box", 80.0), (4, "simplex", 0.0), (5, "simplex", 0.0),
                          (5, "simplex", 45.0)])
def test_fast_spinning_bodies_can_still_swing_through_in_one_step(dim: int, kind: str, angle: float) -> None:
    passed = [s for s in range(20) if _passes(dim, _shapes(dim)[kind], angle, s)]
    assert passed == []


@dims(2, 3, 4)
@pytest.mark.parametrize("angle", [45.0, 80.0])
def test_small_simplices_stop_at_thin_static_walls_at_an_angle(dim: int, angle: float) -> None:
    shape = _shapes(dim)["simplex"]
    passed = [s for s in range(10) if _passes(dim, shape, angle, s)]
    assert passed == []


@dims()
def test_balls_stop_at_thin_free_planks(dim: int) -> None:
    """A 5 kg free plank 5 mm thick, hit by a ball at 200 m/s: the ball stays on its side of the
    plank (both move off together)."""
    shape = _shapes(dim)["ball"]
    passed = [s for s in range(10) if _passes(dim, shape, 0.0, s, dynamic_wall=True)]
    assert passed == []
