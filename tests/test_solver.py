"""Tests of the contact solver (``core/dynamics/solver.py``) on contact sets built by hand.

References (named again beside each check):

* Impulse-momentum for a single contact: the normal impulse that stops the relative normal speed
  u_n is ``-u_n / k`` with ``k = J M^-1 J^T``; here J is built by brute force from the point
  velocity ``v + W r`` in skew-matrix form and M^-1 from the covariance route of the inertia map
  (angular momentum ``L = C W + W C`` of a body with mass covariance C: the definition
  ``sum m r ^ v`` summed over the body), independent of the solver's wedge products.
* Newton's law of restitution; for one frictionless contact with e = 1 the kinetic energy is
  conserved (any mechanics text, e.g. Goldstein, *Classical Mechanics*, impulsive motion).
* Newton's third law: equal and opposite impulses at one point conserve linear momentum and
  angular momentum about any point.
* Coulomb friction: while sliding, the friction impulse opposes the slip with magnitude mu times
  the normal impulse (Halliday, Resnick and Walker); a ball brought to rolling by a tangential
  impulse keeps ``v / (1 + I / (m r^2))`` of its speed (impulse-momentum with the no-slip
  condition), with the n-ball plane inertia ``2 m r^2 / (n + 2)``.
* Speculative contacts: the closing speed is limited to gap/dt (speculative contacts,
  common practice).
* Statics of a vertical column: each contact carries the weight of the bodies above it
  (free-body diagram, Halliday, Resnick and Walker).
* Graph colouring: checked by brute force (no body twice in a colour; every later item conflicts
  with each earlier colour, i.e. colours are maximal).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.algebra import skew, unskew
from ndrigid.core.dynamics.solver import colour_items, solve_impulses, tangent_basis
from ndrigid.core.geometry.shapes import Ball, Box
from ndrigid.core.state.contacts import ContactSet, combine_friction, combine_restitution, contact_keys
from ndrigid.core.world.simulation import Settings, Simulation

DT = 1.0 / 60.0


def contacts_for(sim: Simulation, a, b, normal, point, depth, feature=None, manifold=None) -> ContactSet:
    """A ContactSet for rows (a, b) with the bodies' combined materials."""
    a = np.asarray(a, dtype=np.int64)
    b = np.asarray(b, dtype=np.int64)
    M = a.shape[0]
    normal = np.asarray(normal, dtype=np.float64).reshape(M, -1)
    normal = normal / np.linalg.norm(normal, axis=1, keepdims=True)
    feature = np.arange(M, dtype=np.int64) if feature is None else np.asarray(feature, dtype=np.int64)
    if manifold is None:
        pairs = np.stack([np.minimum(a, b), np.maximum(a, b)], 1)
        _, manifold = np.unique(pairs, axis=0, return_inverse=True)
    bd = sim.bodies
    h = bd.handle
    return ContactSet(a, b, normal, np.asarray(point, dtype=np.float64).reshape(M, -1),
                      np.asarray(depth, dtype=np.float64).reshape(M), feature,
                      np.asarray(manifold, dtype=np.int64).reshape(M), contact_keys(h[a], h[b], feature),
                      combine_friction(bd.friction[a], bd.friction[b]),
                      combine_restitution(bd.restitution[a], bd.restitution[b]))


def solve(sim: Simulation, c: ContactSet, dt: float = DT) -> None:
    solve_impulses(sim.alg, sim.bodies, c, dt, sim.settings, sim.caches)


def point_velocity(sim: Simulation, row: int, x) -> np.ndarray:
    """Velocity of the material point at world x of a body: v + W (x - c), W the skew form."""
    bd = sim.bodies
    c = bd.centroids()[row]
    return bd.velocity[row] + skew(bd.angular_velocity[row], sim.dim) @ (np.asarray(x) - c)


def brute_inverse_inertia(sim: Simulation, row: int) -> np.ndarray:
    """World inverse inertia map (k, k) from the mass covariance: I(W) = C W + W C, inverted."""
    bd = sim.bodies
    shape = sim.shape(int(bd.handle[row]))
    mp = shape.mass_properties(mass=1.0 / bd.inv_mass[row])
    R = bd.rotation[row]
    C = R @ mp.covariance @ R.T
    k = sim.alg.k
    cols = []
    for j in range(k):
        e = np.zeros(k)
        e[j] = 1.0
        W = skew(e, sim.dim)
        cols.append(unskew(C @ W + W @ C))
    return np.linalg.inv(np.array(cols).T)


def random_rotor(sim: Simulation, rng: np.random.Generator) -> np.ndarray:
    return sim.alg.rotor(rng.normal(size=sim.alg.k))


