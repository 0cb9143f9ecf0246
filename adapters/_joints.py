"""Joint components for the ECS adapters, and the bridge's joint bookkeeping.

A game joins two bodies by putting a :class:`Joint` on one entity that holds a RigidBody (the
*holder*), naming the kind, the *other* entity (or None: the world) and the options of
``Simulation.add_joint``. The bridge (:class:`~ndrigid.adapters._common.PhysicsBridge`) makes
the joint at the next frame, after the frame's new bodies, in the order the Joint components were
constructed.

Which body is which. Every value a Joint shows or takes is the holder's relative to the other:

* with another entity, the other's body is the core's ``body_a`` and the holder's ``body_b``
  (so a wheel joint sits on the wheel entity and names its carrier, and the default anchor is the
  holder's origin);
* with the world, the holder's body is ``body_a`` (the core needs a body there); a hinge's angle,
  motor speed and limits are then mirrored (angle -> -angle, [lower, upper] -> [-upper, -lower]),
  so that ``angle`` is always the turn of the holder relative to the other (or to the world) in
  the joint's plane, positive in the plane's sense (e_i toward e_j for the blade e_i ^ e_j).

Life cycle (``Joint.state``): ``"waiting"`` until the bridge makes it, ``"live"`` while the
joint exists, then ``"broken"`` (it passed ``break_force`` / ``break_torque``; an
:class:`EntityJointEvent` is forwarded) or ``"removed"`` (the component was removed or replaced,
or the holder's or the other's body went: entity deleted, RigidBody removed or replaced, or the
joint removed through ``Simulation.remove_joint``). A broken or removed Joint stays on its entity
(it is not removed for the game) and keeps its last values; it is used once: to join again,
attach a new Joint.

Read-back: while live, ``angle`` (hinge and wheel), ``error``, ``force``, ``torque``,
``motor_speed`` and ``max_motor_torque`` read the state after the latest step, from per-frame
snapshots gathered for all joints at once (like Transform and Velocity). ``motor_speed`` and
``max_motor_torque`` are the only assignable fields: an assignment is checked at once and
forwarded to ``Simulation.set_motor`` before the next step. The other fields are fixed when the
joint is made (replace the component to change them).
"""

from __future__ import annotations

import itertools
from collections.abc import Hashable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
from ndrigid.core.dynamics.joints import hinge_angles, joint_geometry
from ndrigid.core.errors import InputError, InputTypeError, as_float_array, positive_scalar, vector
from ndrigid.core.state.joints import DISTANCE, HINGE, KINDS, SPRING, WHEEL
from ndrigid.core.world.joint_calls import _number, axis_frame, plane_frame
from numpy.typing import NDArray

if TYPE_CHECKING:
    from ._common import PhysicsBridge

Array = NDArray[np.float64]

WAITING, LIVE, BROKEN, REMOVED = "waiting", "live", "broken", "removed"

_serials = itertools.count()

#: options that only some kinds take (the core refuses them for the others)
_ONLY = {"anchor_other": ("distance", "spring"), "plane": ("hinge", "wheel"), "axis": ("slider", "wheel"),
         "length": ("distance", "spring"), "min_length": ("distance",), "max_length": ("distance",),
         "lower": ("hinge",), "upper": ("hinge",)}
_FIXED = ("kind", "other", "anchor", "anchor_other", "plane", "axis", "length", "min_length", "max_length",
          "lower", "upper", "frequency", "damping_ratio", "break_force", "break_torque", "collide")
_MOTOR = ("hinge", "wheel")
_READ_BACK = ("angle", "error", "force", "torque", "motor_speed", "max_motor_torque")


def _array(name: str, value: Any) -> Array | None:
    if value is None:
        return None
    a = as_float_array(name, value, ())
    if a.ndim != 1:
        raise InputError(f"{name}: expected a 1-D array of numbers, got shape {a.shape}")
    a = a.copy()
    a.flags.writeable = False
    return a


def _speed(name: str, value: Any) -> float:
    return _number(name, value, lo=-1e9, hi=1e9)


