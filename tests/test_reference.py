"""The vectorised stages against the scalar reference path (``core/reference.py``).

The reference is a second, independent statement of the same algorithms (plain loops over bodies,
pairs and contacts; the box/box separating axes as determinants instead of minor tables), so the
checks here are brute force against brute force:

* broadphase: the candidate pairs equal the all-pairs bounding-box test with the same filter
  rules, exactly;
* narrowphase: the same contact keys, and points, normals and depths to 1e-9, for random ball and
  box pairs (and compound pieces) in every pose, including separating-axis verdicts on mixed axes;
* stages in lockstep: every stage of six steps of small scenes, run on both paths from the very
  same input (a copy taken just before the stage), gives the same pairs, contacts, accumulated
  impulses and body state to 1e-9, for each solver batching;
* free runs: both paths stepped side by side from the same start agree each step and at the end.

A face contact can reach the same corner twice (an incident vertex and the clipped end of a
reference edge through it). Both copies carry one feature id, the set of side planes met there, and
the reduction keeps the first slot of each id, so both paths keep the same copy under the same key:
the random-pair test requires every point to match by key (``match_contacts`` would fall back to
matching by position, and the count of such points must be zero). The free runs therefore use the
default point batching, whose batch order comes from the contact keys (salted per step).
Scenes have small random tilts so that no other exact ties arise.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.collision import broadphase, narrowphase
from ndrigid.core.errors import InputTypeError
from ndrigid.core.geometry.shapes import Ball, Box, Compound, HalfSpace
from ndrigid.core.reference import (
    collide_reference,
    find_pairs_reference,
    solve_impulses_reference,
    use_reference_stages,
)
from ndrigid.core.state.contacts import ContactSet
from ndrigid.core.world.simulation import Settings, Simulation

DT = 1.0 / 60.0
TOL = 1e-9


def match_contacts(cv: ContactSet, cr: ContactSet) -> tuple[np.ndarray, int]:
    """Row pairs (M, 2) matching the vectorised contacts to the reference ones: by key, and for a
    point whose key differs, by the same body pair and the same position (module notes).

    Returns the pairs and the number matched by position.
    """
    assert cv.count == cr.count
    by_key = {k: q for q, k in enumerate(cr.key.tolist())}
    pairs, loose = [], []
    for q, k in enumerate(cv.key.tolist()):
        if k in by_key:
            pairs.append((q, by_key.pop(k)))
        else:
            loose.append(q)
    rest = sorted(by_key.values())
    for q in loose:
        same = [r for r in rest if cv.body_a[q] == cr.body_a[r] and cv.body_b[q] == cr.body_b[r]
                and np.max(np.abs(cv.point[q] - cr.point[r])) <= TOL]
        assert len(same) == 1, f"contact {q} (feature {cv.feature[q]}) has no reference twin"
        pairs.append((q, same[0]))
        rest.remove(same[0])
    return np.array(pairs, dtype=np.int64).reshape(-1, 2), len(loose)


def assert_same_contacts(cv: ContactSet, cr: ContactSet) -> tuple[np.ndarray, int]:
    m, loose = match_contacts(cv, cr)
    qv, qr = m[:, 0], m[:, 1]
    for name in ("body_a", "body_b", "manifold"):
        np.testing.assert_array_equal(getattr(cv, name)[qv], getattr(cr, name)[qr], err_msg=name)
    for name in ("normal", "point", "depth", "friction", "restitution"):
        np.testing.assert_allclose(getattr(cv, name)[qv], getattr(cr, name)[qr], rtol=0, atol=TOL,
                                   err_msg=name)
    return m, loose


def random_scene(dim: int, rng: np.random.Generator, count: int = 6, floor: bool = False) -> Simulation:
    """Balls, boxes and a two-piece compound packed close together in random poses."""
    sim = Simulation(dim)
    alg = sim.alg
    compound = Compound([(Box(np.full(dim, 0.25)), np.r_[0.3, np.zeros(dim - 1)]),
                         (Ball(dim, 0.2), np.r_[-0.3, np.zeros(dim - 1)])])
    for _ in range(count):
        u = rng.random()
        shape = Box(rng.uniform(0.2, 0.6, dim)) if u < 0.6 else (Ball(dim, rng.uniform(0.2, 0.5)) if u < 0.9
                                                                   else compound)
        sim.add_body(shape, position=rng.uniform(-0.7, 0.7, dim), rotor=alg.rotor(rng.normal(size=alg.k)),
                     velocity=rng.normal(size=dim), angular_velocity=rng.normal(size=alg.k),
                     friction=rng.uniform(0.2, 0.8), restitution=rng.uniform(0.0, 0.5),
                     rolling_resistance=rng.uniform(0.0, 0.004), spin_friction=rng.uniform(0.0, 0.01))
    if floor:
        up = np.zeros(dim)
        up[1] = 1.0
        sim.add_body(HalfSpace(up, -0.6), kind="static")
    return sim


# -- broadphase -----------------------------------------------------------------------------------


@dims()
def test_pairs_equal_all_pairs_test_with_filters(dim: int, rng: np.random.Generator) -> None:
    """Pair lists agree exactly with the all-pairs test (brute force), including half-spaces, static
    and kinematic bodies, sensors, layer masks and sleeping bodies."""
    sim = random_scene(dim, rng, count=14, floor=True)
    b = sim.bodies
    b.kind[0] = 2  # static
    b.kind[1] = 1  # kinematic
    b.sensor[2] = True
    b.mask[3] = 0b10  # collides only with layer 2
    b.layer[4] = 0b10
    b.awake[5] = False
    for _ in range(3):  # a few random configurations of the same bodies
        b.position[:-1] = rng.uniform(-1.2, 1.2, size=(b.count - 1, dim))
        pv = broadphase.find_pairs(sim.alg, b, sim.info.shapes, sim.settings, {}, DT)
        pr = find_pairs_reference(sim.alg, b, sim.info.shapes, sim.settings, {}, DT)
        np.testing.assert_array_equal(pv, pr)
        assert len(pv) > 0


# -- narrowphase ----------------------------------------------------------------------------------


@dims()
def test_contacts_equal_on_random_pairs(dim: int, rng: np.random.Generator) -> None:
    """Random ball/box/compound pairs in random poses: same contact set and geometry to 1e-9, and the
    same touching lists. The box/box pairs cover face and mixed separating axes in every n."""
    total = loose = 0
    for _ in range(12 if dim < 5 else 6):
        sim = random_scene(dim, rng)
        b = sim.bodies
        pairs = broadphase.find_pairs(sim.alg, b, sim.info.shapes, sim.settings, {}, DT)
        cv, tv, sv = narrowphase.find_contacts(sim.alg, b, pairs, sim.info.shapes, sim.settings, {}, DT)
        cr, tr, sr = collide_reference(sim.alg, b, pairs, sim.info.shapes, sim.settings, {}, DT)
        np.testing.assert_array_equal(tv, tr)
        np.testing.assert_array_equal(sv, sr)
        _, lo = assert_same_contacts(cv, cr)
        total += cv.count
        loose += lo
    assert total > 20
    assert loose == 0  # coincident twins share their plane-set feature id (module notes)


# -- whole steps ----------------------------------------------------------------------------------


def _floor(sim: Simulation) -> None:
    up = np.zeros(sim.dim)
    up[1] = 1.0
    sim.add_body(HalfSpace(up, 0.0), kind="static")


def _at(dim: int, x: float, y: float) -> np.ndarray:
    p = np.zeros(dim)
    p[0], p[1] = x, y
    return p


def scene_mixed(dim: int, seed: int, settings: Settings) -> Simulation:
    """Balls and boxes on a floor, touching each other, one bouncing in fast."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, settings=settings)
    alg = sim.alg
    _floor(sim)

    def tilt() -> np.ndarray:
        return alg.rotor(rng.normal(size=alg.k) * 0.05)

    sim.add_body(Box(np.linspace(0.3, 0.5, dim)), position=_at(dim, 0.0, 0.29), rotor=tilt(), friction=0.6)
    sim.add_body(Ball(dim, 0.3), position=_at(dim, 0.78, 0.29), velocity=_at(dim, -1.0, 0.0), friction=0.4)
    sim.add_body(Ball(dim, 0.25), position=_at(dim, -0.8, 0.6), velocity=_at(dim, 0.5, -4.0), restitution=0.7)
    sim.add_body(Box(np.full(dim, 0.2)), position=_at(dim, 1.5, 0.19), rotor=tilt(),
                 angular_velocity=rng.normal(size=alg.k), restitution=0.3)
    return sim


