"""The compiled kernels against the vectorised numpy path, stage by stage, in 2-D to 5-D.

Both paths state the same method on the same rows in the same order (the kernels' module notes
say how the solver's serial loop reproduces the colour batches); they may differ only by the
order of floating-point sums, so every state and impulse must agree to 1e-9. The numpy path is
itself checked against outside references elsewhere (test_solver, test_integrate, test_scenes);
this file pins the compiled path to it.
"""

from __future__ import annotations

import copy
import dataclasses

import numpy as np
import pytest
from ndrigid.core import Ball, Box, ConvexPolytope, HalfSpace, Settings, Simulation, kernels
from ndrigid.core.dynamics import integrate, solver

pytestmark = pytest.mark.skipif(not kernels.available(), reason="numba is not available")

DIMS = [2, 3, 4, 5]
TOL = 1e-9


def _close(x: np.ndarray, y: np.ndarray) -> float:
    return float(np.max(np.abs(x - y))) if x.size else 0.0


@pytest.mark.parametrize("dim", [*DIMS, 6])
def test_rotor_exponential_matches_algebra(dim: int) -> None:
    """exp(-B/2): generic, simple, isoclinic (e_01 + e_23, the closed form's fallback) and zero."""
    mod = kernels.load("integrate", dim)
    sim = Simulation(dim)
    alg = sim.alg
    rng = np.random.default_rng(dim)
    cases = [rng.normal(size=alg.k) * s for s in (1e-3, 0.3, 2.0, 7.0)]
    simple = np.zeros(alg.k)
    simple[0] = 1.3
    cases += [simple, np.zeros(alg.k)]
    if dim >= 4:
        iso = np.zeros(alg.k)
        iso[0] = 0.8  # e_01
        iso[list(map(tuple, alg.pairs)).index((2, 3))] = 0.8  # e_23: equal angles
        cases.append(iso)
    for B in cases:
        got = np.empty(alg.even_size)
        mod.rotor_exp(np.ascontiguousarray(B), -0.5, got, mod._workspace())
        assert _close(got, alg.rotor(B)) < 1e-12, B


def _random_world(dim: int) -> Simulation:
    rng = np.random.default_rng(10 + dim)
    sim = Simulation(dim, settings=Settings(sleep_enabled=False))
    alg = sim.alg
    for i in range(24):
        shape = Box(rng.uniform(0.1, 1.0, dim)) if i % 2 else Ball(dim, 0.3)
        sim.add_body(shape, position=rng.normal(size=dim) * 5, rotor=alg.rotor(rng.normal(size=alg.k)),
                     velocity=rng.normal(size=dim), angular_velocity=rng.normal(size=alg.k) * 3,
                     linear_damping=0.1 * (i % 3), angular_damping=0.2 * (i % 2))
    # an irregular hull: its principal frame is not the body frame
    sim.add_body(ConvexPolytope(rng.normal(size=(3 * dim + 3, dim))), position=np.zeros(dim),
                 angular_velocity=rng.normal(size=alg.k) * 4)
    sim.add_body(Box(np.ones(dim)), position=np.full(dim, -9.0), kind="kinematic", velocity=np.ones(dim),
                 angular_velocity=np.ones(alg.k))
    return sim


@pytest.mark.parametrize("mode", ["none", "explicit", "implicit"])
@pytest.mark.parametrize("dim", DIMS)
def test_integration_lockstep(dim: int, mode: str) -> None:
    sim = _random_world(dim)
    out = {compiled: copy.deepcopy(sim.bodies) for compiled in (False, True)}
    torque = np.random.default_rng(1).normal(size=sim.bodies.torque.shape)
    force = np.random.default_rng(2).normal(size=sim.bodies.force.shape)
    for compiled, b in out.items():
        b.torque[:] = torque
        b.force[:] = force
        for _ in range(30):
            integrate.accelerate(sim.alg, b, sim.gravity, 1 / 60, mode, compiled=compiled)
            integrate.advance_poses(sim.alg, b, 1 / 60, compiled=compiled)
    for name in ("velocity", "angular_velocity", "position", "rotor", "rotation"):
        assert _close(getattr(out[False], name), getattr(out[True], name)) < TOL, name


def _settled_pile(dim: int) -> Simulation:
    from ndrigid.bench.scenes import SCENES

    sim, _ = SCENES["pile"](dim, 40, 3)
    sim.with_settings(compiled=False)
    # mixed couple coefficients (rows combine them by the geometric mean), some 0
    rng = np.random.default_rng(dim)
    for h in sim.handles:
        sim.set_material(int(h), rolling_resistance=rng.choice([0.0, 0.0005, 0.002, 0.01]),
                         spin_friction=rng.choice([0.0, 0.002, 0.004, 0.02]))
    for _ in range(90):
        sim.step()
    return sim


def _settled_heavy_on_light(dim: int) -> Simulation:
    from test_reference import scene_heavy_on_light

    sim = scene_heavy_on_light(dim, 7, Settings(sleep_enabled=False, compiled=False))
    for _ in range(30):
        sim.step()
    return sim


