"""The integrate systems: Euler's equations for rigid bodies in any dimension.

Linear part: semi-implicit (symplectic) Euler, ``v += h (g + F/m)`` then ``x += h v``.

Angular part, in the principal body frame (where the inertia map is diagonal with the plane
moments I_ij = c_i + c_j). With body angular velocity w and momentum L = I w, the torque-free
equations read, in the commutator product of bivectors ``a x b = (ab - ba)/2``,

    I dw/dt = w x (I w) + tau.                                                      (1)

(In skew-matrix form this is dL/dt = [L, W], the n-dimensional Euler equation; for n = 3 it is
the classical I dw/dt = (I w) x w + tau with the vector cross product. The sign was fixed once in
the skew form and is pinned by tests against solve_ivp.)

* explicit: ``w2 = w1 + h I^-1 (w1 x I w1 + tau)``;
* implicit (default): the torque is applied first, then ``f(w2) = I (w2 - w1) - h w2 x (I w2) = 0``
  is solved with one Newton step from w1, ``J = I - h (ad_w1 I - ad_(I w1))``, ``ad_a(b) = a x b``
  (backward Euler on Euler's equations with one Newton step, common practice; the bivector form
  makes it dimension-free). It is stable for long thin bodies where the explicit
  term pumps energy. The Newton estimate then sets the exact rotation of the body momentum over
  the step, which conserves |L| and the world momentum far better than the linearised step alone
  (see gyroscopic_step).

Orientation: ``R(t+h) = exp(-h/2 B) R(t)`` with the world angular velocity B, by the exact rotor
exponential, then one Newton renormalisation step (``Algebra.rotor_normalize``) so that rounding
drift never accumulates. The body origin follows the centre of mass.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from .. import kernels as _kernels
from ..algebra import Algebra
from ..errors import MAX_MAGNITUDE, StepError
from ..state.components import DYNAMIC, KINEMATIC, Bodies, body_frames

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

GYRO_IMPLICIT = "implicit"
GYRO_EXPLICIT = "explicit"
GYRO_NONE = "none"
GYRO_SPLIT = "split"


def _matvec(C: Array, x: Array) -> Array:
    return np.matmul(C, x[..., None])[..., 0]


def _rmatvec(C: Array, x: Array) -> Array:
    """C^T x for batches of square matrices."""
    return np.matmul(x[..., None, :], C)[..., 0, :]


def _select(mask: NDArray[np.bool_]) -> slice | NDArray[np.intp]:
    """Rows of a mask: a slice when every row is selected (no gather copies on the common path)."""
    return slice(None) if mask.all() else np.nonzero(mask)[0]


def gyroscopic_step(alg: Algebra, w_body: Array, inertia: Array, tau_body: Array, dt: float,
                    mode: str = GYRO_IMPLICIT) -> Array:
    """Advance body-frame angular velocities (N, k) over dt under equation (1).

    ``inertia`` (N, k) principal plane moments (finite, > 0); ``tau_body`` (N, k) body torques.
    """
    if mode == GYRO_NONE:
        return w_body + dt * tau_body / inertia
    if mode == GYRO_EXPLICIT:
        gyro = alg.commutator(w_body, inertia * w_body)
        return w_body + dt * (gyro + tau_body) / inertia
    w1 = w_body + dt * tau_body / inertia
    L1 = inertia * w1
    f = -dt * alg.commutator(w1, L1)  # f(w1) = I (w1 - w1) - h w1 x I w1
    # J = I - h (ad_w1 o diag(I) - ad_(I w1))
    J = alg.commutator_matrix(w1) * inertia[:, None, :] - alg.commutator_matrix(L1)
    J *= -dt
    idx = np.arange(alg.k)
    J[:, idx, idx] += inertia
    w2 = w1 - np.linalg.solve(J, f[..., None])[..., 0]
    # Backward Euler is the linearisation of L2 = exp(-h W2) L1 exp(h W2): the body momentum
    # turned back by the rotation the orientation update will apply (that is what keeps the world
    # momentum P L P^T fixed, since P_new = P_old exp(h W2)). The Newton step alone damps |L| and
    # the energy at O(h^2) per step (measured: 0.3-0.5 % drift of world L over 10 s at 240 Hz in
    # 3-D to 5-D). So turn L1 by the Newton estimate of w2 exactly; that keeps |L| exactly and the
    # world momentum to O(h^3) per step. A final rescale, only where it would otherwise rise, keeps
    # the energy from increasing (the property the implicit variant promises).
    L1 = inertia * w1
    L2 = alg.rotate_bivectors(alg.rotor(-dt * w2), L1)
    w2 = L2 / inertia
    E1 = np.einsum("ni,ni->n", L1, w1)
    E2 = np.einsum("ni,ni->n", L2, w2)
    s = np.sqrt(np.minimum(1.0, E1 / np.where(E2 > 0.0, E2, 1.0)))
    return w2 * s[:, None]


_MODE_CODES = {GYRO_NONE: 0, GYRO_EXPLICIT: 1, GYRO_IMPLICIT: 2}


def split_flow(alg: Algebra, L: Array, inertia: Array, dt: float) -> tuple[Array, Array]:
    """The free rigid body over dt by splitting (mode "split"): body-frame momenta L (N, k) in the
    principal frame, plane moments ``inertia`` (N, k). Returns the new momenta and the body-frame
    rotor (N, 2**(n-1)) the body turns by.

    The kinetic energy is a sum over the planes, H = sum_p L_p^2 / (2 I_p), and the flow of one
    term alone is exact: L_p stays fixed and the body turns at the constant rate (L_p / I_p) in
    the plane p, which turns L the other way by one rotor. The step composes these exact flows
    symmetrically (Strang: planes 0 .. k-2 for dt/2, plane k-1 for dt, back for dt/2), the
    Lie-Poisson splitting of the free rigid body (McLachlan, "Explicit Lie-Poisson integration and
    the Euler equations", Phys. Rev. Lett. 71, 1993; Dullweber, Leimkuhler and McLachlan,
    J. Chem. Phys. 107, 1997). Each sub-step turns the body and its momentum together, so the
    world angular momentum is kept to rounding; the composition is symplectic and second order,
    so the energy error stays bounded instead of drifting.
    """
    N, k = L.shape
    planes = list(range(k)) + list(range(k - 2, -1, -1))
    times = [0.5 * dt] * (k - 1) + [dt] + [0.5 * dt] * (k - 1)
    Q = alg.identity_rotor((N,))
    gens = _plane_generators(alg)
    r = np.zeros((N, alg.even_size))
    for p, s in zip(planes, times, strict=True):  # 2k - 1 sub-steps (a loop over planes)
        angle = s * L[:, p] / inertia[:, p]
        # L turned by rotor(-angle e_p): exp(-angle A_p) with A_p^3 = -A_p (Rodrigues' formula)
        A, A2, j, sign = gens[p]
        L = L - np.sin(angle)[:, None] * (L @ A.T) + (1.0 - np.cos(angle))[:, None] * (L @ A2.T)
        # the body turns by rotor(angle e_p) = cos(angle / 2) + sign sin(angle / 2) e_p
        r[:, 0] = np.cos(0.5 * angle)
        r[:, j] = sign * np.sin(0.5 * angle)
        Q = alg.rotor_mul(Q, r)
        r[:, j] = 0.0
    return L, Q


_GENERATORS: dict[int, list[tuple[Array, Array, int, float]]] = {}


def _plane_generators(alg: Algebra) -> list[tuple[Array, Array, int, float]]:
    """Per plane p: A_p, the derivative of ``rotate_bivectors(rotor(t e_p), .)`` at t = 0 (minus the
    commutator with e_p, as R B ~R with R = exp(-t e_p / 2)), A_p^2, and where and with which sign
    the rotor of a turn in the plane keeps its bivector part (read off ``Algebra.rotor``)."""
    if alg.n not in _GENERATORS:
        out = []
        for p in range(alg.k):
            e = np.zeros(alg.k)
            e[p] = 1.0
            A = -alg.commutator_matrix(e)
            probe = alg.rotor(0.5 * e)
            j = int(np.argmax(np.abs(probe[1:]))) + 1
            out.append((A, A @ A, j, float(np.sign(probe[j]))))
        _GENERATORS[alg.n] = out
    return _GENERATORS[alg.n]


def accelerate(alg: Algebra, b: Bodies, gravity: Array, dt: float,
               gyroscopic: str = GYRO_IMPLICIT, compiled: bool = False) -> SplitMomenta | None:
    """Apply gravity, forces, torques, damping and the gyroscopic term to awake dynamic bodies.

    ``compiled``: run the compiled kernel (``ndrigid.core.kernels``, family ``integrate``), which
    does the same per body; the caller decides (``kernels.use_compiled(settings)``). The "split"
    mode runs on this numpy path only (it is meant for teaching and research runs, not for
    crowds of bodies: see the module notes).

    In the "split" mode it returns the free bodies' momenta (:class:`SplitMomenta`) for
    :func:`keep_split_momenta` at the end of the step; else None.
    """
    if gyroscopic == GYRO_EXPLICIT:
        _explicit_guarded(alg, b, gravity, dt, compiled)
        return None
    return _accelerate(alg, b, gravity, dt, gyroscopic, compiled)


def _explicit_guarded(alg: Algebra, b: Bodies, gravity: Array, dt: float, compiled: bool) -> None:
    """The explicit mode, which can pump energy into a long or fast-spinning body until its
    angular velocity overflows: on a non-finite result the step's velocities are put back and an
    error names the body and the mode."""
    v0, w0 = b.velocity.copy(), b.angular_velocity.copy()
    with np.errstate(over="ignore", invalid="ignore"):
        _accelerate(alg, b, gravity, dt, GYRO_EXPLICIT, compiled)
    # NaN fails the comparison too; beyond MAX_MAGNITUDE the step guard would refuse it anyway
    bad = ~np.all(np.abs(b.angular_velocity) <= MAX_MAGNITUDE, axis=1)
    if np.any(bad):
        b.velocity[...] = v0
        b.angular_velocity[...] = w0
        h = int(b.handle[np.flatnonzero(bad)[0]])
        raise StepError(
            f"gyroscopic='explicit' blew up: the angular velocity of body {h} overflowed (the explicit "
            "gyroscopic term pumps energy into long or fast-spinning bodies); use gyroscopic='implicit' "
            "(games) or 'split' (free-body accuracy). The step was not taken.")


def _accelerate(alg: Algebra, b: Bodies, gravity: Array, dt: float, gyroscopic: str,
                compiled: bool) -> SplitMomenta | None:
    if compiled and gyroscopic != GYRO_SPLIT:
        if b.count == 0:
            return
        k = _kernels.load("integrate", alg.n)
        k.accelerate(b.kind, b.awake, b.inv_mass, b.force, b.linear_damping, b.velocity, b.inv_inertia,
                     b.rotor, b.principal_rotor, b.rotation, b.torque, b.angular_damping, b.angular_velocity,
                     np.ascontiguousarray(gravity, dtype=np.float64), float(dt), _MODE_CODES[gyroscopic])
        return
    active = (b.kind == DYNAMIC) & b.awake
    if not active.any():
        return
    rows = _select(active)
    inv_m = b.inv_mass[rows]
    v = b.velocity[rows] + dt * (gravity + inv_m[:, None] * b.force[rows])
    v *= (1.0 / (1.0 + dt * b.linear_damping[rows]))[:, None]
    b.velocity[rows] = v

    inv_i = b.inv_inertia[rows]
    rotating = np.any(inv_i > 0.0, axis=1)
    if not rotating.all():
        if not rotating.any():
            return
        rows = np.arange(b.count)[rows][rotating]
        inv_i = inv_i[rotating]
    C = body_frames(alg, b.rotor[rows], b.principal_rotor[rows])
    w_body = _rmatvec(C, b.angular_velocity[rows])
    tau_body = _rmatvec(C, b.torque[rows])
    # planes with zero inverse inertia (locked) keep zero velocity: give them unit inertia and
    # zero the result, which avoids a division by zero without a branch
    locked = inv_i <= 0.0
    inertia = np.where(locked, 1.0, 1.0 / np.where(locked, 1.0, inv_i))
    if locked.any():
        w_body = np.where(locked, 0.0, w_body)
        tau_body = np.where(locked, 0.0, tau_body)
    if gyroscopic == GYRO_SPLIT:
        return _accelerate_split(alg, b, rows, C, w_body, tau_body, inertia, locked, dt)
    w2 = gyroscopic_step(alg, w_body, inertia, tau_body, dt, gyroscopic)
    if locked.any():
        w2 = np.where(locked, 0.0, w2)
    w2 *= (1.0 / (1.0 + dt * b.angular_damping[rows]))[:, None]
    b.angular_velocity[rows] = _matvec(C, w2)


def _accelerate_split(alg: Algebra, b: Bodies, rows: Any, C: Array, w_body: Array, tau_body: Array,
                      inertia: Array, locked: NDArray[np.bool_], dt: float) -> SplitMomenta | None:
    """The "split" mode of :func:`accelerate`: the torque kick, then :func:`split_flow`. The body's
    orientation is set now to where the flow turns it less the turn ``advance_poses`` will add
    from the final angular velocity, so that a free body ends the step exactly at the composed
    rotation (the centre of mass stays put). Bodies with a locked plane take the implicit step."""
    idx = np.arange(b.count)[rows]
    free = ~np.any(locked, axis=1)
    if not free.all():
        stiff = idx[~free]
        w2 = gyroscopic_step(alg, np.where(locked[~free], 0.0, w_body[~free]), inertia[~free],
                             np.where(locked[~free], 0.0, tau_body[~free]), dt, GYRO_IMPLICIT)
        w2 = np.where(locked[~free], 0.0, w2)
        w2 *= (1.0 / (1.0 + dt * b.angular_damping[stiff]))[:, None]
        b.angular_velocity[stiff] = _matvec(C[~free], w2)
    if not free.any():
        return None
    r = idx[free]
    I = inertia[free]
    L, Q = split_flow(alg, I * (w_body[free] + dt * tau_body[free] / I), I, dt)
    w2 = L / I
    w2 *= (1.0 / (1.0 + dt * b.angular_damping[r]))[:, None]
    P = b.principal_rotor[r]
    R0 = b.rotor[r]
    R1 = alg.rotor_normalize(alg.rotor_mul(alg.rotor_mul(R0, P), alg.rotor_mul(Q, alg.rotor_reverse(P))), 2)
    omega = _matvec(body_frames(alg, R1, P), w2)
    # advance_poses turns by rotor(dt omega): start it from where that lands on R1
    Rm = alg.rotor_normalize(alg.rotor_mul(alg.rotor(-dt * omega), R1), 2)
    com = b.position[r] + _matvec(b.rotation[r], b.local_centroid[r])
    M = alg.rotor_to_matrix(Rm)
    b.rotor[r] = Rm
    b.rotation[r] = M
    b.position[r] = com - _matvec(M, b.local_centroid[r])
    b.angular_velocity[r] = omega
    return SplitMomenta(r, omega.copy(), _matvec(body_frames(alg, R1, P), I * w2),
                        body_frames(alg, Rm, P), I)


class SplitMomenta(NamedTuple):
    """What :func:`keep_split_momenta` needs of the split mode's free bodies (rows): their world
    angular velocity after the flow, their world momentum at the flow's end pose, the body frames
    at the pose the step's impulses see, and the plane moments."""

    rows: IntArray
    omega: Array
    momentum: Array
    frames: Array
    inertia: Array


