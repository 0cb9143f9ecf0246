"""Demo input, driven with synthetic pygame events on SDL's dummy driver: picking a body under the
mouse (a raycast within the slice), dragging it on the spring, releasing it, and the keys.

Reference: the dragged body must end near the point under the mouse (a damped spring with the
body's weight compensated settles on its target, elementary dynamics), and a body the slice does
not show cannot be picked (common practice for slice views).
"""

from __future__ import annotations

import os

import numpy as np
import pytest

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
pygame = pytest.importorskip("pygame")

from ndrigid.demo.app import App  # noqa: E402
from test_demo import SIZE, _body_pixels  # noqa: E402


@pytest.fixture
def pg():  # type: ignore[no-untyped-def]
    pygame.init()
    yield pygame
    pygame.quit()


def _event(pg, kind, **kw):  # type: ignore[no-untyped-def]
    return pg.event.Event(kind, **kw)


@pytest.mark.parametrize("dim", [2, 3, 4], ids=["2d", "3d", "4d"])
def test_pick_drag_and_release(pg, dim: int) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, dim, "rockfall", SIZE, 3, headless=True)
    for _ in range(5):
        app.advance(1 / 60)
    targets = _body_pixels(app)
    assert targets, "no dynamic body visible to pick"
    handle, (x, y) = targets[0]
    assert app.handle_event(_event(pg, pg.MOUSEBUTTONDOWN, pos=(x, y), button=1))
    assert app.grab is not None and app.grab.handle == handle
    # drag 30 px up and hold for a second: the grabbed point follows the mouse
    goal = (x, y - 30)
    app.handle_event(_event(pg, pg.MOUSEMOTION, pos=goal, rel=(0, -30), buttons=(1, 0, 0)))
    g = app.grab
    sim = app.sim

    def grabbed_point() -> np.ndarray:
        return sim.position(handle) + sim.rotation(handle) @ g.local

    target = app.mouse_world(g.depth)
    assert target is not None
    start = np.linalg.norm(grabbed_point() - target)
    lift0 = grabbed_point()[1]
    for _ in range(60):
        app.advance(1 / 60)
    assert app.grab is g
    # the spring pulled the grabbed point most of the way to the mouse, and up
    assert np.linalg.norm(grabbed_point() - target) < 0.5 * start
    assert grabbed_point()[1] > lift0
    app.handle_event(_event(pg, pg.MOUSEBUTTONUP, pos=goal, button=1))
    assert app.grab is None


def test_keys_toggle_help_pause_and_reset(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 4, "billiards", SIZE, 3, headless=True)
    key = lambda k: app.handle_event(_event(pg, pg.KEYDOWN, key=k, mod=0, unicode=""))  # noqa: E731
    key(pg.K_h)
    assert app.show_help
    key(pg.K_SPACE)
    assert app.paused
    t = app.t
    app.advance(1 / 60)
    assert app.t == t  # paused: no step
    key(pg.K_PERIOD)
    app.advance(1 / 60)
    assert app.t > t  # single step while paused
    key(pg.K_TAB)
    assert app.scene_name != "billiards"
    assert not app.handle_event(_event(pg, pg.KEYDOWN, key=pg.K_ESCAPE, mod=0, unicode=""))
