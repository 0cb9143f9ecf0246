"""Joints: equality and inequality constraints between two bodies, solved by sequential impulses.

Every joint is stated as rows of one form, the same as a contact row: a row has a linear direction
d (n) taken at the offsets r_A, r_B of a point from the bodies' centres of mass and an angular part,
and measures the speed ``c' = d . (v_B + W_B r_B - v_A - W_A r_A) + <e, B_B - B_A>`` (the speed of a
point along u is ``u . v + <B, r ^ u>``, design.md). Its Jacobian on the pair state [v_A, B_A, v_B,
B_B] is ``G = [-d, -(r_A ^ d) - e, d, r_B ^ d + e]``; a row is linear (e = 0) or angular (d = 0).

Rows of a joint:

* *linear*: the anchors coincide (point, weld, hinge: the n world axes, impulses at the anchors'
  midpoint, so that the two impulses are equal and opposite at one point and conserve angular
  momentum exactly), or the anchor of B stays on A's line (slider, wheel: the n - 1 directions
  across the line, at B's anchor; with A's offset taken to that point as well the Jacobian is the
  exact derivative of ``d . (p_B - p_A)`` with d turning with A);
* *angular*: for frame vectors a (turning with A) and b (with B) that are orthogonal at rest, the
  row ``C = a . b`` has ``C' = <B_B - B_A, b ^ a>`` (from u . (W r) = <B, r ^ u>). With the frames
  f_i of both sides, the rows ``f_i^A . f_j^B`` (i < j) hold every plane (weld, slider); a plane
  hinge in f_0 ^ f_1 drops the row of that plane and keeps the other k - 1. Each is a pure couple
  (conserves angular momentum);
* *scalar rows* with bounds on the accumulated impulse: a hinge's angle limit (one-sided, on the
  nearer limit, speculative: it allows the angle to close up to the limit within the step) and its
  motor (target speed, impulse within max torque x dt); the distance row of a rod (both sides) or a
  rope (one side at the nearer of min and max length); the soft row of a spring; a wheel's
  suspension spring along its line and its motor.

The equality rows of a joint are solved together as one block (Gauss-Seidel over joints, an exact
solve of the joint's own rows: the inverse of its effective-mass matrix ``K = G M^-1 G^T``), the
scalar rows one by one before it (common practice for block solvers; Erleben 2007 for the
Gauss-Seidel frame). Joints are coloured so that no dynamic body appears twice in a colour; the
numpy path solves a colour at a time (vectorised), the compiled kernel joint by joint in the same
order, so the two agree to rounding.

Position error. A rigid row asks for ``c' = -C / dt``: the error of the step's start is taken out
over this step, and the correcting speed stays in the velocity. With the staggered (leapfrog)
velocities of the semi-implicit Euler step this is the linearised SHAKE condition (Ryckaert,
Ciccotti and Berendsen, J. Comput. Phys. 23, 1977: the constraint holds at the end of the step):
a pendulum of 1 m released at 1 rad, 240 Hz, 10 s, keeps its energy within 2.5e-4 (measured with
the time-centred velocity), against 1.9e-3 with a fifth of the error taken out per step and 0.12
(lost) when the error is removed at the position level without touching the velocity. A soft
joint (``frequency`` > 0) uses the implicit spring-damper of
:func:`~ndrigid.core.dynamics.solver.soft_coefficients` instead.

Order in a step: joints are warm-started from last step's impulses and take ``joint_passes``
passes before the contact solve and ``joint_passes_after`` after it, so that both see each other's
impulses (block Gauss-Seidel between the two sets) and the step ends with the joints held.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from .. import kernels as _kernels
from ..algebra import Algebra
from ..state.components import DYNAMIC, Bodies
from ..state.joints import DISTANCE, HINGE, POINT, SCALAR_ROWS, SLIDER, SPRING, WELD, WHEEL, JointSet
from .solver import colour_items, soft_coefficients, tangent_basis

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]


class JointEvent(NamedTuple):
    """A joint that broke in the last step: its constraint force or couple passed its threshold.

    ``kind`` is ``"joint_broken"``; ``joint`` the joint's handle (no longer valid); ``body_a`` and
    ``body_b`` the body handles (-1: the world); ``force`` (N) and ``torque`` (N m) the sizes that
    broke it.
    """

    kind: str
    joint: int
    body_a: int
    body_b: int
    force: float
    torque: float


class JointRows:
    """The rows of the awake joints of one step, in solve order (by colour)."""

    def __init__(self, **arrays: Any) -> None:
        self.__dict__.update(arrays)


def _wedge(alg: Algebra, r: Array, D: Array) -> Array:
    """Bivectors (..., k) r ^ u for r (..., n) and u (..., n) (broadcast)."""
    p = alg.pairs
    return r[..., p[:, 0]] * D[..., p[:, 1]] - r[..., p[:, 1]] * D[..., p[:, 0]]


def _side_pose(bodies: Bodies, rows: IntArray) -> tuple[Array, Array, Array]:
    """Origin, rotation and centre of mass of each side; row -1 is the world (identity pose)."""
    n = bodies.alg.n
    J = rows.shape[0]
    pos = np.zeros((J, n))
    rot = np.broadcast_to(np.eye(n), (J, n, n)).copy()
    com = np.zeros((J, n))
    has = rows >= 0
    if np.any(has):
        r = rows[has]
        pos[has] = bodies.position[r]
        rot[has] = bodies.rotation[r]
        com[has] = pos[has] + np.einsum("jab,jb->ja", rot[has], bodies.local_centroid[r])
    return pos, rot, com


def joint_geometry(alg: Algebra, bodies: Bodies, joints: JointSet, ra: IntArray, rb: IntArray,
                   sel: IntArray | None = None) -> dict[str, Array]:
    """World anchors, frames and axis of joints ``sel`` (default all) with body rows ra, rb (-1: world)."""
    sel = np.arange(joints.count) if sel is None else sel
    posA, RA, cA = _side_pose(bodies, ra)
    posB, RB, cB = _side_pose(bodies, rb)
    pA = posA + np.einsum("jab,jb->ja", RA, joints.anchor_a[sel])
    pB = posB + np.einsum("jab,jb->ja", RB, joints.anchor_b[sel])
    FA = np.einsum("jab,jib->jia", RA, joints.frame_a[sel])
    FB = np.einsum("jab,jib->jia", RB, joints.frame_b[sel])
    axis = np.einsum("jab,jb->ja", RA, joints.axis_a[sel])
    # directions across the line, chosen in A's frame and turned with it: a basis that changes
    # smoothly with the pose (a basis of the world axis would jump where the axis passes a
    # coordinate axis, flipping the rows' signs between the poses of one step)
    across = np.einsum("jab,jrb->jra", RA, tangent_basis(joints.axis_a[sel]))
    return {"pA": pA, "pB": pB, "cA": cA, "cB": cB, "FA": FA, "FB": FB, "axis": axis, "across": across}


def hinge_angles(FA: Array, FB: Array) -> Array:
    """Angle (J,) of B's f_0 turned toward A's f_1 in A's plane f_0 ^ f_1, in (-pi, pi]."""
    return np.arctan2(np.einsum("ji,ji->j", FA[:, 1], FB[:, 0]), np.einsum("ji,ji->j", FA[:, 0], FB[:, 0]))


