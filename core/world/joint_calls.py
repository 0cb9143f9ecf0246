"""The Simulation's joint calls: make, change, read and remove joints (validated before any change).

Kinds and what they hold (n dimensions, k = n(n-1)/2 planes):

===========  =================================================================  ==============
kind         holds                                                              equality rows
===========  =================================================================  ==============
point        the anchors coincide (free turning)                                n
weld         the anchors coincide and no relative turn                          n + k
distance     the anchors at a fixed distance (rod), or within [min, max]        a scalar row
             (rope; min 0), soft with ``frequency``
slider       B's anchor stays on A's line ``axis``, no relative turn            n - 1 + k
hinge        the anchors coincide, relative turn only in the plane ``plane``    n + k - 1
             (a unit 2-blade), with optional angle limits and a motor
spring       a spring-damper between the anchors (``frequency`` Hz, damping     a scalar row
             ratio), rest length ``length``
wheel        B's anchor on A's line ``axis`` with a suspension spring           n - 1 + k - 1
             (``frequency``, damping ratio), turn only in ``plane``, a motor
===========  =================================================================  ==============
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError, InputTypeError, as_float_array, positive_scalar, vector
from ..state.components import DYNAMIC
from ..state.joints import HINGE, KIND_NAMES, KINDS, SLIDER, WHEEL

if TYPE_CHECKING:
    from .simulation import Simulation

_DEFAULT = object()


def _number(name: str, value: Any, *, lo: float = -np.inf, hi: float = np.inf,
            allow_inf: bool = False) -> float:
    if isinstance(value, (str, bytes, bool, np.bool_)) or not isinstance(value, (int, float, np.integer,
                                                                                 np.floating)):
        raise InputTypeError(f"{name}: expected a number, got {type(value).__name__} {value!r}")
    v = float(value)
    if np.isnan(v) or (not allow_inf and not np.isfinite(v)) or not lo <= v <= hi:
        what = f"a number in [{lo:g}, {hi:g}]" + ("" if allow_inf else " (finite)")
        raise InputError(f"{name}: expected {what}, got {v!r}")
    return v


def plane_frame(sim: Simulation, plane: Any) -> np.ndarray:
    """An orthonormal frame (n, n), rows f_0 .. f_{n-1}, with f_0 ^ f_1 = the unit 2-blade ``plane``."""
    alg, n = sim.alg, sim.dim
    P = as_float_array("plane", plane, (alg.k,), exact=True, bound=None)
    norm = float(np.sqrt(P @ P))
    if not np.isfinite(norm) or norm == 0.0:
        raise InputError(f"plane: expected a non-zero bivector of {alg.k} components, got {P.tolist()}")
    P = P / norm
    from ..algebra import skew

    W = skew(P, n)
    U, s, _ = np.linalg.svd(W)
    # a 2-blade's skew matrix has rank 2 (one pair of singular values 1, the rest 0 for a unit blade)
    if n > 3 and s[2] > 1e-6:
        raise InputError(f"plane: expected a simple bivector (one plane, u ^ v), got {P.tolist()} whose "
                         f"matrix has rank {int(np.sum(s > 1e-6))}")
    u0 = U[:, 0]
    u1 = W @ u0  # W u0 lies in the plane, orthogonal to u0
    u1 = u1 / np.linalg.norm(u1)
    p = alg.pairs
    wedge = u0[p[:, 0]] * u1[p[:, 1]] - u0[p[:, 1]] * u1[p[:, 0]]
    if wedge @ P < 0.0:
        u1 = -u1
    return _complete(np.stack([u0, u1]), n)


def _complete(rows: np.ndarray, n: int) -> np.ndarray:
    """Orthonormal frame (n, n) whose first rows are the orthonormal ``rows``."""
    m = rows.shape[0]
    Q, _ = np.linalg.qr(np.concatenate([rows.T, np.eye(n)], axis=1))
    F = Q.T[:n].copy()
    F[:m] = rows  # QR may flip signs of the first columns
    return F


def axis_frame(sim: Simulation, axis: Any) -> tuple[np.ndarray, np.ndarray]:
    a = vector("axis", axis, sim.dim, bound=None)
    norm = float(np.linalg.norm(a))
    if not np.isfinite(norm) or norm == 0.0:
        raise InputError(f"axis: expected a non-zero vector of {sim.dim} numbers, got {a.tolist()}")
    a = a / norm
    return a, _complete(a[None, :], sim.dim)


def add_joint(sim: Simulation, kind: str, body_a: int, body_b: int | None = None, *, anchor: Any = None,
              anchor_b: Any = None, plane: Any = None, axis: Any = None, length: Any = None,
              min_length: Any = None, max_length: Any = None, lower: Any = None, upper: Any = None,
              motor_speed: Any = 0.0, max_motor_torque: Any = 0.0, frequency: Any = 0.0,
              damping_ratio: Any = 1.0, break_force: Any = np.inf, break_torque: Any = np.inf,
              collide: Any = False) -> int:
    if not isinstance(kind, str) or kind not in KINDS:
        raise InputError(f"kind: expected one of {sorted(KINDS)}, got {kind!r}")
    code = KINDS[kind]
    n, b = sim.dim, sim.bodies
    if code == WHEEL and body_b is None:
        raise InputError("body_b: a wheel joint holds a wheel (body_b) on a carrier (body_a) whose frame "
                         "keeps the suspension line; got no wheel (to mount one on the world, make a static "
                         "body the carrier)")
    ra = sim.row(body_a)
    rb = -1 if body_b is None else sim.row(body_b)
    if rb == ra:
        raise InputError(f"body_b: expected another body than body_a ({body_a}), got the same")
    dyn = b.kind == DYNAMIC
    if not dyn[ra] and (rb < 0 or not dyn[rb]):
        raise InputError(f"body_a, body_b: expected at least one dynamic body, got {body_a} and "
                         f"{'the world' if body_b is None else body_b}, neither dynamic")
    if not isinstance(collide, (bool, np.bool_)):
        raise InputTypeError(f"collide: expected a bool, got {type(collide).__name__} {collide!r}")

    def pose(r: int) -> tuple[np.ndarray, np.ndarray]:
        if r < 0:
            return np.zeros(n), np.eye(n)
        return b.position[r].copy(), b.rotation[r].copy()

    posA, RA = pose(ra)
    posB, RB = pose(rb)
    default_anchor = posB if rb >= 0 else posA
    pa = default_anchor if anchor is None else vector("anchor", anchor, n)
    two_points = code in (KINDS["distance"], KINDS["spring"])
    if anchor_b is not None and not two_points:
        raise InputError(f"anchor_b: only distance and spring joints take a second anchor, got one for a "
                         f"{kind} joint")
    pb = (posB if rb >= 0 else pa) if (two_points and anchor_b is None) else (
        vector("anchor_b", anchor_b, n) if anchor_b is not None else pa)
    if two_points and anchor is None and rb >= 0:
        pa = posA
    # plane and axis
    if plane is not None and code not in (HINGE, WHEEL):
        raise InputError(f"plane: only hinge and wheel joints take a plane, got one for a {kind} joint")
    if axis is not None and code not in (SLIDER, WHEEL):
        raise InputError(f"axis: only slider and wheel joints take an axis, got one for a {kind} joint")
    ax_world = np.zeros(n)
    if code in (HINGE, WHEEL):
        P = np.zeros(sim.alg.k)
        P[0] = 1.0
        F = plane_frame(sim, P if plane is None else plane)
    else:
        F = np.eye(n)
    if code in (SLIDER, WHEEL):
        default_axis = np.eye(n)[0 if code == SLIDER else 1]
        ax_world, Fs = axis_frame(sim, default_axis if axis is None else axis)
        if code == SLIDER:
            F = Fs
    # lengths
    dist = float(np.linalg.norm(pb - pa))
    mn = mx = dist
    if code == KINDS["distance"]:
        if length is not None:
            if min_length is not None or max_length is not None:
                raise InputError("length: give either length (a rod) or min_length/max_length (a rope), "
                                 "got both")
            mn = mx = positive_scalar("length", length, allow_zero=True)
        elif min_length is not None or max_length is not None:
            mn = 0.0 if min_length is None else positive_scalar("min_length", min_length, allow_zero=True)
            mx = np.inf if max_length is None else positive_scalar("max_length", max_length, allow_zero=True)
            if mn > mx:
                raise InputError(f"min_length, max_length: expected min_length <= max_length, got {mn!r} > "
                                 f"{mx!r}")
    elif code == KINDS["spring"]:
        if min_length is not None or max_length is not None:
            raise InputError("min_length, max_length: a spring takes its rest length as length, got "
                             "min_length/max_length")
        mn = mx = dist if length is None else positive_scalar("length", length, allow_zero=True)
    elif any(v is not None for v in (length, min_length, max_length)):
        raise InputError(f"length: only distance and spring joints take lengths, got one for a {kind} joint")
    # limits, motor, softness, breaking
    if (lower is not None or upper is not None) and code != HINGE:
        raise InputError(f"lower, upper: only hinge joints take angle limits, got them for a {kind} joint")
    lw = -np.inf if lower is None else _number("lower", lower, lo=-np.pi, hi=np.pi)
    up = np.inf if upper is None else _number("upper", upper, lo=-np.pi, hi=np.pi)
    if lw > up:
        raise InputError(f"lower, upper: expected lower <= upper, got {lw!r} > {up!r}")
    speed = _number("motor_speed", motor_speed, lo=-1e9, hi=1e9)
    torque = positive_scalar("max_motor_torque", max_motor_torque, allow_zero=True)
    if (speed != 0.0 or torque != 0.0) and code not in (HINGE, WHEEL):
        raise InputError(f"motor_speed, max_motor_torque: only hinge and wheel joints have a motor, got one "
                         f"for a {kind} joint")
    freq = positive_scalar("frequency", frequency, allow_zero=True)
    zeta = positive_scalar("damping_ratio", damping_ratio, allow_zero=True)
    if code == KINDS["spring"] and freq == 0.0:
        raise InputError("frequency: a spring needs a frequency > 0 Hz (a rigid rod is a distance joint), "
                         "got 0")
    bf = _number("break_force", break_force, lo=0.0, allow_inf=True)
    bt = _number("break_torque", break_torque, lo=0.0, allow_inf=True)
    if bf <= 0.0 or bt <= 0.0:
        raise InputError(f"break_force, break_torque: expected numbers > 0 (inf: never breaks), got {bf!r}, "
                         f"{bt!r}")

    # body frames: local anchors and frames (a world side keeps world values)
    values = {
        "kind": code, "body_a": int(body_a), "body_b": -1 if body_b is None else int(body_b),
        "anchor_a": (pa - posA) @ RA, "anchor_b": (pb - posB) @ RB,
        "frame_a": F @ RA, "frame_b": F @ RB, "axis_a": ax_world @ RA,
        "min_length": mn, "max_length": mx, "lower": lw, "upper": up, "motor_speed": speed,
        "max_motor_torque": torque, "frequency": freq, "damping_ratio": zeta, "break_force": bf,
        "break_torque": bt, "collide": bool(collide),
    }
    h = sim.joints.add(values)
    for r in (ra, rb):
        if r >= 0:
            sim._wake_touching(r)
    sim.caches.pop("pairs", None)
    return h


def joint_row(sim: Simulation, joint: Any) -> int:
    if isinstance(joint, bool) or not isinstance(joint, (int, np.integer)):
        raise InputTypeError(f"joint: expected an integer joint handle, got {joint!r}")
    r = sim.joints.handle_to_row.get(int(joint))
    if r is None:
        raise InputError(f"joint: expected the handle of a live joint, got {int(joint)} (unknown, removed or "
                         f"broken)")
    return r


def joint_info(sim: Simulation, joint: Any) -> dict[str, Any]:
    """What a joint is: kind, bodies, and its last step's constraint force (N) and couple (N m)."""
    r = joint_row(sim, joint)
    j = sim.joints
    info = {"kind": KIND_NAMES[int(j.kind[r])], "body_a": int(j.body_a[r]),
            "body_b": None if j.body_b[r] < 0 else int(j.body_b[r]), "force": float(j.force[r]),
            "torque": float(j.torque[r])}
    return info