def scene_stack(dim: int, seed: int, settings: Settings) -> Simulation:
    """Three boxes stacked on a floor, slightly tilted and overlapping (pushed apart softly)."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, settings=settings)
    _floor(sim)
    for i in range(3):
        sim.add_body(Box(np.full(dim, 0.5)), position=_at(dim, rng.uniform(-0.05, 0.05), 0.49 + 0.99 * i),
                     rotor=sim.alg.rotor(rng.normal(size=sim.alg.k) * 0.03), friction=0.7)
    return sim


def scene_ball_on_box(dim: int, seed: int, settings: Settings) -> Simulation:
    """A ball dropped onto a box resting on a floor."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, settings=settings)
    _floor(sim)
    sim.add_body(Box(np.full(dim, 0.4)), position=_at(dim, 0.0, 0.395),
                 rotor=sim.alg.rotor(rng.normal(size=sim.alg.k) * 0.03))
    sim.add_body(Ball(dim, 0.3), position=_at(dim, 0.1, 1.12), velocity=_at(dim, 0.0, -1.5), restitution=0.4)
    return sim


def scene_heavy_on_light(dim: int, seed: int, settings: Settings) -> Simulation:
    """A 300 kg box on a 1 kg box on a floor, beside a 1 kg ball under a 100 kg box (the heavy-on-
    light rows and the rows beneath them take the shock-propagation sweep)."""
    rng = np.random.default_rng(seed)
    sim = Simulation(dim, settings=settings)
    _floor(sim)
    tilt = sim.alg.rotor(rng.normal(size=sim.alg.k) * 0.02)
    sim.add_body(Box(np.full(dim, 0.25)), position=_at(dim, 0.0, 0.248), mass=1.0)
    sim.add_body(Box(np.full(dim, 0.25)), position=_at(dim, 0.01, 0.745), rotor=tilt, mass=300.0)
    sim.add_body(Ball(dim, 0.2), position=_at(dim, 2.0, 0.199), mass=1.0)
    sim.add_body(Box(np.full(dim, 0.3)), position=_at(dim, 2.05, 0.697), mass=100.0)
    return sim


