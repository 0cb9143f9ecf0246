"""What the ECS adapters share: the body components and the bridge between entities and the core.

The ECS adapters (:mod:`ndrigid.adapters.esper`, :mod:`ndrigid.adapters.tcod`) only query their ECS
and attach components; everything else happens here, once, in :class:`PhysicsBridge`:

1. ``sync``: the structural diff. Entities holding a :class:`RigidBody` that the bridge has not
   seen get a body (in the order their RigidBody components were constructed, so that a scene
   built in the same order gives the same body order in every ECS, whose entity sets iterate in
   no defined order); entities that lost their RigidBody (or were deleted) lose their body;
   a replaced RigidBody instance rebuilds the body. Removals run before additions.
   The same diff makes and removes the joints of :class:`~ndrigid.adapters._joints.Joint`
   components (after the frame's bodies; see :mod:`ndrigid.adapters._joints` for which body is
   which and what a Joint shows).
   The adapters call the diff only when their ECS says the set of RigidBody components changed
   (esper returns a new cached query list; tcod-ecs calls a component-changed hook), so a frame
   without spawns or deletions does no per-entity work at all.
2. ``apply_pending``: velocities and teleports that game code assigned to :class:`Velocity` /
   :class:`Transform` since the last frame, applied in one vectorised write (teleports through
   ``Simulation.set_pose``, which is rare and keeps the rotor checks in one place).
3. the fixed steps (:class:`~ndrigid.adapters.loop.FixedStepper`), with contact events translated
   from body handles to entities after every step;
4. ``refresh``: the scatter. The core's arrays are the single source of physical state. The
   components do not copy it per entity: every bound Transform / Velocity holds a slot number
   into one shared :class:`PoseStore`, whose arrays are replaced, once per frame, by fresh
   read-only snapshots gathered with one fancy index per column. So the scatter costs a few
   numpy copies whatever the number of entities, and a value read from a component (a read-only
   view of one frame's snapshot) never changes under the reader's hands when later frames come.

Rejected alternatives, with reasons: components holding views into the core's table break when
the table grows (reallocation) or swap-removes (rows move); writing each entity's pose into its
component is a Python loop of 0.5 us per entity (row views) to 1.9 us (row copies) per frame,
measured in 4-D: 0.5-1.9 ms a frame for 1,000 entities, 2-8 % of a quiet 1,000-body 4-D step on
its own, against about 0.09 ms for the five snapshot gathers; comparing every Velocity with last
frame's value to detect changes is another such loop, where assignment through a property knows
exactly what changed.

Rules for game code (also in the adapters' docs): assign ``velocity.linear = ...`` (the arrays
returned are read-only, so an in-place ``velocity.linear[0] = 1`` raises instead of being silently
lost); change a body's shape or material by replacing its RigidBody component; remove a body by
deleting its entity or its RigidBody, never by ``sim.remove_body`` on a body an entity owns; join
bodies with a Joint component and remove the joint by removing the component (a joint removed
through ``sim.remove_joint`` shows its component as "removed" at the next frame).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Hashable, Iterable
from dataclasses import dataclass, field
from typing import Any, Generic, NamedTuple, TypeVar

import numpy as np
from ndrigid.core.algebra import Algebra
from ndrigid.core.errors import InputError, InputTypeError, as_float_array, positive_scalar, vector
from ndrigid.core.state.components import ALL_LAYERS, KIND_NAMES, STATIC
from ndrigid.core.world.stages import _NO_POINTS
from numpy.typing import NDArray

from ._joints import EntityJointEvent, Joint, JointBook
from .loop import FixedStepper

Array = NDArray[np.float64]
E = TypeVar("E", bound=Hashable)

_serials = itertools.count()


# -- components -----------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class RigidBody:
    """What a body is: put one on an entity to give it physics (read once, when the body is made).

    Where it starts is the entity's :class:`Transform` and how it moves at first its
    :class:`Velocity` (both optional: origin, identity rotor, at rest). To change any field later,
    replace the component with a new RigidBody; the body is rebuilt at the same pose and velocity.

    Args:
        shape: a shape from :mod:`ndrigid.core.geometry.shapes` in the simulation's dimension.
        kind: "dynamic", "kinematic" or "static".
        density, mass: at most one (default density 1000 kg/m^n); ignored (0 accepted) unless dynamic.
        friction, static_friction, restitution: material coefficients (>= 0; restitution <= 1).
        rolling_resistance, spin_friction: couples of a one-point contact per unit normal force, m
            (>= 0; see ``Simulation.add_body``).
        layer, mask: collision filter bits (A and B collide iff A.layer & B.mask and B.layer & A.mask).
        linear_damping, angular_damping: rates >= 0, 1/s.
        sensor: report overlaps as contact events without a contact response.
    """

    shape: Any
    kind: str = "dynamic"
    density: float | None = None
    mass: float | None = None
    friction: float = 0.5
    static_friction: float | None = None
    restitution: float = 0.0
    rolling_resistance: float = 0.001
    spin_friction: float = 0.016
    layer: int = 1
    mask: int = ALL_LAYERS
    linear_damping: float = 0.0
    angular_damping: float = 0.0
    sensor: bool = False
    #: construction order; new bodies are made in this order (see the module docstring)
    serial: int = field(init=False, repr=False, default_factory=lambda: next(_serials))

    def __post_init__(self) -> None:
        # The checks that need no simulation, at the construction site where the mistake is; the
        # Simulation re-checks everything when the body is added.
        if not hasattr(self.shape, "dim") or not hasattr(self.shape, "mass_properties"):
            raise InputTypeError(f"shape: expected an ndrigid shape (Ball, Box, ConvexPolytope, ...), got "
                                 f"{type(self.shape).__name__}")
        if self.kind not in KIND_NAMES:
            raise InputError(f"kind: expected one of {sorted(KIND_NAMES)}, got {self.kind!r}")
        if self.kind == "dynamic" and getattr(self.shape, "static_only", False):
            raise InputError(f"kind: a {type(self.shape).__name__} has no finite mass; expected "
                             f"kind='static' or 'kinematic', got 'dynamic'")
        if self.density is not None and self.mass is not None:
            raise InputError("density, mass: expected at most one of them, got both")
        for name in ("density", "mass"):
            if getattr(self, name) is not None:
                positive_scalar(name, getattr(self, name), allow_zero=self.kind != "dynamic")
        for name in ("friction", "restitution", "rolling_resistance", "spin_friction", "linear_damping",
                     "angular_damping"):
            positive_scalar(name, getattr(self, name), allow_zero=True)
        if self.restitution > 1.0:
            raise InputError(f"restitution: expected a value in [0, 1] (above 1 every bounce gains "
                             f"energy), got {self.restitution!r}")
        if not isinstance(self.sensor, (bool, np.bool_)):
            raise InputTypeError(f"sensor: expected True or False, got {type(self.sensor).__name__} "
                                 f"{self.sensor!r}")

    def body_arguments(self) -> dict[str, Any]:
        """Keyword arguments of ``Simulation.add_body`` for this description (shape excluded)."""
        return {"kind": self.kind, "density": self.density, "mass": self.mass, "friction": self.friction,
                "static_friction": self.static_friction, "restitution": self.restitution,
                "rolling_resistance": self.rolling_resistance, "spin_friction": self.spin_friction,
                "layer": self.layer, "mask": self.mask, "linear_damping": self.linear_damping,
                "angular_damping": self.angular_damping, "sensor": self.sensor}


class PoseStore:
    """Per-frame read-only snapshots shared by all bound components of one bridge.

    Each array is indexed by slot: position (S, n), rotor (S, 2**(n-1)), rotation (S, n, n),
    velocity (S, n), angular_velocity (S, k). A new set of arrays replaces the old each frame.
    Assignments made through components are queued in ``pending_pose`` / ``pending_velocity``
    (slot -> component), in assignment order.
    """

    def __init__(self, alg: Algebra) -> None:
        self.alg = alg
        self.dim = alg.n
        n, k, e = alg.n, alg.k, alg.even_size
        self.position: Array = np.zeros((0, n))
        self.rotor: Array = np.zeros((0, e))
        self.rotation: Array = np.zeros((0, n, n))
        self.velocity: Array = np.zeros((0, n))
        self.angular_velocity: Array = np.zeros((0, k))
        self.pending_pose: dict[int, Transform] = {}
        self.pending_velocity: dict[int, Velocity] = {}


_READ_ONLY = ("{what} is read-only: it shows the physics state after the latest step. Assign a whole new "
              "value to the field instead (transform.position = p, transform.rotor = R, velocity.linear = v, "
              "velocity.angular = w), which the next step applies")


class ReadOnlyArray(np.ndarray):
    """What component fields return: a read-only float array whose in-place edits raise an
    :class:`~ndrigid.core.errors.InputError` saying what to do (assign the field) instead of
    numpy's generic "assignment destination is read-only". Arithmetic on it gives plain arrays."""

    def __setitem__(self, key: Any, value: Any) -> None:
        if not self.flags.writeable:
            raise InputError(_READ_ONLY.format(what="this component array"))
        super().__setitem__(key, value)

    def __array_ufunc__(self, ufunc: Any, method: str, *inputs: Any, out: Any = None, **kwargs: Any) -> Any:
        if out is not None:
            if any(isinstance(o, ReadOnlyArray) and not o.flags.writeable for o in out):
                raise InputError(_READ_ONLY.format(what="this component array"))
            kwargs["out"] = tuple(np.asarray(o) if isinstance(o, ReadOnlyArray) else o for o in out)
        plain = tuple(np.asarray(x) if isinstance(x, ReadOnlyArray) else x for x in inputs)
        return getattr(ufunc, method)(*plain, **kwargs)

    def __repr__(self) -> str:
        return repr(np.asarray(self))


