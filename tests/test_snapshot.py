"""Snapshots: a saved and restored world steps on bit for bit like the uninterrupted one, in
memory and on disk; damaged files are refused and nothing is half-loaded.

The reference is the uninterrupted run itself (exact equality of every body column after 500
more steps), the common contract of save games, rewind and rollback networking.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import dims
from ndrigid.core import (
    SAMPLE_MESH,
    Ball,
    Box,
    Compound,
    Settings,
    Simulation,
    load_world,
    read_noff,
    save_world,
)
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.polytopes import regular_simplex
from ndrigid.core.world import snapshot


def _columns(sim: Simulation) -> dict[str, np.ndarray]:
    b = sim.bodies
    return {name: b.column(name).copy() for name in b.names} | {"time": np.array(sim.time),
                                                                 "steps": np.array(sim.step_count)}


def _assert_same(a: dict[str, np.ndarray], b: dict[str, np.ndarray]) -> None:
    assert a.keys() == b.keys()
    for k in a:
        np.testing.assert_array_equal(a[k], b[k], err_msg=k)


def _mixed_world(dim: int) -> Simulation:
    """Balls, boxes, a simplex, a compound (and the sample mesh in 4-D) on a floor in a room,
    mixed materials, sleeping on, JSON-like user data; stepped until some bodies sleep and
    contacts are warm."""
    rng = np.random.default_rng(dim)
    sim = Simulation(dim, settings=Settings(sleep_enabled=True))
    sim.add_room(np.r_[-2.0, 0.0, -2.0 * np.ones(dim - 2)], np.r_[2.0, 5.0, 2.0 * np.ones(dim - 2)])
    comp = Compound([(Ball(dim, 0.15), np.r_[0.2, np.zeros(dim - 1)]),
                     (Box(np.full(dim, 0.12)), np.r_[-0.2, np.zeros(dim - 1)])])
    shapes = [Ball(dim, 0.25), Box(np.linspace(0.15, 0.3, dim)), regular_simplex(dim, edge=0.5), comp]
    if dim == 4:
        shapes.append(read_noff(SAMPLE_MESH, kind="mesh"))
    for i in range(14):
        pos = np.r_[rng.uniform(-1.2, 1.2), 0.4 + 0.45 * i, rng.uniform(-1.2, 1.2, dim - 2)]
        sim.add_body(shapes[i % len(shapes)], position=pos, rotor=sim.alg.rotor(rng.normal(size=sim.alg.k)),
                     friction=rng.uniform(0.3, 0.8), restitution=rng.uniform(0.0, 0.4),
                     user_data={"name": f"rock {i}", "tags": [i, 2.5, None, True]})
    sim.add_body(Ball(dim, 0.2), position=np.r_[1.5, 0.2, np.zeros(dim - 2)], kind="kinematic",
                 velocity=np.r_[-0.3, np.zeros(dim - 1)])
    for _ in range(150):
        sim.step()
    return sim


@dims()
def test_restored_worlds_step_on_bit_for_bit(dim: int, tmp_path) -> None:
    sim = _mixed_world(dim)
    # warm contacts, or (5-D) an island asleep that the kinematic ball will wake
    assert sim.contacts is not None and (sim.contacts.count > 0 or not np.all(sim.bodies.awake))
    path = tmp_path / "world.npz"
    state = sim.save_state()
    save_world(sim, path)
    for _ in range(500):
        sim.step()
    want = _columns(sim)
    want_events = [(e.kind, e.handle_a, e.handle_b) for e in sim.events]

    sim.restore_state(state)
    for _ in range(500):
        sim.step()
    _assert_same(want, _columns(sim))

    sim.restore_state(state)  # a state can be restored twice
    loaded = load_world(path)
    assert loaded.user_data(int(loaded.handles[-2])) == {"name": "rock 13", "tags": [13, 2.5, None, True]}
    for _ in range(500):
        sim.step()
        loaded.step()
    _assert_same(want, _columns(loaded))
    _assert_same(want, _columns(sim))
    assert [(e.kind, e.handle_a, e.handle_b) for e in loaded.events] == want_events


def test_a_loaded_world_gives_new_bodies_the_right_shapes(tmp_path) -> None:
    sim = _mixed_world(3)
    save_world(sim, tmp_path / "w.npz")
    del sim
    loaded = load_world(tmp_path / "w.npz")
    before = {int(h): type(loaded.shape(int(h))).__name__ for h in loaded.handles}
    added = {}
    for i in range(200):
        shape = Ball(3, 0.01 + 0.001 * i) if i % 2 else Box(np.full(3, 0.02 + 0.001 * i))
        added[loaded.add_body(shape, position=[0.0, 20.0 + i, 0.0])] = shape
    for h, shape in added.items():
        got = loaded.shape(h)
        assert type(got) is type(shape)
    assert {h: type(loaded.shape(h)).__name__ for h in before} == before
    loaded.step()


def _rewrite(path, change) -> None:
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    header = json.loads(arrays["header"].tobytes().decode())
    change(header, arrays)
    arrays["header"] = np.frombuffer(json.dumps(header).encode(), dtype=np.uint8)
    with open(path, "wb") as f:
        np.savez(f, **arrays)


def test_damaged_files_are_refused(tmp_path, monkeypatch) -> None:
    sim = _mixed_world(3)
    good = tmp_path / "good.npz"
    save_world(sim, good)
    data = good.read_bytes()
    cases = {}
    (tmp_path / "truncated.npz").write_bytes(data[: len(data) // 2])
    cases["truncated.npz"] = "damaged or foreign"
    (tmp_path / "garbage.npz").write_bytes(bytes(range(256)) * 40)
    cases["garbage.npz"] = "damaged or foreign"
    (tmp_path / "empty.npz").write_bytes(b"")
    cases["empty.npz"] = "damaged or foreign"
    for name, change, words in [
        ("version.npz", lambda h, a: h.__setitem__("version", 99), "format version 1, got 99"),
        ("magic.npz", lambda h, a: h.__setitem__("magic", "other"), "header mark"),
        ("missing-array.npz", lambda h, a: a.pop("a3"), "damaged"),
        ("short-column.npz", lambda h, a: a.__setitem__("a3", a["a3"][:1]), "bodies"),
        ("bad-tree.npz", lambda h, a: h.__setitem__("tree", {"t": "?"}), "unknown type"),
    ]:
        p = tmp_path / name
        p.write_bytes(data)
        _rewrite(p, change)
        cases[name] = words
    for name, words in cases.items():
        with pytest.raises(InputError, match=words):
            load_world(tmp_path / name)
    with pytest.raises(InputError, match="readable"):
        load_world(tmp_path / "absent.npz")
    monkeypatch.setattr(snapshot, "MAX_FILE_BYTES", 1000)
    with pytest.raises(InputError, match="at most 1000 bytes"):
        load_world(good)


def test_unsavable_user_data_is_refused_and_the_world_kept(tmp_path) -> None:
    sim = Simulation(3)
    h = sim.add_body(Ball(3, 0.5), user_data=object())
    before = _columns(sim)
    with pytest.raises(InputTypeError, match="object"):
        save_world(sim, tmp_path / "w.npz")
    _assert_same(before, _columns(sim))
    state = sim.save_state()  # in memory anything goes
    sim.restore_state(state)
    assert type(sim.user_data(h)) is object


def test_restoring_a_wrong_state_changes_nothing() -> None:
    sim = _mixed_world(3)
    other = Simulation(4)
    before = _columns(sim)
    with pytest.raises(InputError, match="3-D world, got one of a 4-D"):
        sim.restore_state(other.save_state())
    with pytest.raises(InputError, match="save_state"):
        sim.restore_state({"bodies": 1})
    _assert_same(before, _columns(sim))
    sim.step()
