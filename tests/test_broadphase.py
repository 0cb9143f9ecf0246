"""Broadphase pairs against a brute-force all-pairs bounding-box test.

References:
* the world bounding box of a convex shape under a rotation M is [p_i - h(-M^T e_i), p_i + h(M^T e_i)]
  with h(d) = max_x d . x the support function (convex-geometry definition), evaluated here from
  each shape's own ``support``, independently of the broadphase's per-kind formulas;
* a box reaches a half-space u . x <= d iff its lowest corner does (brute force over the 2^n corners);
* the pair set is compared with the O(N^2) test of every pair (brute force);
* filter rules as documented in core/collision/broadphase.py (layer/mask bits as in the Simulation docstring).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.collision import broadphase as bp
from ndrigid.core.geometry.polytopes import regular_simplex
from ndrigid.core.geometry.shapes import Ball, Box, Compound, HalfSpace
from ndrigid.core.state.components import DYNAMIC, STATIC
from ndrigid.core.world.simulation import Settings, Simulation

DT = 1.0 / 60.0


def _reference_boxes(sim: Simulation) -> tuple[np.ndarray, np.ndarray]:
    """World boxes (N, n) from each shape's support function (half-spaces: infinite)."""
    b = sim.bodies
    N, n = b.count, sim.dim
    lo = np.full((N, n), -np.inf)
    hi = np.full((N, n), np.inf)
    eye = np.eye(n)
    for r in range(N):  # test code: a plain loop over bodies is the point of a brute force
        s = sim.info.shapes[int(b.shape_id[r])]
        if isinstance(s, HalfSpace):
            continue
        M = b.rotation[r]
        dirs = eye @ M  # row i is M^T e_i
        up = np.einsum("ij,ij->i", s.support(dirs), dirs)
        down = np.einsum("ij,ij->i", s.support(-dirs), -dirs)
        hi[r] = b.position[r] + up
        lo[r] = b.position[r] - down
    return lo, hi


def _reference_fat(sim: Simulation) -> np.ndarray:
    b, s = sim.bodies, sim.settings
    reach = b.radius + np.linalg.norm(b.local_centroid, axis=1)
    reach = np.where(np.isfinite(reach), reach, 0.0)
    speed = np.linalg.norm(b.velocity, axis=1) + np.linalg.norm(b.angular_velocity, axis=1) * reach
    return max(s.broadphase_margin, s.speculative_margin / 2) + DT * speed


def _reference_pairs(sim: Simulation) -> set[tuple[int, int]]:
    b = sim.bodies
    n = sim.dim
    lo, hi = _reference_boxes(sim)
    fat = _reference_fat(sim)
    lo, hi = lo - fat[:, None], hi + fat[:, None]
    half = np.isinf(lo).all(axis=1)
    bounded = np.flatnonzero(~half)
    ov = np.ones((bounded.size, bounded.size), dtype=bool)
    for i in range(n):
        li, hi_ = lo[bounded, i], hi[bounded, i]
        ov &= (li[:, None] <= hi_[None, :]) & (li[None, :] <= hi_[:, None])
    ia, ib = np.nonzero(np.triu(ov, 1))
    cand = set(zip(bounded[ia].tolist(), bounded[ib].tolist(), strict=True))
    # half-spaces: the lowest of the fattened box's 2^n corners along the world normal
    corners = np.array(np.meshgrid(*[[0, 1]] * n, indexing="ij")).reshape(n, -1).T  # (2^n, n)
    for h in np.flatnonzero(half):
        s = sim.info.shapes[int(b.shape_id[h])]
        u = b.rotation[h] @ s.normal
        d = s.offset + u @ b.position[h]
        pts = lo[bounded][:, None, :] + corners[None] * (hi[bounded] - lo[bounded])[:, None, :]
        low = (pts @ u).min(axis=1)
        for j in bounded[low <= d + fat[h]]:
            cand.add((min(int(j), int(h)), max(int(j), int(h))))
    out = set()
    inert = (b.kind == STATIC) | ~b.awake
    responds = (b.kind == DYNAMIC) | b.sensor
    for a, c in cand:
        if not (int(b.layer[a]) & int(b.mask[c]) and int(b.layer[c]) & int(b.mask[a])):
            continue
        if inert[a] and inert[c]:
            continue
        if not (responds[a] or responds[c]):
            continue
        out.add((a, c))
    return out