def keep_split_momenta(alg: Algebra, b: Bodies, split: SplitMomenta | None) -> None:
    """End of a split-mode step: set each free body's angular velocity from its momentum.

    The step's impulses (contacts, joints, their position pass) change a body's angular velocity
    by I_m^-1 dL, with I_m the world inertia at the pose they see; but the body then turns, and
    at its end pose I_end (omega + I_m^-1 dL) is not the flow's momentum plus dL: angular
    momentum would leak in proportion to dt times the spin (3-D boxes on point joints: 6.3e-4 at
    240 Hz). Here the momentum, the flow's exact one plus I_m (omega' - omega), is kept and the
    angular velocity is taken from it at the end pose: omega_end = I_end^-1 L. A body that no
    impulse touched keeps its angular velocity (to rounding); one spinning in a single plane of
    its inertia (a planar pendulum) too, since its world inertia there does not change."""
    if split is None or split.rows.size == 0:
        return
    r = split.rows
    keep = (b.kind[r] == DYNAMIC) & b.awake[r]
    r = r[keep]
    if r.size == 0:
        return
    Cm, I = split.frames[keep], split.inertia[keep]
    dL = _matvec(Cm, I * _rmatvec(Cm, b.angular_velocity[r] - split.omega[keep]))
    C = body_frames(alg, b.rotor[r], b.principal_rotor[r])
    b.angular_velocity[r] = _matvec(C, _rmatvec(C, split.momentum[keep] + dL) / I)


