"""A plain game-loop adapter: a fixed-time-step accumulator and pose interpolation.

For a hand-written loop with no ECS::

    sim = Simulation(dim)
    stepper = FixedStepper(sim, dt=1 / 60, max_steps_per_frame=5)
    while running:
        frame = clock.tick() / 1000.0          # seconds since the last frame, irregular
        stepper.advance(frame)                 # 0, 1, 2 ... fixed steps of dt
        positions, rotors = stepper.interpolated()   # poses alpha of the way to the next step
        draw(positions, rotors)

Invariants and choices:

* Physics always advances by the same ``dt`` (determinism, and a solver tuned for one step size);
  the frame's wall time is banked in an accumulator and spent in whole steps. What is left over,
  ``alpha = accumulator / dt``, lies in [0, 1) and says how far the world has got towards the next
  step, so drawing the poses interpolated between the previous and the current step (one step of
  latency) hides the beat between frame rate and physics rate.
* Spiral of death: if a step costs more than ``dt`` of wall time, the backlog grows every frame
  and the game freezes. At most ``max_steps_per_frame`` steps run per frame; the backlog beyond
  them is dropped (kept only modulo ``dt`` so that ``alpha`` stays meaningful), and the total is
  counted in :attr:`FixedStepper.dropped_seconds`. The game then runs slower than real time
  instead of locking up. The alternative, carrying the whole backlog, was rejected for exactly
  that lock-up.
* Rounding: frame times such as 1/60 s summed in floating point land a few ulps short of a whole
  step; a relative tolerance of 1e-9 steps counts those as whole steps (otherwise a 60 Hz game
  at 60 Hz would alternate 0 and 2 steps per frame).
* Interpolation of rotors: normalised lerp by default (``"nlerp"``: pick the sign of the current
  rotor nearest the previous one, blend linearly, renormalise onto the rotors). Between two steps
  the rotation is small, so nlerp's uneven angular speed (exact only at both ends) is invisible,
  and it costs a handful of vectorised products; ``"exact"`` follows the geodesic
  ``exp(alpha log(R1 ~R0)) R0`` through the principal logarithm (an eigen-decomposition per body,
  about 20 times slower in 4-D) for cases where bodies turn fast.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from ndrigid.core.algebra import Algebra
from ndrigid.core.errors import InputError, InputTypeError, positive_scalar
from numpy.typing import NDArray

Array = NDArray[np.float64]

# whole-step tolerance, in steps (see the module docstring on rounding)
_STEP_EPS = 1e-9
INTERPOLATION_METHODS = ("nlerp", "exact")


class FixedStepper:
    """Run a simulation in fixed steps of ``dt`` from irregular frame times.

    Args:
        sim: the :class:`~ndrigid.core.world.simulation.Simulation` to advance.
        dt: step size in seconds (default ``sim.settings.dt``).
        max_steps_per_frame: cap on the steps one :meth:`advance` takes (spiral-of-death guard).
        on_step: called with no arguments after every step (e.g. to dispatch ``sim.events``,
            which each step replaces).

    Attributes:
        alpha: fraction of a step banked in the accumulator, in [0, 1).
        accumulator: banked seconds, in [0, dt).
        dropped_seconds: wall time discarded by the step cap, in total.
        steps: steps taken in total.
    """

    def __init__(self, sim: Any, dt: float | None = None, max_steps_per_frame: int = 5,
                 on_step: Callable[[], None] | None = None) -> None:
        h = float(sim.settings.dt) if dt is None else positive_scalar("dt", dt)
        if isinstance(max_steps_per_frame, bool) or not isinstance(max_steps_per_frame, (int, np.integer)) \
                or max_steps_per_frame < 1:
            raise InputError(f"max_steps_per_frame: expected an integer >= 1, got {max_steps_per_frame!r}")
        if on_step is not None and not callable(on_step):
            raise InputTypeError(f"on_step: expected a callable or None, got {type(on_step).__name__}")
        self.sim = sim
        self.dt = h
        self.max_steps_per_frame = int(max_steps_per_frame)
        self.on_step = on_step
        self.accumulator = 0.0
        self.dropped_seconds = 0.0
        self.steps = 0
        # poses before the latest step, keyed by handle, for interpolation
        self._prev_handles: NDArray[np.int64] = np.zeros(0, dtype=np.int64)
        self._prev_position: Array = np.zeros((0, sim.dim))
        self._prev_rotor: Array = np.zeros((0, sim.alg.even_size))

    @property
    def alpha(self) -> float:
        """Interpolation factor in [0, 1): how far the world has got from the last step to the next."""
        return min(max(self.accumulator / self.dt, 0.0), np.nextafter(1.0, 0.0))

    def advance(self, frame_seconds: float) -> int:
        """Bank ``frame_seconds`` (>= 0) and take the whole steps it pays for; returns their number.

        At most ``max_steps_per_frame`` steps run; the backlog beyond them is dropped (see the
        module docstring), so a slow frame never makes the next one slower.
        """
        frame = positive_scalar("frame_seconds", frame_seconds, allow_zero=True)
        acc = self.accumulator + frame
        due = int(np.floor(acc / self.dt + _STEP_EPS))
        take = min(due, self.max_steps_per_frame)
        acc -= take * self.dt
        if due > take:
            # drop the whole steps we cannot afford, keep the fraction of a step for alpha
            keep = acc - (due - take) * self.dt
            self.dropped_seconds += acc - max(keep, 0.0)
            acc = keep
        self.accumulator = max(acc, 0.0)
        for _ in range(take):
            self.step()
        return take

    def step(self) -> None:
        """Take one step of ``dt`` now (remembering the poses before it for interpolation)."""
        b = self.sim.bodies
        self._prev_handles = b.handle.copy()
        self._prev_position = b.position.copy()
        self._prev_rotor = b.rotor.copy()
        self.sim.step(self.dt)
        self.steps += 1
        if self.on_step is not None:
            self.on_step()

    def forget_previous(self) -> None:
        """Drop the poses remembered before the latest step (after the world was replaced, e.g.
        restored from a snapshot): interpolation starts again from the current poses."""
        self._prev_handles = np.zeros(0, dtype=np.int64)
        self._prev_position = np.zeros((0, self.sim.dim))
        self._prev_rotor = np.zeros((0, self.sim.alg.even_size))

    def previous_poses(self) -> tuple[Array, Array]:
        """Poses (positions (N, n), rotors (N, 2**(n-1))) before the latest step, in the
        simulation's current row order. Bodies added since then take their current pose."""
        b = self.sim.bodies
        pos, rot = b.position.copy(), b.rotor.copy()
        if len(self._prev_handles):
            # handle -> index in the snapshot, vectorised (handles are small non-negative ints)
            lookup = np.full(int(max(self._prev_handles.max(), b.handle.max(initial=-1))) + 1, -1, np.int64)
            lookup[self._prev_handles] = np.arange(len(self._prev_handles))
            idx = lookup[b.handle]
            had = idx >= 0
            pos[had] = self._prev_position[idx[had]]
            rot[had] = self._prev_rotor[idx[had]]
        return pos, rot

    def interpolated(self, method: str = "nlerp") -> tuple[Array, Array]:
        """Poses ``alpha`` of the way from the previous step to the current one, row order.

        Returns positions (N, n) and rotors (N, 2**(n-1)); ``method`` is "nlerp" or "exact".
        """
        p0, r0 = self.previous_poses()
        b = self.sim.bodies
        return interpolate_poses(self.sim.alg, p0, r0, b.position, b.rotor, self.alpha, method)


