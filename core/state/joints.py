"""The joint table: one row per joint between two bodies (or a body and the world).

A joint keeps what it needs in the frames of its bodies, so that it follows them:

* ``anchor_a``, ``anchor_b`` (n): the anchor point in body A's and body B's frame (relative to the
  body origin ``position``, in the body's axes); a side without a body (``body_b = -1``: the world)
  keeps a world point.
* ``frame_a``, ``frame_b`` (n, n): an orthonormal frame per side, rows f_0 .. f_{n-1} in the body's
  axes, equal in the world when the joint was made. A plane hinge turns in the plane f_0 ^ f_1 of
  A's frame (its angle is the turn of B's f_0 toward A's f_1); the other frame vectors fix the
  relative orientation where it is held.
* ``axis_a`` (n): the line of a slider or a wheel, a unit vector in A's frame.

Kinds (codes in ``KINDS``): point, weld, distance, slider, hinge, spring, wheel. Rows are dense,
removal moves the last row into the hole (like the body table); joints have stable handles of their
own (``JointSet.handle_to_row``). Bodies are referred to by body *handle*, so removing or moving
body rows does not disturb the joints.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .components import Table

POINT, WELD, DISTANCE, SLIDER, HINGE, SPRING, WHEEL = range(7)
KINDS = {"point": POINT, "weld": WELD, "distance": DISTANCE, "slider": SLIDER, "hinge": HINGE,
         "spring": SPRING, "wheel": WHEEL}
KIND_NAMES = {v: k for k, v in KINDS.items()}

#: scalar rows per joint besides its block of equality rows: a limit and a motor (hinge), the
#: distance or spring row and nothing (distance, spring), the suspension spring and the motor (wheel)
SCALAR_ROWS = 2


def joint_columns(n: int) -> dict[str, tuple[tuple[int, ...], Any, Any]]:
    k = n * (n - 1) // 2
    inf = np.inf
    return {
        "handle": ((), np.int64, -1),
        "kind": ((), np.int8, POINT),
        "body_a": ((), np.int64, -1),  # body handles; -1 on side B: the world
        "body_b": ((), np.int64, -1),
        "anchor_a": ((n,), np.float64, 0.0),
        "anchor_b": ((n,), np.float64, 0.0),
        "frame_a": ((n, n), np.float64, 0.0),
        "frame_b": ((n, n), np.float64, 0.0),
        "axis_a": ((n,), np.float64, 0.0),
        "min_length": ((), np.float64, 0.0),
        "max_length": ((), np.float64, 0.0),
        "lower": ((), np.float64, -inf),
        "upper": ((), np.float64, inf),
        "motor_speed": ((), np.float64, 0.0),
        "max_motor_torque": ((), np.float64, 0.0),
        "frequency": ((), np.float64, 0.0),
        "damping_ratio": ((), np.float64, 1.0),
        "break_force": ((), np.float64, inf),
        "break_torque": ((), np.float64, inf),
        "collide": ((), np.bool_, False),
        # accumulated impulses of the last step (warm start): n linear, k angular, then the scalars
        "impulse": ((n + k + SCALAR_ROWS,), np.float64, 0.0),
        "limit_side": ((), np.int8, 0),  # which limit row slot 0 held last step (-1 lower, 1 upper)
        "force": ((), np.float64, 0.0),  # size of the last step's constraint force, N
        "torque": ((), np.float64, 0.0),  # size of the last step's constraint couple, N m
    }


class JointSet(Table):
    """The joints of a simulation (struct of arrays), with stable joint handles."""

    def __init__(self, n: int, capacity: int = 8) -> None:
        super().__init__(joint_columns(n), capacity)
        self.__dict__["n"] = n
        self.__dict__["handle_to_row"] = {}
        self.__dict__["next_handle"] = 0

    def add(self, values: dict[str, Any]) -> int:
        h = self.next_handle
        self.__dict__["next_handle"] = h + 1
        values = dict(values, handle=h)
        row = self.append(values)
        self.handle_to_row[h] = row
        return h

    def remove(self, handle: int) -> None:
        row = self.handle_to_row.pop(handle)
        last = self.count - 1
        moved = int(self.column("handle")[last])
        self.swap_remove(row)
        if moved != handle:
            self.handle_to_row[moved] = row

    def rows_of_body(self, body_handle: int) -> np.ndarray:
        """Rows of the joints that hold the body ``body_handle``."""
        return np.nonzero((self.column("body_a") == body_handle) | (self.column("body_b") == body_handle))[0]

    def copy_state(self) -> dict[str, Any]:
        """The table's rows, copied (``set_state`` puts them back; the handles are rebuilt from them)."""
        return {"data": {k: v[: self.count].copy() for k, v in self._data.items()}, "count": self.count,
                "next_handle": self.next_handle}

    def set_state(self, state: dict[str, Any], check: bool = False) -> None:
        """Put back rows from ``copy_state``; ``check``: refuse (InputError, nothing changed) a state
        whose columns do not match this table's."""
        count = int(state["count"])
        data = state["data"]
        if check:
            from ..errors import InputError

            if set(data) != set(self._spec):
                raise InputError(f"joints: expected the columns {sorted(self._spec)}, got {sorted(data)}")
            for name, (trail, dtype, _default) in self._spec.items():
                arr = np.asarray(data[name])
                if arr.shape != (count,) + tuple(trail) or arr.dtype != np.dtype(dtype):
                    raise InputError(f"joints.{name}: expected shape {(count,) + tuple(trail)} of "
                                     f"{np.dtype(dtype)}, got {arr.shape} of {arr.dtype}")
        self._grow(count)
        for name, (_trail, _dtype, default) in self._spec.items():
            arr = self._data[name]
            arr[:count] = data[name]
            arr[count:] = default
        self.count = count
        handles = self._data["handle"][:count].tolist()
        self.__dict__["handle_to_row"] = {int(h): r for r, h in enumerate(handles)}
        self.__dict__["next_handle"] = int(state["next_handle"])


__all__ = ["DISTANCE", "HINGE", "JointSet", "KINDS", "KIND_NAMES", "POINT", "SCALAR_ROWS", "SLIDER", "SPRING",
           "WELD", "WHEEL", "joint_columns"]
