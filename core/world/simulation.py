"""The Simulation facade: owns the tables of one world and runs the ordered stages of a step.

A step runs these stages in order, each a plain function of the body table (and of the contact
arrays the earlier stages made), each timed into :attr:`Simulation.timings`:

1. ``accelerate`` -- gravity, forces, torques, damping, gyroscopic term;
2. ``find_pairs``         -- broadphase: bounding boxes and candidate pairs;
3. ``find_contacts``              -- narrowphase: contact manifolds with feature ids;
4. ``solve_impulses``       -- sequential impulses with friction, restitution, warm starting;
5. ``report_contacts``      -- begin and end contact events, with points, normal, approach speed and
   impulse (:class:`~ndrigid.core.world.stages.ContactEvent`);
6. ``advance_poses``  -- positions and rotors from the new velocities;
7. ``settle_islands``         -- islands, sleeping and waking.

Every public method validates its input before touching any state, so a call that raises leaves
the simulation exactly as it was.
"""

from __future__ import annotations

import contextlib
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..algebra import Algebra
from ..dynamics import integrate as _integrate
from ..errors import (
    MAX_MAGNITUDE,
    InputError,
    InputTypeError,
    StepError,
    as_float_array,
    dimension,
    positive_scalar,
    vector,
)
from ..geometry.shapes import HalfSpace
from ..state.components import (
    ALL_LAYERS,
    DYNAMIC,
    KIND_NAMES,
    KINEMATIC,
    SHAPE_BALL,
    SHAPE_BOX,
    SHAPE_COMPOUND,
    SHAPE_HALFSPACE,
    SHAPE_MESH,
    SHAPE_POLYTOPE,
    STATIC,
    Bodies,
    BodyInfo,
    shape_kind,
)
from ..state.joints import JointSet
from . import joint_calls as _joint_calls
from . import queries
from .stages import default_stages, removal_events

Array = NDArray[np.float64]

_BLAS: list[Any] = []


def _one_blas_thread() -> Any:
    """A context that runs the step's BLAS and LAPACK calls on one thread.

    With more threads OpenBLAS splits some products differently and the 6-D numpy path's results
    changed in the last bits (measured: a 6-D pile of 40, 150 steps, hashed the same with 2 and 4
    threads but not with 1), so a step would not replay bit for bit on another machine. The
    controller (threadpoolctl, a general-purpose library) is made at the first step and costs
    ~10 us per step.
    """
    if not _BLAS:
        from threadpoolctl import ThreadpoolController

        _BLAS.append(ThreadpoolController())
    ctl = _BLAS[0]
    if all(lib.num_threads == 1 for lib in ctl.lib_controllers if lib.user_api == "blas"):
        return contextlib.nullcontext()  # already one thread (asking costs ~1 us per library)
    return ctl.limit(limits=1, user_api="blas")


