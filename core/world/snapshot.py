"""Save and restore a whole world: for save games, rewind and network rollback.

A snapshot holds everything a step reads: the body table (poses, velocities, masses, materials,
sleep timers), the joints (with their warm-start impulses), the shapes, the settings and gravity,
the contacts of the last step with their warm-start impulses, the sleeping islands, the touching
pairs and pending events, the time and the step counter that salts the solver's order. Restoring
one and stepping gives, bit for bit, what the uninterrupted world gives (tests/test_snapshot.py).

* In memory: ``state = sim.save_state()`` and ``sim.restore_state(state)`` (a deep copy each way,
  so one state can be restored many times; anything can be user data).
* On disk: ``save_world(sim, path)`` writes one ``.npz`` file of plain numpy arrays (no pickle
  anywhere: it is read with ``allow_pickle=False``) plus a JSON header that carries the format
  version and the structure; ``load_world(path)`` builds a new Simulation. User data must then be
  made of numbers, strings, bools, None, lists, tuples, dicts with str or int keys, or numpy
  arrays (anything else is refused when saving, naming the body).

A damaged, truncated, wrong-version or oversized file is refused with :class:`InputError` and
nothing is half-loaded: the new Simulation is built completely before it is returned, and
``restore_state`` swaps the state in only once all of it is ready. Custom stages are not part of a
snapshot (a loaded world runs the default stages); derived caches that are keyed by object
identity are dropped and rebuilt on the next step (they change no result).
"""

from __future__ import annotations

import copy
import dataclasses
import json
import os
import zipfile
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError, InputTypeError
from ..geometry import shapes as _shapes
from ..state.components import Bodies, BodyInfo, shape_value_key
from ..state.contacts import ContactSet, ManifoldPoints
from ..state.joints import JointSet

if TYPE_CHECKING:
    from .simulation import Simulation

#: Version of the on-disk format; a file of another version is refused.
FORMAT_VERSION = 1

#: Largest snapshot file read, bytes. A 4-D world of 100,000 bodies saves to about 0.2 GB (the body
#: table holds about 1.5 KB per 4-D body, measured with Table.nbytes_per_row), so 2 GiB leaves
#: room for any game scene and refuses a runaway or hostile file before it is read.
MAX_FILE_BYTES = 2 * 1024 ** 3

_MAGIC = "ndrigid-world"
_STATE_KEYS = ("settings", "gravity", "bodies", "info", "time", "step_count", "pairs", "contacts", "caches",
               "events", "pending_events")
# keys a state may lack (states saved before they existed): their value when missing
_OPTIONAL_KEYS = ("joints",)
# caches keyed by id(): meaningless in another process, rebuilt on demand (results do not change)
_ID_KEYED = (("narrowphase", "extra_ids"), ("narrowphase", "convex_tables"))


# -- in memory ----------------------------------------------------------------------------------


def save_state(sim: Simulation) -> dict[str, Any]:
    """Everything a step reads, deep-copied (see the module docstring)."""
    return copy.deepcopy({
        "dim": sim.dim, "settings": sim.settings, "gravity": sim.gravity, "bodies": _table_state(sim.bodies),
        "info": sim.info, "time": sim.time, "step_count": sim.step_count, "pairs": sim.pairs,
        "contacts": sim.contacts, "caches": sim.caches, "events": sim.events,
        "pending_events": sim._pending_events, "joints": sim.joints.copy_state()})


def restore_state(sim: Simulation, state: dict[str, Any]) -> None:
    """Put a saved state into ``sim`` (same dimension); the state can be restored again."""
    if not isinstance(state, dict) or not set(_STATE_KEYS) | {"dim"} <= set(state) <= (
            set(_STATE_KEYS) | {"dim"} | set(_OPTIONAL_KEYS)):
        raise InputError("state: expected a dict made by Simulation.save_state, got "
                         f"{type(state).__name__}")
    if state["dim"] != sim.dim:
        raise InputError(f"state: expected a state of a {sim.dim}-D world, got one of a {state['dim']}-D "
                         f"world")
    s = copy.deepcopy(state)
    bodies = _table_from_state(sim.alg, s["bodies"])  # everything is built before anything changes
    joints = JointSet(sim.dim)
    if s.get("joints") is not None:
        joints.set_state(s["joints"], check=True)
    sim.settings, sim.gravity, sim.bodies, sim.info = s["settings"], s["gravity"], bodies, s["info"]
    sim.time, sim.step_count, sim.pairs, sim.contacts = s["time"], s["step_count"], s["pairs"], s["contacts"]
    sim.caches, sim.events, sim._pending_events = s["caches"], s["events"], s["pending_events"]
    sim.joints = joints