def two_boxes(dim: int, rng: np.random.Generator, **body) -> Simulation:
    sim = Simulation(dim, gravity=np.zeros(dim))
    for x in (-0.6, 0.6):
        pos = np.zeros(dim)
        pos[0] = x
        sim.add_body(Box(rng.uniform(0.2, 0.6, dim)), position=pos, rotor=random_rotor(sim, rng),
                     velocity=rng.normal(size=dim), angular_velocity=rng.normal(size=sim.alg.k), **body)
    return sim


# ---------------------------------------------------------------------------------------------
# one contact: impulse, energy, momentum
# ---------------------------------------------------------------------------------------------


@dims()
def test_normal_impulse_matches_brute_force_effective_mass(dim, rng):
    """lambda = -u_n / (J M^-1 J^T), J from v + W r by brute force (impulse-momentum)."""
    sim = two_boxes(dim, rng, friction=0.0)
    d = rng.normal(size=dim)
    d /= np.linalg.norm(d)
    x = rng.normal(size=dim) * 0.3
    bd = sim.bodies
    # orient the approach: the relative normal speed must be negative for an impulse
    un = d @ (point_velocity(sim, 1, x) - point_velocity(sim, 0, x))
    if un > 0:
        d = -d
        un = -un
    # brute-force Jacobian and inverse mass of the generalised velocity [v_A, B_A, v_B, B_B]
    n, k = dim, sim.alg.k
    blocks = []
    for row, sign in ((0, -1.0), (1, 1.0)):
        J = np.zeros(n + k)
        c = bd.centroids()[row]
        for j in range(n + k):
            e = np.zeros(n + k)
            e[j] = 1.0
            J[j] = sign * d @ (e[:n] + skew(e[n:], n) @ (x - c))
        Minv = np.zeros((n + k, n + k))
        Minv[:n, :n] = bd.inv_mass[row] * np.eye(n)
        Minv[n:, n:] = brute_inverse_inertia(sim, row)
        blocks.append(J @ Minv @ J)
    k_eff = sum(blocks)
    p0, L0 = sim.linear_momentum(), sim.angular_momentum()
    solve(sim, contacts_for(sim, [0], [1], d, x, [0.0]))
    lam = sim.caches["solver"]["normal"][0]
    assert lam == pytest.approx(-un / k_eff, rel=1e-9)
    after = d @ (point_velocity(sim, 1, x) - point_velocity(sim, 0, x))
    assert abs(after) < 1e-10
    # Newton's third law: both momenta conserved
    np.testing.assert_allclose(sim.linear_momentum(), p0, atol=1e-9)
    np.testing.assert_allclose(sim.angular_momentum(), L0, atol=1e-9)


@dims()
def test_elastic_frictionless_contact_conserves_energy_and_momentum(dim, rng):
    """e = 1 at one frictionless point: kinetic energy, linear and angular momentum conserved
    (Newton's law of restitution; Newton's third law)."""
    sim = two_boxes(dim, rng, friction=0.0, restitution=1.0)
    d = np.zeros(dim)
    d[0] = 1.0
    x = rng.normal(size=dim) * 0.2
    sim.bodies.velocity[0] = 0.0
    sim.bodies.velocity[0, 0] = 4.0  # A runs into B well above the restitution threshold
    sim.bodies.velocity[1, 0] = -4.0
    e0, p0, L0 = sim.kinetic_energy(), sim.linear_momentum(), sim.angular_momentum()
    un0 = d @ (point_velocity(sim, 1, x) - point_velocity(sim, 0, x))
    assert un0 < -sim.settings.bounce_threshold
    solve(sim, contacts_for(sim, [0], [1], d, x, [0.0]))
    un1 = d @ (point_velocity(sim, 1, x) - point_velocity(sim, 0, x))
    assert un1 == pytest.approx(-un0, rel=1e-9)
    assert sim.kinetic_energy() == pytest.approx(e0, rel=1e-9)
    np.testing.assert_allclose(sim.linear_momentum(), p0, atol=1e-9)
    np.testing.assert_allclose(sim.angular_momentum(), L0, atol=1e-9)


def ball_on_floor(dim: int, *, friction: float = 0.5, static_friction: float | None = None,
                  restitution: float = 0.0, settings: Settings | None = None) -> Simulation:
    sim = Simulation(dim, settings=settings)
    normal = np.zeros(dim)
    normal[1] = 1.0
    floor_pos = np.zeros(dim)
    floor_pos[1] = -0.5
    sim.add_body(Box(np.r_[5.0, 0.5, [5.0] * (dim - 2)]), kind="static", position=floor_pos,
                 friction=friction, static_friction=static_friction, restitution=restitution)
    pos = np.zeros(dim)
    pos[1] = 0.5
    sim.add_body(Ball(dim, 0.5), position=pos, friction=friction, static_friction=static_friction,
                 restitution=restitution)
    return sim