SCENES = {"mixed": scene_mixed, "stack": scene_stack, "ball_on_box": scene_ball_on_box,
          "heavy_on_light": scene_heavy_on_light}


def impulses_by_key(sim: Simulation) -> dict[int, tuple[float, np.ndarray, bool]]:
    cache = sim.caches["solver"]
    return {int(k): (float(cache["normal"][q]), cache["tangent"][q], bool(cache["sliding"][q]))
            for q, k in enumerate(cache["key"].tolist())}


def assert_same_bodies(vec: Simulation, ref: Simulation) -> None:
    for name in ("positions", "rotors", "velocities", "angular_velocities"):
        np.testing.assert_allclose(getattr(vec, name), getattr(ref, name), rtol=0, atol=TOL, err_msg=name)


def assert_same_impulses(vec: Simulation, ref: Simulation, m: np.ndarray) -> int:
    """Impulses of matched contacts (rows of vec.contacts, ref.contacts) agree; returns how many push."""
    iv, ir = impulses_by_key(vec), impulses_by_key(ref)
    pushing = 0
    for qv, qr in m:
        nv, tv, sv = iv[int(vec.contacts.key[qv])]
        nr, tr, sr = ir[int(ref.contacts.key[qr])]
        scale = max(1.0, abs(nv))
        assert abs(nv - nr) <= TOL * scale, (nv, nr)
        np.testing.assert_allclose(tv, tr, rtol=0, atol=TOL * scale)
        assert sv == sr
        pushing += nv > 0.0
    return pushing