def _random_scene(dim: int, count: int, rng: np.random.Generator) -> Simulation:
    sim = Simulation(dim)
    alg = sim.alg
    up = np.zeros(dim)
    up[1] = 1.0
    tilt = up + 0.3 * rng.normal(size=dim)
    sim.add_body(HalfSpace(up, 0.0), kind="static")
    sim.add_body(HalfSpace(tilt, -2.0), kind="static", position=rng.normal(size=dim))
    shapes = [Ball(dim, 0.3), Ball(dim, 0.6), Box(rng.uniform(0.1, 0.6, dim)),
              Box(rng.uniform(0.1, 0.6, dim)), regular_simplex(dim, edge=0.8),
              Compound([(Ball(dim, 0.2), np.full(dim, 0.3)), (Box(np.full(dim, 0.2)), -np.full(dim, 0.3))])]
    edge = 1.6 * (count / 4.0) ** (1.0 / dim)
    pos = rng.uniform(-0.5, edge, size=(count, dim))
    rot = alg.rotor(rng.normal(scale=2.0, size=(count, alg.k)))
    vel = rng.normal(scale=3.0, size=(count, dim))
    om = rng.normal(size=(count, alg.k))
    kinds = rng.choice(["dynamic", "kinematic", "static"], p=[0.7, 0.1, 0.2], size=count)
    which = rng.choice(len(shapes), p=[0.3, 0.1, 0.3, 0.2, 0.05, 0.05], size=count)
    layers = rng.choice([1, 2, 4, 3], size=count)
    masks = rng.choice([0xFFFFFFFF, 1, 2, 5, 6], size=count)
    for i in range(count):
        static = kinds[i] == "static"
        sim.add_body(shapes[which[i]], position=pos[i], rotor=rot[i], kind=str(kinds[i]),
                     velocity=None if static else vel[i], angular_velocity=None if static else om[i],
                     layer=int(layers[i]), mask=int(masks[i]), sensor=bool(rng.random() < 0.05))
    b = sim.bodies
    b.awake[:] = rng.random(b.count) > 0.2  # some bodies asleep (set directly: the broadphase only reads it)
    return sim


@dims()
def test_pairs_equal_brute_force_on_random_scenes(dim: int, rng: np.random.Generator) -> None:
    """Mixed shapes, static/kinematic/asleep bodies, random layers and masks, two half-spaces."""
    count = 2000 if dim <= 3 else 1200
    sim = _random_scene(dim, count, rng)
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    got = set(map(tuple, pairs.tolist()))
    assert len(got) == len(pairs)  # no duplicates
    assert np.all(pairs[:, 0] < pairs[:, 1])
    assert np.all(np.diff(pairs[:, 0] * sim.bodies.count + pairs[:, 1]) > 0)  # sorted
    want = _reference_pairs(sim)
    assert len(want) > 50  # the scene is dense enough to test something
    assert got == want


@dims()
def test_world_boxes_match_support_function(dim: int, rng: np.random.Generator) -> None:
    sim = _random_scene(dim, 200, rng)
    lo, hi = bp.world_aabbs(sim.alg, sim.bodies, sim.info.shapes, sim.caches)
    rlo, rhi = _reference_boxes(sim)
    fin = np.isfinite(rlo)
    np.testing.assert_allclose(lo[fin], rlo[fin], atol=1e-12)
    np.testing.assert_allclose(hi[fin], rhi[fin], atol=1e-12)


def _brute_box_pairs(lo: np.ndarray, hi: np.ndarray) -> set[tuple[int, int]]:
    ov = np.all((lo[:, None, :] <= hi[None]) & (lo[None] <= hi[:, None, :]), axis=2)
    a, b = np.nonzero(np.triu(ov, 1))
    return set(zip(a.tolist(), b.tolist(), strict=True))