def equality_rows(alg: Algebra, kind: NDArray[np.int8], g: dict[str, Array]) -> tuple[Array, Array,
                                                                                   NDArray[np.bool_]]:
    """Jacobians G (J, n + k, 2 (n + k)), errors C (J, n + k) and the used slots (J, n + k) of the
    joints' equality rows (n linear slots, then k angular slots), from their world geometry ``g``
    (:func:`joint_geometry`)."""
    n, k = alg.n, alg.k
    w = n + k
    J = kind.shape[0]
    pA, pB, cA, cB, FA, FB = g["pA"], g["pB"], g["cA"], g["cB"], g["FA"], g["FB"]
    R = n + k
    G = np.zeros((J, R, 2 * w))
    C = np.zeros((J, R))
    point_like = (kind == POINT) | (kind == WELD) | (kind == HINGE)
    line_like = (kind == SLIDER) | (kind == WHEEL)
    D = np.zeros((J, n, n))
    D[point_like] = np.eye(n)
    D[line_like, : n - 1] = g["across"][line_like]
    mid = 0.5 * (pA + pB)
    at = np.where(line_like[:, None], pB, mid)
    rA, rB = at - cA, at - cB
    G[:, :n, :n] = -D
    G[:, :n, n:w] = -_wedge(alg, rA[:, None, :], D)
    G[:, :n, w:w + n] = D
    G[:, :n, w + n:] = _wedge(alg, rB[:, None, :], D)
    C[:, :n] = np.einsum("jri,ji->jr", D, pB - pA)
    p = alg.pairs
    fa, fb = FA[:, p[:, 0]], FB[:, p[:, 1]]
    ang_on = np.zeros((J, k), dtype=bool)
    ang_on[(kind == WELD) | (kind == SLIDER)] = True
    ang_on[(kind == HINGE) | (kind == WHEEL), 1:] = True
    E = _wedge(alg, fb, fa) * ang_on[..., None]
    G[:, n:, n:w] = -E
    G[:, n:, w + n:] = E
    C[:, n:] = np.einsum("jpi,jpi->jp", fa, fb) * ang_on
    lin_on = np.any(D != 0.0, axis=2)
    C[:, :n] *= lin_on
    return G, C, np.concatenate([lin_on, ang_on], axis=1)


