"""Contact details for game code: what begin events carry (points, normal, approach speed, impulse),
the per-body contact query and the impulse between two bodies, checked against free fall and the
impulse-momentum theorem in 2-D to 5-D."""

from __future__ import annotations

import math

import numpy as np
import pytest
from ndrigid.core import Ball, Box, HalfSpace, InputError, Simulation

G = 9.81
DT = 1.0 / 60.0
DIMS = [2, 3, 4, 5]


def _up(n: int) -> np.ndarray:
    return np.eye(n)[1]


def _drop(dim: int, height: float, restitution: float) -> tuple[Simulation, int, int, float]:
    """A unit ball whose lowest point starts ``height`` above a half-space ground."""
    sim = Simulation(dim)
    ground = sim.add_body(HalfSpace.below(dim, 1, 0.0), kind="static", restitution=restitution)
    ball = sim.add_body(Ball(dim, 0.5), position=(height + 0.5) * _up(dim), restitution=restitution)
    return sim, ground, ball, sim.mass(ball)


def _begins(sim: Simulation, steps: int) -> list[tuple[int, object]]:
    out = []
    for i in range(steps):
        sim.step(DT)
        out += [(i, e) for e in sim.events if e.kind == "begin"]
    return out


@pytest.mark.parametrize("dim", DIMS)
def test_begin_event_of_a_dropped_ball_reports_free_fall_speed_normal_and_impulse(dim: int) -> None:
    """Free fall from h: impact speed sqrt(2 g h) (any mechanics text); a perfectly inelastic hit on
    a static ground takes the impulse m v (impulse-momentum theorem). Both within 2 %; the normal is
    the ground's, from the ground (handle_a, added first) toward the ball."""
    h = 10.0
    sim, ground, ball, m = _drop(dim, h, 0.0)
    begins = _begins(sim, 200)
    assert len(begins) == 1
    _, ev = begins[0]
    assert (ev.handle_a, ev.handle_b, ev.sensor) == (ground, ball, False)
    v = math.sqrt(2.0 * G * h)
    assert ev.approach_speed == pytest.approx(v, rel=0.02)
    assert ev.impulse == pytest.approx(m * v, rel=0.02)
    np.testing.assert_allclose(ev.normal, _up(dim), atol=1e-9)
    assert ev.points.shape == (1, dim)
    # midway between the surfaces: at most half a step's travel above the ground plane
    assert 0.0 <= ev.points[0, 1] <= 0.5 * v * DT
    assert not ev.points.flags.writeable


@pytest.mark.parametrize("dim", DIMS)
def test_every_bounce_above_the_threshold_reports_a_begin_with_the_restitution_impulse(dim: int) -> None:
    """A ball with e = 0.5 bounces off speculative contacts before it overlaps: each bounce is still a
    begin event, with impulse m (1 + e) v (Newton's law of restitution with the impulse-momentum
    theorem) within 2 %, and successive approach speeds falling by the factor e."""
    e = 0.5
    sim, ground, ball, m = _drop(dim, 2.0, e)
    begins = _begins(sim, 240)
    fast = [ev for _, ev in begins if ev.approach_speed > 2.0 * sim.settings.bounce_threshold]
    assert len(fast) >= 2
    for ev in fast:
        assert ev.impulse == pytest.approx(m * (1.0 + e) * ev.approach_speed, rel=0.02)
    assert fast[0].approach_speed == pytest.approx(math.sqrt(2.0 * G * 2.0), rel=0.02)
    assert fast[1].approach_speed == pytest.approx(e * fast[0].approach_speed, rel=0.05)
    assert all(ev.handle_a == ground for ev in fast)