def joint_angle(sim: Simulation, joint: Any) -> float:
    """A hinge's or wheel's angle (rad, in (-pi, pi]): the turn of B from where it was made, in the
    joint's plane."""
    from ..dynamics.joints import hinge_angles, joint_geometry

    r = joint_row(sim, joint)
    j = sim.joints
    if j.kind[r] not in (HINGE, WHEEL):
        raise InputError(f"joint: expected a hinge or wheel joint, got a {KIND_NAMES[int(j.kind[r])]} joint")
    ra = np.array([sim.info.handle_to_row[j.body_a[r]]])
    rb = np.array([sim.info.handle_to_row[j.body_b[r]] if j.body_b[r] >= 0 else -1])
    g = joint_geometry(sim.alg, sim.bodies, j, ra, rb, np.array([r]))
    return float(hinge_angles(g["FA"], g["FB"])[0])


def joint_error(sim: Simulation, joint: Any) -> float:
    """Distance (m) between the joint's two anchors in the world (for a distance joint: how far the
    distance is outside [min, max])."""
    from ..dynamics.joints import joint_geometry

    r = joint_row(sim, joint)
    j = sim.joints
    ra = np.array([sim.info.handle_to_row[j.body_a[r]]])
    rb = np.array([sim.info.handle_to_row[j.body_b[r]] if j.body_b[r] >= 0 else -1])
    g = joint_geometry(sim.alg, sim.bodies, j, ra, rb, np.array([r]))
    d = float(np.linalg.norm(g["pB"][0] - g["pA"][0]))
    if KIND_NAMES[int(j.kind[r])] in ("distance", "spring"):
        return max(0.0, float(j.min_length[r]) - d, d - float(j.max_length[r]))
    return d