def response(G: Array, imA: Array, IA: Array, imB: Array, IB: Array) -> Array:
    """Velocity change per unit impulse (J, rows, 2 w) of rows G: M^-1 G^T, row by row."""
    w = G.shape[-1] // 2
    n = w - IA.shape[-1]  # IA is (J, k, k)
    H = np.empty_like(G)
    H[..., :n] = imA[:, None, None] * G[..., :n]
    H[..., n:w] = np.einsum("jrb,jbc->jrc", G[..., n:w], IA)
    H[..., w:w + n] = imB[:, None, None] * G[..., w:w + n]
    H[..., w + n:] = np.einsum("jrb,jbc->jrc", G[..., w + n:], IB)
    return H


def awake_sides(bodies: Bodies, joints: JointSet, handle_to_row: IntArray) -> tuple[
        IntArray, IntArray, IntArray, NDArray[np.bool_], NDArray[np.bool_]] | None:
    """The joints that hold an awake dynamic body: their rows ``sel``, body rows ``ia``, ``ib``
    (``ib`` = N, one past the last body: the world) and whether each side takes impulses."""
    N = bodies.count
    ra = handle_to_row[joints.body_a]
    rb = np.where(joints.body_b >= 0, handle_to_row[np.maximum(joints.body_b, 0)], -1)
    dyn = (bodies.kind == DYNAMIC) & bodies.awake
    dynA = dyn[ra]
    dynB = np.where(rb >= 0, dyn[np.maximum(rb, 0)], False)
    sel = np.nonzero(dynA | dynB)[0]
    if sel.size == 0:
        return None
    return sel, ra[sel], np.where(rb[sel] >= 0, rb[sel], N), dynA[sel], dynB[sel]


def side_inverses(bodies: Bodies, ia: IntArray, ib: IntArray) -> tuple[Array, Array, Array, Array]:
    """Inverse masses and world inverse inertia maps of each side (zero where a side takes no
    impulse: static, kinematic, asleep, or the world at row N)."""
    k = bodies.alg.k
    dyn = (bodies.kind == DYNAMIC) & bodies.awake
    inv_m = np.concatenate([np.where(dyn, bodies.inv_mass, 0.0), [0.0]])
    inv_I = np.concatenate([bodies.world_inv_inertia() * dyn[:, None, None], np.zeros((1, k, k))])
    return inv_m[ia], inv_I[ia], inv_m[ib], inv_I[ib]


def block_inverse(G: Array, H: Array, C: Array, on: NDArray[np.bool_]) -> Array:
    """Inverse effective masses (J, R, R) of the joints' equality blocks ``K = G M^-1 G^T``.

    A row whose bodies cannot respond (K_rr = 0, e.g. a body without inertia in that plane) is
    dropped (``on``, G, H and C cleared in place); unused slots get an identity block (zero impulse).
    """
    R = G.shape[1]
    K = np.einsum("jra,jsa->jrs", G, H)
    diag = np.einsum("jrr->jr", K)
    on &= diag > 1e-14 * np.maximum(diag.max(axis=1), 1e-300)[:, None]
    G[~on] = 0.0
    H[~on] = 0.0
    C[~on] = 0.0
    K = np.where(on[:, :, None] & on[:, None, :], K, 0.0) + (~on)[:, :, None] * np.eye(R)
    return np.linalg.inv(K)


