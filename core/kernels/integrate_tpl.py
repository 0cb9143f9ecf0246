"""Compiled integration: the accelerate and advance-poses stages as loops over bodies.

The template of the ``integrate`` kernel family (see ``ndrigid.core.kernels``). It states, body by
body, what ``ndrigid.core.dynamics.integrate.accelerate`` and ``advance_poses`` do with batched
numpy calls (the method is in that module's docstring): gravity, forces and damping; the
gyroscopic step in the principal body frame (modes none, explicit, implicit); the exact rotor
exponential of the world angular velocity, one renormalisation step, and the rotation matrix.

The algebra's product tables come in as sparse triplets (``T_*_A``, ``T_*_B``, ``T_*_C``,
``T_*_V``: ``out[C] += x[A] y[B] V``), generated from :class:`~ndrigid.core.algebra.Algebra`.
The rotor exponential is the closed two-plane form for n <= 5 (as ``Algebra.rotor``), and for
near-isoclinic bivectors and n >= 6 a Taylor series with scaling and squaring in the even algebra
(exact to rounding, like the numpy path's plane decomposition).
"""

import numpy as np
from numba import njit

# --- constants of the dimension (generated) ---
N = 3
K = 3
E = 4
Q = 0
PAIRS = np.array([(0, 1), (0, 2), (1, 2)], dtype=np.int64).reshape(3, 2)
EVEN_BIV = np.array([1, 2, 3], dtype=np.int64)
EVEN_QUAD = np.zeros(0, dtype=np.int64)
EVEN_REV = np.array([1.0, -1.0, -1.0, -1.0])
T_EVEN_A = T_EVEN_B = T_EVEN_C = T_ROT_A = T_ROT_B = T_ROT_C = np.zeros(0, dtype=np.int64)
T_C2_A = T_C2_B = T_C2_C = T_COMM_A = T_COMM_B = T_COMM_C = np.zeros(0, dtype=np.int64)
T_EB_A = T_EB_B = T_EB_C = T_EEB_A = T_EEB_B = T_EEB_C = np.zeros(0, dtype=np.int64)
T_BB4_A = T_BB4_B = T_BB4_C = T_B4B_A = T_B4B_B = T_B4B_C = np.zeros(0, dtype=np.int64)
T_EVEN_V = T_ROT_V = T_C2_V = T_COMM_V = T_EB_V = T_EEB_V = T_BB4_V = T_B4B_V = np.zeros(0)
g_even = g_rot = g_comm = g_eb = g_eeb = g_bb4 = g_b4b = None  # generated straight-line products

DYNAMIC = 0
KINEMATIC = 1
MODE_NONE = 0
MODE_EXPLICIT = 1
MODE_IMPLICIT = 2


@njit(cache=True, error_model="numpy")
def _workspace():
    """Scratch rows shared by the helpers (each helper owns fixed rows; see their notes)."""
    return np.zeros((21, max(E, K, N)))


@njit(cache=True, error_model="numpy")
def rotor_mul(R1, R2, out):
    g_even(R1, R2, out)


@njit(cache=True, error_model="numpy")
def rotor_to_matrix(R, M):
    """Rotation matrix (n, n) of a rotor (column i is R e_i ~R)."""
    g_rot(R, R, M.reshape(N * N))


@njit(cache=True, error_model="numpy")
def compound_of_matrix(M, C):
    """Second compound matrix (k, k) of a matrix (n, n): its 2 x 2 minors (Algebra.second_compound)."""
    for p in range(K):
        i0 = PAIRS[p, 0]
        j0 = PAIRS[p, 1]
        for r in range(K):
            k0 = PAIRS[r, 0]
            l0 = PAIRS[r, 1]
            C[p, r] = M[i0, k0] * M[j0, l0] - M[i0, l0] * M[j0, k0]


@njit(cache=True, error_model="numpy")
def rotor_normalize(R, ws):
    """One rescale and one Newton step R <- R (3 - ~R R) / 2, in place (scratch rows 5-7 of ws)."""
    s = 0.0
    for i in range(E):
        s += R[i] * R[i]
    s = np.sqrt(abs(s))
    if s > 0.0:
        for i in range(E):
            R[i] /= s
    rev = ws[5]
    for i in range(E):
        rev[i] = R[i] * EVEN_REV[i]
    Nm = ws[6]
    rotor_mul(rev, R, Nm)
    for i in range(E):
        Nm[i] = -Nm[i]
    Nm[0] += 3.0
    out = ws[7]
    rotor_mul(R, Nm, out)
    for i in range(E):
        R[i] = 0.5 * out[i]