def _threshold(name: str, value: Any) -> float:
    v = _number(name, value, lo=0.0, allow_inf=True)
    if v <= 0.0:
        raise InputError(f"{name}: expected a number > 0 (inf: never breaks), got {v!r}")
    return v


class Joint:
    """A joint between this entity's body (the holder) and ``other``'s body, or the world.

    Args:
        kind: "point", "weld", "distance", "slider", "hinge", "spring" or "wheel" (what each
            holds: :mod:`ndrigid.core.world.joint_calls`).
        other: the other entity (it must hold a RigidBody when the joint is made), or None for the
            world. A wheel needs one: the holder is the wheel, ``other`` its carrier.
        anchor: (n,) world point: the joint's point (default the holder's origin); for distance and
            spring joints the point on the holder.
        anchor_other: (n,) world point on the other body (distance and spring only; default the
            other's origin, or with the world the holder's anchor).
        plane: (k,) unit 2-blade a hinge or wheel turns in (default e_0 ^ e_1).
        axis: (n,) a slider's line (default e_0) or a wheel's suspension line (default e_1).
        length, min_length, max_length: a rod's or a spring's rest length; a rope's range.
        lower, upper: a hinge's angle limits (rad, in [-pi, pi]) for the holder's turn relative to
            the other, counted from where the joint is made.
        motor_speed, max_motor_torque: a hinge's or wheel's motor (rad/s of the holder relative
            to the other; N m, 0: no motor). Assignable while the joint lives.
        frequency, damping_ratio: a spring's or wheel suspension's (Hz, ratio); for other kinds a
            soft joint (0 Hz: rigid).
        break_force, break_torque: N, N m (default inf: never breaks).
        collide: whether the two bodies still collide with each other (default False).

    World values (anchors, plane, axis) are taken at the poses the bodies have when the joint is
    made (the frame after the component is attached; a new entity's starting Transform). Values
    are checked here (types, ranges, which kinds take which options) and again against the
    simulation (dimension, bodies) before a frame changes anything.
    """

    __slots__ = (*_FIXED, "serial", "_motor_speed", "_max_motor_torque", "_pending", "_binding", "_state",
                 "_last")

    def __init__(self, kind: str, other: Any = None, *, anchor: Any = None, anchor_other: Any = None,
                 plane: Any = None, axis: Any = None, length: Any = None, min_length: Any = None,
                 max_length: Any = None, lower: Any = None, upper: Any = None, motor_speed: Any = 0.0,
                 max_motor_torque: Any = 0.0, frequency: Any = 0.0, damping_ratio: Any = 1.0,
                 break_force: Any = np.inf, break_torque: Any = np.inf, collide: Any = False) -> None:
        put = object.__setattr__
        if not isinstance(kind, str) or kind not in KINDS:
            raise InputError(f"Joint.kind: expected one of {sorted(KINDS)}, got {kind!r}")
        if other is not None and (not isinstance(other, Hashable) or isinstance(other, (bool, np.bool_))):
            raise InputTypeError(f"Joint.other: expected an entity (or None: the world), got "
                                 f"{type(other).__name__} {other!r}")
        if kind == "wheel" and other is None:
            raise InputError("Joint.other: a wheel joint sits on the wheel entity and names its carrier; got "
                             "None (to mount a wheel on the world, make a static entity the carrier)")
        given = {"anchor_other": anchor_other, "plane": plane, "axis": axis, "length": length,
                 "min_length": min_length, "max_length": max_length, "lower": lower, "upper": upper}
        for name, kinds in _ONLY.items():
            if given[name] is not None and kind not in kinds:
                raise InputError(f"Joint.{name}: only {' and '.join(kinds)} joints take it, got one for a "
                                 f"{kind} joint")
        if length is not None and (min_length is not None or max_length is not None):
            raise InputError("Joint.length: give either length (a rod) or min_length/max_length (a rope), "
                             "got both")
        lens = {n: None if v is None else positive_scalar(f"Joint.{n}", v, allow_zero=True)
                for n, v in (("length", length), ("min_length", min_length), ("max_length", max_length))}
        if lens["min_length"] is not None and lens["max_length"] is not None \
                and lens["min_length"] > lens["max_length"]:
            raise InputError(f"Joint.min_length, max_length: expected min_length <= max_length, got "
                             f"{lens['min_length']!r} > {lens['max_length']!r}")
        lw = None if lower is None else _number("Joint.lower", lower, lo=-np.pi, hi=np.pi)
        up = None if upper is None else _number("Joint.upper", upper, lo=-np.pi, hi=np.pi)
        if lw is not None and up is not None and lw > up:
            raise InputError(f"Joint.lower, upper: expected lower <= upper, got {lw!r} > {up!r}")
        speed = _speed("Joint.motor_speed", motor_speed)
        torque = positive_scalar("Joint.max_motor_torque", max_motor_torque, allow_zero=True)
        if (speed != 0.0 or torque != 0.0) and kind not in _MOTOR:
            raise InputError(f"Joint.motor_speed, max_motor_torque: only hinge and wheel joints have a "
                             f"motor, got one for a {kind} joint")
        freq = positive_scalar("Joint.frequency", frequency, allow_zero=True)
        if kind == "spring" and freq == 0.0:
            raise InputError("Joint.frequency: a spring needs a frequency > 0 Hz (a rigid rod is a distance "
                             "joint), got 0")
        if kind == "spring" and (min_length is not None or max_length is not None):
            raise InputError("Joint.min_length, max_length: a spring takes its rest length as length, got "
                             "min_length/max_length")
        if not isinstance(collide, (bool, np.bool_)):
            raise InputTypeError(f"Joint.collide: expected True or False, got {type(collide).__name__} "
                                 f"{collide!r}")
        values = {"kind": kind, "other": other, "anchor": _array("Joint.anchor", anchor),
                  "anchor_other": _array("Joint.anchor_other", anchor_other),
                  "plane": _array("Joint.plane", plane), "axis": _array("Joint.axis", axis), **lens,
                  "lower": lw, "upper": up, "frequency": freq,
                  "damping_ratio": positive_scalar("Joint.damping_ratio", damping_ratio, allow_zero=True),
                  "break_force": _threshold("Joint.break_force", break_force),
                  "break_torque": _threshold("Joint.break_torque", break_torque), "collide": bool(collide)}
        for name, v in values.items():
            put(self, name, v)
        put(self, "serial", next(_serials))
        put(self, "_motor_speed", speed)
        put(self, "_max_motor_torque", torque)
        put(self, "_pending", False)  # a motor assignment not yet applied
        put(self, "_binding", None)
        put(self, "_state", WAITING)
        put(self, "_last", dict.fromkeys(_READ_BACK))

    def __setattr__(self, name: str, value: Any) -> None:
        if name in ("motor_speed", "max_motor_torque"):
            object.__setattr__(self, name, value)
        elif name in _FIXED or name in ("serial", *_READ_BACK[:4], "state", "handle"):
            raise InputError(f"Joint.{name} is fixed once the Joint is made: replace the component with a "
                             f"new Joint (only motor_speed and max_motor_torque are assigned)")
        else:
            raise AttributeError(f"Joint has no attribute {name!r}")

    def __repr__(self) -> str:
        return f"Joint({self.kind!r}, other={self.other!r}, state={self._state!r})"

    # -- state --

    @property
    def state(self) -> str:
        """"waiting" (not made yet), "live", "broken" or "removed" (see the module docstring)."""
        return self._state

    @property
    def bound(self) -> bool:
        """True while the joint exists in the simulation."""
        return self._state == LIVE

    @property
    def broken(self) -> bool:
        """True once the joint broke above its force or couple threshold."""
        return self._state == BROKEN

    @property
    def handle(self) -> int | None:
        """The core's joint handle while live (for ``Simulation.joint`` and friends), else None."""
        return None if self._binding is None else self._binding.handle

    def _read(self, name: str) -> Any:
        b = self._binding
        if b is None:
            return self._last[name]
        return b.book.value(b.slot, name)

    @property
    def angle(self) -> float | None:
        """Hinge and wheel: the holder's turn relative to the other (or the world) in the joint's
        plane, rad in (-pi, pi], from where the joint was made; None for other kinds or before the
        joint is made. A broken or removed joint keeps the last value shown."""
        v = self._read("angle")
        return None if v is None or np.isnan(v) else float(v)

    @property
    def error(self) -> float | None:
        """How far apart the joint's anchors are, m (``Simulation.joint_error``); None before made."""
        return self._read("error")

    @property
    def force(self) -> float | None:
        """Size of the last step's constraint force, N (for a broken joint: the one that broke it)."""
        return self._read("force")

    @property
    def torque(self) -> float | None:
        """Size of the last step's constraint couple, N m (for a broken joint: the one that broke it)."""
        return self._read("torque")

    # -- the motor, assignable --

    def _motor(self, name: str) -> float:
        if self._pending or self._binding is None:
            return getattr(self, "_" + name) if self._state in (WAITING, LIVE) else self._last[name]
        return self._binding.book.value(self._binding.slot, name)

    def _set_motor(self, name: str, value: Any) -> None:
        if self.kind not in _MOTOR:
            raise InputError(f"Joint.{name}: only hinge and wheel joints have a motor, this is a {self.kind} "
                             f"joint")
        if self._state in (BROKEN, REMOVED):
            raise InputError(f"Joint.{name}: the joint is {self._state}; attach a new Joint to join again")
        v = _speed(f"Joint.{name}", value) if name == "motor_speed" else positive_scalar(
            f"Joint.{name}", value, allow_zero=True)
        b = self._binding
        if b is not None and not self._pending:  # keep the other motor value as it is now
            other = "max_motor_torque" if name == "motor_speed" else "motor_speed"
            object.__setattr__(self, "_" + other, b.book.value(b.slot, other))
        object.__setattr__(self, "_" + name, v)
        if b is not None:
            object.__setattr__(self, "_pending", True)
            b.book.pending[b.slot] = self

    @property
    def motor_speed(self) -> float:
        """Target speed of the motor, rad/s (the holder relative to the other); assign to change it
        before the next step (``Simulation.set_motor``)."""
        return self._motor("motor_speed")

    @motor_speed.setter
    def motor_speed(self, value: Any) -> None:
        self._set_motor("motor_speed", value)

    @property
    def max_motor_torque(self) -> float:
        """Largest couple the motor may apply, N m (0: no motor); assignable like ``motor_speed``."""
        return self._motor("max_motor_torque")

    @max_motor_torque.setter
    def max_motor_torque(self, value: Any) -> None:
        self._set_motor("max_motor_torque", value)