@pytest.mark.parametrize("scene", ["pile", "heavy_on_light"])
@pytest.mark.parametrize("dim", DIMS)
def test_solver_lockstep(dim: int, scene: str) -> None:
    """One solve of a settling pile (warm impulses, friction cones, sliding rows, pushes), and of
    heavy boxes on light bodies (the shock-propagation sweep), both ways: same impulses by key,
    velocities, poses and sliding flags."""
    from ndrigid.core.world import stages

    sim = _settled_pile(dim) if scene == "pile" else _settled_heavy_on_light(dim)
    dt = sim.settings.dt
    stages._stage_accelerate(sim, dt)
    stages._stage_find_pairs(sim, dt)
    stages._stage_find_contacts(sim, dt)
    assert sim.contacts is not None and sim.contacts.count > (20 if scene == "pile" else 4)
    res = {}
    for compiled in (False, True):
        b = copy.deepcopy(sim.bodies)
        caches = copy.deepcopy(sim.caches)
        settings = dataclasses.replace(sim.settings, compiled=compiled)
        solver.solve_impulses(sim.alg, b, sim.contacts, dt, settings, caches)
        res[compiled] = (b, caches["solver"])
    (b0, c0), (b1, c1) = res[False], res[True]
    assert np.array_equal(c0["key"], c1["key"])
    assert _close(c0["normal"], c1["normal"]) < TOL
    assert _close(c0["tangent"], c1["tangent"]) < TOL
    assert np.array_equal(c0["sliding"], c1["sliding"])
    assert np.max(c0["normal"]) > 0.0  # the pile rests on its contacts: impulses were solved
    for name in ("velocity", "angular_velocity", "position", "rotor", "rotation"):
        assert _close(getattr(b0, name), getattr(b1, name)) < TOL, name


@pytest.mark.parametrize("dim", DIMS)
def test_colouring_matches_numpy(dim: int) -> None:
    """The kernel's serial greedy colouring gives the colours of the numpy path's Luby rounds."""
    rng = np.random.default_rng(dim)
    M, nb = 400, 60
    a = rng.integers(0, nb, M)
    b = (a + rng.integers(1, nb, M)) % nb
    slot = rng.random(nb) > 0.2
    key = rng.integers(-(1 << 62), 1 << 62, M)
    mod = kernels.load("solver", dim)
    got = mod.colour_rows(a, b, slot[a], slot[b], key, nb)
    want = solver.colour_items(a, b, slot[a], slot[b], solver._ranks(key), nb)
    assert np.array_equal(got, want)


def _box_pairs(dim: int, P: int = 240) -> tuple:
    """Box pairs: a third resting face to face (exact ties in the point selection), a third turned a
    little (clipped patches), a third in random poses (mixed axes, separated within the margin)."""
    from ndrigid.core.algebra import Algebra

    alg = Algebra(dim)
    rng = np.random.default_rng(100 + dim)
    rot = [alg.rotor_to_matrix(alg.rotor(rng.normal(size=alg.k))) for _ in range(P)]
    Ra = np.stack(rot)
    turn = np.stack([alg.rotor_to_matrix(alg.rotor(rng.normal(size=alg.k) * [0.0, 0.05, 2.0][i % 3]))
                     for i in range(P)])
    Rb = np.einsum("pij,pjk->pik", Ra, turn)
    ha = rng.uniform(0.2, 1.0, (P, dim))
    hb = rng.uniform(0.2, 1.0, (P, dim))
    pa = rng.normal(size=(P, dim)) * 0.1
    direction = rng.normal(size=(P, dim))
    direction /= np.linalg.norm(direction, axis=1, keepdims=True)
    kind = np.arange(P) % 3
    direction = np.where((kind != 2)[:, None], Ra[:, :, 1], direction)
    dist = np.where(kind == 2, rng.uniform(0.3, 2.0, P), (ha[:, 1] + hb[:, 1]) * rng.uniform(0.9, 1.02, P))
    pb = pa + direction * dist[:, None]
    return alg, pa, Ra, ha, pb, Rb, hb, np.full(P, 0.02)


@pytest.mark.parametrize("dim", DIMS)
def test_box_box_lockstep(dim: int) -> None:
    """The compiled box/box kernel gives the numpy path's rows: same pairs and feature ids in the
    same order, normals, points and depths to 1e-9."""
    from ndrigid.core.collision import sat

    alg, *args = _box_pairs(dim)
    want = sat.box_box(alg, *args)
    got = sat.box_box_compiled(alg, *args)
    assert len(want.pair) > len(args[0])  # face contacts with several points each
    assert np.array_equal(want.pair, got.pair)
    assert np.array_equal(want.feature, got.feature)
    for name in ("normal", "point", "depth"):
        assert _close(getattr(want, name), getattr(got, name)) < TOL, name


@pytest.mark.parametrize("dim", DIMS)
def test_speculative_row_at_a_rounding_noise_speed(dim: int) -> None:
    """A ball just above a floor, closing at 1e-323 m/s (a subnormal: closing x dt is 0.0 in
    floating point). The time of impact gap / (closing x dt) must not divide by zero on either
    path (the compiled one raised ZeroDivisionError before the numpy path's floor of 1e-300 was
    applied there too); both keep the speed and agree."""
    res = {}
    for compiled in (False, True):
        settings = Settings(compiled=compiled, sleep_enabled=False)
        sim = Simulation(dim, gravity=np.zeros(dim), settings=settings)
        sim.add_body(HalfSpace(np.eye(dim)[1], 0.0), kind="static")
        v = np.zeros(dim)
        v[1] = -1e-323
        h = sim.add_body(Ball(dim, 0.5), position=0.501 * np.eye(dim)[1], velocity=v)
        sim.step()
        assert sim.contacts is not None and sim.contacts.count == 1  # the speculative row was solved
        res[compiled] = sim.velocity(h)
    assert np.all(np.isfinite(res[True])) and _close(res[False], res[True]) < TOL
