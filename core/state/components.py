"""Struct-of-arrays component tables: what an ECS stores for each rigid body.

One :class:`Bodies` table per simulation holds a column per component field, each a numpy array
whose first axis is the row (the body) and whose trailing axes are the components (design.md:
components last). Columns are grouped as

* pose (hot):      ``position`` (n) of the body origin, ``rotor`` (2**(n-1)); ``rotation`` (n, n)
  is the rotor's matrix, refreshed by the simulation whenever rotors change;
* motion (hot):    ``velocity`` (n) of the centre of mass, ``angular_velocity`` (k) world bivector;
* mass (warm):     ``inv_mass``, ``inv_inertia`` (k, principal plane moments inverted),
  ``principal_rotor`` (principal frame relative to the body frame), ``local_centroid`` (n);
* accumulators:    ``force`` (n), ``torque`` (k bivector), cleared after each step;
* settings:        ``linear_damping``, ``angular_damping``, ``kind`` (dynamic/kinematic/static);
* collider:        ``shape_id``, ``shape_kind``, ``radius``, ``half_extents`` (n), ``layer``,
  ``mask``, ``sensor``, and the material ``friction`` (kinetic), ``static_friction`` (the solver
  uses it while a contact point sticks; add_body sets it equal to ``friction`` unless given),
  ``restitution``, ``rolling_resistance`` and ``spin_friction`` (lengths, m: the couples of a
  one-point contact per unit normal force);
* sleeping:        ``awake``, ``rest_time``.

Bookkeeping that no system touches on a hot path (the handle of each row, the shape objects, user
data) lives apart, in :class:`BodyInfo`.

Rows are dense: ``rows [0, count)`` are live bodies. Adding appends (capacity doubles when full,
so adds are amortised O(1)); removing moves the last row into the hole (O(1)). Handles are stable
integers, never reused; ``handle_to_row`` maps them to rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..algebra import Algebra
from ..errors import InputTypeError
from ..geometry import shapes as S

DYNAMIC, KINEMATIC, STATIC = 0, 1, 2
KIND_NAMES = {"dynamic": DYNAMIC, "kinematic": KINEMATIC, "static": STATIC}

# collider kinds: the narrowphase dispatches on pairs of these codes
SHAPE_BALL, SHAPE_BOX, SHAPE_POLYTOPE, SHAPE_HALFSPACE, SHAPE_COMPOUND, SHAPE_MESH = range(6)

ALL_LAYERS = 0xFFFFFFFF


class Table:
    """A growable struct-of-arrays table with swap-remove.

    ``columns`` maps a name to ``(trailing_shape, dtype, default)``. Each column is exposed as an
    attribute giving the live view ``array[:count]``; ``column(name)`` gives the same.
    """

    def __init__(self, columns: dict[str, tuple[tuple[int, ...], Any, Any]], capacity: int = 16) -> None:
        self._spec = dict(columns)
        self._data: dict[str, NDArray[Any]] = {}
        self.count = 0
        self.capacity = max(1, int(capacity))
        for name, (trail, dtype, default) in self._spec.items():
            arr = np.empty((self.capacity,) + tuple(trail), dtype=dtype)
            arr[...] = default
            self._data[name] = arr

    def __getattr__(self, name: str) -> NDArray[Any]:
        data = self.__dict__.get("_data")
        if data is not None and name in data:
            return data[name][: self.__dict__["count"]]
        raise AttributeError(name)

    def column(self, name: str) -> NDArray[Any]:
        """The live rows of column ``name`` (a view: writes go to the table)."""
        return self._data[name][: self.count]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(self._spec)

    def _grow(self, need: int) -> None:
        cap = self.capacity
        while cap < need:
            cap *= 2
        if cap == self.capacity:
            return
        for name, (trail, dtype, default) in self._spec.items():
            old = self._data[name]
            new = np.empty((cap,) + tuple(trail), dtype=dtype)
            new[: self.count] = old[: self.count]
            new[self.count:] = default
            self._data[name] = new
        self.capacity = cap

    def append(self, values: dict[str, Any]) -> int:
        """Append one row (missing columns take their default); returns the row index."""
        self._grow(self.count + 1)
        row = self.count
        for name, (_trail, _dtype, default) in self._spec.items():
            self._data[name][row] = values.get(name, default)
        self.count += 1
        return row

    def swap_remove(self, row: int) -> int:
        """Remove ``row`` by moving the last row into it. Returns the old index of the moved row
        (equal to ``row`` when the removed row was the last)."""
        last = self.count - 1
        if row != last:
            for arr in self._data.values():
                arr[row] = arr[last]
        for name, (_trail, _dtype, default) in self._spec.items():
            self._data[name][last] = default
        self.count -= 1
        return last

    def nbytes_per_row(self) -> int:
        """Bytes of one row over all columns."""
        return int(sum(a[0].nbytes for a in self._data.values()))


def body_columns(alg: Algebra) -> dict[str, tuple[tuple[int, ...], Any, Any]]:
    """Column spec of the body table for the algebra's dimension."""
    n, k, E = alg.n, alg.k, alg.even_size
    ident = alg.identity_rotor()
    return {
        # pose
        "position": ((n,), np.float64, 0.0),
        "rotor": ((E,), np.float64, ident),
        "rotation": ((n, n), np.float64, np.eye(n)),
        # motion
        "velocity": ((n,), np.float64, 0.0),
        "angular_velocity": ((k,), np.float64, 0.0),
        # mass properties
        "inv_mass": ((), np.float64, 0.0),
        "inv_inertia": ((k,), np.float64, 0.0),
        "principal_rotor": ((E,), np.float64, ident),
        "local_centroid": ((n,), np.float64, 0.0),
        # accumulators
        "force": ((n,), np.float64, 0.0),
        "torque": ((k,), np.float64, 0.0),
        # settings
        "linear_damping": ((), np.float64, 0.0),
        "angular_damping": ((), np.float64, 0.0),
        "kind": ((), np.int8, DYNAMIC),
        # collider and material
        "shape_id": ((), np.int32, -1),
        "shape_kind": ((), np.int8, SHAPE_BALL),
        "radius": ((), np.float64, 0.0),
        "half_extents": ((n,), np.float64, 0.0),
        "layer": ((), np.uint32, 1),
        "mask": ((), np.uint32, ALL_LAYERS),
        "sensor": ((), np.bool_, False),
        "friction": ((), np.float64, 0.5),
        "static_friction": ((), np.float64, 0.5),
        "restitution": ((), np.float64, 0.0),
        "rolling_resistance": ((), np.float64, 0.001),
        "spin_friction": ((), np.float64, 0.016),
        # sleeping
        "awake": ((), np.bool_, True),
        "rest_time": ((), np.float64, 0.0),
        # stable handle of each row (read by systems that key caches by body)
        "handle": ((), np.int64, -1),
    }