@njit(cache=True, error_model="numpy")
def _exp_series(B, half, R, ws):
    """exp(half B) by a Taylor series with scaling and squaring in the even algebra (rows 2-4)."""
    nrm = 0.0
    for i in range(K):
        nrm += B[i] * B[i]
    nrm = np.sqrt(nrm) * abs(half)
    if not np.isfinite(nrm):
        for i in range(E):
            R[i] = np.nan  # as the numpy path: a non-finite angle gives a non-finite rotor
        return
    s = 0
    while nrm > 0.25:
        nrm *= 0.5
        s += 1
    scale = half / (2.0 ** s)
    X = ws[2]
    term = ws[3]
    tmp = ws[4]
    for i in range(E):
        X[i] = 0.0
        term[i] = 0.0
    for i in range(K):
        X[EVEN_BIV[i]] = scale * B[i]
    term[0] = 1.0
    for i in range(E):
        R[i] = term[i]
    # the trip count is read from the array shape (15 at run time) so that LLVM does not unroll
    # 15 copies of the inlined even product (measured: the 5-D family compiled for 92 s)
    for order in range(1, 16 + B.shape[0] - K):
        rotor_mul(term, X, tmp)
        for i in range(E):
            term[i] = tmp[i] / order
            R[i] += term[i]
    for _ in range(s):
        rotor_mul(R, R, tmp)
        for i in range(E):
            R[i] = tmp[i]


@njit(cache=True, error_model="numpy")
def rotor_exp(B, half, R, ws):
    """exp(half B) of a bivector B (k,) into R (E,): closed form for n <= 5, as Algebra._exp
    (scratch rows 0-4 of ws)."""
    if N > 5:
        _exp_series(B, half, R, ws)
        return
    p = 0.0
    for i in range(K):
        p += B[i] * B[i]
    S = ws[0]
    qv = 0.0
    if Q > 0:
        g_bb4(B, B, S)
        for i in range(Q):
            S[i] *= 0.5
            qv += S[i] * S[i]
    disc = np.sqrt(max(p * p - 4.0 * qv, 0.0))
    l1s = 0.5 * (p + disc)
    l2s = max(0.5 * (p - disc), 0.0)
    l1 = np.sqrt(l1s)
    l2 = np.sqrt(l2s)
    if disc <= 1e-4 * p and p > 0.0:
        _exp_series(B, half, R, ws)  # near-isoclinic: the division below loses precision
        return
    den = 1.0 if disc <= 1e-4 * p else disc
    BS = ws[1]
    for i in range(K):
        BS[i] = 0.0
    if Q > 0:
        g_b4b(B, S, BS)
    a1 = half * l1
    a2 = half * l2
    c1 = np.cos(a1)
    s1 = np.sin(a1)
    c2 = np.cos(a2)
    s2 = np.sin(a2)
    f1 = s1 / l1 if l1 > 1e-12 else half
    f2 = s2 / l2 if l2 > 1e-12 else half
    for i in range(E):
        R[i] = 0.0
    R[0] = c1 * c2
    for i in range(K):
        b1 = (l1s * B[i] + BS[i]) / den
        b2 = B[i] - b1
        R[EVEN_BIV[i]] = (c2 * f1) * b1 + (c1 * f2) * b2
    if Q > 0:
        for i in range(Q):
            R[EVEN_QUAD[i]] = (f1 * f2) * S[i]


@njit(cache=True, error_model="numpy")
def _commutator(a, b, out):
    g_comm(a, b, out)


@njit(cache=True, error_model="numpy")
def _solve(M, y, x):
    """x = M^-1 y for a small dense system (Gaussian elimination, partial pivoting); M and y are
    overwritten."""
    m = M.shape[0]
    for col in range(m):
        piv = col
        best = abs(M[col, col])
        for r in range(col + 1, m):
            if abs(M[r, col]) > best:
                best = abs(M[r, col])
                piv = r
        if piv != col:
            for j in range(m):
                tmp = M[col, j]
                M[col, j] = M[piv, j]
                M[piv, j] = tmp
            tmp = y[col]
            y[col] = y[piv]
            y[piv] = tmp
        for r in range(col + 1, m):
            f = M[r, col] / M[col, col]
            if f != 0.0:
                for j in range(col, m):
                    M[r, j] -= f * M[col, j]
                y[r] -= f * y[col]
    for r in range(m - 1, -1, -1):
        s = y[r]
        for j in range(r + 1, m):
            s -= M[r, j] * x[j]
        x[r] = s / M[r, r]