def colour_order(ia: IntArray, ib: IntArray, dynA: NDArray[np.bool_], dynB: NDArray[np.bool_],
                 N: int, compiled_dim: int | None = None) -> tuple[IntArray, IntArray]:
    """Solve order of joints (sorted by colour, then by their own order: no dynamic body twice in a
    colour) and the bounds (colours + 1,) of each colour in it. ``compiled_dim``: the greedy colouring
    by that dimension's solver kernel ``colour_rows`` (the same colours as :func:`colour_items`:
    tests/test_kernels_lockstep.py)."""
    J = ia.shape[0]
    priority = J - np.arange(J, dtype=np.int64)
    if compiled_dim is not None:
        colour = _kernels.load("solver", compiled_dim).colour_rows(
            np.ascontiguousarray(ia, dtype=np.int64), np.ascontiguousarray(ib, dtype=np.int64),
            np.ascontiguousarray(dynA), np.ascontiguousarray(dynB), priority, N + 1)
    else:
        colour = colour_items(ia, ib, dynA, dynB, priority, N)
    order = np.argsort(colour, kind="stable")
    ncol = int(colour.max()) + 1
    return order, np.searchsorted(colour[order], np.arange(ncol + 1))


def prepare(alg: Algebra, bodies: Bodies, joints: JointSet, handle_to_row: IntArray, dt: float,
            settings: Any) -> JointRows | None:
    """Build this step's joint rows (None when no joint holds an awake dynamic body)."""
    if joints.count == 0:
        return None
    n, k = alg.n, alg.k
    w = n + k
    N = bodies.count
    sides = awake_sides(bodies, joints, handle_to_row)
    if sides is None:
        return None
    sel, ia, ib, dynA, dynB = sides
    J = sel.size
    kind = joints.kind[sel]
    ra, rb = ia, np.where(ib < N, ib, -1)
    g = joint_geometry(alg, bodies, joints, ra, rb, sel)
    pA, pB, cA, cB, FA, FB, axis = g["pA"], g["pB"], g["cA"], g["cB"], g["FA"], g["FB"], g["axis"]
    imA, IA, imB, IB = side_inverses(bodies, ia, ib)

    # --- equality rows: n linear slots, then k angular slots ---------------------------------
    R = n + k
    G, C, on = equality_rows(alg, kind, g)
    H = response(G, imA, IA, imB, IB)
    Kinv = block_inverse(G, H, C, on)

    freq = joints.frequency[sel]
    zeta = joints.damping_ratio[sel]
    soft_block = (freq > 0.0) & ~((kind == SPRING) | (kind == WHEEL) | (kind == DISTANCE))
    rate = np.full(J, 1.0 / dt)
    mscale = np.ones(J)
    iscale = np.zeros(J)
    if np.any(soft_block):
        rate[soft_block], mscale[soft_block], iscale[soft_block] = soft_coefficients(
            freq[soft_block], zeta[soft_block], dt)
    bias = rate[:, None] * C

    # --- scalar rows -------------------------------------------------------------------------
    S = SCALAR_ROWS
    Gs = np.zeros((J, S, 2 * w))
    bias_s = np.zeros((J, S))
    lo = np.full((J, S), -np.inf)
    hi = np.full((J, S), np.inf)
    ms_s = np.ones((J, S))
    is_s = np.zeros((J, S))
    on_s = np.zeros((J, S), dtype=bool)
    side = np.zeros(J, dtype=np.int8)
    plane = _wedge(alg, FA[:, 0], FA[:, 1])  # f_0 ^ f_1 of A, a unit bivector

    # distance, spring: one row along the anchors' line, at the anchors
    dist = (kind == DISTANCE) | (kind == SPRING)
    if np.any(dist):
        dv = pB[dist] - pA[dist]
        length = np.sqrt(np.einsum("ji,ji->j", dv, dv))
        u = np.where(length[:, None] > 1e-9, dv / np.maximum(length, 1e-300)[:, None], axis[dist])
        r_a, r_b = pA[dist] - cA[dist], pB[dist] - cB[dist]
        g = np.zeros((dist.sum(), 2 * w))
        g[:, :n], g[:, n:w] = -u, -_wedge(alg, r_a, u)
        g[:, w:w + n], g[:, w + n:] = u, _wedge(alg, r_b, u)
        Gs[dist, 0] = g
        mn, mx = joints.min_length[sel][dist], joints.max_length[sel][dist]
        near_min = (length - mn) < (mx - length)
        rod = mn == mx
        target = np.where(near_min, mn, mx)
        cval = length - target
        lo_d = np.where(rod, -np.inf, np.where(near_min, 0.0, -np.inf))
        hi_d = np.where(rod, np.inf, np.where(near_min, np.inf, 0.0))
        lo[dist, 0], hi[dist, 0] = lo_d, hi_d
        on_s[dist, 0] = True
        side[dist] = np.where(rod, 0, np.where(near_min, -1, 1))
        rate_d = np.full(dist.sum(), 1.0 / dt)
        ms_d, is_d = np.ones(dist.sum()), np.zeros(dist.sum())
        fd, zd = freq[dist], zeta[dist]
        sd = fd > 0.0
        if np.any(sd):
            rate_d[sd], ms_d[sd], is_d[sd] = soft_coefficients(fd[sd], zd[sd], dt)
        bias_s[dist, 0] = rate_d * cval
        ms_s[dist, 0], is_s[dist, 0] = ms_d, is_d

    # hinge: slot 0 the nearer angle limit, slot 1 the motor
    hinge = kind == HINGE
    angle = np.zeros(J)
    if np.any(hinge):
        angle[hinge] = hinge_angles(FA[hinge], FB[hinge])
        lw, up = joints.lower[sel], joints.upper[sel]
        limited = hinge & (np.isfinite(lw) | np.isfinite(up))
        if np.any(limited):
            th = angle[limited]
            l_, u_ = lw[limited], up[limited]
            near_lo = (th - l_) < (u_ - th)
            g = np.zeros((limited.sum(), 2 * w))
            g[:, n:w], g[:, w + n:] = -plane[limited], plane[limited]
            Gs[limited, 0] = g
            cval = np.where(near_lo, th - l_, th - u_)
            bias_s[limited, 0] = cval / dt
            lo[limited, 0] = np.where(near_lo, 0.0, -np.inf)
            hi[limited, 0] = np.where(near_lo, np.inf, 0.0)
            on_s[limited, 0] = True
            side[limited] = np.where(near_lo, -1, 1)
    motor = ((kind == HINGE) | (kind == WHEEL)) & (joints.max_motor_torque[sel] > 0.0)
    if np.any(motor):
        g = np.zeros((motor.sum(), 2 * w))
        g[:, n:w], g[:, w + n:] = -plane[motor], plane[motor]
        Gs[motor, 1] = g
        bias_s[motor, 1] = -joints.motor_speed[sel][motor]
        tau = joints.max_motor_torque[sel][motor] * dt
        lo[motor, 1], hi[motor, 1] = -tau, tau
        on_s[motor, 1] = True

    # wheel: slot 0 the suspension along the line (a spring when frequency > 0)
    wheel = kind == WHEEL
    if np.any(wheel):
        ax = axis[wheel]
        r_a, r_b = pB[wheel] - cA[wheel], pB[wheel] - cB[wheel]
        g = np.zeros((wheel.sum(), 2 * w))
        g[:, :n], g[:, n:w] = -ax, -_wedge(alg, r_a, ax)
        g[:, w:w + n], g[:, w + n:] = ax, _wedge(alg, r_b, ax)
        Gs[wheel, 0] = g
        cval = np.einsum("ji,ji->j", ax, pB[wheel] - pA[wheel])
        rate_w = np.full(wheel.sum(), 1.0 / dt)
        ms_w, is_w = np.ones(wheel.sum()), np.zeros(wheel.sum())
        fw, zw = freq[wheel], zeta[wheel]
        sw = fw > 0.0
        if np.any(sw):
            rate_w[sw], ms_w[sw], is_w[sw] = soft_coefficients(fw[sw], zw[sw], dt)
        bias_s[wheel, 0] = rate_w * cval
        ms_s[wheel, 0], is_s[wheel, 0] = ms_w, is_w
        on_s[wheel, 0] = True

    Gs[~on_s] = 0.0
    Hs = response(Gs, imA, IA, imB, IB)
    ks = np.einsum("jsa,jsa->js", Gs, Hs)
    on_s &= ks > 1e-300
    meff = np.where(on_s, 1.0 / np.where(on_s, ks, 1.0), 0.0)
    bias_s[~on_s] = 0.0

    # warm start values: last step's impulses where the row is the same (a limit that changed
    # sides starts cold), none where warm starting is off
    lam = joints.impulse[sel].copy()
    if not getattr(settings, "warm_start", True):
        lam[:] = 0.0
    lam[:, :R] *= on
    changed = side != joints.limit_side[sel]
    lam[changed, R] = 0.0
    lam[:, R:] *= on_s
    lam[:, R:] = np.clip(lam[:, R:], lo, hi)

    # colours: no dynamic body twice in one (joints sorted by colour, then by their own order)
    order, bounds = colour_order(ia, ib, dynA, dynB, N, n if _kernels.use_compiled(settings) else None)

    def o(x: Any) -> Any:
        return x[order]

    return JointRows(sel=o(sel), a=o(ia), b=o(ib), G=o(G), H=o(H), Kinv=o(Kinv), bias=o(bias),
                     mscale=o(mscale), iscale=o(iscale), Gs=o(Gs), Hs=o(Hs), bias_s=o(bias_s), lo=o(lo),
                     hi=o(hi), ms_s=o(ms_s), is_s=o(is_s), meff=o(meff), lam=o(lam), side=o(side),
                     on=o(on), on_s=o(on_s), bounds=bounds, n=n, k=k, w=w, N=N, dt=dt)


