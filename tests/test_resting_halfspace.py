"""A box resting on a static half-space floor: the height and sleep of a settled box.

Sources: geometry: a box lying on a face on a plane rests with its centre at its half extent along
the plane normal; fact of the trade that a resting box sleeps (common practice). The same box on a
static Box floor must rest at the same height (both floors present the same plane).

Regression for a 4-D-and-up bug: every corner below the speculative margin was a candidate, so a
thin box's top corners (which project onto its bottom ones) tied with them in the point selection
and the box sank on half-spaces; and in 6-D the corner-selection directions all lay on one half of
the face, so the box tipped into the floor.
"""

from __future__ import annotations

import numpy as np
import pytest
from ndrigid.core import Box, HalfSpace, Settings, Simulation
from ndrigid.core.algebra import bivector_pairs

SHORT = 0.05  # m, the half extent along e_1 and the other short axes
STEPS = 600  # 10 s at 60 Hz


def _settle(n: int, aspect: float, degrees: float, floor: str) -> tuple[float, bool, float]:
    settings = Settings()
    sim = Simulation(n, settings=settings)
    up = np.zeros(n)
    up[1] = 1.0
    if floor == "halfspace":
        sim.add_body(HalfSpace(up, 0.0), kind="static")
    else:
        fh = np.full(n, 10.0)
        fh[1] = 0.5
        sim.add_body(Box(fh), kind="static", position=-0.5 * up)
    h = np.full(n, SHORT)
    h[0] = aspect * SHORT
    rotor = None
    if degrees:
        B = np.zeros(sim.alg.k)
        pairs = [tuple(p) for p in bivector_pairs(n)]
        B[pairs.index((0, n - 1))] = np.radians(degrees)  # a turn in the horizontal plane (e_0, e_{n-1})
        rotor = sim.alg.rotor(B)
    box = sim.add_body(Box(h), position=(SHORT + 0.002) * up, rotor=rotor)
    for _ in range(STEPS):
        sim.step()
    return float(sim.position(box)[1]), bool(sim.is_awake(box)), settings.overlap_allowance


CASES = [(n, aspect, deg) for n in range(2, 7) for aspect in (1.0, 10.0, 50.0)
         for deg in ((0.0,) if n == 2 else (0.0, 30.0, 90.0))]  # in 2-D (e_0, e_1) is not horizontal


@pytest.mark.parametrize(("n", "aspect", "degrees"), CASES,
                         ids=[f"{n}d-{int(a)}to1-{int(d)}deg" for n, a, d in CASES])
def test_box_rests_and_sleeps_on_halfspace_like_on_box_floor(n: int, aspect: float, degrees: float) -> None:
    y_half, awake_half, allowance = _settle(n, aspect, degrees, "halfspace")
    assert abs(y_half - SHORT) <= allowance + 1e-3, f"rests at {y_half:.4f}, half extent {SHORT}"
    assert not awake_half, "a resting box on a half-space should sleep"
    y_box, _, _ = _settle(n, aspect, degrees, "box")
    assert abs(y_half - y_box) <= 1e-3, f"half-space {y_half:.4f} vs box floor {y_box:.4f}"