@njit(cache=True, error_model="numpy")
def gyroscopic(w, inertia, tau, dt, mode, w2, ws, J):
    """One step of I dw/dt = w x (I w) + tau for body-frame w (k,), as integrate.gyroscopic_step
    (scratch rows 0-15 of ws, J (k, k))."""
    if mode == MODE_NONE:
        for i in range(K):
            w2[i] = w[i] + dt * tau[i] / inertia[i]
        return
    if mode == MODE_EXPLICIT:
        L = ws[8]
        for i in range(K):
            L[i] = inertia[i] * w[i]
        g = ws[9]
        _commutator(w, L, g)
        for i in range(K):
            w2[i] = w[i] + dt * (g[i] + tau[i]) / inertia[i]
        return
    w1 = ws[8]
    L1 = ws[9]
    for i in range(K):
        w1[i] = w[i] + dt * tau[i] / inertia[i]
        L1[i] = inertia[i] * w1[i]
    f = ws[10]
    _commutator(w1, L1, f)
    for i in range(K):
        f[i] = -dt * f[i]
    # J = I - h (ad_w1 diag(I) - ad_L1), with ad_a[c, b] the coefficient of e_c in a x e_b
    for i in range(K):
        for j in range(K):
            J[i, j] = 0.0
    for t in range(T_COMM_A.shape[0]):
        a_ = T_COMM_A[t]
        b_ = T_COMM_B[t]
        c_ = T_COMM_C[t]
        v = T_COMM_V[t]
        J[c_, b_] += (w1[a_] * v) * inertia[b_] - L1[a_] * v
    for i in range(K):
        for j in range(K):
            J[i, j] *= -dt
        J[i, i] += inertia[i]
    dw = ws[11]
    _solve(J, f, dw)
    for i in range(K):
        w2[i] = w1[i] - dw[i]
    # turn L1 by the Newton estimate exactly, then keep the energy from rising
    mb = ws[12]
    for i in range(K):
        mb[i] = -dt * w2[i]
    R = ws[13]
    rotor_exp(mb, -0.5, R, ws)
    RB = ws[14]
    g_eb(R, L1, RB)
    L2 = ws[15]
    g_eeb(RB, R, L2)
    E1 = 0.0
    E2 = 0.0
    for i in range(K):
        w2[i] = L2[i] / inertia[i]
        E1 += L1[i] * w1[i]
        E2 += L2[i] * w2[i]
    s = np.sqrt(min(1.0, E1 / (E2 if E2 > 0.0 else 1.0)))
    for i in range(K):
        w2[i] *= s


@njit(cache=True, error_model="numpy")
def accelerate(kind, awake, inv_mass, force, linear_damping, velocity, inv_inertia, rotor, principal_rotor,
               rotation, torque, angular_damping, angular_velocity, gravity, dt, mode):
    """Gravity, forces, damping and the gyroscopic step of every awake dynamic body, in place."""
    ws = _workspace()
    J = np.empty((K, K))
    C = np.empty((K, K))
    MQ = np.empty((N, N))
    RQ = ws[16]
    wb = ws[17]
    tb = ws[18]
    inertia = ws[19]
    w2 = ws[20]
    locked = np.empty(K, np.bool_)
    for i in range(kind.shape[0]):
        if kind[i] != DYNAMIC or not awake[i]:
            continue
        im = inv_mass[i]
        damp = 1.0 / (1.0 + dt * linear_damping[i])
        for t in range(N):
            velocity[i, t] = (velocity[i, t] + dt * (gravity[t] + im * force[i, t])) * damp
        rotating = False
        for p in range(K):
            if inv_inertia[i, p] > 0.0:
                rotating = True
        if not rotating:
            continue
        # the second compound of the world-from-principal rotation: of the stored rotation
        # matrix (the rotor's, kept in step with it by advance_poses) when the principal frame is
        # the body frame, else of the matrix of R Q
        if principal_rotor[i, 0] == 1.0:
            compound_of_matrix(rotation[i], C)
        else:
            rotor_mul(rotor[i], principal_rotor[i], RQ)
            rotor_to_matrix(RQ, MQ)
            compound_of_matrix(MQ, C)
        for p in range(K):
            s1 = 0.0
            s2 = 0.0
            for r in range(K):
                s1 += angular_velocity[i, r] * C[r, p]
                s2 += torque[i, r] * C[r, p]
            lk = inv_inertia[i, p] <= 0.0
            locked[p] = lk
            inertia[p] = 1.0 if lk else 1.0 / inv_inertia[i, p]
            wb[p] = 0.0 if lk else s1
            tb[p] = 0.0 if lk else s2
        gyroscopic(wb, inertia, tb, dt, mode, w2, ws, J)
        adamp = 1.0 / (1.0 + dt * angular_damping[i])
        for p in range(K):
            if locked[p]:
                w2[p] = 0.0
            w2[p] *= adamp
        for r in range(K):
            s = 0.0
            for p in range(K):
                s += C[r, p] * w2[p]
            angular_velocity[i, r] = s


