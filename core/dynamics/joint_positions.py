"""The joints' position pass: after the bodies have moved, take out what is left of each rigid
joint's position error by moving the bodies (post-stabilisation).

The velocity rows (:mod:`ndrigid.core.dynamics.joints`) hold a joint to first order: the anchors'
relative speed is zero at the start of the step's motion, but bodies that turn move their anchors
on arcs, so a fast chain still opens by about ``(v dt)^2 / (2 r)`` per step (a 4-D chain of ten
0.2 m links released horizontally at 120 Hz: 7 % of a link). This pass removes that error after
the bodies have moved, in two phases:

1. Simplified Newton passes of the SHAKE condition (Ryckaert, Ciccotti and Berendsen, J. Comput.
   Phys. 23, 1977): impulses along the step's own rows (taken at the poses of the step's start)
   are added to the velocities and the bodies are moved by dt times the velocity change, all
   joints at once, until the largest error is below ``_DONE`` or stops shrinking. The Newton
   matrix ``dt G M^-1 G^T`` is factored once per step (scipy's sparse LU); the impulses are
   internal and applied at the poses the bodies move from, so momentum is kept exactly.
2. Where an error above ``_PROJECT_ABOVE`` is left (a violent step), up to two Newton passes at the
   current poses move the bodies without touching the velocities: the projection step of
   post-stabilisation (Cline and Pai, "Post-stabilization for rigid body simulation with contact
   and constraints", IEEE ICRA 2003). It converges quadratically but does not keep angular
   momentum exactly.

Both phases are vectorised over joints (no Python loop over joints or bodies); the compiled path
runs the same code (numba offers no sparse direct solver to write it as loops).

For the rows G of a phase (on the pairs' displacements [dx_A, dth_A, dx_B, dth_B]: centre of mass
shifts and turn bivectors), errors C and ``K = G M^-1 G^T``, the move is ``M^-1 G^T l`` with
``K l = -C``: the smallest mass-weighted move that zeroes the linearised error. A body turns by the
rotor ``exp(-dth/2)`` of its turn bivector (as ``advance_poses`` turns it by ``dt B``). A rod's
length, a rope past its range and a hinge past its limit are held by their scalar row, solved with
the block rows (a rope's or a limit's row only when it is violated at the start of the pass). Soft
joints (``frequency`` > 0), springs and wheel suspensions are left as they are: their error is their
spring's business.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import sparse
from scipy.sparse.linalg import splu

from .. import kernels as _kernels
from ..algebra import Algebra
from ..state.components import Bodies
from ..state.joints import DISTANCE, HINGE, POINT, SLIDER, SPRING, WELD, WHEEL, JointSet
from .joints import JointRows, _wedge, equality_rows, hinge_angles, joint_geometry, response, side_inverses
from .solver import tangent_basis

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]


def _move(alg: Algebra, bodies: Bodies, rows: IntArray, shift: Array) -> None:
    """Shift the centres of mass of bodies ``rows`` (distinct) by shift[:, :n] and turn them by the
    bivectors shift[:, n:]."""
    if rows.size == 0:
        return
    n = alg.n
    lc = bodies.local_centroid[rows]
    com = bodies.position[rows] + np.einsum("jab,jb->ja", bodies.rotation[rows], lc) + shift[:, :n]
    R = alg.rotor_normalize(alg.rotor_mul(alg.rotor(shift[:, n:]), bodies.rotor[rows]), steps=1)
    M = alg.rotor_to_matrix(R)
    bodies.rotor[rows] = R
    bodies.rotation[rows] = M
    bodies.position[rows] = com - np.einsum("jab,jb->ja", M, lc)


def _scalar_rows(alg: Algebra, joints: JointSet, js: IntArray, kind: NDArray[np.int8],
                 g: dict[str, Array]) -> tuple[Array, Array]:
    """Row G (J, 2 w) and violated error C (J,) of each joint's scalar position row: a rod's length,
    a rope outside its range, a hinge outside its limits (zero rows elsewhere)."""
    n, k = alg.n, alg.k
    w = n + k
    J = js.size
    Gs = np.zeros((J, 2 * w))
    Cs = np.zeros(J)
    dist = kind == DISTANCE
    if np.any(dist):
        pA, pB = g["pA"][dist], g["pB"][dist]
        dv = pB - pA
        length = np.sqrt(np.einsum("ji,ji->j", dv, dv))
        u = np.where(length[:, None] > 1e-9, dv / np.maximum(length, 1e-300)[:, None], g["axis"][dist])
        r_a, r_b = pA - g["cA"][dist], pB - g["cB"][dist]
        row = np.zeros((dist.sum(), 2 * w))
        row[:, :n], row[:, n:w] = -u, -_wedge(alg, r_a, u)
        row[:, w:w + n], row[:, w + n:] = u, _wedge(alg, r_b, u)
        Gs[dist] = row
        mn, mx = joints.min_length[js][dist], joints.max_length[js][dist]
        Cs[dist] = np.maximum(length - mx, 0.0) + np.minimum(length - mn, 0.0)
    lw, up = joints.lower[js], joints.upper[js]
    limited = (kind == HINGE) & (np.isfinite(lw) | np.isfinite(up))
    if np.any(limited):
        FA, FB = g["FA"][limited], g["FB"][limited]
        th = hinge_angles(FA, FB)
        plane = _wedge(alg, FA[:, 0], FA[:, 1])
        row = np.zeros((limited.sum(), 2 * w))
        row[:, n:w], row[:, w + n:] = -plane, plane
        Gs[limited] = row
        Cs[limited] = np.maximum(th - up[limited], 0.0) + np.minimum(th - lw[limited], 0.0)
    return Gs, Cs


def _sparse_rows(Gr: Array, use_a: NDArray[np.bool_], use_b: NDArray[np.bool_], colA: IntArray,
                 colB: IntArray, size: int, w: int) -> sparse.csr_matrix:
    """Rows Gr (m, 2 w) on the pair states as a sparse (m, size) matrix on all bodies' states;
    a side that takes no impulse (static, asleep, the world) is left out. Built as CSR arrays
    directly (each row: A's w columns, then B's; no duplicates, so no COO sort is needed)."""
    m = Gr.shape[0]
    keep = np.concatenate([np.repeat(use_a[:, None], w, axis=1), np.repeat(use_b[:, None], w, axis=1)],
                          axis=1)
    cols = np.concatenate([colA, colB], axis=1)
    indptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(w * (use_a.astype(np.int64) + use_b), out=indptr[1:])
    return sparse.csr_matrix((Gr[keep], cols[keep], indptr), shape=(m, size))


def _factor(Gm: sparse.csr_matrix, Hm: sparse.csr_matrix) -> Any:
    """LU factors of G M^-1 G^T (Hm = M^-1 G^T row by row), with a tiny relative regularisation
    that keeps redundant rows (a closed loop, two joints holding the same freedom) solvable: they
    share the correction instead of making the matrix singular."""
    K = (Gm @ Hm.T).tocsc()
    m = K.shape[0]
    K = K + sparse.identity(m, format="csc") * (_REGULARISE * float(np.abs(K.diagonal()).max()))
    return splu(K)


def _errors(alg: Algebra, bodies: Bodies, joints: JointSet, rows: JointRows, kind: NDArray[np.int8],
            with_rows: bool) -> tuple[Array, Array | None]:
    """Position errors (J, R + 1) of the joints at the bodies' current poses (block rows, then the
    scalar position row) and, with ``with_rows``, their Jacobians (J, R + 1, 2 w)."""
    N = bodies.count
    sel = rows.sel
    g = joint_geometry(alg, bodies, joints, rows.a, np.where(rows.b < N, rows.b, -1), sel)
    G, C, _on = equality_rows(alg, kind, g)
    Gs, Cs = _scalar_rows(alg, joints, sel, kind, g)
    C = np.concatenate([C, Cs[:, None]], axis=1)
    return C, (np.concatenate([G, Gs[:, None, :]], axis=1) if with_rows else None)


def _pass_functions(alg: Algebra, bodies: Bodies, joints: JointSet, rows: JointRows,
                    kind: NDArray[np.int8], compiled: bool) -> tuple[Any, Any]:
    """``errors()`` (the joints' position errors (J, R + 1) now) and ``move(rows, shift)`` (as
    :func:`_move`) on the numpy path or by the compiled kernels."""
    if not compiled:
        return (lambda: _errors(alg, bodies, joints, rows, kind, False)[0],
                lambda moved, shift: _move(alg, bodies, moved, shift))
    n = alg.n
    sel = rows.sel
    lin_mode = np.where((kind == POINT) | (kind == WELD) | (kind == HINGE), 1,
                        np.where((kind == SLIDER) | (kind == WHEEL), 2, 0)).astype(np.int8)
    ang_on = np.zeros((sel.size, alg.k), dtype=np.bool_)
    ang_on[(kind == WELD) | (kind == SLIDER)] = True
    ang_on[(kind == HINGE) | (kind == WHEEL), 1:] = True
    scalar_mode = np.where(kind == DISTANCE, 1, np.where(kind == HINGE, 2, 0)).astype(np.int8)
    across = tangent_basis(joints.axis_a[sel]) if sel.size else np.zeros((0, n - 1, n))
    jk = _kernels.load("joints", n)
    ik = _kernels.load("integrate", n)
    fixed = (np.ascontiguousarray(rows.a, dtype=np.int64), np.ascontiguousarray(rows.b, dtype=np.int64),
             lin_mode, ang_on, scalar_mode)
    body_frame = tuple(np.ascontiguousarray(x, dtype=np.float64) for x in (
        joints.anchor_a[sel], joints.anchor_b[sel], joints.frame_a[sel], joints.frame_b[sel], across,
        joints.min_length[sel], joints.max_length[sel], joints.lower[sel], joints.upper[sel]))
    out = np.zeros((sel.size, alg.n + alg.k + 1))

    def errors() -> Array:
        jk.position_errors(*fixed, bodies.position, bodies.rotation, *body_frame, out)
        return out.copy()

    def move(moved: IntArray, shift: Array) -> None:
        ik.push_poses(np.ascontiguousarray(moved, dtype=np.int64), np.ascontiguousarray(shift),
                      bodies.local_centroid, bodies.position, bodies.rotor, bodies.rotation)

    return errors, move


def project(alg: Algebra, bodies: Bodies, joints: JointSet, rows: JointRows | None, passes: int,
            dt: float, compiled: bool = False) -> None:
    """Hold the rigid joints at the position level after the bodies have moved.

    ``rows`` are the step's velocity rows (:func:`ndrigid.core.dynamics.joints.prepare`, taken at
    the poses of the step's start). First ``passes`` simplified Newton passes add impulses along
    those rows to the velocities and move the bodies by dt times the velocity change, all joints
    at once (the Newton matrix is the start-of-step ``dt G M^-1 G^T``, symmetric and positive
    definite, factored once: it cannot blow up where a fast turn makes the exact Jacobian near
    singular); a pass that does not shrink the largest error stops them. Internal impulses at the
    poses the bodies move from: momentum is kept exactly, as by the velocity rows (the SHAKE
    condition, Ryckaert, Ciccotti and Berendsen 1977, solved to convergence). Where an error
    above ``_PROJECT_ABOVE`` is left (a violent step), up to ``_PROJECTIONS`` Newton passes at
    the current poses move the bodies without touching the velocities (post-stabilisation, Cline
    and Pai 2003), while the error shrinks; they converge quadratically but do not keep angular
    momentum exactly. In both phases a pass that makes the largest error grow is undone (the
    bodies' poses and velocities restored) before stopping.

    ``compiled``: the errors of the momentum-keeping passes and the bodies' moves run in the
    compiled ``joints`` and ``integrate`` kernels (the same statements as :func:`_errors` and
    :func:`_move`, as loops); the sparse solves are scipy's on both paths."""
    if passes <= 0 or rows is None:
        return
    kind = joints.kind[rows.sel]
    freq = joints.frequency[rows.sel]
    N = bodies.count
    n, w = alg.n, alg.n + alg.k
    size = (N + 1) * w
    soft_block = (freq > 0.0) & ~((kind == SPRING) | (kind == WHEEL) | (kind == DISTANCE))
    on_block = rows.on & ~soft_block[:, None]
    # slot 0 of the scalar rows where it is a position row: a rigid rod or rope, a hinge limit
    scalar = ((kind == DISTANCE) & (freq == 0.0)) | (kind == HINGE)
    Gn = np.concatenate([rows.G, rows.Gs[:, :1]], axis=1)  # (J, R + 1, 2 w) at the step's start
    Hn = np.concatenate([rows.H, rows.Hs[:, :1]], axis=1)
    dynA = np.abs(Hn[:, :, :w]).max(axis=(1, 2)) > 0.0
    dynB = (rows.b < N) & (np.abs(Hn[:, :, w:]).max(axis=(1, 2)) > 0.0)
    cols = np.arange(w)
    colA = rows.a[:, None] * w + cols  # (J, w) state columns of each side
    colB = rows.b[:, None] * w + cols

    errors, move = _pass_functions(alg, bodies, joints, rows, kind, compiled)
    C = errors()
    # the rows to hold, fixed over the passes: the rigid block rows, a rod, and a rope or a limit
    # that is violated now
    on = np.concatenate([on_block, (scalar & (C[:, -1] != 0.0))[:, None]], axis=1)
    diag = np.einsum("jra,jra->jr", Gn, Hn)
    on &= diag > 1e-14 * np.maximum(diag.max(axis=1), 1e-300)[:, None]
    jr = np.nonzero(on)
    if jr[0].size == 0:
        return
    j = jr[0]
    ua, ub, ca, cb = dynA[j], dynB[j], colA[j], colB[j]
    Hm = _sparse_rows(Hn[jr], ua, ub, ca, cb, size, w)
    lu = _factor(_sparse_rows(Gn[jr], ua, ub, ca, cb, size, w), Hm)
    HmT = Hm.T.tocsr()
    last = np.inf
    err = C[jr]
    saved = None
    for p in range(passes + 1):
        if p:
            err = errors()[jr]
        largest = float(np.abs(err).max())
        if largest >= last and saved is not None:
            _restore(bodies, saved)  # the pass made it worse (a turn too large for the step's rows)
            largest = last
            break
        if p == passes or largest <= _DONE:
            break
        last = largest
        dv = (HmT @ lu.solve(-err / dt)).reshape(N + 1, w)[:N]
        moved = np.nonzero(np.any(dv != 0.0, axis=1))[0]
        saved = _save(bodies, moved)
        bodies.velocity[moved] += dv[moved, :n]
        bodies.angular_velocity[moved] += dv[moved, n:]
        move(moved, dt * dv[moved])

    # what is left after a violent step: project at the current poses, positions only, while the
    # error shrinks (Newton's method at the current poses: quadratic once close)
    if largest <= _PROJECT_ABOVE:
        return
    imA, IA, imB, IB = side_inverses(bodies, rows.a, rows.b)
    last, saved = largest, None
    for q in range(_PROJECTIONS + 1):
        C, G = _errors(alg, bodies, joints, rows, kind, True)
        err = C[jr]
        largest = float(np.abs(err).max())
        if q and largest >= last:
            _restore(bodies, saved)
            break
        if largest <= _PROJECT_ABOVE or q == _PROJECTIONS:
            break
        last = largest
        H = response(G, imA, IA, imB, IB)
        Hc = _sparse_rows(H[jr], ua, ub, ca, cb, size, w)
        shift = (Hc.T @ _factor(_sparse_rows(G[jr], ua, ub, ca, cb, size, w), Hc).solve(-err))
        shift = shift.reshape(N + 1, w)[:N]
        moved = np.nonzero(np.any(shift != 0.0, axis=1))[0]
        saved = _save(bodies, moved)
        move(moved, shift[moved])


_STATE = ("position", "rotor", "rotation", "velocity", "angular_velocity")


def _save(bodies: Bodies, rows: IntArray) -> tuple[IntArray, list[Array]]:
    return rows, [getattr(bodies, name)[rows].copy() for name in _STATE]


def _restore(bodies: Bodies, saved: Any) -> None:
    rows, values = saved
    for name, v in zip(_STATE, values, strict=True):
        getattr(bodies, name)[rows] = v


#: relative regularisation of the joints' position matrices (a redundant row then shares the
#: correction; 1e-10 moves a held joint's solution by about that fraction)
_REGULARISE = 1e-10
#: an error this small (m, or rad for a frame row) needs no more passes
_DONE = 1e-12
#: errors above this (m) left after the momentum-keeping passes are projected away at the poses
_PROJECT_ABOVE = 1e-6
#: the most projections at the current poses after a violent step
_PROJECTIONS = 4


__all__ = ["project"]