def floor_contact(sim: Simulation, depth: float = 0.0, normal=None) -> ContactSet:
    dim = sim.dim
    up = np.zeros(dim)
    up[1] = 1.0
    return contacts_for(sim, [0], [1], up if normal is None else normal, np.zeros(dim), [depth])


@dims()
def test_bounce_threshold(dim):
    """Approach slower than bounce_threshold: no bounce; faster: bounce with e (Newton)."""
    sim = ball_on_floor(dim, restitution=0.5, friction=0.0)
    thr = sim.settings.bounce_threshold
    sim.bodies.velocity[1, 1] = -0.5 * thr
    solve(sim, floor_contact(sim))
    assert abs(sim.bodies.velocity[1, 1]) < 1e-12
    sim.bodies.velocity[1, 1] = -3.0 * thr
    solve(sim, floor_contact(sim))
    assert sim.bodies.velocity[1, 1] == pytest.approx(1.5 * thr, rel=1e-12)


@dims()
def test_friction_stops_slip_and_ball_rolls(dim, rng):
    """Enough friction: the contact point stops slipping and the ball keeps v / (1 + I/(m r^2)) of
    its speed with I = 2 m r^2 / (n + 2) (impulse-momentum with the no-slip condition)."""
    sim = ball_on_floor(dim, friction=1.0)
    t = rng.normal(size=dim)
    t[1] = 0.0
    t /= np.linalg.norm(t)
    sim.bodies.velocity[1] = 2.0 * t
    sim.bodies.velocity[1, 1] = -1.0
    solve(sim, floor_contact(sim))
    np.testing.assert_allclose(point_velocity(sim, 1, np.zeros(dim)), 0.0, atol=1e-9)
    ratio = 2.0 / (dim + 2)
    np.testing.assert_allclose(sim.bodies.velocity[1], 2.0 * t / (1.0 + ratio), atol=1e-9)


@dims()
def test_friction_is_an_isotropic_cone(dim, rng):
    """Sliding: the friction impulse is opposite to the slip and has magnitude mu lambda_n (Coulomb
    friction). A pyramid (per-axis clamping) would turn the impulse toward a tangent axis."""
    mu = 0.1
    sim = ball_on_floor(dim, friction=mu)
    t = rng.normal(size=dim)
    t[1] = 0.0
    t /= np.linalg.norm(t)
    sim.bodies.velocity[1] = 3.0 * t
    sim.bodies.velocity[1, 1] = -1.0
    slip0 = point_velocity(sim, 1, np.zeros(dim))
    slip0[1] = 0.0
    solve(sim, floor_contact(sim))
    lam_n = sim.caches["solver"]["normal"][0]
    lam_t = sim.caches["solver"]["tangent"][0]
    assert np.linalg.norm(lam_t) == pytest.approx(mu * lam_n, rel=1e-9)
    cosine = lam_t @ slip0 / (np.linalg.norm(lam_t) * np.linalg.norm(slip0))
    assert cosine == pytest.approx(-1.0, abs=1e-12)
    assert bool(sim.caches["solver"]["sliding"][0])


@dims()
def test_static_then_kinetic_friction(dim):
    """A new contact holds with mu_s; once it slid (clamped), the next solve uses mu_k (Coulomb
    friction with distinct static and kinetic coefficients, Halliday, Resnick and Walker)."""
    mu_k, mu_s = 0.2, 0.6
    sim = ball_on_floor(dim, friction=mu_k, static_friction=mu_s)
    bd = sim.bodies
    for expected in (mu_s, mu_k):
        bd.velocity[1] = 0.0
        bd.angular_velocity[1] = 0.0
        bd.velocity[1, 0] = 10.0
        bd.velocity[1, 1] = -1.0
        solve(sim, floor_contact(sim))
        cache = sim.caches["solver"]
        # warm start carries the previous step's impulses in; the ratio still hits the cone
        assert np.linalg.norm(cache["tangent"][0]) == pytest.approx(expected * cache["normal"][0], rel=1e-9)