def body_state(bodies: Bodies) -> Array:
    """The state X (N + 1, n + k): [velocity, angular velocity] per body, a zero row for the world."""
    X = np.zeros((bodies.count + 1, bodies.alg.n + bodies.alg.k))
    X[:-1, : bodies.alg.n] = bodies.velocity
    X[:-1, bodies.alg.n:] = bodies.angular_velocity
    return X


def store_state(bodies: Bodies, X: Array) -> None:
    n = bodies.alg.n
    dyn = (bodies.kind == DYNAMIC) & bodies.awake
    bodies.velocity[dyn] = X[:-1, :n][dyn]
    bodies.angular_velocity[dyn] = X[:-1, n:][dyn]


def warm_start(rows: JointRows, X: Array) -> None:
    """Apply the accumulated impulses of every joint (all at once: bodies may repeat)."""
    w, R = rows.w, rows.n + rows.k
    dXab = (np.einsum("jr,jra->ja", rows.lam[:, :R], rows.H)
            + np.einsum("js,jsa->ja", rows.lam[:, R:], rows.Hs))
    np.add.at(X, rows.a, dXab[:, :w])
    np.add.at(X, rows.b, dXab[:, w:])
    X[-1] = 0.0


def solve_passes(rows: JointRows, X: Array, passes: int) -> None:
    """``passes`` Gauss-Seidel passes over the joints, a colour at a time (vectorised numpy)."""
    w, R = rows.w, rows.n + rows.k
    S = SCALAR_ROWS
    lam = rows.lam
    b = rows.bounds
    for _ in range(passes):
        for c in range(len(b) - 1):
            s = slice(int(b[c]), int(b[c + 1]))
            ia, ib = rows.a[s], rows.b[s]
            Xab = np.concatenate([X[ia], X[ib]], axis=1)
            for q in range(S):
                g = rows.Gs[s, q]
                cdot = np.einsum("ja,ja->j", g, Xab)
                old = lam[s, R + q].copy()
                new = np.clip(old - rows.ms_s[s, q] * rows.meff[s, q] * (cdot + rows.bias_s[s, q])
                              - rows.is_s[s, q] * old, rows.lo[s, q], rows.hi[s, q])
                lam[s, R + q] = new
                Xab += (new - old)[:, None] * rows.Hs[s, q]
            cdot = np.einsum("jra,ja->jr", rows.G[s], Xab)
            dl = (-rows.mscale[s, None] * np.einsum("jrs,js->jr", rows.Kinv[s], cdot + rows.bias[s])
                  - rows.iscale[s, None] * lam[s, :R])
            lam[s, :R] += dl
            Xab += np.einsum("jr,jra->ja", dl, rows.H[s])
            X[ia] = Xab[:, :w]
            X[ib] = Xab[:, w:]
            X[-1] = 0.0


