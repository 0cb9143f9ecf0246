"""The compiled joint kernel against the vectorised numpy joint solve, in 2-D to 5-D.

Both paths solve the same rows (``joints.prepare``) in the same order: the numpy path a colour at
a time, the kernel joint by joint (inside a colour no dynamic body repeats, so the two updates are
the same). They may differ only by the order of floating-point sums, so velocities and
accumulated impulses must agree to 1e-9. The numpy path itself is checked against mechanics
outside the project in test_joints.py; this file pins the compiled path to it.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import Ball, Box, Settings, Simulation, kernels
from ndrigid.core.dynamics import joints as J

pytestmark = pytest.mark.skipif(not kernels.available(), reason="numba is not available")

TOL = 1e-9
KINDS = ("point", "weld", "soft_weld", "rod", "rope", "slider", "hinge", "spring", "wheel")
#: kinds with scalar rows (limits, motors, lengths, springs) that must take an impulse
SCALAR = ("rod", "rope", "hinge", "spring", "wheel")


def _close(x: np.ndarray, y: np.ndarray) -> float:
    return float(np.max(np.abs(x - y))) if x.size else 0.0


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v)


def _join(sim: Simulation, kind: str, a: int, b: int | None, rng: np.random.Generator) -> int:
    """A ``kind`` joint between a and b (None: the world), with its limits, motor or spring set so
    that its scalar rows act."""
    n = sim.dim
    pa = sim.position(a)
    pb = sim.position(b) if b is not None else pa + 0.4 * _unit(rng.normal(size=n))
    mid = 0.5 * (pa + pb)
    d = float(np.linalg.norm(pb - pa))
    if kind in ("point", "weld"):
        return sim.add_joint(kind, a, b, anchor=mid)
    if kind == "soft_weld":  # a soft block: the spring-damper's mass and impulse scales
        return sim.add_joint("weld", a, b, anchor=mid, frequency=6.0, damping_ratio=0.4)
    if kind == "rod":
        return sim.add_joint("distance", a, b, anchor=pa, anchor_b=pb)
    if kind == "rope":  # stretched past its longest: the one-sided row pulls
        return sim.add_joint("distance", a, b, anchor=pa, anchor_b=pb, min_length=0.3 * d, max_length=0.8 * d)
    if kind == "slider":
        return sim.add_joint("slider", a, b, axis=_unit(rng.normal(size=n)))
    if kind == "hinge":
        return sim.add_joint("hinge", a, b, anchor=mid, lower=-0.2, upper=0.3, motor_speed=1.5,
                             max_motor_torque=0.8)
    if kind == "spring":
        return sim.add_joint("spring", a, b, anchor=pa, anchor_b=pb, length=0.8 * d, frequency=4.0,
                             damping_ratio=0.5)
    assert kind == "wheel" and b is not None  # a wheel (b) on a carrier (a)
    return sim.add_joint("wheel", a, b, frequency=5.0, damping_ratio=0.7, motor_speed=3.0,
                         max_motor_torque=2.0)


def _scene(dim: int, kind: str, rng: np.random.Generator) -> Simulation:
    """Five spinning dynamic bodies (boxes and balls) in a chain with a branch, a world-side joint
    (a static carrier for wheels) and a joint to a moving kinematic body, all of one kind; no
    floor, no collisions."""
    g = np.zeros(dim)
    g[1] = -9.81
    sim = Simulation(dim, gravity=g, settings=Settings(dt=1.0 / 120.0, sleep_enabled=False))
    alg = sim.alg
    e0 = np.eye(dim)[0]
    body = []
    for i in range(5):
        shape = Box(rng.uniform(0.05, 0.15, dim)) if i % 2 == 0 else Ball(dim, 0.1)
        body.append(sim.add_body(shape, position=0.45 * i * e0 + 0.1 * rng.normal(size=dim),
                                 rotor=alg.rotor(rng.normal(size=alg.k)), mass=rng.uniform(0.5, 2.0),
                                 velocity=rng.normal(size=dim), angular_velocity=2.0 * rng.normal(size=alg.k),
                                 mask=0))
    static = sim.add_body(Box(np.full(dim, 0.1)), position=-0.5 * e0, kind="static", mask=0)
    moving = sim.add_body(Ball(dim, 0.1), position=0.45 * 4 * e0 + 0.5 * np.eye(dim)[1], kind="kinematic",
                          velocity=0.5 * rng.normal(size=dim), angular_velocity=rng.normal(size=alg.k),
                          mask=0)
    if kind == "wheel":
        _join(sim, kind, static, body[0], rng)
        _join(sim, kind, moving, body[4], rng)
    else:
        _join(sim, kind, body[0], None, rng)
        _join(sim, kind, body[4], moving, rng)
    for a, b in ((0, 1), (1, 2), (2, 3), (1, 4)):
        _join(sim, kind, body[a], body[b], rng)
    return sim


@pytest.mark.parametrize("kind", KINDS)
@dims()
def test_joint_solve_lockstep(dim: int, kind: str, rng: np.random.Generator) -> None:
    """One step's joint solve both ways, after a few steps (warm impulses): the warm start alone,
    then the passes before and after the contact solve; same velocities and impulses."""
    sim = _scene(dim, kind, rng)
    for _ in range(6):
        sim.step()
    rows = J.prepare(sim.alg, sim.bodies, sim.joints, sim.info.handle_to_row, sim.settings.dt, sim.settings)
    assert rows is not None and rows.sel.size == 6
    assert len(rows.bounds) - 1 >= 3  # body 1 holds three joints: at least three colours
    N = sim.bodies.count
    assert np.any(rows.b == N) or kind == "wheel"  # a world side
    assert np.abs(rows.lam).max() > 0.0  # warm-started
    res = {}
    for compiled in (False, True):
        r, b = copy.deepcopy(rows), copy.deepcopy(sim.bodies)
        s = Settings(compiled=compiled)
        J.run(r, b, 0, True, settings=s)
        warm = (b.velocity.copy(), b.angular_velocity.copy())
        J.run(r, b, sim.settings.joint_passes, False, settings=s)
        J.run(r, b, sim.settings.joint_passes_after, False, settings=s)
        res[compiled] = (warm, b, r.lam)
    (w0, b0, lam0), (w1, b1, lam1) = res[False], res[True]
    assert _close(w0[0], w1[0]) < TOL and _close(w0[1], w1[1]) < TOL
    assert _close(b0.velocity, b1.velocity) < TOL
    assert _close(b0.angular_velocity, b1.angular_velocity) < TOL
    assert _close(lam0, lam1) < TOL
    # the solve did something: velocities moved and the impulses changed from the warm start
    assert _close(b0.velocity, sim.bodies.velocity) > 1e-3
    assert _close(lam0, rows.lam) > 1e-6
    R = sim.alg.n + sim.alg.k
    if kind in SCALAR:
        assert np.abs(lam0[:, R:]).max() > 1e-6


@pytest.mark.parametrize("passes", [0, 1, 3])
@dims()
def test_pass_counts_and_cold_start(dim: int, passes: int, rng: np.random.Generator) -> None:
    """Few passes, and no warm start, on a scene of every kind at once: still the same."""
    sims = [_scene(dim, kind, rng) for kind in KINDS]
    for sim in sims:
        for _ in range(3):
            sim.step()
        rows = J.prepare(sim.alg, sim.bodies, sim.joints, sim.info.handle_to_row, sim.settings.dt,
                         sim.settings)
        out = []
        for compiled in (False, True):
            r, b = copy.deepcopy(rows), copy.deepcopy(sim.bodies)
            J.run(r, b, passes, passes == 0, settings=Settings(compiled=compiled))
            out.append((b.velocity, b.angular_velocity, r.lam))
        for x, y in zip(out[0], out[1], strict=True):
            assert _close(x, y) < TOL


def _every_kind_world(dim: int, compiled: bool) -> Simulation:
    """A ragdoll pile (bench.joints: point joints and limited hinges, contacts with a floor and
    each other) and, apart from it, the chain scene of every kind, thrown."""
    from ndrigid.bench.joints import ragdoll_pile

    sim = ragdoll_pile(dim, 3, seed=dim, settings=Settings(compiled=compiled))
    rng = np.random.default_rng(dim)
    far, up = 6.0 * np.eye(dim)[0], np.eye(dim)[1]
    alg = sim.alg
    for i, kind in enumerate(KINDS):
        bodies = []
        for j in range(3):
            bodies.append(sim.add_body(Box(np.full(dim, 0.08)) if j % 2 else Ball(dim, 0.08),
                                       position=far * (1 + i) + (2.0 + 0.4 * j) * up,
                                       rotor=alg.rotor(rng.normal(size=alg.k)), mass=1.0,
                                       velocity=rng.normal(size=dim),
                                       angular_velocity=rng.normal(size=alg.k)))
        if kind == "wheel":
            _join(sim, kind, bodies[0], bodies[1], rng)
        else:
            _join(sim, kind, bodies[0], None, rng)
            _join(sim, kind, bodies[0], bodies[1], rng)
        _join(sim, kind, bodies[1], bodies[2], rng)
    return sim


@dims()
def test_simulation_steps_agree(dim: int) -> None:
    """Whole steps with every stage, compiled (the default) against Settings(compiled=False):
    poses, velocities and joint impulses agree to 1e-9 over 30 steps, while the ragdolls land.

    (Measured: both paths stay within 1e-13 for 30 steps in 2-D to 5-D; from about step 35 the
    landing pile of 4-D and 5-D meets branches of the contact solve where rounding-level
    differences choose differently and the runs part, by 1e-5 m within a few steps. The contact
    kernels alone, with the same joint solve on both sides, part at the same step.)"""
    sims = {c: _every_kind_world(dim, c) for c in (False, True)}
    for _ in range(30):
        for sim in sims.values():
            sim.step()
    a, b = sims[False].bodies, sims[True].bodies
    for name in ("position", "rotor", "velocity", "angular_velocity"):
        assert _close(getattr(a, name), getattr(b, name)) < TOL, name
    assert _close(sims[False].joints.impulse, sims[True].joints.impulse) < TOL
    assert sims[True].contacts is not None and sims[True].contacts.count > 0  # the ragdolls landed
    assert np.abs(sims[True].joints.impulse).max() > 1e-3


@pytest.mark.parametrize("kind", KINDS)
@dims()
def test_position_pass_lockstep(dim: int, kind: str, rng: np.random.Generator) -> None:
    """The position pass (joint_positions.project) both ways on the same moved bodies: the errors
    and moves by the kernels, the sparse solves by scipy on both; same poses and velocities. It
    moves the bodies of every kind with rigid rows (not a spring, nor a soft weld).

    The scene's joint to the moving kinematic body is removed first: with it the rigid kinds
    close a loop world - body 0 - body 1 - body 4 - mover that no pose can satisfy, where the
    regularised matrix (relative 1e-10) turns rounding into differences of ~1e-8."""
    from ndrigid.core.dynamics import integrate, joint_positions

    sim = _scene(dim, kind, rng)
    sim.remove_joint(int(sim.joint_handles()[1]))  # the second joint made: body 4 and the mover
    for _ in range(6):
        sim.step()
    dt = sim.settings.dt
    rows = J.prepare(sim.alg, sim.bodies, sim.joints, sim.info.handle_to_row, dt, sim.settings)
    J.run(rows, sim.bodies, sim.settings.joint_passes, True, settings=Settings(compiled=False))
    integrate.advance_poses(sim.alg, sim.bodies, dt)
    res = {}
    for compiled in (False, True):
        b = copy.deepcopy(sim.bodies)
        passes = sim.settings.joint_position_passes
        joint_positions.project(sim.alg, b, sim.joints, copy.deepcopy(rows), passes, dt, compiled=compiled)
        res[compiled] = b
    for name in ("position", "rotor", "rotation", "velocity", "angular_velocity"):
        assert _close(getattr(res[False], name), getattr(res[True], name)) < TOL, name
    moved = _close(res[True].position, sim.bodies.position)
    assert (moved == 0.0) if kind in ("spring", "soft_weld") else (moved > 1e-12), moved