@dims()
def test_speculative_contact_limits_closing_speed(dim):
    """A gap g closes at most at g/dt; a body that cannot reach the surface in the step is left
    alone (speculative contacts, common practice)."""
    gap = 0.05
    sim = ball_on_floor(dim, friction=0.0)
    bd = sim.bodies
    bd.velocity[1, 1] = -50.0
    solve(sim, floor_contact(sim, depth=-gap))
    assert bd.velocity[1, 1] == pytest.approx(-gap / DT, rel=1e-12)
    bd.velocity[1, 1] = -0.5 * gap / DT
    solve(sim, floor_contact(sim, depth=-gap))
    assert bd.velocity[1, 1] == pytest.approx(-0.5 * gap / DT, rel=1e-12)
    assert sim.caches["solver"]["normal"][0] == 0.0


@dims()
def test_speculative_contact_without_impulse_does_not_bounce(dim):
    """Restitution only for rows that took an impulse: a bouncy ball passing near a surface it
    does not reach within the step keeps its velocity (speculative contacts, common practice;
    Newton's law applies at impact)."""
    sim = ball_on_floor(dim, friction=0.0, restitution=1.0)
    bd = sim.bodies
    bd.velocity[1, 1] = -2.0
    solve(sim, floor_contact(sim, depth=-0.1))
    assert bd.velocity[1, 1] == pytest.approx(-2.0, rel=1e-12)


@dims()
def test_overlap_push_adds_no_kinetic_energy(dim):
    """Overlap beyond the slop is corrected by moving the body, not by leaving it a velocity
    (common practice: position correction must not add energy); the push speed is capped."""
    sim = ball_on_floor(dim, friction=0.5)
    bd = sim.bodies
    depth = 0.2
    y0 = bd.position[1, 1]
    solve(sim, floor_contact(sim, depth=depth))
    assert sim.kinetic_energy() < 1e-20
    dy = bd.position[1, 1] - y0
    assert 0.0 < dy <= sim.settings.separation_speed_cap * DT + 1e-12
    # within the slop: nothing moves
    y1 = bd.position[1, 1]
    solve(sim, floor_contact(sim, depth=0.5 * sim.settings.overlap_allowance))
    assert bd.position[1, 1] == y1


@dims()
def test_kinematic_body_pushes_and_is_not_pushed(dim):
    """A kinematic platform rising at u gives a resting ball the normal speed u (it has infinite
    mass in the solve: common practice), and keeps its own velocity."""
    sim = Simulation(dim)
    up = np.zeros(dim)
    up[1] = 1.0
    plat = sim.add_body(Box(np.full(dim, 0.5)), kind="kinematic", velocity=0.7 * up)
    sim.add_body(Ball(dim, 0.5), position=up * 1.0, friction=0.0)
    solve(sim, contacts_for(sim, [0], [1], up, 0.5 * up, [0.0]))
    assert sim.bodies.velocity[1] @ up == pytest.approx(0.7, rel=1e-12)
    np.testing.assert_array_equal(sim.velocity(plat), 0.7 * up)


# ---------------------------------------------------------------------------------------------
# many rows: statics, warm starting, batchings
# ---------------------------------------------------------------------------------------------


def ball_column(dim: int, count: int, settings: Settings) -> tuple[Simulation, ContactSet]:
    """count unit-mass balls of radius 0.5 stacked on a static floor, exactly touching."""
    sim = Simulation(dim, settings=settings)
    up = np.zeros(dim)
    up[1] = 1.0
    sim.add_body(Box(np.r_[5.0, 0.5, [5.0] * (dim - 2)]), kind="static", position=-0.5 * up)
    for i in range(count):
        sim.add_body(Ball(dim, 0.5), position=(0.5 + i) * up, mass=1.0)
    a = np.arange(count)
    c = contacts_for(sim, a, a + 1, np.tile(up, (count, 1)), a[:, None] * up, np.zeros(count))
    return sim, c


@dims()
@pytest.mark.parametrize("batching", ["manifold", "point", "jacobi"])
def test_column_statics_all_batchings(dim, batching):
    """A column of 4 unit masses under gravity: contact j (from the top) carries j m g dt per step
    (free-body diagram); every batching reaches it, warm started over a few steps."""
    count = 4
    st = replace(Settings(), solver_batching=batching, solver_passes=8, bias_free_passes=3)
    sim, c = ball_column(dim, count, st)
    bd = sim.bodies
    g = 9.81
    for _ in range(60):
        bd.velocity[1:] = 0.0
        bd.velocity[1:, 1] = -g * DT  # gravity of one step on resting bodies
        solve(sim, c)
    expected = (count - np.arange(count)) * g * DT
    np.testing.assert_allclose(sim.caches["solver"]["normal"], expected[np.argsort(np.argsort(c.key))],
                               rtol=1e-3)
    np.testing.assert_allclose(bd.velocity[1:], 0.0, atol=1e-3 * g * DT)