def _read_only(a: Any, name: str = "value") -> Array:
    a = as_float_array(name, a, ())
    if a.ndim != 1:
        raise InputError(f"{name}: expected a 1-D array of numbers, got shape {a.shape}")
    a = a.copy()
    a.flags.writeable = False
    return a.view(ReadOnlyArray)


class _Field:
    """A component field backed by one PoseStore column.

    Reading gives the value assigned and not yet applied if there is one, else (while bound) the
    row of this frame's snapshot, else the value given before binding. Assigning validates
    against the bound simulation and queues the component in the store's ``pending`` dict.
    """

    def __init__(self, column: str, pending: str, check: Callable[[PoseStore, Any, str], Array],
                 doc: str) -> None:
        self.column, self.pending, self.check, self.__doc__ = column, pending, check, doc
        self.name = self.attr = ""

    def __set_name__(self, owner: type, name: str) -> None:
        self.name, self.attr = name, "_" + name

    def __get__(self, obj: Any, owner: type | None = None) -> Any:
        if obj is None:
            return self
        value, st = getattr(obj, self.attr), obj._store
        if value is not None or st is None:
            return value
        return getattr(st, self.column)[obj._slot].view(ReadOnlyArray)

    def __set__(self, obj: Any, value: Any) -> None:
        st = obj._store
        checked = value if st is None else self.check(st, value, self.name)
        setattr(obj, self.attr, _read_only(checked, self.name))
        if st is not None:
            getattr(st, self.pending)[obj._slot] = obj