class Bodies(Table):
    """The body table of one simulation (see the module docstring for the columns)."""

    def __init__(self, alg: Algebra, capacity: int = 16) -> None:
        super().__init__(body_columns(alg), capacity)
        self.alg = alg

    def centroids(self) -> NDArray[np.float64]:
        """World centres of mass (N, n): position + rotation @ local_centroid."""
        return self.position + np.einsum("nij,nj->ni", self.rotation, self.local_centroid)

    def principal_matrices(self) -> NDArray[np.float64]:
        """World-from-principal rotation matrices (N, n, n)."""
        P = self.alg.rotor_to_matrix(self.principal_rotor)
        return np.einsum("nij,njk->nik", self.rotation, P)

    def world_inv_inertia(self) -> NDArray[np.float64]:
        """World-frame inverse inertia maps (N, k, k): C2(P) diag(inv_inertia) C2(P)^T."""
        C = body_frames(self.alg, self.rotor, self.principal_rotor)
        return np.matmul(C * self.inv_inertia[:, None, :], np.swapaxes(C, -1, -2))


@dataclass
class BodyInfo:
    """Cold bookkeeping, apart from the hot arrays: handle <-> row maps, shapes, user data."""

    handle_to_row: NDArray[np.int64] = field(default_factory=lambda: np.full(16, -1, dtype=np.int64))
    row_to_handle: list[int] = field(default_factory=list)
    shapes: list[Any] = field(default_factory=list)  # shape registry: shape_id -> shape (None: free)
    shape_ids: dict[Any, int] = field(default_factory=dict)  # value key of a shape -> shape_id
    shape_keys: list[Any] = field(default_factory=list)  # shape_id -> its value key
    shape_refs: list[int] = field(default_factory=list)  # shape_id -> number of bodies using it
    free_shape_ids: list[int] = field(default_factory=list)
    user_data: dict[int, Any] = field(default_factory=dict)  # handle -> anything
    next_handle: int = 0

    def new_handle(self, row: int) -> int:
        h = self.next_handle
        self.next_handle += 1
        if h >= len(self.handle_to_row):
            grown = np.full(max(16, 2 * len(self.handle_to_row)), -1, dtype=np.int64)
            grown[: len(self.handle_to_row)] = self.handle_to_row
            self.handle_to_row = grown
        self.handle_to_row[h] = row
        self.row_to_handle.append(h)
        return h

    def shape_id(self, shape: Any) -> int:
        """The registry id of ``shape``: shapes equal by value share one entry (shapes are
        immutable), so bodies made from new but equal shape objects every frame do not grow the
        registry; the key is the shape's defining values, never its ``id()``, which Python reuses
        after an object is freed (a deep-copied world kept the originals' ids and handed a new
        shape the entry of a freed one)."""
        key = shape_value_key(shape)
        sid = self.shape_ids.get(key)
        if sid is not None and (key[0] != "object" or self.shapes[sid] is shape):
            return sid
        if self.free_shape_ids:
            sid = self.free_shape_ids.pop()
            self.shapes[sid], self.shape_keys[sid], self.shape_refs[sid] = shape, key, 0
        else:
            sid = len(self.shapes)
            self.shapes.append(shape)
            self.shape_keys.append(key)
            self.shape_refs.append(0)
        self.shape_ids[key] = sid
        return sid

    def retain_shape(self, sid: int) -> None:
        """One more body uses registry entry ``sid``."""
        self.shape_refs[sid] += 1

    def release_shape(self, sid: int) -> bool:
        """One body fewer uses ``sid``; the entry is freed with its last body (True then: the
        caller drops what it cached about the id before the id is given to another shape)."""
        self.shape_refs[sid] -= 1
        if self.shape_refs[sid] > 0:
            return False
        self.shape_ids.pop(self.shape_keys[sid], None)
        self.shapes[sid] = None
        self.shape_keys[sid] = None
        self.free_shape_ids.append(sid)
        return True

    def shape_count(self) -> int:
        """Number of shapes in use (registry entries held by at least one body)."""
        return len(self.shapes) - len(self.free_shape_ids)


