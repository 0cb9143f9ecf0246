"""The demo window's frame loop and overlays, on SDL's dummy driver with synthetic events: steps per
frame and the slow-motion mark, key presses from the event queue, short taps, recentring on a
scene switch, the help overlay's columns, the 3-D inset's slice outline, the title bar and the
smoothed step time.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
pygame = pytest.importorskip("pygame")

from ndrigid.core import DYNAMIC  # noqa: E402
from ndrigid.demo import app as demo_app  # noqa: E402
from ndrigid.demo.app import HELP, MAX_STEPS_PER_FRAME, SMOOTHING, STEP, App, clip_polygon  # noqa: E402
from ndrigid.demo.scenes import scene_names  # noqa: E402

SIZE = (480, 300)


@pytest.fixture
def pg():  # type: ignore[no-untyped-def]
    pygame.init()
    pygame.display.set_mode(SIZE)
    pygame.event.clear()
    yield pygame
    pygame.quit()


def key(pg, kind, k):  # type: ignore[no-untyped-def]
    return pg.event.Event(kind, key=k, mod=0, unicode="", scancode=0)


def test_a_long_frame_takes_at_most_two_steps_and_shows_slow_motion(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 3, "billiards", SIZE, 6)
    for _ in range(5):  # frames at the physics rate: one step each, no slow-motion mark
        assert app.frame(STEP, events=[])
        assert app.steps_last_frame == 1
    assert app.slow_motion() is None
    taken = []
    for _ in range(40):  # 100 ms frames would pay for 6 steps each
        app.frame(0.1, events=[])
        taken.append(app.steps_last_frame)
    assert max(taken) == MAX_STEPS_PER_FRAME == 2
    slow = app.slow_motion()
    assert slow is not None and 2.0 < slow <= 3.0 + 1e-9  # 0.1 s of wall time per 2/60 s simulated
    surf = pg.Surface(SIZE)
    app.draw(surf)  # the mark is drawn (on the title bar's right end)
    right = pg.surfarray.array3d(surf)[SIZE[0] // 2:, : app.title_height()].reshape(-1, 3)
    from ndrigid.demo.palette import SIGNAL_AMBER

    assert (np.abs(right.astype(int) - np.array(SIGNAL_AMBER)).sum(axis=1) < 40).any()
    for _ in range(60):  # back to real time: the mark goes away
        app.frame(STEP, events=[])
    assert app.slow_motion() is None


def test_a_key_down_in_the_event_queue_switches_scenes(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 2, "rockfall", SIZE, 3, headless=True)
    names = scene_names()
    pg.event.post(key(pg, pg.KEYDOWN, pg.K_2))
    assert app.frame(STEP)  # events=None: the frame reads pygame's queue
    assert app.scene_name == names[1]
    pg.event.post(key(pg, pg.KEYDOWN, pg.K_TAB))
    app.frame(STEP)
    assert app.scene_name == names[2]
    pg.event.post(key(pg, pg.KEYDOWN, pg.K_ESCAPE))
    assert not app.frame(STEP)


@pytest.mark.parametrize("dim", [3, 5], ids=["3d", "5d"])
def test_a_tap_shorter_than_a_frame_moves_the_slice(pg, dim: int) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, dim, "rockfall", SIZE, 3, headless=True)
    # pressed and released between two frames: get_pressed() says "up" when the frame looks
    app.frame(STEP, events=[key(pg, pg.KEYDOWN, pg.K_e), key(pg, pg.KEYUP, pg.K_e)])
    assert app.offsets[-1] > 0
    if dim == 5:
        app.frame(STEP, events=[key(pg, pg.KEYDOWN, pg.K_z), key(pg, pg.KEYUP, pg.K_z)])
        assert app.offsets[0] < 0
    yaw = app.yaw
    app.frame(STEP, events=[key(pg, pg.KEYDOWN, pg.K_LEFT), key(pg, pg.KEYUP, pg.K_LEFT)])
    assert app.yaw < yaw
    # many taps cannot push the slice out of the room
    for _ in range(200):
        app.frame(STEP, events=[key(pg, pg.KEYDOWN, pg.K_e)])
    lo, hi = app.info.bounds
    assert app.offsets[-1] == pytest.approx(hi[-1])


def test_switching_scenes_recentres_the_slice_and_camera(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 5, "rockfall", SIZE, 3, headless=True)
    app.offsets[:] = [0.3, -0.2]
    app.yaw, app.pitch = 1.7, -0.9
    app.handle_event(key(pg, pg.KEYDOWN, pg.K_2))
    assert app.scene_name == scene_names()[1]
    assert np.all(app.offsets == 0.0)
    assert (app.yaw, app.pitch) == (demo_app.YAW, demo_app.PITCH)


def test_help_columns_line_up(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 4, "billiards", SIZE, 3, headless=True)
    layout = app.help_layout()
    assert len(layout) == len(HELP)
    text_x = {t[0] for _, t in layout}
    key_x = {k[0] for k, _ in layout}
    assert len(text_x) == 1 and len(key_x) == 1
    widest = max(app.font.size(k)[0] for k, _ in HELP)
    assert min(text_x) > min(key_x) + widest  # no key runs into its text
    ys = [k[1] for k, _ in layout]
    assert ys == sorted(ys) and len(set(ys)) == len(ys)
    app.show_help = True
    app.draw(pg.Surface(SIZE))


def test_clip_polygon_keeps_the_part_inside() -> None:
    square = np.array([[-5.0, -5.0], [15.0, -5.0], [15.0, 5.0], [-5.0, 5.0]])
    out = clip_polygon(square, (0, 0), (10, 10))
    assert out.min(axis=0).tolist() == [0.0, 0.0] and out.max(axis=0).tolist() == [10.0, 5.0]
    x, y = out[:, 0], out[:, 1]
    assert 0.5 * abs(np.dot(x, np.roll(y, 1)) - np.dot(y, np.roll(x, 1))) == pytest.approx(50.0)
    assert len(clip_polygon(square + 100.0, (0, 0), (10, 10))) == 0


@pytest.mark.parametrize("scene", scene_names())
def test_inset_slice_outline_stays_in_the_inset(pg, scene: str) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 3, scene, SIZE, 3, headless=True)
    W, H = SIZE[0] // 3, SIZE[1] // 3
    lo, hi = app.info.bounds
    surf = pg.Surface(SIZE)
    for w in (lo[2], 0.0, hi[2]):
        app.offsets[0] = w
        app.draw(surf)
        ring = app.inset_ring
        assert ring is not None and len(ring) >= 3
        assert ring.min() >= 0 and np.all(ring.max(axis=0) <= [W - 1, H - 1])


@pytest.mark.parametrize("dim", [2, 3], ids=["2d", "3d"])
@pytest.mark.parametrize("scene", scene_names())
def test_bodies_start_below_the_title_bar(pg, scene: str, dim: int) -> None:  # type: ignore[no-untyped-def]
    """In the flat views (2-D, and the 3-D world's slice) the top of every dynamic body's
    bounding circle is below the title bar, at the start and while the conveyor spawns crates."""
    size = (960, 600)  # the window's default size
    app = App(pg, dim, scene, size, 18, headless=True)
    for f in range(240):
        if f % 60 == 0:
            sim = app.sim
            bar = app.title_height()
            for h in sim.bodies.handle.tolist():
                row = sim.row(h)
                if sim.bodies.kind[row] != DYNAMIC:
                    continue
                top = sim.position(h)[:2] + np.array([0.0, sim.bodies.radius[row]])
                assert app.to_screen(top)[1] > bar, f"body {h} reaches the title bar at frame {f}"
        app.advance(STEP)


def test_status_step_time_is_an_exponential_moving_average(pg) -> None:  # type: ignore[no-untyped-def]
    app = App(pg, 4, "rockfall", SIZE, 6, headless=True)
    for _ in range(30):
        app.advance(STEP)
    raw = app.step_times
    ema = raw[0]
    for x in raw[1:]:
        ema = (1 - SMOOTHING) * ema + SMOOTHING * x
    assert app.step_ema == pytest.approx(ema, rel=1e-12)
    assert min(raw) <= app.step_ema <= max(raw)
    app.switch("billiards")
    assert app.step_ema is None  # a new scene starts a new average