class EntityJointEvent(NamedTuple):
    """A joint that broke in a step, with entities in place of body handles.

    ``kind`` is ``"joint_broken"``. ``entity_a`` is the entity holding the :class:`Joint` and
    ``entity_b`` its other entity (None: the world); for a joint made on the Simulation directly
    they are the owners of the core's ``body_a`` and ``body_b`` (None: the world or a body no
    entity owns) and ``joint`` is None. ``handle`` is the core's joint handle (no longer valid);
    ``force`` (N) and ``torque`` (N m) the sizes that broke it.
    """

    kind: str
    entity_a: Any
    entity_b: Any
    joint: Joint | None
    handle: int
    force: float
    torque: float


@dataclass
class _JointBinding:
    comp: Joint
    holder: Any
    other: Any
    handle: int
    slot: int
    book: JointBook


class JointBook:
    """The joints that Joint components own, for one bridge: diff, checks, snapshots, events."""

    def __init__(self, bridge: PhysicsBridge[Any]) -> None:
        self.bridge = bridge
        self.sim = bridge.sim
        self.by_holder: dict[Any, _JointBinding] = {}
        self.by_handle: dict[int, _JointBinding] = {}
        self.pending: dict[int, Joint] = {}  # slot -> component with a motor assignment
        self.slot_handle: NDArray[np.int64] = np.zeros(0, dtype=np.int64)
        self.sign = np.ones(0)  # -1: a hinge held to the world (the holder is the core's body A)
        self.free: list[int] = []
        self.values: dict[str, Array] = {name: np.zeros(0) for name in _READ_BACK}

    # -- reading --

    def value(self, slot: int, name: str) -> float:
        self.bridge.refresh()
        return float(self.values[name][slot])

    # -- the diff (before anything changes) --

    def diff(self, current: Any) -> tuple[list[Any], list[tuple[Any, Joint]]]:
        """(holders whose live Joint is gone or replaced, new (holder, Joint) in construction order)."""
        now: dict[Any, Any] = {}
        for e, jc in current:
            now[e] = jc
        gone = [e for e, b in self.by_holder.items() if now.get(e) is not b.comp]
        new = []
        seen: dict[int, Any] = {}
        for e, jc in now.items():
            if not isinstance(jc, Joint):
                raise InputTypeError(f"Joint of entity {e!r}: expected an ndrigid Joint, got "
                                     f"{type(jc).__name__}")
            b = jc._binding
            if b is not None and b.holder is not e and b.holder != e:
                raise InputError(f"Joint of entity {e!r}: expected a component of its own, got the one of "
                                 f"entity {b.holder!r}")
            if jc._state != WAITING:
                continue
            first = seen.setdefault(id(jc), e)
            if first is not e and first != e:
                raise InputError(f"Joint of entity {e!r}: expected a component of its own, got the same "
                                 f"object as on entity {first!r}")
            new.append((jc.serial, e, jc))
        new.sort(key=lambda t: t[0])
        return gone, [(e, jc) for _, e, jc in new]

    def check(self, e: Any, jc: Joint, kinds: dict[Any, str]) -> None:
        """Everything ``add_joint`` checks, against the bodies the frame will leave (``kinds``:
        entity -> RigidBody kind of every entity that has a body after the frame)."""
        sim, n = self.sim, self.sim.dim
        where = f"of entity {e!r}"
        if e not in kinds:
            raise InputError(f"Joint {where}: expected an entity that holds a RigidBody, got one without")
        if jc.other is not None:
            if jc.other is e or jc.other == e:
                raise InputError(f"Joint.other {where}: expected another entity (or None: the world), got "
                                 f"the holder itself")
            if jc.other not in kinds:
                raise InputError(f"Joint.other {where}: expected an entity that holds a RigidBody (or None: "
                                 f"the world), got {jc.other!r} without one")
        if kinds[e] != "dynamic" and (jc.other is None or kinds[jc.other] != "dynamic"):
            other = "the world" if jc.other is None else f"a {kinds[jc.other]} other"
            raise InputError(f"Joint {where}: expected at least one dynamic body, got a {kinds[e]} holder "
                             f"and {other}")
        for name in ("anchor", "anchor_other"):
            if getattr(jc, name) is not None:
                vector(f"Joint.{name} {where}", getattr(jc, name), n)
        try:
            if jc.plane is not None:
                plane_frame(sim, jc.plane)
            if jc.axis is not None:
                axis_frame(sim, jc.axis)
        except (InputError, InputTypeError) as exc:
            raise type(exc)(f"Joint {where}: {exc}") from exc

    # -- changes --

    def call(self, jc: Joint, holder_handle: int, other_handle: int | None) -> tuple[int, int | None, dict]:
        """``add_joint``'s (body_a, body_b, options) for a Joint (see the module docstring on roles)."""
        world = other_handle is None
        mirror = world and jc.kind == "hinge"
        s = -1.0 if mirror else 1.0
        opts: dict[str, Any] = {"plane": jc.plane, "axis": jc.axis, "length": jc.length,
                                "min_length": jc.min_length, "max_length": jc.max_length,
                                "motor_speed": s * jc._motor_speed + 0.0,
                                "max_motor_torque": jc._max_motor_torque,
                                "frequency": jc.frequency, "damping_ratio": jc.damping_ratio,
                                "break_force": jc.break_force, "break_torque": jc.break_torque,
                                "collide": jc.collide}
        lw, up = (jc.lower, jc.upper) if not mirror else (
            None if jc.upper is None else -jc.upper, None if jc.lower is None else -jc.lower)
        opts["lower"], opts["upper"] = lw, up
        two = jc.kind in ("distance", "spring")
        if world:
            opts["anchor"] = jc.anchor
            if two:
                opts["anchor_b"] = jc.anchor_other
            return holder_handle, None, opts
        if two:
            opts["anchor"], opts["anchor_b"] = jc.anchor_other, jc.anchor
        else:
            opts["anchor"] = jc.anchor
        return other_handle, holder_handle, opts

    def add(self, e: Any, jc: Joint) -> None:
        other = None if jc.other is None else self.bridge.handle_of(jc.other)
        a, b, opts = self.call(jc, self.bridge.handle_of(e), other)
        h = self.sim.add_joint(jc.kind, a, b, **{k: v for k, v in opts.items() if v is not None})
        self.own(e, jc, h)

    def own(self, e: Any, jc: Joint, h: int) -> None:
        slot = self.free.pop() if self.free else self._grow()
        self.slot_handle[slot] = h
        self.sign[slot] = -1.0 if (jc.other is None and jc.kind == "hinge") else 1.0
        bnd = _JointBinding(jc, e, jc.other, int(h), slot, self)
        self.by_holder[e] = bnd
        self.by_handle[int(h)] = bnd
        object.__setattr__(jc, "_binding", bnd)
        object.__setattr__(jc, "_state", LIVE)
        object.__setattr__(jc, "_pending", False)
        object.__setattr__(jc, "_last", dict.fromkeys(_READ_BACK))
        self.bridge._stale = True

    def _grow(self) -> int:
        slot = len(self.slot_handle)
        size = max(8, 2 * slot)
        grown = np.full(size, -1, dtype=np.int64)
        grown[:slot] = self.slot_handle
        sign = np.ones(size)
        sign[:slot] = self.sign
        self.slot_handle, self.sign = grown, sign
        for name, a in self.values.items():
            b = np.full(size, np.nan)
            b[: len(a)] = a
            self.values[name] = b
        self.free.extend(range(size - 1, slot, -1))
        return slot

    def end(self, bnd: _JointBinding, state: str, force: float | None = None,
            torque: float | None = None) -> None:
        """Detach a component from its joint (already gone from the core, or about to be)."""
        jc, s = bnd.comp, bnd.slot
        last = {name: float(self.values[name][s]) for name in _READ_BACK}
        if jc._pending:  # an assignment not applied: it is what the component showed
            last["motor_speed"], last["max_motor_torque"] = jc._motor_speed, jc._max_motor_torque
        if force is not None:
            last["force"], last["torque"] = float(force), float(torque)
        object.__setattr__(jc, "_last", last)
        object.__setattr__(jc, "_binding", None)
        object.__setattr__(jc, "_state", state)
        object.__setattr__(jc, "_pending", False)
        self.pending.pop(s, None)
        self.by_holder.pop(bnd.holder, None)
        self.by_handle.pop(bnd.handle, None)
        self.slot_handle[s] = -1
        self.free.append(s)

    def remove(self, holder: Any) -> None:
        """The holder's Joint component was removed or replaced: remove its joint."""
        bnd = self.by_holder[holder]
        self.bridge.refresh()
        if bnd.handle in self.sim.joints.handle_to_row:
            self.sim.remove_joint(bnd.handle)
        self.end(bnd, REMOVED)
        self.bridge._stale = True

    def body_going(self, handle: int) -> None:
        """A body is about to be removed (the core removes its joints with it): end the components
        of those joints, with the values shown now."""
        for h in self.sim.joint_handles(handle).tolist():
            bnd = self.by_handle.get(int(h))
            if bnd is not None:
                self.end(bnd, REMOVED)

    def apply_pending(self) -> None:
        """Forward the motor assignments (checked when assigned) to ``Simulation.set_motor``."""
        if not self.pending:
            return
        for slot, jc in list(self.pending.items()):
            s = float(self.sign[slot])
            self.sim.set_motor(int(self.slot_handle[slot]), speed=s * jc._motor_speed + 0.0,
                               max_torque=jc._max_motor_torque)
            object.__setattr__(jc, "_pending", False)
        self.pending.clear()
        self.bridge._stale = True

    def broke(self, ev: Any) -> EntityJointEvent:
        """The entity event of a core JointEvent; the component (if any) is marked broken."""
        bnd = self.by_handle.get(int(ev.joint))
        if bnd is not None:
            self.end(bnd, BROKEN, ev.force, ev.torque)
            return EntityJointEvent(ev.kind, bnd.holder, bnd.other, bnd.comp, int(ev.joint), float(ev.force),
                                    float(ev.torque))
        ent = self.bridge._handle_entity.get
        return EntityJointEvent(ev.kind, ent(int(ev.body_a)), None if ev.body_b < 0 else ent(int(ev.body_b)),
                                None, int(ev.joint), float(ev.force), float(ev.torque))

    # -- the scatter --

    def refresh(self) -> None:
        """The read-back values of every live component's joint, gathered at once."""
        live = np.nonzero(self.slot_handle >= 0)[0]
        if not len(live):
            return
        sim, j = self.sim, self.sim.joints
        hs = self.slot_handle[live]
        jh = j.handle
        order = np.argsort(jh, kind="stable")
        at = np.minimum(np.searchsorted(jh[order], hs), max(len(jh) - 1, 0))
        found = (jh[order][at] == hs) if len(jh) else np.zeros(len(hs), dtype=bool)
        for s in live[~found].tolist():  # removed through the Simulation directly
            self.end(self.by_handle[int(self.slot_handle[s])], REMOVED)
        live, rows = live[found], order[at[found]]
        if not len(live):
            return
        h2r = sim.info.handle_to_row
        ra = h2r[j.body_a[rows]]
        bb = j.body_b[rows]
        rb = np.where(bb >= 0, h2r[np.maximum(bb, 0)], -1)
        g = joint_geometry(sim.alg, sim.bodies, j, ra, rb, rows)
        d = np.linalg.norm(g["pB"] - g["pA"], axis=1)
        kind = j.kind[rows]
        ranged = (kind == DISTANCE) | (kind == SPRING)
        out = np.maximum(np.maximum(j.min_length[rows] - d, d - j.max_length[rows]), 0.0)
        sign = self.sign[live]
        turning = (kind == HINGE) | (kind == WHEEL)
        v = self.values
        v["error"][live] = np.where(ranged, out, d)
        v["angle"][live] = np.where(turning, sign * hinge_angles(g["FA"], g["FB"]), np.nan)
        v["force"][live] = j.force[rows]
        v["torque"][live] = j.torque[rows]
        v["motor_speed"][live] = sign * j.motor_speed[rows] + 0.0
        v["max_motor_torque"][live] = j.max_motor_torque[rows]

    # -- snapshots --

    def save(self) -> dict[Any, tuple[int, Any, str]]:
        return {e: (b.handle, b.other, b.comp.kind) for e, b in self.by_holder.items()}

    def check_restore(self, saved: dict[Any, Any], current: dict[Any, Any]) -> None:
        for e, (h, other, kind) in saved.items():
            jc = current.get(e)
            if not isinstance(jc, Joint):
                raise InputError(f"saved: entity {e!r} held joint {h} when saved, but has no Joint now")
            if jc.kind != kind or not (jc.other is other or jc.other == other):
                raise InputError(f"saved: entity {e!r} held a {kind} joint to {other!r} when saved, but its "
                                 f"Joint now is a {jc.kind} joint to {jc.other!r}")

    def restore(self, saved: dict[Any, Any], current: dict[Any, Any]) -> None:
        """Bind the saved joints to their holders' current Joint components again; a component live
        now whose joint the saved world lacks waits to be made again (broken and removed ones stay)."""
        for bnd in list(self.by_holder.values()):
            jc = bnd.comp
            object.__setattr__(jc, "_binding", None)
            object.__setattr__(jc, "_state", WAITING)
            object.__setattr__(jc, "_pending", False)
        self.by_holder.clear()
        self.by_handle.clear()
        self.pending.clear()
        self.slot_handle[:] = -1
        self.free = list(range(len(self.slot_handle) - 1, -1, -1))
        for e, (h, _other, _kind) in saved.items():
            self.own(e, current[e], int(h))


__all__ = ["BROKEN", "EntityJointEvent", "Joint", "JointBook", "LIVE", "REMOVED", "WAITING"]