def check_lockstep(dim: int, build, steps: int, settings: Settings) -> None:
    """Every stage of every step from the same input: the vectorised stage on the simulation, the
    reference stage on a copy taken just before it; outputs compared, then the vectorised run goes on.

    This isolates each stage: e.g. the solvers see the very same contact set, so a coincident twin
    kept differently by the two narrowphases cannot change the solver's batch order.
    """
    from ndrigid.core.reference import _REFERENCE_STAGES

    vec = build(dim, 7, settings)
    saw_contacts = saw_push = 0
    for _ in range(steps):
        vec.events, vec._pending_events = vec._pending_events, []
        for name, stage in vec.stages:
            ref = copy.deepcopy(vec)
            stage(vec, DT)
            if name not in _REFERENCE_STAGES:
                continue
            _REFERENCE_STAGES[name](ref, DT)
            if name == "find_pairs":
                np.testing.assert_array_equal(vec.pairs, ref.pairs)
            elif name == "find_contacts":
                m, _ = assert_same_contacts(vec.contacts, ref.contacts)
                assert vec.events == ref.events
                saw_contacts += vec.contacts.count
            elif name == "solve_impulses":
                m = np.stack([np.arange(vec.contacts.count)] * 2, axis=1)
                saw_push += assert_same_impulses(vec, ref, m)
            assert_same_bodies(vec, ref)
        vec.bodies.force[...] = 0.0
        vec.bodies.torque[...] = 0.0
    assert saw_contacts > 0 and saw_push > 0


def check_free_run(dim: int, build, steps: int, settings: Settings) -> None:
    """A vectorised and a reference-stage copy of one scene stepped side by side from the same
    start: each step's contacts and impulses, the events, and the final state agree."""
    vec = build(dim, 7, settings)
    ref = build(dim, 7, settings)
    use_reference_stages(ref)
    saw_push = 0
    for _ in range(steps):
        vec.step()
        ref.step()
        np.testing.assert_array_equal(vec.pairs, ref.pairs)
        m, _ = assert_same_contacts(vec.contacts, ref.contacts)
        saw_push += assert_same_impulses(vec, ref, m)
        assert [e[:3] for e in vec.events] == [e[:3] for e in ref.events]
    assert saw_push > 0
    assert_same_bodies(vec, ref)


@pytest.mark.parametrize("scene", list(SCENES))
@dims()
def test_stages_agree_in_lockstep(dim: int, scene: str) -> None:
    """Six steps of each small scene, stage by stage, with the default (point) batching."""
    check_lockstep(dim, SCENES[scene], 6, Settings(sleep_enabled=False))


@pytest.mark.parametrize("batching", ["manifold", "jacobi"])
@dims(3, 4)
def test_lockstep_for_the_other_batchings(dim: int, batching: str) -> None:
    """Colour by manifold with mass splitting inside one, and one Jacobi batch."""
    check_lockstep(dim, scene_stack, 4, Settings(sleep_enabled=False, solver_batching=batching))


@pytest.mark.parametrize("scene", list(SCENES))
@dims()
def test_free_runs_agree(dim: int, scene: str) -> None:
    """Six whole steps on each path with the default point batching: the same keys, hence the same
    salted batch order, every step (module notes)."""
    check_free_run(dim, SCENES[scene], 6, Settings(sleep_enabled=False))


def test_solve_without_contacts_resets_the_cache() -> None:
    """No contacts: the reference leaves velocities alone and empties the impulse cache, like the solver."""
    sim = Simulation(3)
    sim.add_body(Ball(3, 0.5), velocity=[1.0, 0.0, 0.0])
    sim.caches["solver"] = {"key": np.array([1])}
    solve_impulses_reference(sim.alg, sim.bodies, None, DT, sim.settings, sim.caches)
    assert sim.caches["solver"]["key"].size == 0
    np.testing.assert_array_equal(sim.velocity(0), [1.0, 0.0, 0.0])


def test_use_reference_stages_keeps_names_and_rejects_non_simulations() -> None:
    sim = Simulation(2)
    names = [name for name, _ in sim.stages]
    use_reference_stages(sim)
    assert [name for name, _ in sim.stages] == names
    # the event bookkeeping and the islands have no scalar twin: they are shared
    assert all(fn.__module__ == "ndrigid.core.reference"
               for name, fn in sim.stages if name not in ("settle_islands", "report_contacts"))
    with pytest.raises(InputTypeError, match="sim: expected a Simulation"):
        use_reference_stages(object())
