"""Compiled joint solve: warm start and Gauss-Seidel passes over joint rows, one module per dimension.

The template of the ``joints`` kernel family (see ``ndrigid.core.kernels``). It states, as plain
loops over joints, what ``warm_start`` and ``solve_passes`` in ``ndrigid.core.dynamics.joints`` do
with batched numpy calls on the rows built by ``joints.prepare`` (that module's docstring states
the method: block equality rows with their precomputed inverse effective mass ``Kinv``, scalar
limit, motor, distance and spring rows with bounds on the accumulated impulse):

* the warm start adds every joint's accumulated impulses through its response rows ``H`` and
  ``Hs``, first to the A sides in joint order, then to the B sides (the numpy path's two
  ``np.add.at`` calls);
* each pass visits the joints in the stored order (sorted by colour). Inside a colour no dynamic
  body appears twice, so visiting its joints one by one gives exactly the colour's simultaneous
  update; the results agree with the numpy path up to the order of floating-point sums.

A slot that is off (``on``, ``on_s``) has a zero Jacobian, zero response and zero impulse (prepare
clears them, and ``Kinv`` holds an identity block there), so its update is exactly zero; the
kernel skips it. Row N of the state X is the world: it takes no impulse and is kept at zero.
"""

import numpy as np
from numba import njit

# --- constants of the dimension (generated) ---
N = 3
K = 3
PAIRS = np.array([(0, 1), (0, 2), (1, 2)], dtype=np.int64).reshape(3, 2)

W = N + K
W2 = 2 * W
R = N + K
S = 2  # SCALAR_ROWS of ndrigid.core.state.joints


@njit(cache=True)
def warm_start(a, b, H, Hs, lam, X):
    """Add every joint's accumulated impulses lam (J, R + S) to the state X (bodies + 1, W)."""
    J = a.shape[0]
    d = np.zeros((J, W2))
    for j in range(J):
        for c in range(W2):
            t = 0.0
            for r in range(R):
                t += lam[j, r] * H[j, r, c]
            u = 0.0
            for q in range(S):
                u += lam[j, R + q] * Hs[j, q, c]
            d[j, c] = t + u
    for j in range(J):
        ia = a[j]
        for c in range(W):
            X[ia, c] += d[j, c]
    for j in range(J):
        ib = b[j]
        for c in range(W):
            X[ib, c] += d[j, W + c]
    last = X.shape[0] - 1
    for c in range(W):
        X[last, c] = 0.0


@njit(cache=True)
def solve_passes(a, b, G, H, Kinv, bias, mscale, iscale, Gs, Hs, bias_s, lo, hi, ms_s, is_s, meff, lam,
                 on, on_s, X, passes):
    """``passes`` Gauss-Seidel passes over the joints in stored order: each joint's scalar rows one
    by one (clipped to [lo, hi]), then its block of equality rows solved with Kinv."""
    J = a.shape[0]
    last = X.shape[0] - 1
    # the used slots of each joint's block, once per call
    rows = np.empty((J, R), np.int64)
    count = np.zeros(J, np.int64)
    for j in range(J):
        m = 0
        for r in range(R):
            if on[j, r]:
                rows[j, m] = r
                m += 1
        count[j] = m
    xab = np.empty(W2)
    v = np.empty(R)
    dl = np.empty(R)
    for _ in range(passes):
        for j in range(J):
            ia = a[j]
            ib = b[j]
            for c in range(W):
                xab[c] = X[ia, c]
                xab[W + c] = X[ib, c]
            for q in range(S):
                if not on_s[j, q]:
                    continue
                cdot = 0.0
                for c in range(W2):
                    cdot += Gs[j, q, c] * xab[c]
                old = lam[j, R + q]
                new = old - ms_s[j, q] * meff[j, q] * (cdot + bias_s[j, q]) - is_s[j, q] * old
                new = min(max(new, lo[j, q]), hi[j, q])
                lam[j, R + q] = new
                step = new - old
                for c in range(W2):
                    xab[c] += step * Hs[j, q, c]
            m = count[j]
            if m > 0:
                for t in range(m):
                    r = rows[j, t]
                    cdot = 0.0
                    for c in range(W2):
                        cdot += G[j, r, c] * xab[c]
                    v[t] = cdot + bias[j, r]
                ms = mscale[j]
                ic = iscale[j]
                for t in range(m):
                    r = rows[j, t]
                    s = 0.0
                    for u in range(m):
                        s += Kinv[j, r, rows[j, u]] * v[u]
                    dl[t] = -ms * s - ic * lam[j, r]
                    lam[j, r] += dl[t]
                for t in range(m):
                    r = rows[j, t]
                    f = dl[t]
                    for c in range(W2):
                        xab[c] += f * H[j, r, c]
            for c in range(W):
                X[ia, c] = xab[c]
                X[ib, c] = xab[W + c]
            for c in range(W):
                X[last, c] = 0.0


