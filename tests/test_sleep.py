"""Tests of islands, sleeping and waking (``core/dynamics/sleep.py``) on contact sets built by hand.

References: connected components checked against a brute-force breadth-first search; the sleep
rule itself (an island sleeps when every member has rested for ``rest_time``; any disturbance
wakes the whole island) is the common practice of game physics engines (common practice).
Scenes through the Simulation are in ``test_scenes.py``.
"""

from __future__ import annotations

from collections import deque
from dataclasses import replace

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.dynamics.sleep import body_speeds, island_labels, settle_islands, wake_touched
from ndrigid.core.geometry.shapes import Ball, Box
from ndrigid.core.state.contacts import ContactSet, contact_keys
from ndrigid.core.world.simulation import Settings, Simulation

DT = 1.0 / 60.0


def pairs_set(sim: Simulation, a, b) -> ContactSet:
    a = np.asarray(a, dtype=np.int64)
    b = np.asarray(b, dtype=np.int64)
    M, n = a.shape[0], sim.dim
    up = np.zeros((M, n))
    up[:, 1] = 1.0
    f = np.zeros(M, dtype=np.int64)
    h = sim.bodies.handle
    return ContactSet(a, b, up, np.zeros((M, n)), np.zeros(M), f, np.arange(M), contact_keys(h[a], h[b], f),
                      np.full(M, 0.5), np.zeros(M))


def world(dim: int, count: int, settings: Settings | None = None) -> Simulation:
    """A static floor (row 0) and ``count`` balls (rows 1..count) at rest."""
    sim = Simulation(dim, settings=settings)
    sim.add_body(Box(np.full(dim, 5.0)), kind="static")
    for i in range(count):
        pos = np.zeros(dim)
        pos[0] = 2.0 * i
        sim.add_body(Ball(dim, 0.5), position=pos)
    return sim


def brute_components(n_nodes: int, edges: list[tuple[int, int]]) -> list[set[int]]:
    adj: dict[int, set[int]] = {i: set() for i in range(n_nodes)}
    for u, v in edges:
        adj[u].add(v)
        adj[v].add(u)
    seen: set[int] = set()
    comps = []
    for s in range(n_nodes):
        if s in seen:
            continue
        comp, q = {s}, deque([s])
        seen.add(s)
        while q:
            u = q.popleft()
            for v in adj[u] - seen:
                seen.add(v)
                comp.add(v)
                q.append(v)
        comps.append(comp)
    return comps


def sleep_step(sim: Simulation, c: ContactSet | None) -> None:
    settle_islands(sim.alg, sim.bodies, c, DT, sim.settings, sim.caches)


@dims()
def test_islands_match_breadth_first_search(dim, rng):
    """Components over contacts between dynamic bodies equal a brute-force BFS; the static floor
    (row 0) joins nothing."""
    count = 25
    sim = world(dim, count)
    a = rng.integers(0, count + 1, 30)
    b = (a + rng.integers(1, count + 1, 30)) % (count + 1)
    lab = island_labels(sim.bodies, pairs_set(sim, a, b))
    assert lab[0] == -1
    edges = [(int(u) - 1, int(v) - 1) for u, v in zip(a, b, strict=True) if u > 0 and v > 0]
    for comp in brute_components(count, edges):
        labels = {int(lab[i + 1]) for i in comp}
        assert len(labels) == 1
    assert len(set(lab[1:].tolist())) == len(brute_components(count, edges))


@dims()
def test_body_speed_is_linear_plus_angular_times_radius(dim, rng):
    """|v| + |B| r: |B| bounds the speed of points at distance r (norm of the skew form's rows)."""
    sim = world(dim, 1)
    bd = sim.bodies
    bd.velocity[1] = rng.normal(size=dim)
    bd.angular_velocity[1] = rng.normal(size=sim.alg.k)
    expected = np.linalg.norm(bd.velocity[1]) + np.linalg.norm(bd.angular_velocity[1]) * 0.5
    assert body_speeds(bd)[1] == pytest.approx(expected, rel=1e-12)


@dims()
def test_resting_island_sleeps_after_rest_time(dim):
    """Every member rests: the island sleeps on the step where the rest time reaches rest_time,
    not before; sleeping bodies have zero velocity (common practice)."""
    sim = world(dim, 3)
    c = pairs_set(sim, [0, 1, 2], [1, 2, 3])
    bd = sim.bodies
    bd.velocity[1:, 0] = 0.5 * sim.settings.rest_speed
    steps = int(np.ceil(sim.settings.rest_time / DT - 1e-9))
    for _ in range(steps - 1):
        sleep_step(sim, c)
    assert np.all(bd.awake[1:])
    sleep_step(sim, c)
    assert not np.any(bd.awake[1:])
    assert np.all(bd.velocity[1:] == 0.0)


@dims()
def test_one_moving_member_keeps_the_island_awake(dim):
    sim = world(dim, 3)
    c = pairs_set(sim, [1, 2], [2, 3])
    bd = sim.bodies
    bd.velocity[3, 0] = 2.0 * sim.settings.rest_speed
    for _ in range(int(2 * sim.settings.rest_time / DT)):
        sleep_step(sim, c)
    assert np.all(bd.awake[1:])


@dims()
def test_contact_with_awake_body_wakes_the_whole_island(dim):
    """A sleeping island touched by an awake dynamic body wakes as a whole, even when this step's
    contacts show only one of its members (the collision stages skip sleeping pairs)."""
    sim = world(dim, 4)
    bd = sim.bodies
    sleep_step(sim, None)  # no contacts yet
    chain = pairs_set(sim, [1, 2], [2, 3])
    for _ in range(int(np.ceil(sim.settings.rest_time / DT)) + 1):
        sleep_step(sim, chain)
    assert not np.any(bd.awake[1:4]) and not bd.awake[4]
    bd.awake[4] = True
    bd.velocity[4, 0] = -1.0
    wake_touched(bd, pairs_set(sim, [3], [4]), sim.caches)
    assert np.all(bd.awake[1:5])
    assert np.all(bd.rest_time[1:4] == 0.0)


@dims()
def test_removed_support_wakes_the_island(dim):
    """An island that fell asleep on a body wakes when that body is gone."""
    sim = world(dim, 2)
    bd = sim.bodies
    c = pairs_set(sim, [0, 1], [1, 2])
    for _ in range(int(np.ceil(sim.settings.rest_time / DT)) + 1):
        sleep_step(sim, c)
    assert not np.any(bd.awake[1:])
    sim.remove_body(int(bd.handle[0]))  # the floor; the last ball moves into row 0
    sleep_step(sim, None)
    assert np.all(sim.bodies.awake)


@dims()
def test_sleep_disabled(dim):
    sim = world(dim, 2, replace(Settings(), sleep_enabled=False))
    c = pairs_set(sim, [0, 1], [1, 2])
    for _ in range(int(2 * sim.settings.rest_time / DT)):
        sleep_step(sim, c)
    assert np.all(sim.bodies.awake)