def _copy_tree(obj: Any) -> Any:
    """A copy of the caches for the step guard: dicts, lists, sets and arrays are copied all the
    way down (a step changes them in place), plain tuples rebuilt, everything else is shared
    (events, shapes, contact sets, numbers: never changed in place). Measured on the caches of the
    settled 4-D pile of 307: 26 us, against 46 us for copy.deepcopy."""
    if isinstance(obj, dict):
        return {k: _copy_tree(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_copy_tree(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.copy()
    if isinstance(obj, set):
        return set(obj)
    if type(obj) is tuple:
        return tuple(_copy_tree(v) for v in obj)
    return obj


#: the material columns of a body (Simulation.material / set_material)
_MATERIAL = ("friction", "static_friction", "restitution", "rolling_resistance", "spin_friction")


@dataclass(frozen=True)
class Settings:
    """Settings of a simulation (SI units). Change with ``sim.settings = replace(sim.settings, ...)``.

    Stepping
        dt: default time step of :meth:`Simulation.step`, s.
        substeps: sub-steps per step (each runs every stage with dt / substeps).
        gyroscopic: free-spin term of Euler's equations: "implicit" (one Newton step, default),
            "split" (Lie-Poisson splitting: conserves the free body's momentum, bounded energy
            error; numpy path only), "explicit" or "none".
        compiled: run the compiled kernels (numba) where they exist; False runs the vectorised
            numpy path (so does the environment variable ``NDRIGID_KERNELS=numpy``).

    Solver passes
        solver_passes: sequential-impulse passes with the soft overlap bias (5-D stacks taller
            than ten boxes want 12).
        bias_free_passes: passes without the bias, which take the push velocity out again.
        warm_start: start each row from last step's impulse matched by feature ids.
        solver_batching: how the vectorised solver batches rows: "point" (colour single points,
            pure Gauss-Seidel), "manifold" (colour manifolds, mass splitting inside one: faster,
            stacks jitter) or "jacobi" (one batch, mass splitting); see core/dynamics/solver.py.

    Contact softness (an overlapping contact is an implicit spring-damper, see
    :func:`ndrigid.core.solver.soft_coefficients`)
        spring_frequency: natural frequency of the contact spring, Hz (capped at half the step
            rate).
        spring_damping_ratio: damping ratio of the contact spring (1 is critical).
        overlap_allowance: overlap left uncorrected, m, so that resting contacts persist; a
            loaded contact settles at it (the spring's rest point allows for its static load).
        separation_speed_cap: fastest speed at which overlap is pushed apart, m/s.

    Collision margins
        speculative_margin: contacts are kept while the gap is below this, m (continuous collision:
            a fast body is stopped at the surface instead of passing through).
        broadphase_margin: how much each body's bounding box is fattened, m.

    Bounce
        bounce_threshold: normal approach speeds below this do not bounce, m/s.

    Rest and sleep
        sleep_enabled: let islands of resting bodies sleep.
        rest_speed: a body rests while its speed (plus angular speed times size) is below this, m/s.
        rest_time: how long every body of an island must rest before it sleeps, s.

    Joints
        joint_passes: Gauss-Seidel passes over the joints before the contact solve (after their
            warm start); joint_passes_after: passes after it, so the step ends with joints held.
        joint_position_passes: passes of the joints' position correction after the bodies have
            moved (0: none; core/dynamics/joint_positions.py).

    Why each default is what it is. Every figure below is printed by
    ``python -m ndrigid.bench.defaults`` (bench/defaults.py: the scenes, one setting changed per
    line); "the stack" is ten unit boxes of 1000 kg on a floor at 60 Hz, sleeping off, measured
    over 10 s after a 1 s settle: deepest overlap at any contact / top-box drift / peak kinetic
    energy per kg, in 2-D / 3-D / 4-D / 5-D. With every default: 5.16 / 5.04 / 5.01 / 5.04 mm
    (within the allowance plus 1 mm), 0.53 / 0.80 / 0.36 / 1.01 cm, at most 1.3e-4 J/kg.

    * ``dt`` 1/60 s: the display rate of most games, so one step per frame.
    * ``substeps`` 1: 2 substeps hold the stack better (drift 0.05-0.32 cm) but cost 1.8-1.9x per
      step in our runs (every stage runs twice) for an overlap that 1 substep already keeps
      within 5.2 mm.
    * ``gyroscopic`` "implicit": a free box spinning 10 rad/s about its unstable middle axis keeps
      its world angular momentum to 0.32-0.35 % over 10 s (3-D to 5-D); "explicit" gains 116-481 %
      kinetic energy and 47-174 % momentum error, "none" keeps the energy but not the momentum
      (0.75-0.95 %). The implicit step loses energy instead (-23 % in that test), which is the
      stable side to err on. "split" keeps the world momentum to rounding and the energy within
      0.04 % ("spin": +0.012 % in 3-D, 0.000 % in 4-D and 5-D; "freebody", a generic box over
      10,000 steps: -0.035 / -0.008 / -0.016 % in 3-D / 4-D / 5-D against -31.9 / -24.9 / -9.4 %
      implicit, momentum error below 1e-12 against 2.5e-2 / 1.5e-2 / 4.1e-3), but it has no
      compiled kernel: 0.74-1.12 ms per step for one body against 0.17-0.20 ms. So it is not the
      default; it is the mode for teaching and research runs of few bodies.
    * ``solver_passes`` 8 and ``bias_free_passes`` 3: 6 + 2 lets the 3-D and 5-D stacks drift
      2.4 cm and peaks 8-22 times higher (2.8e-3 J/kg in 2-D); without bias-free passes (8 + 0)
      the stack jitters (2-D 3.5e-2 J/kg, overlap 8.6 mm, drift 2.2 cm).
    * ``joint_passes`` 8 and ``joint_passes_after`` 4: a 4-D chain of ten 0.2 m links released
      horizontally at 120 Hz (``python -m ndrigid.bench.joints passes``; worst joint error after 1 s
      over 2 s, per link, and ms per step): 2 + 1 passes 17 %, 2.7 ms; 4 + 2 8.3 %, 1.7 ms;
      8 + 4 7.0 %, 2.0 ms; 12 + 6 7.0 %, 2.4 ms without a position pass: 8 + 4 is converged for
      the velocity rows, the error left is position drift.
    * ``joint_position_passes`` 6: the same chain with 8 + 4 velocity passes and 0, 2, 4, 6, 8
      position passes: 7.0e-2, 2.1e-5, 1.65e-4, 1.49e-4, 1.32e-4 of a link (bound 1e-3); figures
      measured before a growing pass was undone, not re-measured since.
    * ``warm_start`` True: without it the stack falls (drift over 12 m, overlap 56-104 mm).
    * ``solver_batching`` "point": the only batching that holds a stack of ten (numbers in
      core/dynamics/solver.py; "manifold" drifts 15 cm in 4-D, "jacobi" collapses).
    * ``spring_frequency`` 30 Hz, the cap at 60 Hz: 15 Hz lets the 2-D and 3-D stacks drift 23
      and 12 cm; above half the step rate the spring rings (with the cap lifted, 60 Hz: 2-D drift
      2.4 cm and peak 4.5e-2 J/kg, measured before the load compensation below).
    * ``spring_damping_ratio`` 10: ratio 1 overlaps 6.6-7.8 mm at up to 2.0e-2 J/kg, ratio 3
      5.5-6.9 mm at up to 1.1e-2 J/kg (both past the allowance plus 1 mm), ratio 30 drifts
      1.0-1.9 cm; 10 is the only one of these within the allowance and about 1 cm everywhere.
    * ``overlap_allowance`` 5 mm: 2 mm keeps the overlap at 2.0-2.2 mm but the 5-D stack drifts
      1.3 cm; 10 mm drifts 0.7-2.0 cm. The spring rests at the allowance less its static
      deflection under last step's load (core/dynamics/solver.py), so a loaded contact settles at
      the allowance instead of W / (m_eff w^2) past it (before that compensation the same stack
      settled at 11.2 / 10.0 / 8.4 / 9.4 mm).
    * ``separation_speed_cap`` 3 m/s: the spring's own rate (8.1 /s at the defaults) pushes a
      box created 0.2 m deep out in 38 steps, at any cap above 1.6 m/s; the cap binds only past
      0.37 m of overlap, where it keeps the push below 5 cm per step. The push moves positions
      only: the box never moves faster than 0.02 m/s.
    * ``speculative_margin`` 0.1 m: a 4-D pile of 100 bodies has 0.13 J of kinetic energy left
      after 5 s with 0.1, against 3.1 J with 0.02 and 3.4 J with 0; the cost is rows (956 against
      492 per step without a margin). The stack and the bounce series do not change with it.
    * ``broadphase_margin`` 0.05 m: the broadphase fattens boxes by at least half the speculative
      margin, which is 0.05 m, so this is the least that changes nothing; 0.2 m doubles the
      candidate pairs of a falling 3-D pile (1,216 against 527) for no contact more.
    * ``bounce_threshold`` 1 m/s ("bounce"): a ball with restitution 0.5 dropped from 1 m bounces
      within 0.05 % of e^(2k) h for the first three bounces and rests after 1.25 s; 0.5 and
      0.2 m/s rest after 1.32 and 1.33 s with the same heights (the extra bounces are below 5 cm);
      2 m/s drops the third bounce.
    * The material defaults of :meth:`Simulation.add_body`, ``rolling_resistance`` 1 mm and
      ``spin_friction`` 16 mm ("piles": the 4-D bin of 200 balls and boxes, 90 % asleep this
      long after its energy fell below 1 % of its peak; the variants set the coefficient on
      every body): with both 7.47 s (seed 0; 5.5-9.6 s over seeds 0-6); spin friction 4 mm
      5.2-28.0 s over seeds 0-4, 8 mm 4.1-13.5 s, 12 mm 5.8-12.7 s, 24 mm 5.0-7.8 s, none never
      within 30 s (balls spin on their point contacts); rolling resistance 0 11.2 s (seed 0),
      0.5 mm 16.1 s, 2 mm 16.0 s. The time is chaotic in the seed, so the spin coefficient is
      the smallest whose worst seed stays under 10 s; 16 mm is (2/3) mu a for a patch of radius 4 cm
      at mu = 0.6 (Johnson 1985). 1 mm lies between the rolling resistance of steel on steel and
      of steel on wood (handbook tables, from memory: about 0.5 and 1.5 mm); a 0.5 m ball rolling
      at 1 m/s rolls 36 m before it stops.
    * ``sleep_enabled`` True, ``rest_speed`` 0.05 m/s, ``rest_time`` 0.5 s: the stack falls
      asleep after 0.82-1.10 s; 0.01 m/s takes 1.8-3.8 s, a rest time of 1 s 1.3-1.6 s.
    """

    dt: float = 1.0 / 60.0
    substeps: int = 1
    gyroscopic: str = "implicit"
    compiled: bool = True
    solver_passes: int = 8
    bias_free_passes: int = 3
    warm_start: bool = True
    solver_batching: str = "point"
    spring_frequency: float = 30.0
    spring_damping_ratio: float = 10.0
    overlap_allowance: float = 0.005
    separation_speed_cap: float = 3.0
    speculative_margin: float = 0.1
    broadphase_margin: float = 0.05
    bounce_threshold: float = 1.0
    sleep_enabled: bool = True
    rest_speed: float = 0.05
    rest_time: float = 0.5
    joint_passes: int = 8
    joint_passes_after: int = 4
    joint_position_passes: int = 6

    def validated(self) -> Settings:
        for name in ("dt", "spring_frequency", "spring_damping_ratio", "separation_speed_cap", "rest_time"):
            positive_scalar(f"settings.{name}", getattr(self, name))
        for name in ("overlap_allowance", "speculative_margin", "broadphase_margin", "bounce_threshold",
                     "rest_speed"):
            positive_scalar(f"settings.{name}", getattr(self, name), allow_zero=True)
        for name in ("substeps", "solver_passes"):
            v = getattr(self, name)
            if not isinstance(v, (int, np.integer)) or v < 1:
                raise InputError(f"settings.{name}: expected an integer >= 1, got {v!r}")
        for name in ("bias_free_passes", "joint_passes", "joint_passes_after", "joint_position_passes"):
            v = getattr(self, name)
            if not isinstance(v, (int, np.integer)) or isinstance(v, bool) or v < 0:
                raise InputError(f"settings.{name}: expected an integer >= 0, got {v!r}")
        for name in ("compiled", "warm_start", "sleep_enabled"):
            if not isinstance(getattr(self, name), (bool, np.bool_)):
                raise InputTypeError(f"settings.{name}: expected True or False, got {getattr(self, name)!r}")
        if self.solver_batching not in ("manifold", "point", "jacobi"):
            raise InputError(f"settings.solver_batching: expected 'manifold', 'point' or 'jacobi', got "
                             f"{self.solver_batching!r}")
        if self.gyroscopic not in (_integrate.GYRO_IMPLICIT, _integrate.GYRO_EXPLICIT, _integrate.GYRO_NONE,
                                   _integrate.GYRO_SPLIT):
            raise InputError("settings.gyroscopic: expected 'implicit', 'split', 'explicit' or 'none', got "
                             f"{self.gyroscopic!r}")
        return self


@dataclass
class StepTimings:
    """Seconds spent in each stage during the last step (summed over substeps)."""

    stages: dict[str, float] = field(default_factory=dict)
    total: float = 0.0


Stage = Callable[["Simulation", float], None]


class Simulation:
    """A world of rigid bodies in ``dim`` dimensions.

    Example (4-D)::

        sim = Simulation(4)
        floor = sim.add_body(HalfSpace([0, 1, 0, 0], 0.0), kind="static")
        ball = sim.add_body(Ball(4, 0.5), position=[0, 2, 0, 0], density=1000.0)
        for _ in range(60):
            sim.step()
        print(sim.position(ball))

    Args:
        dim: number of spatial dimensions (>= 2).
        gravity: (dim,) acceleration; default 9.81 m/s^2 along -e_1 ("up" is +e_1).
        settings: a :class:`Settings`; defaults are tuned for 60 Hz game use.
    """

    def __init__(self, dim: int, gravity: Any = None, settings: Settings | None = None) -> None:
        n = dimension("dim", dim)
        alg = Algebra(n)
        if gravity is None:
            g = np.zeros(n)
            g[1] = -9.81
        else:
            g = vector("gravity", gravity, n).copy()
        self.settings = (settings or Settings()).validated()
        self.alg = alg
        self.dim = n
        self.gravity = g
        self.bodies = Bodies(alg)
        self.info = BodyInfo()
        self.joints = JointSet(n)
        self.timings = StepTimings()
        self.time = 0.0
        self.step_count = 0
        # state shared between stages of one step (candidate pairs, contacts, caches)
        self.pairs: NDArray[np.int64] = np.zeros((0, 2), dtype=np.int64)
        self.contacts: Any = None
        self.caches: dict[str, Any] = {}
        self.events: list[Any] = []  # contact events of the last step (plus removals since)
        self._pending_events: list[Any] = []
        self.stages: list[tuple[str, Stage]] = default_stages()

    # -- bodies -----------------------------------------------------------------------------------

    def add_body(
        self,
        shape: Any,
        *,
        position: Any = None,
        rotor: Any = None,
        rotation: Any = None,
        velocity: Any = None,
        angular_velocity: Any = None,
        density: float | None = None,
        mass: float | None = None,
        kind: str = "dynamic",
        friction: float = 0.5,
        restitution: float = 0.0,
        static_friction: float | None = None,
        rolling_resistance: float = 0.001,
        spin_friction: float = 0.016,
        layer: int = 1,
        mask: int = ALL_LAYERS,
        linear_damping: float = 0.0,
        angular_damping: float = 0.0,
        sensor: bool = False,
        user_data: Any = None,
        _check_only: bool = False,
    ) -> int:
        """Add a body and return its handle (a stable int, never reused).

        Args:
            shape: a shape from :mod:`ndrigid.core.shapes` of the simulation's dimension.
            position: (n,) world position of the shape's local origin (default 0).
            rotor: (2**(n-1),) unit rotor of the body (default identity).
            rotation: (n, n) rotation matrix instead of ``rotor`` (at most one of the two).
            velocity: (n,) velocity of the centre of mass.
            angular_velocity: (k,) world-frame angular velocity bivector.
            density / mass: at most one; default density 1000 kg/m^n. Ignored (0 accepted) for
                static and kinematic bodies; a dynamic body needs them > 0.
            kind: "dynamic", "kinematic" (moves by its velocity, never pushed) or "static".
            friction, restitution: material coefficients (friction >= 0, restitution in [0, 1];
                combined per contact by the geometric mean and the maximum respectively).
                ``friction`` is the kinetic coefficient (sliding contacts).
            static_friction: coefficient while a contact point sticks (>= friction); None means
                "same as friction".
            rolling_resistance: coefficient of rolling resistance, m (>= 0): a one-point contact
                resists rolling with a couple up to this times its normal force (default 1 mm).
            spin_friction: coefficient of spin (torsional) friction, m (>= 0): a one-point contact
                resists spinning in the planes of its tangent space with a couple up to this times
                its normal force (default 16 mm). Both combine per contact by the geometric mean,
                like friction; 0 on either body turns the couple off for its contacts.
            layer, mask: collision filter bits: A and B collide iff (A.layer & B.mask) and
                (B.layer & A.mask) are both non-zero.
            linear_damping, angular_damping: rates >= 0, 1/s.
            sensor: report overlaps as events, produce no contact response.
        """
        alg, n = self.alg, self.dim
        rotor = self._rotor_of(rotor, rotation)
        row_values = self._body_values(shape, position, rotor, velocity, angular_velocity, density, mass,
                                       kind, friction, restitution, layer, mask, linear_damping,
                                       angular_damping, sensor, static_friction,
                                       rolling_resistance, spin_friction)
        if _check_only:
            return -1
        sid = self.info.shape_id(shape)
        row_values["shape_id"] = sid
        row = self.bodies.append(row_values)
        self.info.retain_shape(sid)
        h = self.info.new_handle(row)
        self.bodies.handle[row] = h
        if user_data is not None:
            self.info.user_data[h] = user_data
        self._wake_touching(row)
        del alg, n
        return h

    # -- snapshots --------------------------------------------------------------------------------

    def save_state(self) -> dict[str, Any]:
        """A deep copy of everything a step reads (bodies, shapes, settings, contacts and their
        warm-start impulses, islands, events, time, step counter): restore it with
        :meth:`restore_state` to rewind (see :mod:`ndrigid.core.world.snapshot`; ``save_world`` /
        ``load_world`` write and read it as a file)."""
        from .snapshot import save_state

        return save_state(self)

    def restore_state(self, state: dict[str, Any]) -> None:
        """Rewind to a state from :meth:`save_state`; stepping on gives bit for bit what the
        world gave after it was saved. The state can be restored again."""
        from .snapshot import restore_state

        restore_state(self, state)

    def check_body(self, shape: Any, **arguments: Any) -> None:
        """Validate the arguments of :meth:`add_body` without adding anything: raises exactly as
        ``add_body(shape, **arguments)`` would (the adapters check a whole frame's new bodies
        this way before they add any)."""
        self.add_body(shape, _check_only=True, **arguments)

    def _body_values(self, shape: Any, position: Any, rotor: Any, velocity: Any, angular_velocity: Any,
                     density: Any, mass: Any, kind: str, friction: Any, restitution: Any, layer: Any,
                     mask: Any, linear_damping: Any, angular_damping: Any, sensor: Any,
                     static_friction: Any = None, rolling_resistance: Any = 0.001,
                     spin_friction: Any = 0.016) -> dict[str, Any]:
        """Validate every argument of add_body and build the row (no state is touched here)."""
        alg, n = self.alg, self.dim
        sdim = getattr(shape, "dim", None)
        if sdim is None:
            raise InputTypeError(f"shape: expected an ndrigid shape (Ball, Box, ConvexPolytope, ...), "
                                 f"got {type(shape).__name__}")
        if sdim != n:
            raise InputError(f"shape: expected a shape of dimension {n}, got one of dimension {sdim}")
        if kind not in KIND_NAMES:
            raise InputError(f"kind: expected one of {sorted(KIND_NAMES)}, got {kind!r}")
        code = KIND_NAMES[kind]
        pos = np.zeros(n) if position is None else vector("position", position, n)
        R = alg.identity_rotor() if rotor is None else alg.check_rotor(rotor, "rotor", single=True)
        if alg.rotor_norm_error(R) > 1e-14:  # keep rotors that are unit to rounding bit for bit
            R = alg.rotor_normalize(R, steps=2)
        vel = np.zeros(n) if velocity is None else vector("velocity", velocity, n)
        om = np.zeros(alg.k) if angular_velocity is None else vector(
            "angular_velocity", angular_velocity, alg.k)
        if density is not None and mass is not None:
            raise InputError("density, mass: expected at most one of them, got both")
        # static and kinematic bodies ignore mass and density (0 is accepted there), dynamic ones
        # need them positive
        dyn_kind = code == DYNAMIC
        if density is not None:
            density = positive_scalar("density", density, allow_zero=not dyn_kind)
        if mass is not None:
            mass = positive_scalar("mass", mass, allow_zero=not dyn_kind)
        fr = positive_scalar("friction", friction, allow_zero=True)
        re = positive_scalar("restitution", restitution, allow_zero=True)
        if re > 1.0:
            raise InputError(f"restitution: expected a value in [0, 1] (above 1 every bounce gains "
                             f"energy), got {re!r}")
        fs = fr if static_friction is None else positive_scalar("static_friction", static_friction,
                                                                allow_zero=True)
        if fs < fr:
            raise InputError(f"static_friction: expected a value >= friction ({fr!r}), got {fs!r}")
        rr = positive_scalar("rolling_resistance", rolling_resistance, allow_zero=True)
        sf = positive_scalar("spin_friction", spin_friction, allow_zero=True)
        if not isinstance(sensor, (bool, np.bool_)):
            raise InputTypeError(f"sensor: expected True or False, got {type(sensor).__name__} {sensor!r}")
        ld = positive_scalar("linear_damping", linear_damping, allow_zero=True)
        ad = positive_scalar("angular_damping", angular_damping, allow_zero=True)
        for name, bits in (("layer", layer), ("mask", mask)):
            is_int = isinstance(bits, (int, np.integer)) and not isinstance(bits, bool)
            if not is_int or not 0 <= int(bits) <= ALL_LAYERS:
                raise InputError(f"{name}: expected an integer bit mask in [0, 2**32), got {bits!r}")

        kind_code = shape_kind(shape)
        values: dict[str, Any] = {
            "position": pos, "rotor": R, "rotation": alg.rotor_to_matrix(R), "kind": code,
            "friction": fr, "static_friction": fs, "restitution": re, "rolling_resistance": rr,
            "spin_friction": sf, "layer": int(layer), "mask": int(mask),
            "linear_damping": ld, "angular_damping": ad, "sensor": bool(sensor), "shape_kind": kind_code,
            "radius": float(shape.bounding_radius) if kind_code != SHAPE_HALFSPACE else np.inf,
        }
        if kind_code == SHAPE_BOX:
            values["half_extents"] = np.asarray(shape.half_extents, dtype=np.float64)
        if kind_code == SHAPE_BALL:
            values["radius"] = float(shape.radius)
        if code == DYNAMIC:
            if kind_code == SHAPE_HALFSPACE:
                raise InputError("kind: a HalfSpace has no finite mass; expected kind='static' or "
                                 "'kinematic', got 'dynamic'")
            if density is None and mass is None:
                density = 1000.0
            with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
                mp = shape.mass_properties(density=density, mass=mass)
            moments = np.asarray(mp.principal_moments, dtype=np.float64)
            if not (np.isfinite(mp.mass) and mp.mass > 0.0 and np.all(np.isfinite(moments))
                    and np.all(moments > 0.0) and np.all(np.isfinite(1.0 / moments))):
                raise InputError(f"density, mass: the body's mass {mp.mass!r} kg and plane moments "
                                 f"{moments.tolist()} must be finite and > 0; expected a density or mass "
                                 f"that fits the shape's size")
            values["inv_mass"] = 1.0 / mp.mass
            values["inv_inertia"] = 1.0 / np.asarray(mp.principal_moments, dtype=np.float64)
            values["principal_rotor"] = np.asarray(mp.principal_rotor, dtype=np.float64)
            values["local_centroid"] = np.asarray(mp.centroid, dtype=np.float64)
            values["velocity"] = vel
            values["angular_velocity"] = om
        elif code == KINEMATIC:
            if kind_code != SHAPE_HALFSPACE:
                mp = shape.mass_properties(density=1.0)
                values["local_centroid"] = np.asarray(mp.centroid, dtype=np.float64)
            values["velocity"] = vel
            values["angular_velocity"] = om
        return values

    def add_room(self, lo: Any, hi: Any, *, ceiling: bool = False, friction: float = 0.5,
                 restitution: float = 0.0, rolling_resistance: float = 0.001, spin_friction: float = 0.016,
                 layer: int = 1, mask: int = ALL_LAYERS) -> NDArray[np.int64]:
        """Add static half-spaces that keep bodies inside the box ``lo <= x <= hi``: a floor at
        ``lo[1]``, a wall on each side of every other axis and, with ``ceiling``, a ceiling at
        ``hi[1]``. Returns their handles (floor first, then the walls by axis, low side first).

        Args:
            lo, hi: (n,) corners of the room, lo < hi on every axis.
            ceiling: also close the room at the top.
            friction, restitution, rolling_resistance, spin_friction, layer, mask: as
                :meth:`add_body`, for every face.

        Bad input raises before anything is added.

        >>> sim = Simulation(3)
        >>> sim.add_room([-5, 0, -5], [5, 4, 5]).tolist()
        [0, 1, 2, 3, 4]
        """
        n = self.dim
        a = vector("lo", lo, n)
        b = vector("hi", hi, n)
        if not np.all(a < b):
            raise InputError(f"lo, hi: expected lo < hi on every axis, got lo={a.tolist()}, hi={b.tolist()}")
        faces = [HalfSpace.below(n, 1, float(a[1]))]
        for axis in range(n):
            if axis != 1:
                faces += [HalfSpace.below(n, axis, float(a[axis])),
                          HalfSpace.above(n, axis, float(b[axis]))]
        if ceiling:
            faces.append(HalfSpace.above(n, 1, float(b[1])))
        material = {"kind": "static", "friction": friction, "restitution": restitution,
                    "rolling_resistance": rolling_resistance, "spin_friction": spin_friction, "layer": layer,
                    "mask": mask}
        # every argument is checked on the first face before any is added
        self._body_values(faces[0], None, None, None, None, None, None, "static", friction, restitution,
                          layer, mask, 0.0, 0.0, False, None, rolling_resistance, spin_friction)
        return np.array([self.add_body(f, **material) for f in faces], dtype=np.int64)

    def remove_body(self, handle: int) -> None:
        """Remove a body; bodies resting on it wake up."""
        row = self.row(handle)
        self._wake_touching(row)
        self._removal_events(handle)
        _joint_calls.remove_joints_of(self, int(handle))
        b, info = self.bodies, self.info
        sid = int(b.shape_id[row])
        moved_from = b.swap_remove(row)
        if moved_from != row:
            moved_handle = info.row_to_handle[moved_from]
            info.row_to_handle[row] = moved_handle
            info.handle_to_row[moved_handle] = row
        info.row_to_handle.pop()
        info.handle_to_row[handle] = -1
        info.user_data.pop(handle, None)
        self.caches.pop("pairs", None)  # cached pairs refer to rows; rebuild next step
        if info.release_shape(sid):  # its last body: what was cached by the id goes with it
            narrow = self.caches.get("narrowphase", {})
            clouds = self.caches.get("shape_clouds", {})
            for table in (clouds, narrow.get("compound", {}), narrow.get("mesh", {})):
                table.pop(sid, None)

    def _removal_events(self, handle: int) -> None:
        """Queue end events for the touching pairs of a body being removed (reported by the next
        step, before that step's own events)."""
        events, self.events = self.events, self._pending_events
        removal_events(self, handle)
        self._pending_events, self.events = self.events, events

    def _wake_touching(self, row: int) -> None:
        """Wake every body that shares a contact with ``row`` (and the body itself)."""
        b = self.bodies
        b.awake[row] = True
        b.rest_time[row] = 0.0
        if "sleep" in self.caches:  # islands asleep on this body: the collision stages skip them
            from ..dynamics.sleep import wake_resting_on

            wake_resting_on(b, self.caches, row)
        c = self.contacts
        if c is None or getattr(c, "count", 0) == 0:
            return
        touching = np.concatenate([c.body_b[c.body_a == row], c.body_a[c.body_b == row]])
        touching = touching[touching < b.count]
        b.awake[touching] = True
        b.rest_time[touching] = 0.0

    def row(self, handle: Any) -> int:
        """Row index of a live body handle; raises InputError for an unknown or removed handle."""
        if isinstance(handle, bool) or not isinstance(handle, (int, np.integer)):
            raise InputTypeError(f"handle: expected an integer body handle, got {handle!r}")
        h = int(handle)
        if not 0 <= h < self.info.next_handle or self.info.handle_to_row[h] < 0:
            raise InputError(f"handle: expected the handle of a live body, got {h} (unknown or removed)")
        return int(self.info.handle_to_row[h])

    def rows(self, handles: Any) -> NDArray[np.int64]:
        """Row indices (N,) of live body handles (N,)."""
        hs = np.asarray(handles, dtype=np.int64).reshape(-1)
        ok = (hs >= 0) & (hs < self.info.next_handle)
        r = np.full(hs.shape, -1, dtype=np.int64)
        r[ok] = self.info.handle_to_row[hs[ok]]
        if np.any(r < 0):
            bad = hs[r < 0][:5].tolist()
            raise InputError(f"handles: expected live body handles, got removed/unknown {bad}")
        return r

    @property
    def count(self) -> int:
        """Number of live bodies."""
        return self.bodies.count

    @property
    def handles(self) -> NDArray[np.int64]:
        """Handles of all live bodies (N,), in row order (the order of the array getters)."""
        return self.bodies.handle.copy()

    def shape(self, handle: int) -> Any:
        """The shape object of a body."""
        return self.info.shapes[int(self.bodies.shape_id[self.row(handle)])]

    # -- state getters and setters ----------------------------------------------------------------

    @property
    def positions(self) -> Array:
        """(N, n) world positions of the bodies' local origins, row order (a copy)."""
        return self.bodies.position.copy()

    @property
    def rotors(self) -> Array:
        """(N, 2**(n-1)) rotors, row order (a copy)."""
        return self.bodies.rotor.copy()

    @property
    def rotations(self) -> Array:
        """(N, n, n) rotation matrices, row order (a copy)."""
        return self.bodies.rotation.copy()

    @property
    def velocities(self) -> Array:
        """(N, n) centre-of-mass velocities, row order (a copy)."""
        return self.bodies.velocity.copy()

    @property
    def angular_velocities(self) -> Array:
        """(N, k) world angular velocity bivectors, row order (a copy)."""
        return self.bodies.angular_velocity.copy()

    @property
    def centroids(self) -> Array:
        """(N, n) world centres of mass, row order."""
        return self.bodies.centroids()

    def position(self, handle: int) -> Array:
        """(n,) world position of a body's local origin."""
        return self.bodies.position[self.row(handle)].copy()

    def rotor(self, handle: int) -> Array:
        """(2**(n-1),) rotor of a body."""
        return self.bodies.rotor[self.row(handle)].copy()

    def rotation(self, handle: int) -> Array:
        """(n, n) rotation matrix of a body."""
        return self.bodies.rotation[self.row(handle)].copy()

    def velocity(self, handle: int) -> Array:
        """(n,) centre-of-mass velocity of a body."""
        return self.bodies.velocity[self.row(handle)].copy()

    def angular_velocity(self, handle: int) -> Array:
        """(k,) world angular velocity bivector of a body."""
        return self.bodies.angular_velocity[self.row(handle)].copy()

    def centroid(self, handle: int) -> Array:
        """(n,) world centre of mass of a body."""
        r = self.row(handle)
        b = self.bodies
        return b.position[r] + b.rotation[r] @ b.local_centroid[r]

    def kind(self, handle: int) -> str:
        """"dynamic", "kinematic" or "static"."""
        code = int(self.bodies.kind[self.row(handle)])
        return {v: k for k, v in KIND_NAMES.items()}[code]

    def is_awake(self, handle: int) -> bool:
        return bool(self.bodies.awake[self.row(handle)])

    # -- mass, inertia and other per-body queries -----------------------------------------------

    def mass(self, handle: int) -> float:
        """Mass of a body, kg (inf for static and kinematic bodies, which nothing moves)."""
        im = float(self.bodies.inv_mass[self.row(handle)])
        return 1.0 / im if im > 0.0 else math.inf

    def inverse_mass(self, handle: int) -> float:
        """1 / mass, 1/kg (0 for static and kinematic bodies)."""
        return float(self.bodies.inv_mass[self.row(handle)])

    def inertia(self, handle: int, frame: str = "world") -> Array:
        """Inertia of a body about its centre of mass, as a map on bivectors (L = I B).

        ``frame="world"``: the (k, k) matrix in world axes; ``"body"``: the same map in the body's
        own frame (constant); ``"principal"``: the (k,) plane moments of the principal frame
        (kg m^2). Static and kinematic bodies have infinite inertia (inf entries).
        """
        if frame not in ("world", "body", "principal"):
            raise InputError(f"frame: expected 'world', 'body' or 'principal', got {frame!r}")
        b, row = self.bodies, self.row(handle)
        inv = b.inv_inertia[row]
        if not np.all(inv > 0.0):
            k = self.alg.k
            return np.full(k, math.inf) if frame == "principal" else np.full((k, k), math.inf)
        moments = 1.0 / inv
        if frame == "principal":
            return moments.copy()
        R = b.principal_rotor[row] if frame == "body" else self.alg.rotor_mul(b.rotor[row],
                                                                               b.principal_rotor[row])
        C = self.alg.rotor_to_compound(R)
        return (C * moments[None, :]) @ C.T

    def body_angular_velocity(self, handle: int) -> Array:
        """(k,) angular velocity bivector in the body's own frame (~R B R)."""
        row = self.row(handle)
        R = self.bodies.rotor[row]
        return self.alg.rotate_bivectors(self.alg.rotor_reverse(R), self.bodies.angular_velocity[row])

    def body_angular_momentum(self, handle: int) -> Array:
        """(k,) spin angular momentum about the centre of mass, in the body's own frame (I_body B_body),
        kg m^2/s; zero for static and kinematic bodies."""
        if self.inverse_mass(handle) == 0.0:
            return np.zeros(self.alg.k)
        return self.inertia(handle, "body") @ self.body_angular_velocity(handle)

    def bounding_box(self, handle: int) -> tuple[Array, Array]:
        """World axis-aligned bounding box (lo, hi) of a body, each (n,), from its shape's support
        points (exact for boxes and polytopes; infinite where a half-space is unbounded)."""
        row = self.row(handle)
        R = self.bodies.rotation[row]
        x = self.bodies.position[row]
        n = self.dim
        dirs = np.concatenate([np.eye(n), -np.eye(n)]) @ R  # rows: R^T (+-e_i), local directions
        with np.errstate(invalid="ignore"):
            pts = self.shape(handle).support(dirs)  # (2n, n) local support points
            world = x + pts @ R.T
        hi = np.where(np.isfinite(world[:n].diagonal()), world[:n].diagonal(), math.inf)
        lo = np.where(np.isfinite(world[n:].diagonal()), world[n:].diagonal(), -math.inf)
        return lo, hi

    def user_data(self, handle: int) -> Any:
        """What was given as ``user_data`` (or set by :meth:`set_user_data`), None by default."""
        self.row(handle)
        return self.info.user_data.get(int(handle))

    def set_user_data(self, handle: int, value: Any) -> None:
        """Attach anything to a body (None removes it)."""
        self.row(handle)
        if value is None:
            self.info.user_data.pop(int(handle), None)
        else:
            self.info.user_data[int(handle)] = value

    def wake(self, handle: int) -> None:
        """Wake a sleeping body, and with it the island it slept in (no effect if awake)."""
        row = self.row(handle)
        if self.bodies.kind[row] == DYNAMIC:
            self.bodies.awake[row] = True
            self.bodies.rest_time[row] = 0.0

    def put_to_sleep(self, handle: int) -> None:
        """Put a dynamic body to sleep now (velocities zeroed). It wakes as any sleeper does: when
        an awake body touches it, or a call such as :meth:`apply_impulse` disturbs it."""
        row = self.row(handle)
        if self.bodies.kind[row] != DYNAMIC:
            raise InputError(f"handle: body {handle} is {self.kind(handle)}; only dynamic bodies sleep")
        was_awake = self.bodies.awake.copy()
        self.bodies.awake[row] = False
        self.bodies.velocity[row] = 0.0
        self.bodies.angular_velocity[row] = 0.0
        queries.note_sleepers(self, was_awake)  # the contact queries keep what it rests on

    def _rotor_of(self, rotor: Any, rotation: Any) -> Any:
        """The public pose convention: a rotor, or a rotation matrix under ``rotation`` (validated,
        converted to its rotor); never both."""
        if rotation is None:
            return rotor
        if rotor is not None:
            raise InputError("rotor, rotation: expected at most one of a rotor and a rotation matrix, "
                             "got both")
        n = self.dim
        M = as_float_array("rotation", rotation, (n, n), exact=True)
        if M.shape != (n, n):
            raise InputError(f"rotation: expected shape ({n}, {n}), got {M.shape}")
        return self.alg.matrix_to_rotor(M, name="rotation")

    def set_pose(self, handle: int, position: Any = None, rotor: Any = None, *, rotation: Any = None) -> None:
        """Teleport a body (position of its local origin and/or rotor, or a rotation matrix under
        ``rotation``); wakes it."""
        r = self.row(handle)
        rotor = self._rotor_of(rotor, rotation)
        pos = None if position is None else vector("position", position, self.dim)
        R = None if rotor is None else self.alg.check_rotor(rotor, "rotor", single=True)
        if R is not None and self.alg.rotor_norm_error(R) > 1e-14:
            R = self.alg.rotor_normalize(R, 2)
        b = self.bodies
        if pos is not None:
            b.position[r] = pos
        if R is not None:
            b.rotor[r] = R
            b.rotation[r] = self.alg.rotor_to_matrix(R)
        self._wake_touching(r)

    def material(self, handle: int) -> dict[str, float]:
        """The body's material coefficients: friction, static_friction, restitution (no units) and
        rolling_resistance, spin_friction (m)."""
        r = self.row(handle)
        b = self.bodies
        return {name: float(getattr(b, name)[r]) for name in _MATERIAL}

    def set_material(self, handle: int, *, friction: Any = None, static_friction: Any = None,
                     restitution: Any = None, rolling_resistance: Any = None,
                     spin_friction: Any = None) -> None:
        """Change a body's material coefficients (those given; None keeps the current value), from
        the next step on. The ranges are those of :meth:`add_body`; the new ``static_friction``
        must still be at least ``friction``. Bad input changes nothing.

        >>> from ndrigid.core import Ball
        >>> sim = Simulation(3)
        >>> h = sim.add_body(Ball(3, 0.5))
        >>> sim.set_material(h, friction=0.9, spin_friction=0.0)
        >>> sim.material(h)["static_friction"]  # raised with friction, which it may not be below
        0.9
        """
        r = self.row(handle)
        given = {"friction": friction, "static_friction": static_friction, "restitution": restitution,
                 "rolling_resistance": rolling_resistance, "spin_friction": spin_friction}
        new = self.material(handle)
        for name, value in given.items():
            if value is not None:
                new[name] = positive_scalar(name, value, allow_zero=True)
        if new["restitution"] > 1.0:
            raise InputError(f"restitution: expected a value in [0, 1] (above 1 every bounce gains "
                             f"energy), got {new['restitution']!r}")
        if static_friction is None and friction is not None:
            new["static_friction"] = max(new["static_friction"], new["friction"])
        if new["static_friction"] < new["friction"]:
            raise InputError(f"static_friction: expected a value >= friction ({new['friction']!r}), got "
                             f"{new['static_friction']!r}")
        for name, value in new.items():
            getattr(self.bodies, name)[r] = value

    def set_velocity(self, handle: int, velocity: Any = None, angular_velocity: Any = None) -> None:
        """Set a dynamic or kinematic body's velocity and/or angular velocity bivector; wakes it."""
        r = self.row(handle)
        v = None if velocity is None else vector("velocity", velocity, self.dim)
        w = None if angular_velocity is None else vector("angular_velocity", angular_velocity, self.alg.k)
        b = self.bodies
        if b.kind[r] == STATIC and (v is not None and np.any(v) or w is not None and np.any(w)):
            raise InputError("handle: expected a dynamic or kinematic body, got a static one (static bodies "
                             "do not move)")
        if v is not None:
            b.velocity[r] = v
        if w is not None:
            b.angular_velocity[r] = w
        self._wake_touching(r)

    def apply_force(self, handle: int, force: Any, point: Any = None) -> None:
        """Add a force (n,) for the next step, at a world point (default: the centre of mass)."""
        r = self.row(handle)
        f = vector("force", force, self.dim, bound=None)
        p = None if point is None else vector("point", point, self.dim)
        b = self.bodies
        if b.kind[r] != DYNAMIC:
            return
        b.force[r] += f
        if p is not None:
            b.torque[r] += _wedge(self.alg, p - self.centroid(handle), f)
        self._wake_touching(r)

    def apply_torque(self, handle: int, torque: Any) -> None:
        """Add a torque bivector (k,) for the next step."""
        r = self.row(handle)
        t = vector("torque", torque, self.alg.k, bound=None)
        if self.bodies.kind[r] != DYNAMIC:
            return
        self.bodies.torque[r] += t
        self._wake_touching(r)

    def apply_impulse(self, handle: int, impulse: Any, point: Any = None) -> None:
        """Apply an impulse (n,) now, at a world point (default: the centre of mass)."""
        r = self.row(handle)
        p_ = vector("impulse", impulse, self.dim, bound=None)
        pt = None if point is None else vector("point", point, self.dim)
        b = self.bodies
        if b.kind[r] != DYNAMIC:
            return
        b.velocity[r] += b.inv_mass[r] * p_
        if pt is not None:
            ang = _wedge(self.alg, pt - self.centroid(handle), p_)
            b.angular_velocity[r] += self.bodies.world_inv_inertia()[r] @ ang
        self._wake_touching(r)

    # -- joints -----------------------------------------------------------------------------------

    def add_joint(self, kind: str, body_a: int, body_b: int | None = None, **options: Any) -> int:
        """Join two bodies (or ``body_a`` and the world, ``body_b=None``); returns a joint handle.

        Kinds: ``"point"``, ``"weld"``, ``"distance"``, ``"slider"``, ``"hinge"``, ``"spring"``,
        ``"wheel"`` (what each holds: :mod:`ndrigid.core.world.joint_calls`). Options (world
        values, taken where the bodies are now; the joint then turns and moves with them):

        * ``anchor`` (n): the joint's point (default: body B's origin, or A's with the world);
          distance and spring joints take ``anchor`` on A and ``anchor_b`` on B (default: the
          bodies' origins);
        * ``plane`` (k, a unit 2-blade u ^ v): the plane a hinge or wheel turns in (default
          e_0 ^ e_1); ``axis`` (n): a slider's line (default e_0) or a wheel's suspension line
          (default e_1, up);
        * ``length`` (a rod or a spring's rest length; default the anchors' distance), or
          ``min_length``/``max_length`` (a rope: min 0);
        * ``lower``, ``upper`` (rad, in [-pi, pi]): a hinge's angle limits, from where it is made;
        * ``motor_speed`` (rad/s) and ``max_motor_torque`` (N m; 0: no motor): hinge and wheel;
        * ``frequency`` (Hz) and ``damping_ratio``: a spring's, or a wheel's suspension; for other
          kinds a soft joint (0: rigid);
        * ``break_force`` (N), ``break_torque`` (N m): the joint breaks (is removed, with a
          :class:`~ndrigid.core.dynamics.joints.JointEvent` in :attr:`events`) in a step whose
          constraint force or couple is larger (default inf: never);
        * ``collide`` (default False): whether the two bodies still collide with each other.
        """
        return _joint_calls.add_joint(self, kind, body_a, body_b, **options)

    def remove_joint(self, joint: int) -> None:
        """Remove a joint; its bodies wake."""
        _joint_calls.remove_joint(self, joint)

    def joint_handles(self, body: int | None = None) -> NDArray[np.int64]:
        """Handles of every joint (or of the joints that hold ``body``)."""
        return _joint_calls.joint_handles(self, body)

    def joint(self, joint: int) -> dict[str, Any]:
        """A joint's kind, bodies and last step's constraint ``force`` (N) and ``torque`` (N m)."""
        return _joint_calls.joint_info(self, joint)

    def joint_angle(self, joint: int) -> float:
        """A hinge's or wheel's angle in its plane (rad, from where it was made)."""
        return _joint_calls.joint_angle(self, joint)

    def joint_error(self, joint: int) -> float:
        """How far apart (m) the joint's anchors are (distance joints: outside their range)."""
        return _joint_calls.joint_error(self, joint)

    def set_motor(self, joint: int, speed: Any = None, max_torque: Any = None) -> None:
        """Change a hinge's or wheel's motor (target speed rad/s, largest torque N m); wakes it."""
        _joint_calls.set_motor(self, joint, speed, max_torque)

    # -- stepping ---------------------------------------------------------------------------------

    def step(self, dt: float | None = None) -> None:
        """Advance the world by dt seconds (default ``settings.dt``), in ``settings.substeps``.

        All or nothing: a step that raises, or that would leave a position, rotor or velocity
        non-finite or beyond 1e9 (m, m/s, rad/s: ``errors.MAX_MAGNITUDE``), is rolled back
        (bodies, contacts, caches, events, time) before the error
        propagates; the latter raises :class:`~ndrigid.core.errors.StepError` naming the bodies,
        the quantity and the stage that made them non-finite, and drops the forces and torques
        applied to those bodies for the step (so that the next step does not fail the same way).
        """
        h = self.settings.dt if dt is None else positive_scalar("dt", dt)
        saved = self._save_step_state()
        try:
            # numpy's overflow warnings are not needed: the guard below catches what they warn of
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"), _one_blas_thread():
                self._run_step(h)
        except BaseException:
            self._restore_step_state(saved)
            raise
        if not self._state_is_finite():
            # replay the step stage by stage (it is deterministic) to name the stage, then undo it
            self._restore_step_state(saved)
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"), _one_blas_thread():
                stage, rows, what = self._find_nonfinite_stage(h)
            self._restore_step_state(saved)
            # what was applied for this step to these bodies cannot be integrated: dropped, so that
            # the next step does not fail the same way
            self.bodies.force[rows] = 0.0
            self.bodies.torque[rows] = 0.0
            handles = [int(x) for x in self.bodies.handle[rows[:8]]]
            more = f" and {rows.size - 8} more" if rows.size > 8 else ""
            raise StepError(
                f"step: the '{stage}' stage made the {what} of bodies {handles}{more} non-finite (NaN or "
                f"infinity) or larger than {MAX_MAGNITUDE:g}; the world is left as it was before this "
                f"step, less the forces and torques applied to these bodies for it. Check the forces, "
                f"impulses, velocities and sizes given to these bodies, or remove bodies that fall out "
                f"of the world")

    def _run_step(self, h: float) -> None:
        sub = int(self.settings.substeps)
        hs = h / sub
        prof: dict[str, float] = {name: 0.0 for name, _ in self.stages}
        t0 = time.perf_counter()
        self.events, self._pending_events = self._pending_events, []
        for _ in range(sub):
            for name, stage in self.stages:
                ts = time.perf_counter()
                stage(self, hs)
                prof[name] += time.perf_counter() - ts
        _integrate.clear_accumulators(self.bodies)
        self.timings = StepTimings(stages=prof, total=time.perf_counter() - t0)
        self.time += h
        self.step_count += 1

    # -- the step guard ---------------------------------------------------------------------------

    _GUARDED = ("position", "rotor", "rotation", "velocity", "angular_velocity")
    #: the body columns a step writes (the stages and kernels write no other)
    _STEP_COLUMNS = _GUARDED + ("force", "torque", "awake", "rest_time")
    # (the joint table is saved whole: a step writes its impulses and removes broken joints)

    def _save_step_state(self) -> dict[str, Any]:
        """What a step changes, copied (the body columns it writes, the caches) or referenced
        (objects a step replaces instead of changing: contacts, pairs, event lists)."""
        b = self.bodies
        return {"columns": {name: b.column(name).copy() for name in self._STEP_COLUMNS},
                "caches": _copy_tree(self.caches), "pairs": self.pairs, "contacts": self.contacts,
                "events": self.events, "pending": list(self._pending_events), "time": self.time,
                "step_count": self.step_count, "timings": self.timings,
                "joints": self.joints.copy_state() if self.joints.count else None}

    def _restore_step_state(self, saved: dict[str, Any]) -> None:
        b = self.bodies
        for name, values in saved["columns"].items():
            b.column(name)[...] = values
        self.caches = _copy_tree(saved["caches"])
        self.pairs, self.contacts, self.events = saved["pairs"], saved["contacts"], saved["events"]
        self._pending_events = list(saved["pending"])
        self.time, self.step_count, self.timings = saved["time"], saved["step_count"], saved["timings"]
        if saved["joints"] is not None:
            self.joints.set_state(saved["joints"])

    def _nonfinite(self) -> tuple[NDArray[np.intp], str]:
        """Rows with a guarded quantity out of bounds (non-finite, or a position or speed beyond
        MAX_MAGNITUDE), and the first such quantity's name."""
        b = self.bodies
        for name in self._GUARDED:
            col = b.column(name)
            ok = (np.abs(col.reshape(col.shape[0], -1)) <= MAX_MAGNITUDE).all(axis=1)
            if not ok.all():
                return np.nonzero(~ok)[0], name.replace("_", " ")
        return np.zeros(0, np.intp), ""

    def _state_is_finite(self) -> bool:
        """Every position, rotor and velocity finite and within MAX_MAGNITUDE (NaN fails the test)."""
        b = self.bodies
        return all(bool(np.abs(b.column(name)).max(initial=0.0) <= MAX_MAGNITUDE) for name in self._GUARDED)

    def _find_nonfinite_stage(self, h: float) -> tuple[str, NDArray[np.intp], str]:
        sub = int(self.settings.substeps)
        for _ in range(sub):
            for name, stage in self.stages:
                stage(self, h / sub)
                rows, what = self._nonfinite()
                if rows.size:
                    return name, rows, what
        rows, what = self._nonfinite()
        return "step", rows, what

    # -- physical quantities ----------------------------------------------------------------------

    def _counted_rows(self, handle: int | None) -> NDArray[np.intp]:
        """Rows the physical quantities sum over: every dynamic body, or the one given (if dynamic)."""
        b = self.bodies
        rows = np.nonzero(b.kind == DYNAMIC)[0] if handle is None else np.array([self.row(handle)])
        return rows[b.kind[rows] == DYNAMIC]

    def _spin(self, rows: NDArray[np.intp]) -> tuple[Array, Array, Array]:
        """Body frames C (N, k, k), body angular velocities (N, k) and principal moments (N, k)
        (0 for locked planes) of the given rows."""
        b = self.bodies
        C = _integrate.body_frames(self.alg, b.rotor[rows], b.principal_rotor[rows])
        wb = np.einsum("nji,nj->ni", C, b.angular_velocity[rows])
        inv_i = b.inv_inertia[rows]
        inertia = np.where(inv_i > 0, 1.0 / np.where(inv_i > 0, inv_i, 1.0), 0.0)
        return C, wb, inertia

    def kinetic_energy(self, handle: int | None = None) -> float:
        """Kinetic energy (J) of one body or of all dynamic bodies: m v^2/2 + <w, I w>/2."""
        b = self.bodies
        rows = self._counted_rows(handle)
        if rows.size == 0:
            return 0.0
        m = 1.0 / b.inv_mass[rows]
        lin = 0.5 * np.sum(m * np.einsum("ni,ni->n", b.velocity[rows], b.velocity[rows]))
        _, wb, inertia = self._spin(rows)
        ang = 0.5 * np.sum(inertia * wb * wb)
        return float(lin + ang)

    def potential_energy(self, handle: int | None = None) -> float:
        """Gravitational potential energy (J), -m g . x_c, zero at the origin."""
        b = self.bodies
        rows = self._counted_rows(handle)
        if rows.size == 0:
            return 0.0
        m = 1.0 / b.inv_mass[rows]
        return float(-np.sum(m * (b.centroids()[rows] @ self.gravity)))

    def energy(self, handle: int | None = None) -> float:
        """Kinetic plus gravitational potential energy (J)."""
        return self.kinetic_energy(handle) + self.potential_energy(handle)

    def linear_momentum(self, handle: int | None = None) -> Array:
        """Linear momentum (n,) of one body or of all dynamic bodies."""
        b = self.bodies
        rows = self._counted_rows(handle)
        return np.sum((1.0 / b.inv_mass[rows])[:, None] * b.velocity[rows], axis=0) if rows.size else \
            np.zeros(self.dim)

    def angular_momentum(self, handle: int | None = None, about: Any = "origin") -> Array:
        """Angular momentum bivector (k,): spin I w plus orbital x_c ^ m v about a point.

        ``about`` is "origin", "com" (the centre of mass of the bodies counted) or an (n,) point.
        """
        b = self.bodies
        rows = self._counted_rows(handle)
        if rows.size == 0:
            return np.zeros(self.alg.k)
        m = 1.0 / b.inv_mass[rows]
        xc = b.centroids()[rows]
        if isinstance(about, str):
            if about == "origin":
                o = np.zeros(self.dim)
            elif about == "com":
                o = np.sum(m[:, None] * xc, axis=0) / np.sum(m)
            else:
                raise InputError(f"about: expected 'origin', 'com' or an (n,) point, got {about!r}")
        else:
            o = vector("about", about, self.dim)
        C, wb, inertia = self._spin(rows)
        spin = np.einsum("nij,nj->ni", C, inertia * wb)
        orbital = _wedge(self.alg, xc - o, m[:, None] * b.velocity[rows])
        return np.sum(spin + orbital, axis=0)

    def with_settings(self, **changes: Any) -> Simulation:
        """Replace settings fields (validated); returns self for chaining."""
        self.settings = replace(self.settings, **changes).validated()
        return self

    # -- scene queries (thin delegates to core/world/queries.py) ------------------------------------------

    def raycast(self, origin: Any, direction: Any, max_distance: Any = np.inf,
                layer_mask: Any = ALL_LAYERS) -> Any:
        """First body hit by a ray, as a ``queries.RayHit`` (handle, point, normal, distance), or None."""
        return queries.raycast(self, origin, direction, max_distance, layer_mask)

    def raycast_all(self, origin: Any, direction: Any, max_distance: Any = np.inf,
                    layer_mask: Any = ALL_LAYERS) -> list[Any]:
        """Every body a ray enters, as ``queries.RayHit`` records sorted by distance."""
        return queries.raycast_all(self, origin, direction, max_distance, layer_mask)

    def bodies_containing_point(self, point: Any, layer_mask: Any = ALL_LAYERS) -> NDArray[np.int64]:
        """Handles of the bodies whose solid contains a world point."""
        return queries.bodies_containing_point(self, point, layer_mask)

    def bodies_overlapping_box(self, lo: Any, hi: Any, layer_mask: Any = ALL_LAYERS) -> NDArray[np.int64]:
        """Handles of the bodies whose bounding box overlaps the world box [lo, hi]."""
        return queries.bodies_overlapping_box(self, lo, hi, layer_mask)

    def contacts_of(self, handle: int) -> Any:
        """The points where a body touched others in the last step, as a ``queries.BodyContacts``
        of arrays (other handles, points, normals toward the other, depths, normal impulses and
        the total impulse on this body of each point)."""
        return queries.contacts_of(self, handle)

    def impulse_between(self, handle_a: int, handle_b: int) -> Array:
        """(n,) total impulse body A applied to body B in the last step, N s (zeros if apart)."""
        return queries.impulse_between(self, handle_a, handle_b)

    def bodies_overlapping_shape(self, shape: Any, position: Any, rotor: Any = None,
                                 layer_mask: Any = ALL_LAYERS, *, rotation: Any = None) -> NDArray[np.int64]:
        """Handles of the bodies whose solid overlaps ``shape`` placed at (position, rotor), or at
        (position, rotation matrix) under the keyword ``rotation``."""
        rotor = self._rotor_of(rotor, rotation)
        return queries.bodies_overlapping_shape(self, shape, position, rotor, layer_mask)


def _wedge(alg: Algebra, a: Array, b: Array) -> Array:
    """Bivector components (..., k) of a ^ b for vectors a, b (..., n)."""
    p = alg.pairs
    return a[..., p[:, 0]] * b[..., p[:, 1]] - a[..., p[:, 1]] * b[..., p[:, 0]]


__all__ = [
    "DYNAMIC",
    "KINEMATIC",
    "STATIC",
    "SHAPE_BALL",
    "SHAPE_BOX",
    "SHAPE_POLYTOPE",
    "SHAPE_HALFSPACE",
    "SHAPE_COMPOUND",
    "SHAPE_MESH",
    "Settings",
    "Simulation",
    "StepTimings",
]