def _vector(st: PoseStore, v: Any, name: str) -> Array:
    return vector(name, v, st.dim)


def _bivector(st: PoseStore, v: Any, name: str) -> Array:
    return vector(name, v, st.alg.k)


def _rotor(st: PoseStore, v: Any, name: str) -> Array:
    return st.alg.check_rotor(v, name, single=True)


class _Bound:
    """Base of the components that show one body's row of a PoseStore."""

    __slots__ = ("_store", "_slot")

    def __init__(self) -> None:
        self._store: PoseStore | None = None
        self._slot = -1

    @property
    def bound(self) -> bool:
        """True while the component shows a live body."""
        return self._store is not None


class Transform(_Bound):
    """Where a body is: the pose game code reads (and may assign to teleport the body).

    ``Transform(position=None, rotor=None)`` before the body exists gives its starting pose (a
    rotation matrix is accepted instead of the rotor under the keyword ``rotation``); values are
    checked at once (finite, a unit rotor of the position's dimension).
    While bound, ``position`` (n,), ``rotor`` (2**(n-1),) and ``matrix`` (n, n) are read-only views
    of the pose after the latest step (refreshed once per frame, not copied per entity; an
    in-place edit raises an error that says to assign instead).
    Assigning ``position`` or ``rotor`` teleports the body before the next step.
    """

    __slots__ = ("_position", "_rotor")
    position = _Field("position", "pending_pose", _vector,
                      "(n,) float: world position of the body's local origin.")
    rotor = _Field("rotor", "pending_pose", _rotor,
                   "(2**(n-1),) float: unit rotor of the body (x' = R x ~R).")

    def __init__(self, position: Any = None, rotor: Any = None, *, rotation: Any = None) -> None:
        super().__init__()
        self._position = None if position is None else _read_only(position, "position")
        n = None if self._position is None else len(self._position)
        if rotation is not None:
            if rotor is not None:
                raise InputError("rotor, rotation: expected at most one of a rotor and a rotation matrix, "
                                 "got both")
            M = as_float_array("rotation", rotation, ())
            m = n if n is not None else (M.shape[0] if M.ndim == 2 else 0)
            if M.shape != (m, m) or m < 2:
                like = "n >= 2" if n is None else f"n = {n} like the position"
                raise InputError(f"rotation: expected a square (n, n) matrix ({like}), got shape {M.shape}")
            rotor = Algebra(M.shape[0]).matrix_to_rotor(M, name="rotation")
        self._rotor = None if rotor is None else _read_only(rotor, "rotor")
        if self._rotor is not None:
            size = len(self._rotor)
            m = int(round(np.log2(size))) + 1 if size else 0
            if size < 2 or 1 << (m - 1) != size or (n is not None and m != n):
                want = f"2**(n-1) = {1 << (n - 1)}" if n is not None else "2**(n-1) for some n >= 2"
                raise InputError(f"rotor: expected {want} components, got {size}")
            Algebra(m).check_rotor(self._rotor, "rotor", single=True)

    def __repr__(self) -> str:
        return f"Transform(position={self.position!r}, rotor={self.rotor!r})"

    @property
    def matrix(self) -> Array:
        """(n, n) float: the rotation matrix of ``rotor`` (column i is the image of e_i)."""
        st = self._store
        if st is not None and self._rotor is None:
            return st.rotation[self._slot].view(ReadOnlyArray)
        if self._rotor is not None:
            n = int(np.log2(len(self._rotor))) + 1
            return Algebra(n).rotor_to_matrix(self._rotor)
        if self._position is not None:
            return np.eye(len(self._position))
        raise InputError("Transform.matrix: expected a bound transform or one with a position or rotor, "
                         "got an empty unbound one")

    @property
    def dim(self) -> int:
        """Dimension n of the pose (0 for an empty unbound transform)."""
        if self._store is not None:
            return self._store.dim
        return 0 if self._position is None else len(self._position)

    def to_world(self, points: Any) -> Array:
        """World coordinates (..., n) of body-local points (..., n): ``matrix @ p + position``."""
        M, p = self.matrix, self.position
        pts = as_float_array("points", points, (len(M),))
        return pts @ M.T + (0.0 if p is None else p)