def joined_rows(joints: JointSet, handle_to_row: IntArray) -> IntArray:
    """Body rows (J, 2) of every joint, -1 on a world side: the joints' edges of the island graph."""
    ra = handle_to_row[joints.body_a]
    rb = np.where(joints.body_b >= 0, handle_to_row[np.maximum(joints.body_b, 0)], -1)
    return np.stack([ra, rb], axis=1).astype(np.int64)


def wake_joined(bodies: Bodies, joints: JointSet, handle_to_row: IntArray, caches: dict[str, Any]) -> None:
    """Wake sleeping bodies joined to an awake one (or to a moving kinematic body), with their islands."""
    from .sleep import wake_joined as _wake

    _wake(bodies, joined_rows(joints, handle_to_row), caches)


def run(rows: JointRows, bodies: Bodies, passes: int, warm: bool, settings: Any = None) -> None:
    """Apply the warm start (``warm``) and ``passes`` passes to the bodies' velocities: by the
    compiled kernel where ``kernels.use_compiled(settings)`` (None: wherever numba is available),
    else by the vectorised numpy path. Both solve the same joints in the same order."""
    if passes == 0 and not warm:
        return
    X = body_state(bodies)
    if _kernels.use_compiled(settings):
        _run_compiled(rows, X, passes, warm)
    else:
        if warm:
            warm_start(rows, X)
        solve_passes(rows, X, passes)
    store_state(bodies, X)