def interpolate_poses(alg: Algebra, position0: Any, rotor0: Any, position1: Any, rotor1: Any, alpha: float,
                      method: str = "nlerp") -> tuple[Array, Array]:
    """Blend poses ``alpha`` of the way from (position0, rotor0) to (position1, rotor1).

    Args:
        alg: the algebra of the dimension n.
        position0, position1: (..., n) float.
        rotor0, rotor1: (..., 2**(n-1)) float unit rotors.
        alpha: blend factor, usually in [0, 1).
        method: "nlerp" (normalised lerp, sign-matched) or "exact" (geodesic through log/exp).

    Returns:
        positions (..., n) and unit rotors (..., 2**(n-1)).
    """
    if method not in INTERPOLATION_METHODS:
        raise InputError(f"method: expected one of {INTERPOLATION_METHODS}, got {method!r}")
    a = float(alpha)
    if not np.isfinite(a):
        raise InputError(f"alpha: expected a finite number, got {alpha!r}")
    p0 = np.asarray(position0, dtype=np.float64)
    p1 = np.asarray(position1, dtype=np.float64)
    R0 = np.asarray(rotor0, dtype=np.float64)
    R1 = np.asarray(rotor1, dtype=np.float64)
    pos = p0 + a * (p1 - p0)
    if method == "nlerp":
        # R and -R are the same rotation: blend towards the one nearer R0 (short way round)
        s = np.where(np.einsum("...i,...i->...", R0, R1) < 0.0, -1.0, 1.0)[..., None]
        R = alg.rotor_cleanup((1.0 - a) * R0 + a * (s * R1))
    else:
        D = alg.rotor_mul(R1, alg.rotor_reverse(R0))  # R1 = D R0
        # principal log of the sign nearer the identity: the shorter of the two spin-group paths
        D = np.where((D[..., :1] < 0.0), -D, D)
        R = alg.rotor_mul(alg.exp(a * alg.log(D)), R0)
    return pos, R


__all__ = ["FixedStepper", "INTERPOLATION_METHODS", "interpolate_poses"]