def set_motor(sim: Simulation, joint: Any, speed: Any = None, max_torque: Any = None) -> None:
    r = joint_row(sim, joint)
    j = sim.joints
    if j.kind[r] not in (HINGE, WHEEL):
        raise InputError(f"joint: expected a hinge or wheel joint, got a {KIND_NAMES[int(j.kind[r])]} joint")
    s = None if speed is None else _number("speed", speed, lo=-1e9, hi=1e9)
    t = None if max_torque is None else positive_scalar("max_torque", max_torque, allow_zero=True)
    if s is not None:
        j.motor_speed[r] = s
    if t is not None:
        j.max_motor_torque[r] = t
    for h in (j.body_a[r], j.body_b[r]):
        if h >= 0:
            sim._wake_touching(int(sim.info.handle_to_row[h]))


def remove_joint(sim: Simulation, joint: Any) -> None:
    r = joint_row(sim, joint)
    j = sim.joints
    for h in (j.body_a[r], j.body_b[r]):
        if h >= 0:
            sim._wake_touching(int(sim.info.handle_to_row[h]))
    j.remove(int(joint))
    sim.caches.pop("pairs", None)


def remove_joints_of(sim: Simulation, body_handle: int) -> None:
    j = sim.joints
    for h in j.handle[j.rows_of_body(body_handle)].tolist():
        j.remove(int(h))


def joint_handles(sim: Simulation, body: Any = None) -> np.ndarray:
    j = sim.joints
    if body is None:
        return j.handle.copy()
    sim.row(body)
    return j.handle[j.rows_of_body(int(body))].copy()


__all__ = ["add_joint", "joint_angle", "joint_error", "joint_handles", "joint_info", "joint_row",
           "plane_frame", "remove_joint", "remove_joints_of", "set_motor"]