def advance_poses(alg: Algebra, b: Bodies, dt: float, compiled: bool = False) -> None:
    """Move awake dynamic and kinematic bodies: centre of mass by h v, orientation by the exact
    rotor exponential of h times the world angular velocity; refresh the rotation matrices.

    ``compiled``: run the compiled kernel (as in :func:`accelerate`)."""
    if compiled:
        if b.count == 0:
            return
        k = _kernels.load("integrate", alg.n)
        k.advance_poses(b.kind, b.awake, b.velocity, b.angular_velocity, b.local_centroid, b.position,
                        b.rotor, b.rotation, float(dt))
        return
    active = ((b.kind == DYNAMIC) | (b.kind == KINEMATIC)) & b.awake
    if not active.any():
        return
    rows = _select(active)
    rot = b.rotation[rows]
    c_local = b.local_centroid[rows]
    com = b.position[rows] + _matvec(rot, c_local)
    com += dt * b.velocity[rows]
    R = alg.rotor_mul(alg.rotor(dt * b.angular_velocity[rows]), b.rotor[rows])
    R = alg.rotor_normalize(R, steps=1)
    M = alg.rotor_to_matrix(R)
    b.rotor[rows] = R
    b.rotation[rows] = M
    b.position[rows] = com - _matvec(M, c_local)


def clear_accumulators(b: Bodies) -> None:
    """Zero the force and torque accumulators after a step."""
    b.force[...] = 0.0
    b.torque[...] = 0.0