def shape_value_key(shape: Any) -> tuple[Any, ...]:
    """A hashable key of a shape's defining values (two shapes with equal keys behave the same)."""

    def arr(a: Any) -> tuple[Any, ...]:
        a = np.ascontiguousarray(a)
        return (a.dtype.str, a.shape, a.tobytes())

    name = type(shape).__name__
    if type(shape) is S.Ball:
        return (name, shape.dim, float(shape.radius))
    if type(shape) is S.Box:
        return (name, arr(shape.half_extents), float(shape._tolerance))
    if type(shape) is S.HalfSpace:
        return (name, arr(shape.normal), float(shape.offset))
    if type(shape) is S.ConvexPolytope:
        return (name, arr(shape.vertices), float(shape._tolerance))
    if type(shape) is S.SimplexMesh:
        return (name, arr(shape.vertices), arr(shape.cells))
    if type(shape) is S.Compound:
        pieces = tuple(shape_value_key(p) for p in shape.shapes)
        return (name, pieces, arr(shape.positions), arr(shape.rotors))
    return ("object", id(shape))  # another kind: by identity, checked on lookup


def body_frames(alg: Algebra, rotor: NDArray[np.float64],
                principal_rotor: NDArray[np.float64]) -> NDArray[np.float64]:
    """Second compound matrices (N, k, k) of the world-from-principal rotations ``R Q``.

    Shapes whose principal axes are their own axes (balls, boxes, most polytopes) carry the exact
    identity rotor Q (scalar part exactly 1); when every row does, ``R Q = R`` is used directly.
    """
    if principal_rotor.shape[0] and np.all(principal_rotor[:, 0] == 1.0):
        return alg.rotor_to_compound(rotor)
    return alg.rotor_to_compound(alg.rotor_mul(rotor, principal_rotor))


def shape_kind(shape: Any) -> int:
    """Collider kind code of a shape object (SHAPE_BALL, SHAPE_BOX, ...)."""
    for cls, code in ((S.Ball, SHAPE_BALL), (S.Box, SHAPE_BOX), (S.HalfSpace, SHAPE_HALFSPACE),
                      (S.Compound, SHAPE_COMPOUND), (S.SimplexMesh, SHAPE_MESH),
                      (S.ConvexPolytope, SHAPE_POLYTOPE)):
        if isinstance(shape, cls):
            return code
    raise InputTypeError("shape: expected an ndrigid shape (Ball, Box, ConvexPolytope, SimplexMesh, "
                         f"Compound, HalfSpace), got {type(shape).__name__}")