@dims()
def test_warm_start_matches_keys_and_reprojects_tangent_impulse(dim, rng):
    """Warm start: impulses follow their key (or, for a new key, the old row of the same pair
    within the match distance), unknown rows start at zero, and the old tangent
    impulse (a world vector) is projected onto the new tangent plane, t - (t . d) d (common
    practice: orthogonal projection)."""
    from ndrigid.core.dynamics.solver import _warm_values

    sim = ball_on_floor(dim, friction=1.0)
    bd = sim.bodies
    bd.velocity[1, 0] = 1.0
    bd.velocity[1, 1] = -1.0
    solve(sim, floor_contact(sim))
    old = {k: v.copy() for k, v in sim.caches["solver"].items()}
    assert np.linalg.norm(old["tangent"][0]) > 0
    tilted = np.zeros(dim)
    tilted[1] = 1.0
    tilted[0] = 0.3
    tilted /= np.linalg.norm(tilted)
    up = np.zeros(dim)
    up[1] = 1.0
    # row 0: same key, tilted normal; row 1: a new feature (new key) far from the old point;
    # row 2: a new feature next to the old point (inherits by proximity)
    far = np.zeros(dim)
    far[0] = 1.0
    near = np.zeros(dim)
    near[0] = 0.01
    c = contacts_for(sim, [0, 0, 0], [1, 1, 1], [tilted, up, up], np.stack([np.zeros(dim), far, near]),
                     [0.0, 0.0, 0.0], feature=[0, 7, 8])
    from ndrigid.core.dynamics.solver import _pair_keys

    pair = _pair_keys(sim.bodies, c)
    lam_n, lam_t, _ = _warm_values(c, pair, old, True, 0.02)
    t = old["tangent"][0]
    assert lam_n[0] == old["normal"][0]
    np.testing.assert_allclose(lam_t[0], t - (t @ tilted) * tilted, atol=1e-12)
    assert lam_n[1] == 0.0 and np.all(lam_t[1] == 0.0)
    assert lam_n[2] == old["normal"][0]
    lam_n, lam_t, _ = _warm_values(c, pair, old, False, 0.02)
    assert np.all(lam_n == 0.0) and np.all(lam_t == 0.0)


@dims()
def test_tangent_basis_is_orthonormal(dim, rng):
    """T T^T = I and T d = 0 (definition of an orthonormal basis of the complement)."""
    d = rng.normal(size=(50, dim))
    d[:5] = np.eye(dim)[np.arange(5) % dim] * np.where(np.arange(5) % 2, -1, 1)[:, None]
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    T = tangent_basis(d)
    assert T.shape == (50, dim - 1, dim)
    eye = np.broadcast_to(np.eye(dim - 1), (50, dim - 1, dim - 1))
    np.testing.assert_allclose(np.einsum("mij,mkj->mik", T, T), eye, atol=1e-12)
    np.testing.assert_allclose(np.einsum("mij,mj->mi", T, d), 0.0, atol=1e-12)


def test_colouring_is_valid_and_maximal(rng):
    """Brute force: no slotted body twice in a colour, and every item of a later colour conflicts
    with some item of each earlier colour (greedy maximality)."""
    nb, ni = 30, 200
    a = rng.integers(0, nb, ni)
    b = (a + rng.integers(1, nb, ni)) % nb
    slot = rng.random(nb) > 0.2
    prio = rng.permutation(ni).astype(np.int64)
    col = colour_items(a, b, slot[a], slot[b], prio, nb)
    assert np.all(col >= 0)
    for c in range(col.max() + 1):
        members = np.nonzero(col == c)[0]
        used = [x for i in members for x in (a[i], b[i]) if slot[x]]
        assert len(used) == len(set(used))
        used_set = set(used)
        for i in np.nonzero(col > c)[0]:
            assert (slot[a[i]] and a[i] in used_set) or (slot[b[i]] and b[i] in used_set)


def test_no_contacts_clears_the_cache():
    sim = ball_on_floor(3)
    solve(sim, floor_contact(sim))
    assert sim.caches["solver"]["key"].size == 1
    v = sim.bodies.velocity.copy()
    solve(sim, None)
    assert sim.caches["solver"]["key"].size == 0
    np.testing.assert_array_equal(sim.bodies.velocity, v)


def test_bad_batching_setting_is_refused():
    from ndrigid.core.errors import InputError

    with pytest.raises(InputError, match="solver_batching"):
        Settings(solver_batching="diagonal").validated()
