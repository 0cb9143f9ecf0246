"""The pygame drawing helper (ndrigid.adapters.pygame_draw), rendered headless on SDL's dummy driver:
the painted pixels cover the projected area of the sections it draws (shoelace formula for 2-D
sections, the convex hull of the projected vertices for a convex 3-D section seen orthographically,
pi r^2 for a disc), within 2 %."""

from __future__ import annotations

import os

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")

import numpy as np  # noqa: E402
import pygame  # noqa: E402
import pytest  # noqa: E402
from ndrigid.adapters.loop import FixedStepper  # noqa: E402
from ndrigid.adapters.pygame_draw import SliceView  # noqa: E402
from ndrigid.core import Algebra, Ball, Box, HalfSpace, InputError, Simulation  # noqa: E402
from ndrigid.core.geometry.slicing import axis_flat, slice_shape  # noqa: E402
from scipy.spatial import ConvexHull  # noqa: E402

RED = (200, 50, 50)
BLACK = (0, 0, 0)
SIZE = (480, 360)


def _count(surface: pygame.Surface, colour: tuple[int, int, int] | None) -> int:
    px = pygame.surfarray.array3d(surface).reshape(-1, 3)
    if colour is None:
        return int(np.count_nonzero(np.any(px != 0, axis=1)))
    return int(np.count_nonzero(np.all(px == np.array(colour), axis=1)))


def _shoelace(P: np.ndarray) -> float:
    x, y = P[:, 0], P[:, 1]
    return 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


def test_a_2d_section_fills_its_projected_area() -> None:
    """A turned 3-D box cut by x_2 = 0.1: the polygon's pixels equal its shoelace area times the
    squared scale within 2 %."""
    pygame.init()
    alg = Algebra(3)
    R = alg.rotor([0.4, 0.3, -0.2])
    sim = Simulation(3, gravity=np.zeros(3))
    h = sim.add_body(Box([1.5, 1.0, 0.8]), rotor=R, position=[0.3, 0.2, 0.0])
    flat = axis_flat(3, [0.1])
    view = SliceView(sim, flat, span=8.0, outline=None, colours={h: RED})
    surf = pygame.Surface(SIZE)
    surf.fill(BLACK)
    assert view.draw(surf) == 1
    sec = slice_shape(sim.shape(h), sim.position(h), sim.rotor(h), flat)[0]
    area = _shoelace(sec.vertices[sec.outline]) * view.scale(surf) ** 2
    assert _count(surf, RED) == pytest.approx(area, rel=0.02)


def test_a_disc_and_a_floor_region() -> None:
    """A ball of radius 1 cut through its centre covers pi r^2 pixels (within 2 %); a floor is
    drawn as the region below its line, clipped to the view."""
    pygame.init()
    sim = Simulation(2, gravity=np.zeros(2))
    ball = sim.add_body(Ball(2, 1.0), position=[0.0, 1.5])
    floor = sim.add_body(HalfSpace.below(2, 1, -1.0), kind="static")
    view = SliceView(sim, span=8.0, outline=None, colours={ball: RED, floor: (40, 200, 40)})
    surf = pygame.Surface(SIZE)
    surf.fill(BLACK)
    view.draw(surf)
    s = view.scale(surf)
    assert _count(surf, RED) == pytest.approx(np.pi * s * s, rel=0.02)
    below = (SIZE[1] / 2 + 1.0 * s)  # pixel row of y = -1
    assert _count(surf, (40, 200, 40)) == pytest.approx(SIZE[0] * (SIZE[1] - below), rel=0.02)


@pytest.mark.parametrize("dim", [4, 5])
def test_a_3d_section_covers_the_hull_of_its_projected_vertices(dim: int) -> None:
    """A turned box in 4-D / 5-D, sliced to 3-D and seen orthographically: the shaded faces cover
    the convex hull of the projected section vertices (scipy ConvexHull area) within 2 %."""
    pygame.init()
    alg = Algebra(dim)
    R = alg.rotor(np.linspace(0.15, 0.5, alg.k))
    sim = Simulation(dim, gravity=np.zeros(dim))
    h = sim.add_body(Box(np.linspace(1.0, 1.4, dim)), rotor=R)
    flat = axis_flat(dim, [0.05] * (dim - 3))
    view = SliceView(sim, flat, span=10.0, outline=None, perspective=False, colours={h: RED})
    surf = pygame.Surface(SIZE)
    surf.fill(BLACK)
    view.draw(surf)
    sec = slice_shape(sim.shape(h), sim.position(h), sim.rotor(h), flat)[0]
    px, _ = view.project(surf, sec.vertices)
    assert _count(surf, None) == pytest.approx(ConvexHull(px).volume, rel=0.02)


def test_interpolated_poses_from_the_fixed_step_helper_are_drawn() -> None:
    """Drawing with ``FixedStepper.interpolated()`` puts a moving ball between its last two
    positions: one step taken (0 -> 0.1 m at 6 m/s) and half a step banked, the disc's centre is
    half way, at 0.05 m (to a pixel)."""
    pygame.init()
    sim = Simulation(2, gravity=np.zeros(2))
    ball = sim.add_body(Ball(2, 0.5), velocity=[6.0, 0.0])
    stepper = FixedStepper(sim)
    stepper.advance(1.5 / 60.0)  # one step taken, half a step banked
    view = SliceView(sim, span=8.0, outline=None, colours={ball: RED})
    surf = pygame.Surface(SIZE)
    surf.fill(BLACK)
    view.draw(surf, poses=stepper.interpolated())
    xs = np.nonzero(np.all(pygame.surfarray.array3d(surf) == np.array(RED), axis=2))[0]
    centre_px = 0.5 * (xs.min() + xs.max())
    expected = SIZE[0] / 2 + 0.05 * view.scale(surf)
    assert abs(centre_px - expected) <= 1.0


def test_bad_views_are_refused() -> None:
    sim = Simulation(4)
    with pytest.raises(InputError, match="2-D or 3-D"):
        SliceView(sim, axis_flat(4, []))
    with pytest.raises(InputError, match="span"):
        SliceView(sim, span=0.0)