def _table_state(t: Bodies) -> dict[str, Any]:
    return {"count": t.count, "columns": {name: t.column(name).copy() for name in t.names}}


def _table_from_state(alg: Any, st: dict[str, Any]) -> Bodies:
    count = int(st["count"])
    b = Bodies(alg, capacity=max(16, count))
    cols = st["columns"]
    if set(cols) != set(b.names):
        raise InputError(f"bodies: expected the columns {sorted(b.names)}, got {sorted(cols)}")
    for name in b.names:
        want = b._data[name].shape[1:]
        arr = np.asarray(cols[name])
        if arr.shape != (count,) + want or arr.dtype != b._data[name].dtype:
            raise InputError(f"bodies.{name}: expected shape {(count,) + want} of {b._data[name].dtype}, got "
                             f"{arr.shape} of {arr.dtype}")
        b._data[name][:count] = arr
    b.count = count
    return b


# -- on disk ------------------------------------------------------------------------------------


def save_world(sim: Simulation, path: str | os.PathLike[str]) -> None:
    """Write the world to ``path`` (a ``.npz`` file of numpy arrays with a JSON header)."""
    arrays: dict[str, np.ndarray] = {}
    state = save_state(sim)
    for outer, inner in _ID_KEYED:
        state["caches"].get(outer, {}).pop(inner, None)
    state["info"].shape_ids, state["info"].shape_keys = {}, []  # keys of bytes: rebuilt on load
    tree = _encode(state, arrays, "state")
    header = {"magic": _MAGIC, "version": FORMAT_VERSION, "dim": sim.dim, "tree": tree}
    arrays["header"] = np.frombuffer(json.dumps(header, allow_nan=True).encode("utf-8"), dtype=np.uint8)
    with open(path, "wb") as f:
        np.savez(f, **arrays)