class Velocity(_Bound):
    """How a body moves: ``linear`` (n,) velocity of the centre of mass and ``angular`` (k,) world
    angular velocity bivector, k = n(n-1)/2.

    ``Velocity(linear=None, angular=None)`` before the body exists gives its starting velocity.
    While bound, both read as read-only views of the velocity after the latest step; assigning
    either sets the body's velocity before the next step (and wakes it).
    """

    __slots__ = ("_linear", "_angular")
    linear = _Field("velocity", "pending_velocity", _vector,
                    "(n,) float: velocity of the centre of mass, m/s.")
    angular = _Field("angular_velocity", "pending_velocity", _bivector,
                     "(k,) float: world angular velocity bivector, rad/s (B_ij turns e_i toward e_j).")

    def __init__(self, linear: Any = None, angular: Any = None) -> None:
        super().__init__()
        self._linear = None if linear is None else _read_only(linear, "linear")
        self._angular = None if angular is None else _read_only(angular, "angular")

    def __repr__(self) -> str:
        return f"Velocity(linear={self.linear!r}, angular={self.angular!r})"


class EntityContact(NamedTuple):
    """A contact event with entities in place of body handles (None for a body no entity owns).

    The detail fields are those of the core's ``ContactEvent`` (a begin event of a non-sensor pair
    carries them; others keep the defaults): ``points`` (P, n), ``normal`` (n,) from entity A toward
    entity B, ``approach_speed`` (m/s, before the step's solve) and ``impulse`` (N s, the step's
    total normal impulse).
    """

    kind: str
    entity_a: Any
    entity_b: Any
    sensor: bool
    points: Any = _NO_POINTS
    normal: Any = None
    approach_speed: float = 0.0
    impulse: float = 0.0


# -- the bridge -----------------------------------------------------------------------------------


@dataclass
class _Binding:
    rigid: RigidBody
    transform: Transform
    velocity: Velocity
    handle: int
    slot: int