def _run_compiled(rows: JointRows, X: Array, passes: int, warm: bool) -> None:
    """:func:`warm_start` and :func:`solve_passes` by the compiled ``joints`` kernel (joint by joint
    in the stored order; X and ``rows.lam`` in place)."""
    kern = _kernels.load("joints", rows.n)
    if not (rows.lam.flags.c_contiguous and rows.lam.dtype == np.float64):
        rows.lam = np.ascontiguousarray(rows.lam, dtype=np.float64)

    def c(x: Any, dtype: Any = np.float64) -> Any:
        return np.ascontiguousarray(x, dtype=dtype)

    kern.run(c(rows.a, np.int64), c(rows.b, np.int64), c(rows.G), c(rows.H), c(rows.Kinv), c(rows.bias),
             c(rows.mscale), c(rows.iscale), c(rows.Gs), c(rows.Hs), c(rows.bias_s), c(rows.lo), c(rows.hi),
             c(rows.ms_s), c(rows.is_s), c(rows.meff), rows.lam, c(rows.on, np.bool_), c(rows.on_s, np.bool_),
             X, bool(warm), int(passes))


def broken(joints: JointSet) -> IntArray:
    """Rows of the joints whose last step's force or couple passed their thresholds."""
    return np.nonzero((joints.force > joints.break_force) | (joints.torque > joints.break_torque))[0]


def finish(rows: JointRows, joints: JointSet) -> None:
    """Store the impulses (for the next warm start) and the constraint force and couple sizes."""
    n, R = rows.n, rows.n + rows.k
    sel = rows.sel
    joints.impulse[sel] = rows.lam
    joints.limit_side[sel] = rows.side
    lin = np.concatenate([rows.lam[:, :n], rows.lam[:, R:R + 1] * _linear_scalar(rows)], axis=1)
    ang = np.concatenate([rows.lam[:, n:R], rows.lam[:, R:R + 1] * ~_linear_scalar(rows)], axis=1)
    joints.force[sel] = np.sqrt(np.einsum("jr,jr->j", lin, lin)) / rows.dt
    joints.torque[sel] = np.sqrt(np.einsum("jr,jr->j", ang, ang)) / rows.dt


def _linear_scalar(rows: JointRows) -> NDArray[np.bool_]:
    """(J, 1): slot 0 is a linear row (distance, spring, suspension) rather than a hinge limit."""
    return np.any(rows.Gs[:, 0, : rows.n] != 0.0, axis=1)[:, None]


__all__ = ["JointEvent", "JointRows", "body_state", "broken", "finish", "hinge_angles", "joint_geometry",
           "joined_rows", "prepare", "run", "solve_passes", "store_state", "wake_joined", "warm_start"]