@dims()
@pytest.mark.parametrize("shift", [0.0, 1e13], ids=["one-cluster", "clusters-1e13-apart"])
def test_grid_and_sweep_and_prune_agree_with_brute_force(dim: int, shift: float,
                                                          rng: np.random.Generator) -> None:
    """Plain boxes with a few huge outliers (the grid's direct path); with clusters 1e13 m apart the
    occupied cell range overflows the exact integer keys and hashed keys are used."""
    N = 600
    c = rng.uniform(0, 6, size=(N, dim)) + shift * rng.integers(0, 2, size=(N, dim))
    e = rng.uniform(0.05, 0.5, size=(N, dim))
    e[:5] *= 12.0  # outliers spanning many cells
    lo, hi = c - e, c + e
    want = _brute_box_pairs(lo, hi)
    for fn in (bp.grid_pairs, bp.sweep_and_prune_pairs):
        got = fn(lo, hi)
        pairs = {(min(a, b), max(a, b)) for a, b in got.tolist()}
        assert pairs == want, fn.__name__
        assert len(pairs) == len(got), fn.__name__


@dims()
def test_fast_body_is_paired_through_its_swept_box(dim: int) -> None:
    """A ball 1.5 m from a wall at 100 m/s reaches it within a 1/60 s step (x + v dt; speculative
    contacts, common practice): paired; at rest it is not (common practice)."""
    sim = Simulation(dim)
    sim.add_body(Box(np.full(dim, 0.5)), kind="static")
    p = np.zeros(dim)
    p[0] = 2.25
    fast = sim.add_body(Ball(dim, 0.25), position=p, velocity=-100.0 * np.eye(dim)[0])
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    assert pairs.tolist() == [[0, 1]]
    sim.set_velocity(fast, np.zeros(dim))
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    assert pairs.tolist() == []


@pytest.mark.parametrize(
    ("kind_a", "kind_b", "asleep_a", "asleep_b", "sensor_b", "expected"),
    [
        ("static", "static", False, False, False, False),
        ("static", "dynamic", False, True, False, False),
        ("dynamic", "dynamic", True, True, False, False),
        ("kinematic", "static", False, False, False, False),
        ("kinematic", "kinematic", False, False, False, False),
        ("kinematic", "dynamic", False, True, False, True),
        ("dynamic", "static", False, False, False, True),
        ("kinematic", "static", False, False, True, True),
    ],
    ids=["static-static", "static-asleep", "asleep-asleep", "kinematic-static", "kinematic-kinematic",
         "kinematic-asleep", "dynamic-static", "kinematic-static-sensor"],
)
def test_activity_filter(kind_a: str, kind_b: str, asleep_a: bool, asleep_b: bool, sensor_b: bool,
                         expected: bool) -> None:
    """Pairs in which neither body can respond are skipped (rules of core/collision/broadphase.py)."""
    sim = Simulation(3)
    sim.add_body(Ball(3, 0.5), kind=kind_a)
    sim.add_body(Ball(3, 0.5), kind=kind_b, position=[0.8, 0, 0], sensor=sensor_b)
    sim.bodies.awake[:] = [not asleep_a, not asleep_b]
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    assert (len(pairs) == 1) == expected


@pytest.mark.parametrize(("layer_a", "mask_a", "layer_b", "mask_b", "expected"),
                         [(1, 0xFFFFFFFF, 2, 0xFFFFFFFF, True), (1, 2, 2, 1, True), (1, 2, 2, 2, False),
                          (1, 1, 1, 0, False), (4, 6, 2, 4, True)],
                         ids=["all-masks", "crossed", "b-mask-misses-a", "zero-mask", "multi-bit"])
def test_layer_mask_rule(layer_a: int, mask_a: int, layer_b: int, mask_b: int, expected: bool) -> None:
    """A and B collide iff (A.layer & B.mask) and (B.layer & A.mask) are both non-zero."""
    sim = Simulation(2)
    sim.add_body(Ball(2, 0.5), layer=layer_a, mask=mask_a)
    sim.add_body(Ball(2, 0.5), position=[0.8, 0], layer=layer_b, mask=mask_b)
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    assert (len(pairs) == 1) == expected


def test_margin_covers_speculative_margin() -> None:
    """With broadphase_margin below speculative_margin / 2 the boxes still grow by half the speculative
    distance, so two balls 0.09 m apart (gap < 0.1 m) are paired."""
    sim = Simulation(2, settings=Settings(broadphase_margin=0.0, speculative_margin=0.1))
    sim.add_body(Ball(2, 0.5))
    sim.add_body(Ball(2, 0.5), position=[1.09, 0.0])
    pairs = bp.find_pairs(sim.alg, sim.bodies, sim.info.shapes, sim.settings, sim.caches, DT)
    assert pairs.tolist() == [[0, 1]]
