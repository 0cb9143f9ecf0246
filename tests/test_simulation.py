"""The Simulation facade: handles, add/remove bookkeeping, getters, and bad input.

Physics here is only bookkeeping (the integrator is checked in test_integrate.py); the external
reference for state preservation is exact equality (bit for bit), for errors the message content.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.shapes import Ball, Box, HalfSpace
from ndrigid.core.world.simulation import Settings, Simulation


def _snapshot(sim: Simulation) -> dict[str, np.ndarray]:
    b = sim.bodies
    cols = {name: b.column(name).copy() for name in b.names}
    return cols | {"handles": sim.handles, "time": np.array(sim.time)}


def _assert_same(a: dict[str, np.ndarray], b: dict[str, np.ndarray]) -> None:
    assert a.keys() == b.keys()
    for k in a:
        np.testing.assert_array_equal(a[k], b[k], err_msg=k)


def _populate(sim: Simulation, rng: np.random.Generator, count: int = 6) -> list[int]:
    n = sim.dim
    hs = []
    for i in range(count):
        shape = Ball(n, 0.2 + 0.05 * i) if i % 2 else Box(np.full(n, 0.1 + 0.03 * i))
        hs.append(sim.add_body(shape, position=rng.normal(size=n) * 5, velocity=rng.normal(size=n),
                               angular_velocity=rng.normal(size=sim.alg.k)))
    return hs


@dims()
def test_add_and_remove_in_any_order_keeps_other_bodies_bit_for_bit(dim: int,
                                                                    rng: np.random.Generator) -> None:
    """Removing bodies in any order leaves every other body's state unchanged, bit for bit, and the
    survivors then evolve like a world created without the removed ones, to rounding (free bodies,
    far apart: no interaction)."""
    sim = Simulation(dim, gravity=np.zeros(dim))
    hs = _populate(sim, rng, 8)
    before = {h: (sim.position(h), sim.rotor(h), sim.velocity(h), sim.angular_velocity(h)) for h in hs}
    for h in (hs[3], hs[0], hs[7]):
        sim.remove_body(h)
    for h in hs:
        if h in (hs[3], hs[0], hs[7]):
            with pytest.raises(InputError, match="handle"):
                sim.position(h)
            continue
        now = (sim.position(h), sim.rotor(h), sim.velocity(h), sim.angular_velocity(h))
        for got, want in zip(now, before[h], strict=True):
            np.testing.assert_array_equal(got, want)
    assert sim.count == 5
    extra = sim.add_body(Ball(dim, 0.3), position=np.full(dim, 40.0))
    assert extra not in hs  # handles are never reused
    for _ in range(10):
        sim.step()
    # reference: a world built with only the survivors (same start states)
    ref = Simulation(dim, gravity=np.zeros(dim))
    ref_h = {}
    for h in hs:
        if h in (hs[3], hs[0], hs[7]):
            continue
        p, R, v, w = before[h]
        ref_h[h] = ref.add_body(sim.shape(h), position=p, rotor=R, velocity=v, angular_velocity=w)
    for _ in range(10):
        ref.step()
    # BLAS picks its summation order by matrix size, so a different batch of bodies may differ in
    # the last bit; the evolution itself must be the same to rounding.
    for h, rh in ref_h.items():
        np.testing.assert_allclose(sim.position(h), ref.position(rh), rtol=0, atol=1e-13)
        np.testing.assert_allclose(sim.rotor(h), ref.rotor(rh), rtol=0, atol=1e-14)


def test_many_adds_are_amortised_and_handles_map_rows() -> None:
    """Capacity doubles (amortised O(1) adds, common practice for growable arrays)."""
    sim = Simulation(3)
    shape = Ball(3, 0.1)
    caps = set()
    hs = []
    for i in range(300):
        hs.append(sim.add_body(shape, position=[i, 0, 0]))
        caps.add(sim.bodies.capacity)
    assert sorted(caps) == [16, 32, 64, 128, 256, 512]
    np.testing.assert_array_equal(sim.rows(hs), np.arange(300))
    sim.remove_body(hs[10])
    assert sim.row(hs[-1]) == 10  # the last row moved into the hole
    np.testing.assert_array_equal(sim.position(hs[-1]), [299, 0, 0])


@dims()
def test_bad_input_raises_and_leaves_state_unchanged(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    hs = _populate(sim, rng, 4)
    sim.step()
    snap = _snapshot(sim)
    n, k = dim, sim.alg.k
    bad_calls = [
        (lambda: sim.add_body(Ball(n, 1.0), position=np.full(n + 1, 0.0)), "position"),
        (lambda: sim.add_body(Ball(n, 1.0), position=[np.nan] * n), "position"),
        (lambda: sim.add_body(Ball(n, 1.0), velocity=[np.inf] * n), "velocity"),
        (lambda: sim.add_body(Ball(n, 1.0), angular_velocity=np.zeros(k + 1)), "angular_velocity"),
        (lambda: sim.add_body(Ball(n, 1.0), mass=0.0), "mass"),
        (lambda: sim.add_body(Ball(n, 1.0), mass=-2.0), "mass"),
        (lambda: sim.add_body(Ball(n, 1.0), density=-1.0), "density"),
        (lambda: sim.add_body(Ball(n, 1.0), mass=1.0, density=1.0), "density, mass"),
        (lambda: sim.add_body(Ball(n, 1.0), rotor=2.0 * sim.alg.identity_rotor()), "rotor"),
        (lambda: sim.add_body(Ball(n, 1.0), kind="floating"), "kind"),
        (lambda: sim.add_body(Ball(n + 1, 1.0)), "dimension"),
        (lambda: sim.add_body("ball"), "shape"),
        (lambda: sim.add_body(Ball(n, 1.0), friction=-0.1), "friction"),
        (lambda: sim.add_body(Ball(n, 1.0), restitution=1.5), "restitution"),
        (lambda: sim.add_body(Ball(n, 1.0), rolling_resistance=-0.001), "rolling_resistance"),
        (lambda: sim.add_body(Ball(n, 1.0), spin_friction=np.nan), "spin_friction"),
        (lambda: sim.add_room(-np.ones(n), np.ones(n), spin_friction=-1.0), "spin_friction"),
        (lambda: sim.set_material(hs[0], friction=0.2, spin_friction=-0.1), "spin_friction"),
        (lambda: sim.set_material(hs[0], restitution=1.2, friction=0.1), "restitution"),
        (lambda: sim.set_material(hs[0], friction=0.8, static_friction=0.6), "static_friction"),
        (lambda: sim.set_material(hs[0], rolling_resistance="soft"), "rolling_resistance"),
        (lambda: sim.set_material(10_000, friction=0.1), "handle"),
        (lambda: sim.add_room(np.zeros(n), np.r_[0.0, np.ones(n - 1)]), "lo < hi"),
        (lambda: sim.add_room(-np.ones(n), np.ones(n), restitution=2.0), "restitution"),
        (lambda: sim.add_room(-np.ones(n), np.ones(n + 1)), "hi"),
        (lambda: sim.add_body(Ball(n, 1.0), layer=-1), "layer"),
        (lambda: sim.add_body(HalfSpace(np.eye(n)[1], 0.0)), "HalfSpace"),
        (lambda: sim.step(0.0), "dt"),
        (lambda: sim.step(-1 / 60), "dt"),
        (lambda: sim.step(float("nan")), "dt"),
        (lambda: sim.apply_force(hs[0], np.zeros(n + 1)), "force"),
        (lambda: sim.apply_force(hs[0], [np.nan] * n), "force"),
        (lambda: sim.apply_impulse(hs[0], np.ones(n), point=np.ones(n + 2)), "point"),
        (lambda: sim.apply_torque(hs[0], np.ones(k + 1)), "torque"),
        (lambda: sim.set_velocity(hs[0], [np.nan] * n), "velocity"),
        (lambda: sim.set_pose(hs[0], np.zeros(n), rotor=np.zeros(sim.alg.even_size)), "rotor"),
        (lambda: sim.set_pose(10_000, np.zeros(n)), "handle"),
        (lambda: sim.remove_body(10_000), "handle"),
        (lambda: sim.remove_body(-1), "handle"),
        (lambda: sim.with_settings(dt=0.0), "settings.dt"),
        (lambda: sim.with_settings(solver_passes=0), "settings.solver_passes"),
    ]
    for call, word in bad_calls:
        with pytest.raises((InputError, InputTypeError)) as info:
            call()
        assert word in str(info.value), (word, str(info.value))
        _assert_same(snap, _snapshot(sim))
    assert sim.settings.dt == pytest.approx(1 / 60)


def test_bad_constructor_arguments() -> None:
    with pytest.raises(InputError, match="dim"):
        Simulation(1)
    with pytest.raises(InputTypeError, match="dim"):
        Simulation(2.5)  # type: ignore[arg-type]
    with pytest.raises(InputError, match="gravity"):
        Simulation(3, gravity=[0, -9.81])
    with pytest.raises(InputError, match="settings.gyroscopic"):
        Simulation(3, settings=Settings(gyroscopic="magic"))


@dims()
def test_getters_return_copies_in_row_order(dim: int, rng: np.random.Generator) -> None:
    sim = Simulation(dim)
    hs = _populate(sim, rng, 3)
    P = sim.positions
    P[:] = 99.0
    assert not np.any(sim.positions == 99.0)
    np.testing.assert_array_equal(sim.positions[1], sim.position(hs[1]))
    np.testing.assert_array_equal(sim.handles, hs)
    assert sim.rotors.shape == (3, 2 ** (dim - 1))
    assert sim.angular_velocities.shape == (3, dim * (dim - 1) // 2)
    assert sim.kind(hs[0]) == "dynamic"


@dims()
def test_step_profile_names_every_stage(dim: int) -> None:
    sim = Simulation(dim)
    sim.add_body(Ball(dim, 0.5))
    sim.step()
    names = [name for name, _ in sim.stages]
    assert list(sim.timings.stages) == names
    assert names[0] == "accelerate" and "advance_poses" in names
    assert sim.timings.total >= sum(sim.timings.stages.values()) * 0.999


@dims()
def test_static_bodies_accept_zero_mass_and_ignore_it(dim: int) -> None:
    """mass / density are ignored for static and kinematic bodies (the add_body docstring), so 0
    is accepted there; a static body has zero inverse mass whatever was given."""
    sim = Simulation(dim)
    h = sim.add_body(Box(np.ones(dim)), kind="static", mass=0.0)
    k = sim.add_body(Ball(dim, 0.5), kind="kinematic", density=0.0, position=3.0 * np.eye(dim)[1])
    assert sim.bodies.inv_mass[sim.row(h)] == 0.0 and sim.bodies.inv_mass[sim.row(k)] == 0.0


@dims()
def test_axis_aligned_half_spaces_and_a_room_keep_a_fast_ball_inside(dim: int) -> None:
    """HalfSpace.below / above are the solids x[axis] <= at and x[axis] >= at (normal +-e_axis,
    checked on points inside and outside: geometry); add_room closes the box lo <= x <= hi, and a
    ball thrown fast in every direction with restitution 1 stays inside it (the walls are static
    and speculative contacts stop it at the surface; geometry: inside means lo + r <= x <= hi - r,
    within the allowance)."""
    below, above = HalfSpace.below(dim, 0, 2.0), HalfSpace.above(dim, 0, 2.0)
    inside, outside = np.r_[1.0, np.zeros(dim - 1)], np.r_[3.0, np.zeros(dim - 1)]
    assert below.normal @ inside <= below.offset < below.normal @ outside
    assert above.normal @ outside <= above.offset < above.normal @ inside
    sim = Simulation(dim, settings=Settings(sleep_enabled=False))
    lo, hi = -np.ones(dim) * 2.0, np.ones(dim) * 2.0
    lo[1] = 0.0
    walls = sim.add_room(lo, hi, ceiling=True, restitution=1.0, friction=0.0)
    assert walls.size == 2 * dim and all(sim.kind(int(w)) == "static" for w in walls)
    r = 0.3
    ball = sim.add_body(Ball(dim, r), position=np.r_[0.0, 1.0, np.zeros(dim - 2)],
                        velocity=np.linspace(8.0, -6.0, dim), restitution=1.0, friction=0.0)
    allowance = sim.settings.overlap_allowance + 1e-3
    for _ in range(240):
        sim.step()
        x = sim.position(ball)
        assert np.all(x >= lo + r - allowance) and np.all(x <= hi - r + allowance)


@dims()
def test_mass_and_inertia_getters_equal_the_shape_mass_properties(dim: int,
                                                                   rng: np.random.Generator) -> None:
    """mass, inverse mass and the inertia map (body frame, and world = C2(R) I_body C2(R)^T) equal
    the shape's own mass properties (computed from its geometry, test_mass checks those against
    handbook formulas); static bodies report infinite mass and inertia."""
    sim = Simulation(dim)
    shape = Box(np.linspace(0.2, 0.6, dim))
    R = sim.alg.rotor(rng.normal(size=sim.alg.k))
    h = sim.add_body(shape, rotor=R, density=700.0)
    mp = shape.mass_properties(density=700.0)
    assert sim.mass(h) == pytest.approx(mp.mass, rel=1e-12)
    assert sim.inverse_mass(h) == pytest.approx(1.0 / mp.mass, rel=1e-12)
    np.testing.assert_allclose(sim.inertia(h, "body"), mp.inertia, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(np.sort(sim.inertia(h, "principal")), np.sort(mp.principal_moments),
                               rtol=1e-10)
    C = sim.alg.rotor_to_compound(R)
    np.testing.assert_allclose(sim.inertia(h), C @ mp.inertia @ C.T, rtol=1e-10, atol=1e-12)
    wall = sim.add_body(HalfSpace(np.eye(dim)[1], 0.0), kind="static")
    assert sim.mass(wall) == np.inf and np.all(np.isinf(sim.inertia(wall)))
    with pytest.raises(InputError, match="frame"):
        sim.inertia(h, "local")


def test_inertia_of_a_turned_3d_box_matches_trimesh(rng: np.random.Generator) -> None:
    """3-D: the bivector inertia map is the classical inertia tensor read in planes (plane (1,2) is
    the x axis, (0,2) the y axis with a sign flip, (0,1) the z axis); trimesh's moment of inertia
    of the same turned box (reference library) agrees."""
    trimesh = pytest.importorskip("trimesh")
    sim = Simulation(3)
    ext = np.array([0.4, 1.0, 1.6])
    R = sim.alg.rotor(rng.normal(size=3))
    h = sim.add_body(Box(ext / 2), rotor=R, density=500.0)
    mesh = trimesh.creation.box(extents=ext)
    T = np.eye(4)
    T[:3, :3] = sim.rotation(h)
    mesh.apply_transform(T)
    mesh.density = 500.0
    S = np.array([[0.0, 0.0, 1.0], [0.0, -1.0, 0.0], [1.0, 0.0, 0.0]])  # (01),(02),(12) <- z, y, x
    np.testing.assert_allclose(sim.inertia(h), S @ mesh.moment_inertia @ S.T, rtol=1e-9, atol=1e-12)


@dims()
def test_body_frame_angular_velocity_and_momentum(dim: int, rng: np.random.Generator) -> None:
    """The body-frame angular velocity is the world one carried back by the rotation,
    Omega_body = R^T Omega_world R on the n x n generators (frame change of a rotation rate:
    fact); the body-frame spin momentum is I_body B_body, and carried to the world it is
    I_world B_world."""
    sim = Simulation(dim)
    R = sim.alg.rotor(rng.normal(size=sim.alg.k))
    B = rng.normal(size=sim.alg.k)
    h = sim.add_body(Box(np.linspace(0.3, 0.5, dim)), rotor=R, angular_velocity=B)
    M = sim.rotation(h)
    from ndrigid.core.algebra import skew

    np.testing.assert_allclose(skew(sim.body_angular_velocity(h), dim), M.T @ skew(B, dim) @ M, atol=1e-12)
    L_body = sim.body_angular_momentum(h)
    np.testing.assert_allclose(sim.alg.rotate_bivectors(R, L_body), sim.inertia(h) @ B, rtol=1e-10,
                               atol=1e-10)


@dims()
def test_bounding_box_user_data_and_sleep_by_hand(dim: int, rng: np.random.Generator) -> None:
    """bounding_box: the min and max of a turned box's 2^n corners (brute force); user data round
    trip; a body put to sleep alone stays asleep and still, and falls once woken (free fall)."""
    sim = Simulation(dim)
    half = np.linspace(0.2, 0.5, dim)
    h = sim.add_body(Box(half), position=rng.normal(size=dim),
                     rotor=sim.alg.rotor(rng.normal(size=sim.alg.k)), user_data={"name": "crate"})
    corners = sim.position(h) + (Box(half).vertices @ sim.rotation(h).T)
    lo, hi = sim.bounding_box(h)
    np.testing.assert_allclose(lo, corners.min(axis=0), atol=1e-12)
    np.testing.assert_allclose(hi, corners.max(axis=0), atol=1e-12)
    assert sim.user_data(h) == {"name": "crate"}
    sim.set_user_data(h, 7)
    assert sim.user_data(h) == 7
    floor = sim.add_body(HalfSpace(np.eye(dim)[1], -10.0), kind="static")
    flo, fhi = sim.bounding_box(floor)
    assert np.isinf(flo[1]) and fhi[1] == pytest.approx(-10.0)
    y0 = sim.position(h)[1]
    sim.put_to_sleep(h)
    for _ in range(10):
        sim.step()
    assert not sim.is_awake(h) and sim.position(h)[1] == y0
    sim.wake(h)
    for _ in range(30):
        sim.step()
    assert sim.is_awake(h) and sim.position(h)[1] < y0 - 0.5 * 9.81 * 0.25  # fell (0.5 s, minus margin)
    with pytest.raises(InputError, match="only dynamic"):
        sim.put_to_sleep(floor)


@dims()
def test_material_getter_and_setter(dim: int) -> None:
    """material() reads back add_body's coefficients (defaults: friction 0.5, rolling resistance
    1 mm, spin friction 16 mm); set_material changes only the given ones; raising friction above
    the static coefficient raises that too (static friction is never below kinetic: Coulomb's
    law of friction as stated in any mechanics text); the adapters' RigidBody carries the two
    couple coefficients to add_body."""
    from ndrigid.adapters import RigidBody

    sim = Simulation(dim)
    h = sim.add_body(Ball(dim, 0.5), friction=0.3, static_friction=0.6, spin_friction=0.01)
    assert sim.material(h) == {"friction": 0.3, "static_friction": 0.6, "restitution": 0.0,
                               "rolling_resistance": 0.001, "spin_friction": 0.01}
    sim.set_material(h, restitution=0.4, rolling_resistance=0.0)
    assert sim.material(h) == {"friction": 0.3, "static_friction": 0.6, "restitution": 0.4,
                               "rolling_resistance": 0.0, "spin_friction": 0.01}
    sim.set_material(h, friction=0.9)
    assert sim.material(h)["static_friction"] == 0.9
    rb = RigidBody(Ball(dim, 0.5), rolling_resistance=0.002, spin_friction=0.0)
    h2 = sim.add_body(rb.shape, **rb.body_arguments())
    assert sim.material(h2)["rolling_resistance"] == 0.002 and sim.material(h2)["spin_friction"] == 0.0
    with pytest.raises(InputError, match="spin_friction"):
        RigidBody(Ball(dim, 0.5), spin_friction=-1.0)
