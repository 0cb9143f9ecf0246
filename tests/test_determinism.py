"""Determinism: the same sequence of calls gives bit-for-bit the same world (common practice for
game physics: replays and lockstep networking depend on it)."""

from __future__ import annotations

import hashlib

import numpy as np
from conftest import dims
from ndrigid.bench.scenes import build_pile


def _state_hash(sim) -> str:  # type: ignore[no-untyped-def]
    h = hashlib.sha256()
    for name in ("position", "rotor", "velocity", "angular_velocity", "awake"):
        h.update(np.ascontiguousarray(sim.bodies.column(name)).tobytes())
    return h.hexdigest()


@dims()
def test_same_calls_give_the_same_state_hash(dim: int) -> None:
    hashes = []
    for _ in range(2):
        sim, _warm = build_pile(dim, 24, seed=7)
        for _ in range(45):
            sim.step()
        hashes.append(_state_hash(sim))
        assert sim.contacts is not None and sim.contacts.count > 0  # the scene really collides
    assert hashes[0] == hashes[1]