@pytest.mark.parametrize("dim", DIMS)
def test_resting_ball_contacts_carry_its_weight(dim: int) -> None:
    """At rest the ground's impulse per step balances gravity: m g dt, upward (Newton's first law);
    the per-body query and the pair query agree and are equal and opposite (third law)."""
    sim, ground, ball, m = _drop(dim, 0.0, 0.0)
    for _ in range(30):
        sim.step(DT)
    assert not sim.is_awake(ball)  # asleep: the points it rests on are kept from its last solve
    got = sim.contacts_of(ball)
    assert len(got.other) >= 1 and set(got.other.tolist()) == {ground}
    np.testing.assert_allclose(got.normal, np.tile(-_up(dim), (len(got.other), 1)), atol=1e-9)
    total = got.impulse.sum(axis=0)
    np.testing.assert_allclose(total, m * G * DT * _up(dim), rtol=0.01, atol=1e-6 * m)
    assert got.normal_impulse.sum() == pytest.approx(m * G * DT, rel=0.01)
    np.testing.assert_allclose(sim.impulse_between(ground, ball), total, atol=1e-12)
    np.testing.assert_allclose(sim.impulse_between(ball, ground), -total, atol=1e-12)
    on_ground = sim.contacts_of(ground)
    np.testing.assert_allclose(on_ground.impulse.sum(axis=0), -total, atol=1e-12)
    np.testing.assert_allclose(on_ground.normal, _up(dim)[None, :].repeat(len(on_ground.other), 0),
                               atol=1e-9)


@pytest.mark.parametrize("dim", DIMS)
def test_sliding_box_feels_coulomb_friction_against_its_motion(dim: int) -> None:
    """A box sliding along e_0 on the ground: the friction impulse per step is mu m g dt against the
    motion (Coulomb's law of kinetic friction), the normal impulse m g dt."""
    mu = 0.3
    sim = Simulation(dim)
    ground = sim.add_body(HalfSpace.below(dim, 1, 0.0), kind="static", friction=mu)
    pos = 0.25 * _up(dim)
    box = sim.add_body(Box([0.25] * dim), position=pos, friction=mu, velocity=5.0 * np.eye(dim)[0])
    m = sim.mass(box)
    for _ in range(20):
        sim.step(DT)
    assert sim.velocity(box)[0] > 1.0  # still sliding
    imp = sim.impulse_between(ground, box)
    assert imp[0] == pytest.approx(-mu * m * G * DT, rel=0.02)
    assert imp[1] == pytest.approx(m * G * DT, rel=0.02)
    got = sim.contacts_of(box)
    assert np.all(got.normal_impulse >= 0.0)
    np.testing.assert_allclose(got.impulse.sum(axis=0), imp, atol=1e-12)


def test_contact_queries_name_bad_handles_and_are_empty_before_a_step() -> None:
    sim = Simulation(3)
    a = sim.add_body(Ball(3, 0.5))
    b = sim.add_body(Ball(3, 0.5), position=[5.0, 0.0, 0.0])
    got = sim.contacts_of(a)
    assert got.other.shape == (0,) and got.point.shape == (0, 3)
    np.testing.assert_array_equal(sim.impulse_between(a, b), np.zeros(3))
    with pytest.raises(InputError, match="two different bodies"):
        sim.impulse_between(a, a)
    with pytest.raises(InputError):
        sim.contacts_of(99)


@pytest.mark.parametrize("dim", [3, 4])
def test_events_of_a_pair_alternate_begin_and_end(dim: int) -> None:
    """Over a bouncing ball's life the events of its pair alternate begin, end, begin ... (the
    held begin of a speculative meeting comes before its end), and a body removed while its
    begin is held reports no end for a contact it never began."""
    sim, ground, ball, _ = _drop(dim, 2.0, 0.6)
    kinds = []
    for _ in range(300):
        sim.step(DT)
        kinds += [e.kind for e in sim.events if {e.handle_a, e.handle_b} == {ground, ball}]
    assert kinds[0] == "begin" and len(kinds) >= 4
    assert all(a != b for a, b in zip(kinds, kinds[1:], strict=False))
    sim, ground, ball, _ = _drop(dim, 2.0, 0.0)
    while not sim.caches.get("held_begins"):
        sim.step(DT)
        assert not sim.events
    sim.remove_body(ball)
    sim.step(DT)
    assert [e for e in sim.events if ball in (e.handle_a, e.handle_b)] == []