@njit(cache=True, error_model="numpy")
def _move_body(i, dx, B, local_centroid, position, rotor, rotation, ws, M):
    """Move body i: centre of mass by dx (n,), orientation by the rotor exp(-B/2) (B (k,)), then one
    renormalisation step and the rotation matrix; the body origin follows the centre of mass
    (scratch rows 0-7 and 17-19 of ws, M (n, n))."""
    dR = ws[17]
    R = ws[18]
    com = ws[19]
    for t in range(N):
        s = 0.0
        for j in range(N):
            s += rotation[i, t, j] * local_centroid[i, j]
        com[t] = position[i, t] + s + dx[t]
    rotor_exp(B, -0.5, dR, ws)
    rotor_mul(dR, rotor[i], R)
    rotor_normalize(R, ws)
    rotor_to_matrix(R, M)
    for e in range(E):
        rotor[i, e] = R[e]
    for t in range(N):
        s = 0.0
        for j in range(N):
            rotation[i, t, j] = M[t, j]
            s += M[t, j] * local_centroid[i, j]
        position[i, t] = com[t] - s


@njit(cache=True, error_model="numpy")
def advance_poses(kind, awake, velocity, angular_velocity, local_centroid, position, rotor, rotation, dt):
    """Move every awake dynamic or kinematic body by its velocities over dt, in place."""
    ws = _workspace()
    B = ws[16]
    dx = ws[20]
    M = np.empty((N, N))
    for i in range(kind.shape[0]):
        if (kind[i] != DYNAMIC and kind[i] != KINEMATIC) or not awake[i]:
            continue
        for t in range(N):
            dx[t] = dt * velocity[i, t]
        for p in range(K):
            B[p] = dt * angular_velocity[i, p]
        _move_body(i, dx, B, local_centroid, position, rotor, rotation, ws, M)


@njit(cache=True, error_model="numpy")
def push_poses(rows, dX, local_centroid, position, rotor, rotation):
    """Move bodies ``rows`` by displacements dX (R, n + k): centre of mass by dx, orientation by the
    rotor exp(-dB/2) (the solver's position push)."""
    ws = _workspace()
    M = np.empty((N, N))
    for q in range(rows.shape[0]):
        busy = False
        for t in range(N + K):
            if dX[q, t] != 0.0:
                busy = True
        if busy:
            _move_body(rows[q], dX[q, :N], dX[q, N:], local_centroid, position, rotor, rotation, ws, M)


def warm_up():
    """Compile every specialisation the engine calls (two bodies, each mode)."""
    kind = np.zeros(2, np.int8)
    awake = np.ones(2, np.bool_)
    f2 = np.ones(2)
    v = np.zeros((2, N))
    w = np.full((2, K), 0.1)
    R = np.zeros((2, E))
    R[:, 0] = 1.0
    rot = np.zeros((2, N, N))
    rot[:] = np.eye(N)
    for mode in (MODE_NONE, MODE_EXPLICIT, MODE_IMPLICIT):
        accelerate(kind, awake, f2, v.copy(), f2 * 0.0, v, np.ones((2, K)), R, R.copy(), rot, w.copy() * 0.0,
                   f2 * 0.0, w, np.zeros(N), 1.0 / 60.0, mode)
    advance_poses(kind, awake, v, w, v.copy(), v.copy(), R, rot, 1.0 / 60.0)
    push_poses(np.arange(2, dtype=np.int64), np.full((2, N + K), 1e-3), v.copy(), v.copy(), R, rot)