@njit(cache=True)
def run(a, b, G, H, Kinv, bias, mscale, iscale, Gs, Hs, bias_s, lo, hi, ms_s, is_s, meff, lam, on, on_s, X,
        warm, passes):
    """The warm start (``warm``) and then ``passes`` passes, on X and lam in place."""
    if warm:
        warm_start(a, b, H, Hs, lam, X)
    solve_passes(a, b, G, H, Kinv, bias, mscale, iscale, Gs, Hs, bias_s, lo, hi, ms_s, is_s, meff, lam, on,
                 on_s, X, passes)


@njit(cache=True)
def position_errors(a, b, lin_mode, ang_on, scalar_mode, position, rotation, anchor_a, anchor_b, frame_a,
                    frame_b, across_a, min_len, max_len, lower, upper, C):
    """Position errors C (J, R + 1) of the joints at the bodies' current poses, as
    ``joint_positions._errors`` states them: the block's linear slots (lin_mode 1: the anchors'
    offset; 2: its parts across A's line, ``across_a`` in A's axes; 0: none), its angular slots
    (f_a . f_b of the frame pairs, where ``ang_on``) and the scalar position row (scalar_mode 1:
    a rod's or rope's length outside [min_len, max_len]; 2: a hinge angle outside [lower, upper]).
    Side b = the body count is the world (identity pose)."""
    J = a.shape[0]
    nb = position.shape[0]
    RA = np.empty((N, N))
    RB = np.empty((N, N))
    d = np.empty(N)
    for j in range(J):
        ia = a[j]
        ib = b[j]
        for r in range(N):
            for c in range(N):
                RA[r, c] = rotation[ia, r, c]
                RB[r, c] = rotation[ib, r, c] if ib < nb else (1.0 if r == c else 0.0)
        for r in range(N):
            sa = position[ia, r]
            sb = position[ib, r] if ib < nb else 0.0
            for c in range(N):
                sa += RA[r, c] * anchor_a[j, c]
                sb += RB[r, c] * anchor_b[j, c]
            d[r] = sb - sa
        for r in range(N + K + 1):
            C[j, r] = 0.0
        if lin_mode[j] == 1:
            for r in range(N):
                C[j, r] = d[r]
        elif lin_mode[j] == 2:
            for q in range(N - 1):
                t = 0.0
                for r in range(N):
                    ur = 0.0
                    for c in range(N):
                        ur += RA[r, c] * across_a[j, q, c]
                    t += ur * d[r]
                C[j, q] = t
        for p in range(K):
            if not ang_on[j, p]:
                continue
            t = 0.0
            for r in range(N):
                xa = 0.0
                xb = 0.0
                for c in range(N):
                    xa += RA[r, c] * frame_a[j, PAIRS[p, 0], c]
                    xb += RB[r, c] * frame_b[j, PAIRS[p, 1], c]
                t += xa * xb
            C[j, N + p] = t
        if scalar_mode[j] == 1:
            length = 0.0
            for r in range(N):
                length += d[r] * d[r]
            length = np.sqrt(length)
            C[j, N + K] = max(length - max_len[j], 0.0) + min(length - min_len[j], 0.0)
        elif scalar_mode[j] == 2:
            s1 = 0.0
            s0 = 0.0
            for r in range(N):
                x0 = 0.0
                x1 = 0.0
                y0 = 0.0
                for c in range(N):
                    x0 += RA[r, c] * frame_a[j, 0, c]
                    x1 += RA[r, c] * frame_a[j, 1, c]
                    y0 += RB[r, c] * frame_b[j, 0, c]
                s1 += x1 * y0
                s0 += x0 * y0
            th = np.arctan2(s1, s0)
            C[j, N + K] = max(th - upper[j], 0.0) + min(th - lower[j], 0.0)


def warm_up():
    """Compile every specialisation the engine calls (one joint between a body and the world)."""
    i0 = np.zeros(1, np.int64)
    i1 = np.ones(1, np.int64)
    G = np.zeros((1, R, W2))
    H = np.zeros((1, R, W2))
    Kinv = np.zeros((1, R, R))
    Kinv[0] = np.eye(R)
    Gs = np.zeros((1, S, W2))
    f1 = np.ones(1)
    fs = np.zeros((1, S))
    lam = np.zeros((1, R + S))
    on = np.zeros((1, R), np.bool_)
    on_s = np.zeros((1, S), np.bool_)
    X = np.zeros((2, W))
    run(i0, i1, G, H, Kinv, np.zeros((1, R)), f1, f1 - 1.0, Gs, Gs.copy(), fs, fs - np.inf, fs + np.inf,
        fs + 1.0, fs.copy(), fs.copy(), lam, on, on_s, X, True, 1)
    eye = np.eye(N).reshape(1, N, N)
    i8 = np.ones(1, np.int8)
    zn = np.zeros((1, N))
    position_errors(i0, i1, i8, np.ones((1, K), np.bool_), i8, zn, eye.copy(), zn, zn.copy(), eye.copy(),
                    eye.copy(), np.zeros((1, N - 1, N)), f1 - 1.0, f1, f1 - 2.0, f1, np.zeros((1, R + 1)))