class PhysicsBridge(Generic[E]):
    """Entities <-> the core's body table, for any ECS (see the module docstring).

    Args:
        sim: the Simulation (one per ECS world).
        dt, max_steps_per_frame: the fixed step and the spiral-of-death cap (see FixedStepper).
        on_contact: called as ``on_contact(EntityContact)`` for every contact event, after the
            step that produced it.
        on_joint: called as ``on_joint(EntityJointEvent)`` for every joint that broke, after the
            step that broke it (in the order of the step's events, among the contact events).
    """

    def __init__(self, sim: Any, dt: float | None = None, max_steps_per_frame: int = 5,
                 on_contact: Callable[[EntityContact], None] | None = None,
                 on_joint: Callable[[EntityJointEvent], None] | None = None) -> None:
        self.sim = sim
        self.on_joint = on_joint
        self.store = PoseStore(sim.alg)
        self.stepper = FixedStepper(sim, dt, max_steps_per_frame, on_step=self._after_step)
        self.on_contact = on_contact
        self._bound: dict[E, _Binding] = {}
        self._handle_entity: dict[int, E] = {}
        self._gone: list[int] = []  # removed handles whose end events the next step reports
        self._slot_handle: NDArray[np.int64] = np.zeros(0, dtype=np.int64)
        self._free: list[int] = []
        self._stale = True
        self._handler_error: Exception | None = None  # the first one raised by a handler this frame
        self.joint_book = JointBook(self)  # the joints that Joint components own (adapters/_joints.py)

    # -- lookups --

    @property
    def entities(self) -> list[E]:
        """Entities that own a body, in the order their bodies were made."""
        return list(self._bound)

    # -- snapshots --

    def save(self) -> dict[str, Any]:
        """The world's state (``Simulation.save_state``), which entity owns which body, and the
        stepper's banked time: what :meth:`restore` needs to put the game back."""
        self.apply_pending()  # assignments made this frame belong to the saved world
        self.joint_book.apply_pending()
        return {"world": self.sim.save_state(), "bodies": {e: b.handle for e, b in self._bound.items()},
                "accumulator": self.stepper.accumulator, "joints": self.joint_book.save()}

    def restore(self, saved: dict[str, Any], rigid_of: Callable[[E], RigidBody | None],
                extras: Callable[[E], tuple[Transform | None, Velocity | None]],
                attach: Callable[[E, Transform | None, Velocity | None], None],
                joints: Iterable[tuple[E, Joint]] | None = None) -> None:
        """Put back a :meth:`save`: the world's state, and each saved entity bound to its body
        again (its current RigidBody, Transform and Velocity components, or new ones attached).
        Every saved entity must hold a RigidBody now; checked before anything changes.

        ``joints`` (every (entity, Joint) of the ECS world now): each saved joint is bound to its
        holder's current Joint component again, which must be of the saved kind and name the
        saved other entity; a Joint live now whose joint the saved world lacks is made again at
        the next frame (broken and removed ones stay so)."""
        if not isinstance(saved, dict) or set(saved) - {"joints"} != {"world", "bodies", "accumulator"}:
            raise InputError(f"saved: expected what PhysicsBridge.save returned, got {type(saved).__name__}")
        saved_joints = saved.get("joints") or {}
        current_joints = dict(joints or ())
        self.joint_book.check_restore(saved_joints, current_joints)
        plan = []
        for e, h in saved["bodies"].items():
            rb = rigid_of(e)
            if rb is None:
                raise InputError(f"saved: entity {e!r} owned body {h} when saved, but has no RigidBody now")
            t, v = extras(e)  # bound ones are detached below and bound again to the saved body
            plan.append((e, int(h), rb, t, v))
        self._check_unshared([(e, c) for e, _, _, t, v in plan for c in (t, v) if c is not None])
        self.sim.restore_state(saved["world"])  # checks the state before it changes anything
        for b in self._bound.values():  # old bindings: components detached (the bodies went with the state)
            for c in (b.transform, b.velocity):
                c._store, c._slot = None, -1
        st = self.store
        st.pending_pose.clear()
        st.pending_velocity.clear()
        self._bound.clear()
        self._handle_entity.clear()
        self._slot_handle[:] = -1
        self._free = list(range(len(self._slot_handle) - 1, -1, -1))
        self._gone.clear()
        for e, h, rb, t, v in plan:
            self._own(e, rb, t, v, h, attach)
        self.joint_book.restore(saved_joints, current_joints)
        self.stepper.accumulator = float(saved["accumulator"])
        self.stepper.forget_previous()
        self._stale = True
        self.refresh()

    def handle_of(self, entity: E) -> int:
        """Body handle of an entity (for the Simulation's own calls: forces, impulses, queries)."""
        b = self._bound.get(entity)
        if b is None:
            raise InputError(f"entity: expected an entity with a body, got {entity!r} (no RigidBody seen "
                             f"yet, or removed)")
        return b.handle

    def entity_of(self, handle: int) -> E | None:
        """Entity that owns a body handle (None if none does)."""
        return self._handle_entity.get(int(handle))

    # -- 1. structural diff --

    def sync(self, current: Iterable[tuple[E, RigidBody]],
             extras: Callable[[E], tuple[Transform | None, Velocity | None]],
             attach: Callable[[E, Transform | None, Velocity | None], None],
             joints: Iterable[tuple[E, Joint]] | None = None) -> tuple[int, int]:
        """Make bodies for new RigidBody components and remove those of vanished ones; make the
        joints of new Joint components and remove those of vanished ones.

        Args:
            current: every (entity, RigidBody) of the ECS world now.
            extras: the entity's Transform and Velocity components (None where missing).
            attach: attach newly made components (None: the entity already had that one).
            joints: every (entity, Joint) of the ECS world now (None: leave the joints alone).

        Returns:
            (bodies added, bodies removed). Validates every new entity and joint before touching
            any state. Order of the changes: removed joints, removed bodies (with their joints),
            new bodies, new joints (in the order their Joint components were constructed).
        """
        now = dict(current)
        old = self._bound
        gone = [e for e, b in old.items() if now.get(e) is not b.rigid]
        new = [(rb.serial, i, e, rb) for i, (e, rb) in enumerate(now.items())
               if e not in old or old[e].rigid is not rb]
        new.sort(key=lambda t: (t[0], t[1]))
        # a rebuilt body (replaced RigidBody) starts from its components, which _unbind freezes at
        # the old body's last pose and velocity
        plan = [(e, rb, *extras(e)) for _, _, e, rb in new]
        # Transform / Velocity objects replaced on kept entities: the usual teleport and steering
        # idiom (the new component's values are applied before the next step)
        moving = {e for e, _, _, _ in plan} | set(gone)
        swaps: list[tuple[E, Any]] = []
        for e, bnd in old.items():
            if e in moving:
                continue
            t, v = extras(e)
            swaps += [(e, c) for c, was in ((t, bnd.transform), (v, bnd.velocity))
                      if c is not None and c is not was]
        book = self.joint_book
        joints_gone, joints_new = ([], []) if joints is None else book.diff(joints)
        # everything is checked before anything changes: a frame applies whole or not at all
        for e, rb, t, v in plan:
            self._check_new(e, rb, t, v)
        for e, c in swaps:
            self._check_swap(e, c)
        self._check_unshared([(e, c) for e, _, t, v in plan for c in (t, v) if c is not None] + swaps)
        if joints_new:
            gone_set = set(gone)
            kinds = {e: b.rigid.kind for e, b in old.items() if e not in gone_set}
            kinds.update({e: rb.kind for e, rb, _, _ in plan})
            for e, jc in joints_new:
                book.check(e, jc, kinds)
        if gone or joints_gone:
            self._stale = True  # freeze the latest state (game code may have called the sim directly)
        for e in joints_gone:
            book.remove(e)
        for e in sorted(gone, key=lambda e: old[e].rigid.serial):
            self._unbind(e)
        for e, rb, t, v in plan:
            self._bind(e, rb, t, v, attach)
        if swaps:
            self.refresh()  # the replaced components keep a frozen copy of the latest state
            for e, c in swaps:
                self._swap(e, c)
        for e, jc in joints_new:
            book.add(e, jc)
        if gone or new or swaps or joints_gone or joints_new:
            self._stale = True
        return len(new), len(gone)

    @staticmethod
    def _check_unshared(comps: list[tuple[E, Any]]) -> None:
        """One component object belongs to one entity: the same Transform or Velocity on two
        entities would show (and move) two bodies at once."""
        seen: dict[int, E] = {}
        for e, c in comps:
            other = seen.setdefault(id(c), e)
            if other is not e and other != e:
                raise InputError(f"{type(c).__name__} of entity {e!r}: expected a component of its own, got "
                                 f"the same object as on entity {other!r}")

    def _check_swap(self, e: E, c: Any) -> None:
        """A replacing Transform or Velocity: unbound, values of the simulation's dimension."""
        n, k, name = self.sim.dim, self.sim.alg.k, type(c).__name__
        if c._store is not None:
            raise InputError(f"{name} of entity {e!r}: expected a component of its own, got one already "
                             f"bound to another body")
        if isinstance(c, Transform):
            if c._position is not None:
                vector(f"Transform.position of entity {e!r}", c._position, n)
            if c._rotor is not None:
                self.sim.alg.check_rotor(c._rotor, f"Transform.rotor of entity {e!r}", single=True)
            return
        if c._linear is not None:
            vector(f"Velocity.linear of entity {e!r}", c._linear, n)
        if c._angular is not None:
            vector(f"Velocity.angular of entity {e!r}", c._angular, k)
        moving = any(a is not None and np.any(a) for a in (c._linear, c._angular))
        if moving and self._bound[e].rigid.kind == "static":
            raise InputError(f"Velocity of entity {e!r}: expected zero for a static body, got "
                             f"{c._linear!r}, {c._angular!r}")

    def _swap(self, e: E, c: Any) -> None:
        """Bind the replacing component ``c`` to the entity's body and queue its values; the
        replaced one keeps a frozen copy of the body's latest state."""
        b, st = self._bound[e], self.store
        s = b.slot
        if isinstance(c, Transform):
            old, b.transform = b.transform, c
            old._position, old._rotor = st.position[s], st.rotor[s]
            st.pending_pose.pop(s, None)
            if c._position is not None or c._rotor is not None:
                st.pending_pose[s] = c
        else:
            old, b.velocity = b.velocity, c
            old._linear, old._angular = st.velocity[s], st.angular_velocity[s]
            st.pending_velocity.pop(s, None)
            if c._linear is not None or c._angular is not None:
                st.pending_velocity[s] = c
        old._store, old._slot = None, -1
        c._store, c._slot = st, s

    def _check_new(self, e: E, rb: RigidBody, t: Transform | None, v: Velocity | None) -> None:
        n, k = self.sim.dim, self.sim.alg.k
        if rb.shape.dim != n:
            raise InputError(f"RigidBody.shape of entity {e!r}: expected a shape of dimension {n}, got one "
                             f"of dimension {rb.shape.dim}")
        seen = self._bound.get(e)
        for comp, name in ((t, "Transform"), (v, "Velocity")):
            if comp is not None and comp._store is not None and (seen is None or comp not in
                                                                (seen.transform, seen.velocity)):
                raise InputError(f"{name} of entity {e!r}: expected a component of its own, got one already "
                                 f"bound to another body")
        if t is not None:
            if t._position is not None:
                as_float_array(f"Transform.position of entity {e!r}", t._position, (n,))
            if t._rotor is not None:
                self.sim.alg.check_rotor(
                    t._rotor, f"Transform.rotor of entity {e!r}", single=True)
        if v is not None:
            if v._linear is not None:
                as_float_array(f"Velocity.linear of entity {e!r}", v._linear, (n,))
            if v._angular is not None:
                as_float_array(f"Velocity.angular of entity {e!r}", v._angular, (k,))
            if rb.kind == "static" and any(a is not None and np.any(a) for a in (v._linear, v._angular)):
                raise InputError(f"Velocity of entity {e!r}: expected zero for a static body, got "
                                 f"{v._linear!r}, {v._angular!r}")
        try:  # everything add_body checks (masses, materials, ...), nothing added
            self.sim.check_body(rb.shape, **_body_call(rb, t, v))
        except (InputError, InputTypeError) as exc:
            raise type(exc)(f"RigidBody of entity {e!r}: {exc}") from exc

    def _bind(self, e: E, rb: RigidBody, t: Transform | None, v: Velocity | None,
              attach: Callable[[E, Transform | None, Velocity | None], None]) -> None:
        h = self.sim.add_body(rb.shape, **_body_call(rb, t, v))
        self._own(e, rb, t, v, h, attach)

    def _own(self, e: E, rb: RigidBody, t: Transform | None, v: Velocity | None, h: int,
             attach: Callable[[E, Transform | None, Velocity | None], None]) -> None:
        """Bind the entity's components (new ones where it has none) to body ``h``."""
        new_t, new_v = t is None, v is None
        t = Transform() if t is None else t
        v = Velocity() if v is None else v
        slot = self._free.pop() if self._free else self._grow_slots()
        self._slot_handle[slot] = h
        for c in (t, v):
            c._store, c._slot = self.store, slot
        # the starting values are now in the core: the components read from the store from here on
        t._position = t._rotor = None
        v._linear = v._angular = None
        self._bound[e] = _Binding(rb, t, v, h, slot)
        self._handle_entity[h] = e
        if new_t or new_v:
            attach(e, t if new_t else None, v if new_v else None)

    def _grow_slots(self) -> int:
        slot = len(self._slot_handle)
        grown = np.full(max(16, 2 * slot), -1, dtype=np.int64)
        grown[:slot] = self._slot_handle
        self._free.extend(range(len(grown) - 1, slot, -1))  # pop() hands out the lowest first
        self._slot_handle = grown
        return slot

    def _unbind(self, e: E) -> None:
        """Remove an entity's body; its components keep a frozen copy of the last pose and velocity."""
        b = self._bound.pop(e)
        self.refresh()  # pending assignments and the latest pose go into the frozen copy
        st = self.store
        t, v, s = b.transform, b.velocity, b.slot
        t._position = t._position if t._position is not None else st.position[s]
        t._rotor = t._rotor if t._rotor is not None else st.rotor[s]
        v._linear = v._linear if v._linear is not None else st.velocity[s]
        v._angular = v._angular if v._angular is not None else st.angular_velocity[s]
        st.pending_pose.pop(s, None)
        st.pending_velocity.pop(s, None)
        for c in (t, v):
            c._store, c._slot = None, -1
        self.joint_book.body_going(b.handle)  # the core removes the body's joints with it
        self.sim.remove_body(b.handle)
        self._slot_handle[s] = -1
        self._free.append(s)
        self._gone.append(b.handle)

    # -- 2. assignments from game code --

    def apply_pending(self) -> None:
        """Apply queued motor changes (Simulation.set_motor), teleports (Simulation.set_pose) and
        velocities (one vectorised write)."""
        self.joint_book.apply_pending()
        st, sim = self.store, self.sim
        if st.pending_pose:
            for slot, t in list(st.pending_pose.items()):
                h = int(self._slot_handle[slot])
                sim.set_pose(h, position=t._position, rotor=t._rotor)
                t._position = t._rotor = None
            st.pending_pose.clear()
            self._stale = True
        if not st.pending_velocity:
            return
        comps = list(st.pending_velocity.values())
        rows = sim.rows(self._slot_handle[list(st.pending_velocity)])
        b = sim.bodies
        lin = [i for i, c in enumerate(comps) if c._linear is not None]
        ang = [i for i, c in enumerate(comps) if c._angular is not None]
        V = np.array([comps[i]._linear for i in lin]).reshape(len(lin), sim.dim)
        W = np.array([comps[i]._angular for i in ang]).reshape(len(ang), sim.alg.k)
        # Simulation.set_velocity refuses motion for static bodies: same rule, checked before writing
        bad = np.concatenate([rows[lin][np.any(V != 0, axis=1)], rows[ang][np.any(W != 0, axis=1)]])
        bad = bad[b.kind[bad] == STATIC]
        if len(bad):
            who = self._handle_entity.get(int(b.handle[bad[0]]))
            # the refused assignments are dropped (they would fail every frame); nothing else of
            # this frame's velocities is applied yet, the rest stay queued for the next frame
            for slot, comp in list(st.pending_velocity.items()):
                if b.kind[sim.row(int(self._slot_handle[slot]))] == STATIC:
                    comp._linear = comp._angular = None
                    del st.pending_velocity[slot]
            raise InputError(f"Velocity of entity {who!r}: expected zero for a static body (static bodies "
                             f"do not move), got a non-zero velocity; the assignment is dropped")
        b.velocity[rows[lin]] = V
        b.angular_velocity[rows[ang]] = W
        wake(sim, rows)
        for c in comps:
            c._linear = c._angular = None
        st.pending_velocity.clear()
        self._stale = True

    # -- 3. steps and events --

    def advance(self, frame_seconds: float | None) -> int:
        """Take the fixed steps ``frame_seconds`` pays for (exactly one step when None)."""
        if frame_seconds is None:
            self.stepper.step()
            taken = 1
        else:
            taken = self.stepper.advance(frame_seconds)
        if taken:
            self._stale = True
        return taken

    def _after_step(self) -> None:
        events = self.sim.events
        if events:
            ent = self._handle_entity.get
            for ev in events:  # one call per event is what an ECS event API takes
                if ev.kind == "joint_broken":  # the component is marked broken, handler or not
                    handler: Any = self.on_joint
                    out: Any = self.joint_book.broke(ev)
                    self._stale = True
                else:
                    handler = self.on_contact
                    if handler is None:
                        continue
                    out = EntityContact(ev.kind, ent(ev.handle_a), ent(ev.handle_b), ev.sensor, ev.points,
                                        ev.normal, ev.approach_speed, ev.impulse)
                if handler is None:
                    continue
                try:
                    handler(out)
                except Exception as exc:  # the other events and the frame's paid steps still run
                    if self._handler_error is None:
                        self._handler_error = exc
        # the end events of removed bodies came with this step: forget their entities now
        for h in self._gone:
            self._handle_entity.pop(h, None)
        self._gone.clear()

    # -- 4. scatter --

    def refresh(self) -> None:
        """Replace the shared snapshots by the core's current state (a few gathers, no entity loop)."""
        if not self._stale:
            return
        st, b = self.store, self.sim.bodies
        live = self._slot_handle >= 0
        rows = np.zeros(len(live), dtype=np.int64)
        if np.any(live):
            hs = self._slot_handle[live]
            r = self.sim.info.handle_to_row[hs]
            if np.any(r < 0):
                raise InputError(f"body handles {hs[r < 0][:5].tolist()}: expected bodies owned by entities "
                                 f"to be removed through their entities, got them removed from the "
                                 f"Simulation directly")
            rows[live] = r
        for name in ("position", "rotor", "rotation", "velocity", "angular_velocity"):
            col = b.column(name)
            a = col[rows] if len(col) else np.zeros((len(rows),) + col.shape[1:])
            a.flags.writeable = False
            setattr(st, name, a)
        self._stale = False
        self.joint_book.refresh()

    def update(self, frame_seconds: float | None) -> int:
        """One frame after ``sync``: pending assignments, fixed steps, scatter. Returns steps taken.

        An exception raised by the ``on_contact`` or ``on_joint`` handler does not stop the
        frame: every event is dispatched and every paid step taken, then the first such exception
        propagates (the world and the components are complete and consistent by then)."""
        self.apply_pending()
        self._handler_error = None
        try:
            taken = self.advance(frame_seconds)
        finally:
            self.refresh()
        error, self._handler_error = self._handler_error, None
        if error is not None:
            raise error
        return taken


def _body_call(rb: RigidBody, t: Transform | None, v: Velocity | None) -> dict[str, Any]:
    """Keyword arguments of ``Simulation.add_body`` for a RigidBody and its starting components."""
    return {"position": None if t is None else t.position, "rotor": None if t is None else t.rotor,
            "velocity": None if v is None else v.linear, "angular_velocity": None if v is None else v.angular,
            **rb.body_arguments()}


def wake(sim: Any, rows: NDArray[np.int64]) -> None:
    """Batched ``Simulation._wake_touching``: wake bodies ``rows`` (R,) and every body in contact
    with one of them (as ``Simulation.set_velocity`` does for one body)."""
    b = sim.bodies
    b.awake[rows] = True
    b.rest_time[rows] = 0.0
    c = sim.contacts
    if c is None or getattr(c, "count", 0) == 0:
        return
    touching = np.concatenate([c.body_b[np.isin(c.body_a, rows)], c.body_a[np.isin(c.body_b, rows)]])
    touching = touching[touching < b.count]
    b.awake[touching] = True
    b.rest_time[touching] = 0.0


__all__ = ["EntityContact", "EntityJointEvent", "Joint", "PhysicsBridge", "PoseStore", "RigidBody",
           "Transform", "Velocity", "wake"]