def load_world(path: str | os.PathLike[str]) -> Simulation:
    """A new Simulation from a file written by :func:`save_world` (refused with InputError if the
    file is damaged, truncated, of another format version or larger than MAX_FILE_BYTES)."""
    from .simulation import Simulation

    where = os.fspath(path)
    try:
        size = os.path.getsize(where)
    except OSError as exc:
        raise InputError(f"{where}: expected a readable snapshot file, got {exc}") from exc
    if size > MAX_FILE_BYTES:
        raise InputError(f"{where}: expected a snapshot of at most {MAX_FILE_BYTES} bytes, got {size} bytes")
    try:
        with np.load(where, allow_pickle=False) as z:
            arrays = {name: z[name] for name in z.files}
    except (OSError, ValueError, zipfile.BadZipFile, EOFError, KeyError) as exc:
        raise InputError(f"{where}: expected an ndrigid snapshot (.npz), got a damaged or foreign file "
                         f"({type(exc).__name__}: {exc})") from exc
    try:
        header = json.loads(arrays.pop("header").tobytes().decode("utf-8"))
    except (KeyError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{where}: expected an ndrigid snapshot with a JSON header, got none") from exc
    if not isinstance(header, dict) or header.get("magic") != _MAGIC:
        raise InputError(f"{where}: expected an ndrigid snapshot, got a file without its header mark")
    if header.get("version") != FORMAT_VERSION:
        raise InputError(f"{where}: expected snapshot format version {FORMAT_VERSION}, got "
                         f"{header.get('version')!r}")
    try:
        state = _decode(header["tree"], arrays)
        sim = Simulation(int(header["dim"]), gravity=state["gravity"], settings=state["settings"])
        _rebuild_registry(state["info"])
        restore_state(sim, state)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        raise InputError(f"{where}: expected a consistent ndrigid snapshot, got a damaged one "
                         f"({type(exc).__name__}: {exc})") from exc
    return sim


def _rebuild_registry(info: BodyInfo) -> None:
    """The registry's value keys (bytes, not stored) from its shapes."""
    info.shape_keys = [None if s is None else shape_value_key(s) for s in info.shapes]
    info.shape_ids = {k: i for i, k in enumerate(info.shape_keys) if k is not None}


# -- the encoder: JSON nodes, arrays apart --------------------------------------------------------

_SHAPES = {c.__name__: c for c in (_shapes.Ball, _shapes.Box, _shapes.ConvexPolytope, _shapes.SimplexMesh,
                                   _shapes.Compound, _shapes.HalfSpace)}


def _records() -> dict[str, type]:
    from ..dynamics.joints import JointEvent
    from .simulation import Settings, StepTimings
    from .stages import ContactEvent

    return {"ContactSet": ContactSet, "ManifoldPoints": ManifoldPoints, "ContactEvent": ContactEvent,
            "JointEvent": JointEvent,
            "Settings": Settings, "StepTimings": StepTimings, "BodyInfo": BodyInfo}


def _encode(obj: Any, arrays: dict[str, np.ndarray], where: str) -> Any:
    if obj is None or isinstance(obj, (bool, str)):
        return {"t": "v", "v": obj}
    if isinstance(obj, (int, np.integer)) and not isinstance(obj, (bool, np.bool_)):
        return {"t": "i", "v": int(obj)}
    if isinstance(obj, (float, np.floating)):
        return {"t": "f", "v": float(obj).hex()}
    if isinstance(obj, np.bool_):
        return {"t": "v", "v": bool(obj)}
    if isinstance(obj, np.ndarray):
        if obj.dtype.kind not in "biuf":
            raise InputTypeError(f"{where}: expected numeric arrays in a snapshot, got dtype {obj.dtype}")
        key = f"a{len(arrays)}"
        arrays[key] = np.ascontiguousarray(obj)
        return {"t": "a", "k": key}
    name = type(obj).__name__
    records = _records()
    if name in _SHAPES and type(obj) is _SHAPES[name]:
        fields = {k: _encode(v, arrays, f"{where}.{k}") for k, v in vars(obj).items() if k != "_cache"}
        return {"t": "shape", "c": name, "f": fields}
    if name in records and type(obj) is records[name]:
        if hasattr(obj, "_fields"):  # a NamedTuple
            items = zip(obj._fields, obj, strict=True)
        else:
            items = ((f.name, getattr(obj, f.name)) for f in dataclasses.fields(obj))
        return {"t": "rec", "c": name, "f": {k: _encode(v, arrays, f"{where}.{k}") for k, v in items}}
    if isinstance(obj, dict):
        return {"t": "d", "i": [[_encode(k, arrays, where), _encode(v, arrays, f"{where}[{k!r}]")]
                                for k, v in obj.items()]}
    if isinstance(obj, (list, tuple)):
        return {"t": "l" if isinstance(obj, list) else "t",
                "i": [_encode(v, arrays, f"{where}[{i}]") for i, v in enumerate(obj)]}
    raise InputTypeError(f"{where}: expected numbers, strings, lists, dicts or numpy arrays in a saved "
                         f"world, got {type(obj).__name__} (keep such user data outside the world, or save "
                         f"it in memory with Simulation.save_state)")


def _decode(node: Any, arrays: dict[str, np.ndarray]) -> Any:
    t = node["t"]
    if t == "v":
        return node["v"]
    if t == "i":
        return int(node["v"])
    if t == "f":
        return float.fromhex(node["v"])
    if t == "a":
        a = arrays[node["k"]]
        return a.copy()
    if t == "d":
        return {_hashable(_decode(k, arrays)): _decode(v, arrays) for k, v in node["i"]}
    if t in ("l", "t"):
        items = [_decode(v, arrays) for v in node["i"]]
        return items if t == "l" else tuple(items)
    if t == "shape":
        cls = _SHAPES[node["c"]]
        shape = object.__new__(cls)
        fields = {k: _decode(v, arrays) for k, v in node["f"].items()}
        for v in fields.values():
            if isinstance(v, np.ndarray):
                v.setflags(write=False)
            elif isinstance(v, tuple):
                for x in v:
                    if isinstance(x, np.ndarray):
                        x.setflags(write=False)
        shape._set(_cache={}, **fields)
        return shape
    if t == "rec":
        cls = _records()[node["c"]]
        return cls(**{k: _decode(v, arrays) for k, v in node["f"].items()})
    raise InputError(f"a node of unknown type {t!r}")


def _hashable(key: Any) -> Any:
    return tuple(_hashable(k) for k in key) if isinstance(key, (list, tuple)) else key
