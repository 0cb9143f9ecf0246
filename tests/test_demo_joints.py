"""The drawbridge scene (ndrigid.demo.scenes.drawbridge): joints in a demo scene, 2-D to 5-D.

One run per dimension of 750 frames (12.5 s at 60 Hz: the winch lowers the deck from the start,
raises it from RAISE_AT and lowers it again from LOWER_AT), physics only, as the window runs it.
Checked against the scene's own physical facts, not recorded outputs:

* every dynamic body stays finite and inside the room;
* every joint holds: the anchors of the two hinges stay within 1 cm, the ropes never stretch
  1 cm past their length (``joint_error``);
* the deck's hinge angle (``joint_angle``) stays within the limits the scene set, and the motor
  takes it from the lowered limit to the raised one and back;
* the hinge angle is the deck's turn: its long axis, read from its pose, points along
  (cos a, -sin a) in the (e_0, e_1) plane (the far end rises as the deck turns about its
  castle-side edge) and has no part outside that plane (trigonometry of a plane rotation);
* kegs cross the lowered bridge and push the gate open, which then swings shut within its
  limits;
* key B (the scene's own key, through the window's event handler) starts the deck up at once.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import DYNAMIC
from ndrigid.demo import scenes
from ndrigid.demo.scenes import FRAME, build_scene
from ndrigid.demo.world import DemoWorld

FRAMES = 750
BODIES = 18
HOLD = 0.01  # m: the most a joint may come apart
LIMIT_TOL = 0.02  # rad: the most the deck may pass a limit for a frame
NEAR = 0.05  # rad: "at a limit"

_runs: dict[int, dict] = {}


def run(dim: int) -> dict:
    """One run per dimension, shared by the tests below: what the checks need, frame by frame."""
    if dim in _runs:
        return _runs[dim]
    world = DemoWorld(dim)
    info = build_scene("drawbridge", world, BODIES)
    sim, st = world.sim, info.state
    joints = [st["hinge"], st["gate_hinge"], *st["ropes"]]
    deck = world.physics.handle_of(st["deck"])
    lo, hi = info.bounds
    angle, gate, err, turn, off_plane, escaped = [], [], [], [], [], []
    for f in range(FRAMES):
        info.tick(world, f * FRAME)
        world.step(None)
        angle.append(sim.joint_angle(st["hinge"]))
        gate.append(sim.joint_angle(st["gate_hinge"]))
        err.append([sim.joint_error(j) for j in joints])
        axis = sim.rotation(deck)[:, 0]  # the deck's long axis, far end -> hinge
        turn.append(float(np.arctan2(-axis[1], axis[0])))
        off_plane.append(float(np.linalg.norm(axis[2:])))
        if f % 30 == 29:
            for h in sim.bodies.handle.tolist():
                if sim.bodies.kind[sim.row(h)] == DYNAMIC:
                    p = sim.position(h)
                    if not (np.all(np.isfinite(p)) and np.all(p > lo) and np.all(p < hi)):
                        escaped.append((f, h))
    world.sync()
    out = {"world": world, "info": info, "angle": np.array(angle), "gate": np.array(gate),
           "err": np.array(err), "turn": np.array(turn), "off_plane": np.array(off_plane),
           "escaped": escaped}
    _runs[dim] = out
    return out


@dims()
def test_drawbridge_stays_finite_and_in_its_room(dim: int) -> None:
    r = run(dim)
    sim = r["world"].sim
    assert np.all(np.isfinite(sim.positions)) and np.all(np.isfinite(sim.velocities))
    assert r["escaped"] == [], f"bodies outside the room at (frame, handle): {r['escaped'][:3]}"


@dims()
def test_drawbridge_joints_hold(dim: int) -> None:
    err = run(dim)["err"]
    worst = err.max(axis=0)
    assert np.all(worst < HOLD), f"worst joint errors (deck hinge, gate hinge, ropes...): {worst.tolist()} m"


@dims()
def test_deck_angle_stays_within_its_limits_and_the_motor_moves_it_both_ways(dim: int) -> None:
    r = run(dim)
    st, a = r["info"].state, r["angle"]
    lowered, raised = st["lowered"], st["raised"]
    assert lowered < raised
    assert a.min() >= lowered - LIMIT_TOL and a.max() <= raised + LIMIT_TOL, (a.min(), a.max())
    assert abs(a[0] - lowered) < NEAR  # it starts down, on its seat
    top = int(np.argmax(a))
    assert a[top] > raised - NEAR, f"the winch raised the deck only to {a[top]:.3f} rad of {raised}"
    assert a[top:].min() < lowered + NEAR, "the winch did not lower the deck again"
    assert abs(a[-1] - lowered) < NEAR
    # the motor drives it at its speed, not in a jump: the steepest change per frame is about
    # BRIDGE_SPEED / 60 (the limits stop it, they do not throw it back)
    assert np.abs(np.diff(a)).max() < 2.0 * scenes.BRIDGE_SPEED * FRAME


@dims()
def test_hinge_angle_is_the_decks_turn_in_its_plane(dim: int) -> None:
    r = run(dim)
    np.testing.assert_allclose(r["turn"], r["angle"], atol=2e-3)
    assert r["off_plane"].max() < 2e-3  # the hinge keeps the deck in the (e_0, e_1) plane


@dims()
def test_kegs_cross_the_bridge_and_the_gate_swings_open_and_shut(dim: int) -> None:
    r = run(dim)
    world, st, g = r["world"], r["info"].state, r["gate"]
    done, released = r["info"].progress(world)
    assert released >= 4 and done >= 3, f"{done} of {released} kegs through the gate"
    # every keg counted through the gate is past it, in the castle yard (none came back)
    x = np.array([world.sim.position(world.physics.handle_of(e))[0] for e in st["counted"]])
    assert np.all(x > st["gate_x"])
    lower, upper = -0.05, 1.35  # the gate hinge's limits (opens inwards only)
    assert g.min() >= lower - LIMIT_TOL and g.max() <= upper + LIMIT_TOL
    assert g.max() > 0.3, "no keg pushed the gate open"
    assert abs(g[-1]) < 0.1, f"the gate hangs open at {g[-1]:.3f} rad"


@dims(2, 5)
def test_key_b_starts_the_deck_up_at_once(dim: int) -> None:
    """In the window: B goes to the scene's own key (SceneInfo.keys) and the winch starts
    raising the deck long before the cycle would (RAISE_AT)."""
    os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    pg = pytest.importorskip("pygame")
    from ndrigid.demo.app import STEP, App

    pg.init()
    try:
        app = App(pg, dim, "drawbridge", (320, 200), 3, headless=True)
        hinge = app.info.state["hinge"]
        for _ in range(30):
            app.advance(STEP)
        assert app.sim.joint_angle(hinge) < NEAR
        app.handle_event(pg.event.Event(pg.KEYDOWN, key=pg.K_b, mod=0, unicode="b"))
        steps = int(1.2 / STEP)
        for _ in range(steps):
            app.advance(STEP)
        assert app.t < scenes.RAISE_AT
        # 1.2 s at BRIDGE_SPEED: the deck is most of the way up (at least half of 0.72 rad)
        assert app.sim.joint_angle(hinge) > 0.5 * scenes.BRIDGE_SPEED * 1.2
        app.handle_event(pg.event.Event(pg.KEYDOWN, key=pg.K_b, mod=0, unicode="b"))
        before = app.sim.joint_angle(hinge)
        for _ in range(30):
            app.advance(STEP)
        assert app.sim.joint_angle(hinge) < before - 0.1  # and B again brings it down
    finally:
        pg.quit()


@dims(2, 4)
def test_the_ropes_are_drawn(dim: int) -> None:
    """The scene's lines (the ropes from the gatehouse to the deck) are drawn over the bodies:
    the frame has pixels of the rope colour, and none without them."""
    os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    pg = pytest.importorskip("pygame")
    from ndrigid.demo import palette as P
    from ndrigid.demo.app import App

    pg.init()
    try:
        app = App(pg, dim, "drawbridge", (480, 300), 3, headless=True)
        surf = pg.Surface((480, 300))

        def rope_pixels() -> int:
            app.draw_scene(surf)
            img = pg.surfarray.array3d(surf).reshape(-1, 3).astype(int)
            return int(np.sum(np.abs(img - np.array(P.ROPE_HEMP)).sum(axis=1) < 12))

        drawn = rope_pixels()
        lines, app.info.lines = app.info.lines, None
        assert rope_pixels() < drawn // 4 and drawn > 40
        app.info.lines = lines
    finally:
        pg.quit()
