"""Contact manifolds of the simple pair kinds (ball/ball, ball/half-space, ball/box, box/half-space,
polytope/half-space, compounds, sensors) against closed forms and brute force.

References:
* ball/ball and ball/plane: distance of centres, and of a centre to a plane, u . c - d (elementary
  analytic geometry; closed form);
* a box resting face down on a plane touches it at the 2^(n-1) corners of its bottom facet, at the
  depth of the overlap (a square in 3-D: 4 corners; a cube in 4-D: 8) (closed form);
* vertex depths of tilted boxes and polytopes: brute force over the corners, enumerated here with
  itertools.product independently of the kernel's bit order;
* ball/box closest point: scipy.optimize.minimize (L-BFGS-B over the box coordinates) for a centre
  outside; for a centre inside, the penetration is the distance to the nearest face (closed form);
* speculative contacts: kept while the gap is below the margin (speculative contacts, common practice).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.collision import broadphase as bp
from ndrigid.core.collision import narrowphase as nph
from ndrigid.core.geometry.polytopes import orthoplex
from ndrigid.core.geometry.shapes import Ball, Box, Compound, HalfSpace
from ndrigid.core.state.contacts import ContactSet
from ndrigid.core.world.simulation import Settings, Simulation
from scipy.optimize import minimize

DT = 1.0 / 60.0


def _up(n: int) -> np.ndarray:
    u = np.zeros(n)
    u[1] = 1.0
    return u


def _collide(sim: Simulation, dt: float = DT) -> tuple[ContactSet, np.ndarray, np.ndarray]:
    b = sim.bodies
    pairs = bp.find_pairs(sim.alg, b, sim.info.shapes, sim.settings, sim.caches, dt)
    return nph.find_contacts(sim.alg, b, pairs, sim.info.shapes, sim.settings, sim.caches, dt)


def _oriented(c: ContactSet, a: int, b: int) -> tuple[np.ndarray, np.ndarray]:
    """Normals oriented from row a to row b, and the mask of contacts of that pair."""
    sel = ((c.body_a == a) & (c.body_b == b)) | ((c.body_a == b) & (c.body_b == a))
    sign = np.where(c.body_a[sel] == a, 1.0, -1.0)
    return c.normal[sel] * sign[:, None], sel


def _corners(h: np.ndarray) -> np.ndarray:
    return np.array(list(itertools.product(*[(-x, x) for x in h])))


@dims()
def test_box_face_down_on_plane_gives_its_bottom_corners(dim: int) -> None:
    """3-D: the 4 bottom corners, 4-D: 8; 5-D: 8 of the 16 (cap), spanning the whole bottom face."""
    sim = Simulation(dim)
    sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    h = np.linspace(0.3, 0.6, dim)
    pos = np.zeros(dim)
    pos[1] = h[1] - 0.02  # 2 cm into the floor
    sim.add_body(Box(h), position=pos)
    c, touching, _ = _collide(sim)
    assert touching.tolist() == [[0, 1]]
    expected = min(2 ** (dim - 1), 8)
    assert c.count == expected
    normal, _ = _oriented(c, 1, 0)  # from the box down into the floor
    np.testing.assert_allclose(normal, np.tile(-_up(dim), (c.count, 1)), atol=1e-12)
    np.testing.assert_allclose(c.depth, 0.02, atol=1e-12)
    # points midway between the corner (y = -0.02) and the floor (y = 0)
    np.testing.assert_allclose(c.point[:, 1], -0.01, atol=1e-12)
    tangent = [i for i in range(dim) if i != 1]
    bottom = {tuple(np.round(v, 9)) for v in _corners(h[tangent])}
    assert {tuple(np.round(p, 9)) for p in c.point[:, tangent]} <= bottom
    # the kept points span the face: every tangent extreme is reached
    np.testing.assert_allclose(c.point[:, tangent].max(axis=0), h[tangent], atol=1e-12)
    np.testing.assert_allclose(c.point[:, tangent].min(axis=0), -h[tangent], atol=1e-12)
    assert len(set(c.feature.tolist())) == c.count


@dims()
def test_tilted_box_on_tilted_plane_matches_brute_force_corners(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    alg = sim.alg
    u = rng.normal(size=dim)
    u /= np.linalg.norm(u)
    plane_pos = rng.normal(size=dim)
    plane_rot = alg.rotor(rng.normal(size=alg.k))
    sim.add_body(HalfSpace(u, 0.3), kind="static", position=plane_pos, rotor=plane_rot)
    M_plane = alg.rotor_to_matrix(plane_rot)
    uw = M_plane @ u
    dw = 0.3 + uw @ plane_pos
    h = rng.uniform(0.2, 0.5, dim)
    R = alg.rotor(0.1 * rng.normal(size=alg.k))
    M = alg.rotor_to_matrix(R)
    pos = (dw + 0.05) * uw + rng.normal(size=dim) * 0.1
    pos += (dw + 0.05 - uw @ pos) * uw  # centre 5 cm above the plane: deep corners below it
    sim.add_body(Box(h), position=pos, rotor=R)
    c, _, _ = _collide(sim)
    local = _corners(h)
    corners = pos + local @ M.T
    height = corners @ uw - dw
    margin = sim.settings.speculative_margin
    # candidates are the corners of the incident face: the face through the deepest corner whose
    # outward normal is most anti-parallel to the plane's (reference/incident face construction)
    deepest = local[np.argmin(height)]
    axis = int(np.argmax(np.abs(M.T @ uw)))
    on_face = np.isclose(local[:, axis], deepest[axis])
    within = np.sort(-height[(height < margin) & on_face])[::-1]
    cap = min(2 ** (dim - 1), 8)
    assert c.count == min(cap, within.size)
    assert c.depth.max() == pytest.approx(within[0], abs=1e-12)  # the deepest corner is always kept
    # every reported depth is one of the brute-force corner depths, at that corner's position
    for p, d in zip(c.point, c.depth, strict=True):
        k = int(np.argmin(np.linalg.norm(corners - (p - 0.5 * d * uw), axis=1)))
        assert -height[k] == pytest.approx(d, abs=1e-12)
    normal, _ = _oriented(c, 1, 0)
    np.testing.assert_allclose(normal, np.tile(-uw, (c.count, 1)), atol=1e-12)


@dims()
def test_ball_ball_closed_form(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    ca = rng.normal(size=dim)
    d = rng.normal(size=dim)
    d /= np.linalg.norm(d)
    cb = ca + 0.7 * d
    sim.add_body(Ball(dim, 0.5), position=ca)
    sim.add_body(Ball(dim, 0.3), position=cb)
    c, touching, _ = _collide(sim)
    assert c.count == 1 and touching.tolist() == [[0, 1]]
    normal, _ = _oriented(c, 0, 1)
    np.testing.assert_allclose(normal[0], d, atol=1e-12)
    assert c.depth[0] == pytest.approx(0.5 + 0.3 - 0.7, abs=1e-12)
    # midway between A's surface point ca + 0.5 d and B's cb - 0.3 d
    np.testing.assert_allclose(c.point[0], 0.5 * (ca + 0.5 * d + cb - 0.3 * d), atol=1e-12)
    assert c.feature[0] == 0


@dims()
def test_ball_on_rotated_plane_closed_form(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    alg = sim.alg
    u = rng.normal(size=dim)
    R = alg.rotor(rng.normal(size=alg.k))
    p = rng.normal(size=dim)
    sim.add_body(HalfSpace(u, -0.2), kind="static", position=p, rotor=R)
    uw = alg.rotor_to_matrix(R) @ (u / np.linalg.norm(u))
    dw = -0.2 / np.linalg.norm(u) + uw @ p
    centre = rng.normal(size=dim)
    centre += (dw + 0.4 - uw @ centre) * uw  # 0.4 m above the plane
    sim.add_body(Ball(dim, 0.45), position=centre)
    c, touching, _ = _collide(sim)
    assert c.count == 1 and touching.tolist() == [[0, 1]]
    normal, _ = _oriented(c, 1, 0)
    np.testing.assert_allclose(normal[0], -uw, atol=1e-12)
    assert c.depth[0] == pytest.approx(0.05, abs=1e-12)
    np.testing.assert_allclose(c.point[0], centre - uw * (0.4 + 0.45) / 2, atol=1e-12)


@dims()
def test_speculative_contact_for_fast_ball_only(dim: int) -> None:
    """Gap 0.5 m: at 60 m/s toward the plane the margin 0.1 + 60/60 m keeps the contact (depth -0.5);
    at rest it is beyond the 0.1 m speculative distance and absent."""
    for speed, expected in ((60.0, 1), (0.0, 0)):
        sim = Simulation(dim)
        sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
        sim.add_body(Ball(dim, 0.25), position=0.75 * _up(dim), velocity=-speed * _up(dim))
        c, touching, _ = _collide(sim)
        assert c.count == expected
        assert len(touching) == 0
        if expected:
            assert c.depth[0] == pytest.approx(-0.5, abs=1e-12)


def _closest_on_box(centre: np.ndarray, pos: np.ndarray, M: np.ndarray, h: np.ndarray) -> np.ndarray:
    def f(y: np.ndarray) -> float:
        r = pos + M @ y - centre
        return float(r @ r)

    res = minimize(f, np.zeros(len(h)), method="L-BFGS-B", bounds=list(zip(-h, h, strict=True)),
                   options={"ftol": 1e-15, "gtol": 1e-12})
    return pos + M @ res.x


@dims()
def test_ball_box_outside_matches_scipy_minimize(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    alg = sim.alg
    h = rng.uniform(0.3, 0.7, dim)
    R = alg.rotor(rng.normal(size=alg.k))
    M = alg.rotor_to_matrix(R)
    sim.add_body(Box(h), rotor=R, kind="static")
    checked = 0
    for trial in range(4):
        direction = rng.normal(size=dim)
        local = np.sign(direction) * h * rng.uniform(0.5, 1.5, dim)
        centre = M @ local + 0.25 * direction / np.linalg.norm(direction)
        ref = _closest_on_box(centre, np.zeros(dim), M, h)
        dist = np.linalg.norm(ref - centre)
        if dist < 1e-3:
            continue
        checked += 1
        r = dist + 0.03
        ball = sim.add_body(Ball(dim, r), position=centre)
        c, _, _ = _collide(sim)
        row = sim.row(ball)
        normal, sel = _oriented(c, row, 0)
        assert sel.sum() == 1, trial
        assert c.depth[sel][0] == pytest.approx(0.03, abs=1e-6)
        np.testing.assert_allclose(normal[0], (ref - centre) / dist, atol=1e-5)
        np.testing.assert_allclose(c.point[sel][0], 0.5 * (ref + centre + normal[0] * r), atol=1e-5)
        sim.remove_body(ball)
    assert checked >= 2


@dims()
def test_ball_centre_inside_box_pushes_out_through_nearest_face(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    alg = sim.alg
    h = rng.uniform(0.4, 0.8, dim)
    R = alg.rotor(rng.normal(size=alg.k))
    M = alg.rotor_to_matrix(R)
    sim.add_body(Box(h), rotor=R, kind="static")
    y = rng.uniform(-0.6, 0.6, dim) * h  # inside
    face_dist = h - np.abs(y)
    ax = int(np.argmin(face_dist))
    sim.add_body(Ball(dim, 0.1), position=M @ y)
    c, _, _ = _collide(sim)
    assert c.count == 1
    assert c.depth[0] == pytest.approx(0.1 + face_dist[ax], abs=1e-12)
    outward = M[:, ax] * np.sign(y[ax])
    normal, _ = _oriented(c, 1, 0)  # ball to box: opposite the face's outward normal
    np.testing.assert_allclose(normal[0], -outward, atol=1e-12)


def test_ball_box_feature_names_the_touched_feature() -> None:
    """Face, edge and corner regions of a 3-D box give distinct, stable feature ids."""
    sim = Simulation(3)
    sim.add_body(Box([0.5, 0.5, 0.5]), kind="static")
    feats = []
    for p in ([0.0, 0.8, 0.0], [0.1, 0.8, 0.05], [0.7, 0.7, 0.0], [0.7, 0.7, 0.7]):
        h = sim.add_body(Ball(3, 0.5), position=p)
        c, _, _ = _collide(sim)
        feats.append(int(c.feature[0]))
        sim.remove_body(h)
    assert feats[0] == feats[1]  # same face, slightly moved
    assert len(set(feats[1:])) == 3


@dims()
def test_polytope_on_plane_matches_brute_force_vertices(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    alg = sim.alg
    sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    shape = orthoplex(dim, circumradius=0.5)
    R = alg.rotor(0.3 * rng.normal(size=alg.k))
    M = alg.rotor_to_matrix(R)
    pos = 0.45 * _up(dim)
    sim.add_body(shape, position=pos, rotor=R)
    c, touching, _ = _collide(sim)
    world = pos + np.asarray(shape.vertices) @ M.T
    height = world[:, 1]
    want = sorted(np.round(-height[height < sim.settings.speculative_margin], 12).tolist())
    assert sorted(np.round(c.depth, 12).tolist()) == want[-min(len(want), 8):]
    assert touching.tolist() == ([[0, 1]] if height.min() <= 0 else [])
    np.testing.assert_allclose(c.feature, [int(np.argmin(np.abs(height + d))) for d in c.depth])


@dims()
def test_compound_pieces_collide_with_composed_poses(dim: int, rng: np.random.Generator) -> None:
    """A dumbbell (two balls and a box bar) lying on the floor: each ball touches at its own lowest
    point; the piece poses are composed with the body pose (x = p + M t)."""
    sim = Simulation(dim)
    alg = sim.alg
    sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    t = np.zeros(dim)
    t[0] = 0.6
    bar = np.full(dim, 0.05)
    bar[0] = 0.6
    comp = Compound([(Ball(dim, 0.2), t), (Ball(dim, 0.2), -t), (Box(bar), np.zeros(dim))])
    # a turn in the last plane (e_{n-2}, e_{n-1}) leaves e_0 and e_1 alone (2-D: no such plane)
    R = alg.rotor(0.5 * np.eye(alg.k)[alg.k - 1] * (dim > 2))
    M = alg.rotor_to_matrix(R)
    pos = 0.19 * _up(dim)
    sim.add_body(comp, position=pos, rotor=R)
    c, touching, _ = _collide(sim)
    assert touching.tolist() == [[0, 1]]
    deep = c.depth > 0
    assert deep.sum() == 2
    centres = pos + np.stack([M @ t, -M @ t])
    lows = centres - 0.2 * _up(dim)
    got = c.point[deep] - 0.5 * c.depth[deep][:, None] * _up(dim)  # back to the ball's lowest point
    order = np.argsort(got[:, 0])
    np.testing.assert_allclose(got[order], lows[np.argsort(lows[:, 0])], atol=1e-12)
    np.testing.assert_allclose(c.depth[deep], 0.01, atol=1e-12)
    assert len(set(c.feature.tolist())) == c.count  # piece indices keep features distinct


@dims(2, 4)
def test_sensor_reports_overlap_without_contacts(dim: int) -> None:
    sim = Simulation(dim)
    sim.add_body(Box(np.full(dim, 0.5)), kind="static", sensor=True)
    sim.add_body(Ball(dim, 0.3), position=0.7 * _up(dim))
    sim.add_body(Ball(dim, 0.3), position=3.0 * _up(dim))
    c, touching, sensors = _collide(sim)
    assert c.count == 0
    assert touching.tolist() == []
    assert sensors.tolist() == [[0, 1]]


@dims(3, 4)
def test_feature_keys_are_stable_while_the_box_slides(dim: int) -> None:
    sim = Simulation(dim)
    sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    pos = 0.49 * _up(dim)
    h = sim.add_body(Box(np.full(dim, 0.5)), position=pos)
    c1, _, _ = _collide(sim)
    sim.set_pose(h, position=pos + 0.01 * np.eye(dim)[0])
    c2, _, _ = _collide(sim)
    assert sorted(c1.key.tolist()) == sorted(c2.key.tolist())


def test_touching_persists_while_both_bodies_are_inert() -> None:
    """A body that falls asleep on the floor is no longer collided, but still counts as touching
    (no spurious end event); waking it collides it again."""
    sim = Simulation(3)
    sim.add_body(HalfSpace(_up(3), 0.0), kind="static")
    sim.add_body(Ball(3, 0.5), position=0.49 * _up(3))
    _, touching, _ = _collide(sim)
    assert touching.tolist() == [[0, 1]]
    sim.bodies.awake[1] = False
    c, touching, _ = _collide(sim)
    assert c.count == 0 and touching.tolist() == [[0, 1]]
    sim.bodies.awake[1] = True
    sim.set_pose(sim.handles[1], position=2.0 * _up(3))
    _, touching, _ = _collide(sim)
    assert touching.tolist() == []


def test_contact_rows_sorted_by_manifold_with_materials() -> None:
    sim = Simulation(2, settings=Settings())
    sim.add_body(HalfSpace(_up(2), 0.0), kind="static", friction=0.81, restitution=0.2)
    sim.add_body(Box([0.5, 0.5]), position=[0, 0.49], friction=0.25, restitution=0.6)
    sim.add_body(Ball(2, 0.5), position=[3, 0.49], friction=0.16, restitution=0.1)
    c, _, _ = _collide(sim)
    assert np.all(np.diff(c.manifold) >= 0)
    assert c.manifold.max() == 1
    np.testing.assert_allclose(c.friction[c.body_b == 1], np.sqrt(0.81 * 0.25))  # geometric mean
    np.testing.assert_allclose(c.restitution[c.body_b == 2], 0.2)  # the larger coefficient


@dims(2, 3, 4)
def test_contact_events_through_the_simulation(dim: int) -> None:
    """A ball dropped on the floor reports one begin event, none while it rests and sleeps, and an
    end event once it is lifted away (events of core/world/stages.py from the touching pairs)."""
    sim = Simulation(dim)
    floor = sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    ball = sim.add_body(Ball(dim, 0.5), position=1.0 * _up(dim))
    events = []
    for _ in range(150):
        sim.step()
        events += sim.events
    assert [(e.kind, e.handle_a, e.handle_b, e.sensor) for e in events] == [("begin", floor, ball, False)]
    assert not sim.is_awake(ball)  # asleep on the floor, still touching: no end event
    sim.set_pose(ball, position=5.0 * _up(dim))
    sim.step()
    assert [(e.kind, e.handle_a, e.handle_b) for e in sim.events] == [("end", floor, ball)]


def test_sensor_events_through_the_simulation() -> None:
    """A ball falling through a static sensor box: begin and end sensor events, no contact response
    (it falls freely: y = y0 - g t^2 / 2 up to the symplectic-Euler term)."""
    sim = Simulation(3)
    zone = sim.add_body(Box([1.0, 0.5, 1.0]), kind="static", sensor=True)
    ball = sim.add_body(Ball(3, 0.2), position=[0.0, 1.5, 0.0])
    kinds = []
    for _ in range(45):
        sim.step()
        kinds += [(e.kind, e.handle_a, e.handle_b, e.sensor) for e in sim.events]
    assert kinds == [("begin", zone, ball, True), ("end", zone, ball, True)]
    t = 45 / 60
    assert sim.position(ball)[1] == pytest.approx(1.5 - 0.5 * 9.81 * t * t - 0.5 * 9.81 * t / 60, abs=1e-9)
