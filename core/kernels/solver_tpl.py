"""Compiled contact solver: sequential impulses over point rows, one module per dimension.

The template of the ``solver`` kernel family (see ``ndrigid.core.kernels``). It states, as plain
loops over rows, what ``ndrigid.core.dynamics.solver._solve_rows`` does with batches of numpy
calls under the default ``"point"`` batching, in the same row order:

* the rows are coloured greedily by decreasing priority (the rank of the salted key), which gives
  the same colours as the numpy path's rounds of local maxima (both compute, colour by colour,
  the lexicographically first maximal independent set in priority order), and sorted by
  (colour, manifold, row);
* each pass then visits the rows in that order, one at a time. Inside a colour no dynamic body
  appears twice, so visiting its rows one by one gives exactly the batch's simultaneous update;
  the results agree with the numpy path up to the order of floating-point sums.

The module docstring of ``ndrigid.core.dynamics.solver`` states the method (rows, warm start,
soft rows, relaxation, restitution, time of impact, the push). Everything dimension-specific is
a module constant, so numba sees fixed trip counts.
"""

import numpy as np
from numba import njit

# --- constants of the dimension (generated) ---
N = 3
K = 3
PAIRS = np.array([(0, 1), (0, 2), (1, 2)], dtype=np.int64).reshape(3, 2)

W = N + K
W2 = 2 * W
T = N - 1


@njit(cache=True)
def colour_rows(a, b, sa, sb, key, n_bodies):
    """Greedy colouring (M,) of rows by decreasing priority (the stable rank of ``key``).

    A row takes the current colour unless a body with a slot (``sa``/``sb``) already holds a row
    of that colour; each colour is one sweep over the rows still uncoloured.
    """
    M = a.shape[0]
    order = np.argsort(key, kind="mergesort")
    rem = np.empty(M, np.int64)
    for t in range(M):
        rem[t] = order[M - 1 - t]
    colour = np.full(M, -1, np.int64)
    used = np.zeros(n_bodies, np.bool_)
    touched = np.empty(2 * M, np.int64)
    nrem = M
    c = 0
    while nrem > 0:
        nt = 0
        keep = 0
        for t in range(nrem):
            i = rem[t]
            ia = a[i]
            ib = b[i]
            if (sa[i] and used[ia]) or (sb[i] and used[ib]):
                rem[keep] = i
                keep += 1
                continue
            colour[i] = c
            if sa[i]:
                used[ia] = True
                touched[nt] = ia
                nt += 1
            if sb[i]:
                used[ib] = True
                touched[nt] = ib
                nt += 1
        for t in range(nt):
            used[touched[t]] = False
        nrem = keep
        c += 1
    return colour


@njit(cache=True)
def _invert(A, out):
    """Inverse of a small symmetric positive definite matrix (Gauss-Jordan, partial pivoting)."""
    m = A.shape[0]
    M = np.empty((m, 2 * m))
    for i in range(m):
        for j in range(m):
            M[i, j] = A[i, j]
            M[i, m + j] = 1.0 if i == j else 0.0
    for col in range(m):
        piv = col
        best = abs(M[col, col])
        for r in range(col + 1, m):
            if abs(M[r, col]) > best:
                best = abs(M[r, col])
                piv = r
        if piv != col:
            for j in range(2 * m):
                tmp = M[col, j]
                M[col, j] = M[piv, j]
                M[piv, j] = tmp
        p = M[col, col]
        for j in range(2 * m):
            M[col, j] /= p
        for r in range(m):
            if r != col:
                f = M[r, col]
                if f != 0.0:
                    for j in range(2 * m):
                        M[r, j] -= f * M[col, j]
    for i in range(m):
        for j in range(m):
            out[i, j] = M[i, m + j]


@njit(cache=True)
def _pass(biased, A, B, G, H, k01, kti, mu, mu_tol, sl, lam_n, lam_t, max_n, bias_on, keep_on, gain_on,
          bias_off, gain_off, X, xab, V, dl, vt, nt):
    """One Gauss-Seidel pass over the sorted rows (normal row, then the friction block)."""
    M = A.shape[0]
    for q in range(M):
        ia = A[q]
        ib = B[q]
        for j in range(W):
            xab[j] = X[ia, j]
            xab[W + j] = X[ib, j]
        for d in range(N):
            s = 0.0
            for j in range(W2):
                s += G[q, d, j] * xab[j]
            V[d] = s
        old_n = lam_n[q]
        if biased:
            new_n = keep_on[q] * old_n - gain_on[q] * (V[0] + bias_on[q])
        else:
            new_n = old_n - gain_off[q] * (V[0] + bias_off[q])
        if new_n < 0.0:
            new_n = 0.0
        dl[0] = new_n - old_n
        lam_n[q] = new_n
        if new_n > max_n[q]:
            max_n[q] = new_n
        for r in range(T):
            vt[r] = V[1 + r] + k01[q, r] * dl[0]
        norm2 = 0.0
        for r in range(T):
            s = 0.0
            for u in range(T):
                s += kti[q, r, u] * vt[u]
            nt[r] = lam_t[q, r] - s
            norm2 += nt[r] * nt[r]
        norm = np.sqrt(norm2)
        if norm > mu_tol[q] * new_n:
            radius = mu[q] * new_n
            f = radius / norm
            for r in range(T):
                nt[r] *= f
            if sl[q]:
                v2 = 0.0
                for r in range(T):
                    v2 += vt[r] * vt[r]
                vnorm = np.sqrt(v2)
                if vnorm > 1e-9:
                    g = radius / vnorm
                    for r in range(T):
                        nt[r] = -g * vt[r]
        for r in range(T):
            dl[1 + r] = nt[r] - lam_t[q, r]
            lam_t[q, r] = nt[r]
        for j in range(W):
            sa_ = 0.0
            sb_ = 0.0
            for d in range(N):
                sa_ += dl[d] * H[q, d, j]
                sb_ += dl[d] * H[q, d, W + j]
            X[ia, j] = xab[j] + sa_
            X[ib, j] = xab[W + j] + sb_


@njit(cache=True)
def _spec_left(A, B, G, sep, vn0, fast, X, dt):
    """How much farther than its gap a speculative row that closed faster than ``fast`` before the
    solve would close within the step, m (0: none)."""
    top = 0.0
    for q in range(A.shape[0]):
        if sep[q] <= 0.0 or vn0[q] >= -fast:
            continue
        s = 0.0
        for j in range(W):
            s += G[q, 0, j] * X[A[q], j] + G[q, 0, W + j] * X[B[q], j]
        v = -s * dt - sep[q]
        if v > top:
            top = v
    return top


@njit(cache=True)
def _push_left(A, B, G, lam_n, X):
    """Largest separating normal speed of a row that holds a normal impulse (0 when none)."""
    top = 0.0
    found = False
    for q in range(A.shape[0]):
        if lam_n[q] <= 0.0:
            continue
        s = 0.0
        for j in range(W):
            s += G[q, 0, j] * X[A[q], j]
        s2 = 0.0
        for j in range(W):
            s2 += G[q, 0, W + j] * X[B[q], j]
        v = s + s2
        if not found or v > top:
            top = v
            found = True
    return top if found else 0.0


@njit(cache=True)
def _shock(A, B, sA, sB, col, lam_n, lam_t, mu, bias_off, ka0, kb0, G, H, X, ratio_min, npasses):
    """Shock propagation on the rows holding a light body under a much heavier one and the rows
    beneath them (solver.py, _shock_sweep: same rows, same order); changes X in place."""
    M = A.shape[0]
    NB = X.shape[0]
    ratio = np.empty(M)
    any_c = False
    for q in range(M):
        hi = max(ka0[q], kb0[q])
        lo = max(min(ka0[q], kb0[q]), 1e-300)
        ratio[q] = hi / lo
        if lam_n[q] > 0.0 and sA[q] and sB[q] and ratio[q] > ratio_min:
            any_c = True
    if not any_c:
        return
    big = NB + 1
    level = np.full(NB, big, np.int64)
    for q in range(M):
        if not sA[q]:
            level[A[q]] = 0
        if not sB[q]:
            level[B[q]] = 0
    new = level.copy()
    for _ in range(NB):
        for i in range(NB):
            new[i] = level[i]
        for q in range(M):
            if lam_n[q] > 0.0:
                if level[A[q]] + 1 < new[B[q]]:
                    new[B[q]] = level[A[q]] + 1
                if level[B[q]] + 1 < new[A[q]]:
                    new[A[q]] = level[B[q]] + 1
        changed = False
        for i in range(NB):
            if new[i] != level[i]:
                changed = True
            level[i] = new[i]
        if not changed:
            break
    step = np.zeros(M, np.bool_)
    take = np.zeros(M, np.bool_)
    low_b = np.empty(M, np.int64)
    up_b = np.empty(M, np.int64)
    under = np.zeros(NB, np.bool_)
    n_take = 0
    for q in range(M):
        la = level[A[q]]
        lb = level[B[q]]
        low_b[q] = A[q] if la < lb else B[q]
        up_b[q] = B[q] if la < lb else A[q]
        step[q] = lam_n[q] > 0.0 and la != lb and min(la, lb) < big
        if step[q] and sA[q] and sB[q] and ratio[q] > ratio_min:
            take[q] = True
            under[low_b[q]] = True
            n_take += 1
    if n_take == 0:
        return
    grew = True
    while grew:
        grew = False
        more = np.zeros(M, np.bool_)
        for q in range(M):
            if step[q] and not take[q] and under[up_b[q]]:
                more[q] = True
                grew = True
        for q in range(M):
            if more[q]:
                take[q] = True
                under[low_b[q]] = True
                n_take += 1
    # visiting order: lowest level first, then colour, then row order (stable)
    ncol = 0
    for q in range(M):
        if col[q] + 1 > ncol:
            ncol = col[q] + 1
    rows = np.empty(n_take, np.int64)
    gkey = np.empty(n_take, np.int64)
    t = 0
    for q in range(M):
        if take[q]:
            rows[t] = q
            gkey[t] = min(level[A[q]], level[B[q]]) * ncol + col[q]
            t += 1
    rows = rows[np.argsort(gkey, kind="mergesort")]
    # per taken row: the upper side's effective mass (lower body fixed)
    Ku = np.empty((n_take, N, N))
    kti = np.empty((n_take, T, T))
    Kt = np.empty((T, T))
    Ki = np.empty((T, T))
    upper_lo = np.empty(n_take, np.int64)
    for t in range(n_take):
        q = rows[t]
        lo = W if level[A[q]] < level[B[q]] else 0
        upper_lo[t] = lo
        for d in range(N):
            for l2 in range(N):
                s = 0.0
                for j in range(W):
                    s += G[q, d, lo + j] * H[q, l2, lo + j]
                Ku[t, d, l2] = s
        for r in range(T):
            for u in range(T):
                Kt[r, u] = Ku[t, 1 + r, 1 + u]
        _invert(Kt, Ki)
        for r in range(T):
            for u in range(T):
                kti[t, r, u] = Ki[r, u]
    acc = np.zeros((n_take, N))
    V = np.empty(N)
    vt = np.empty(T)
    lt = np.empty(T)
    dl = np.empty(N)
    for _ in range(npasses):
        for t in range(n_take):
            q = rows[t]
            ia = A[q]
            ib = B[q]
            for d in range(N):
                s = 0.0
                for j in range(W):
                    s += G[q, d, j] * X[ia, j]
                s2 = 0.0
                for j in range(W):
                    s2 += G[q, d, W + j] * X[ib, j]
                V[d] = s + s2
            new_n = acc[t, 0] - (V[0] + bias_off[q]) / Ku[t, 0, 0]
            if new_n < 0.0:
                new_n = 0.0
            dn = new_n - acc[t, 0]
            for r in range(T):
                vt[r] = V[1 + r] + Ku[t, 0, 1 + r] * dn
            nrm2 = 0.0
            for r in range(T):
                s = 0.0
                for u in range(T):
                    s += kti[t, r, u] * vt[u]
                lt[r] = lam_t[q, r] + acc[t, 1 + r] - s
                nrm2 += lt[r] * lt[r]
            nrm = np.sqrt(nrm2)
            radius = mu[q] * (lam_n[q] + new_n)
            f = radius / nrm if nrm > radius else 1.0
            dl[0] = dn
            acc[t, 0] = new_n
            for r in range(T):
                nt_ = lt[r] * f - lam_t[q, r]
                dl[1 + r] = nt_ - acc[t, 1 + r]
                acc[t, 1 + r] = nt_
            body = ib if upper_lo[t] == W else ia
            lo = upper_lo[t]
            for j in range(W):
                s = 0.0
                for d in range(N):
                    s += dl[d] * H[q, d, lo + j]
                X[body, j] += s


@njit(cache=True)
def _couples(A, B, D, inv_I, roll_c, spin_c, load, man, nman, X, npasses):
    """Rolling resistance and spin friction at single-point contacts that carried a load last step
    (solver.py, _contact_couples: same rows, same order; ``roll_c``, ``spin_c`` the rows' combined
    coefficients, m, in sorted order); changes X in place."""
    per_man = np.zeros(nman, np.int64)
    for q in range(A.shape[0]):
        per_man[man[q]] += 1
    nsel = 0
    for q in range(A.shape[0]):
        if per_man[man[q]] == 1 and load[q] > 0.0:
            nsel += 1
    if nsel == 0:
        return
    sel = np.empty(nsel, np.int64)
    t = 0
    for q in range(A.shape[0]):
        if per_man[man[q]] == 1 and load[q] > 0.0:
            sel[t] = q
            t += 1
    M = nsel
    # planes of the contact frame: n ^ t_i (rolling), then t_i ^ t_j (spin)
    first = np.empty(K, np.int64)
    second = np.empty(K, np.int64)
    c = 0
    for i in range(T):
        first[c] = 0
        second[c] = 1 + i
        c += 1
    for i in range(T):
        for j in range(i + 1, T):
            first[c] = 1 + i
            second[c] = 1 + j
            c += 1
    S = np.empty((M, K, K))
    RA = np.empty((M, K, K))
    RB = np.empty((M, K, K))
    Ksi = np.empty((M, K, K))
    Ks = np.empty((K, K))
    Ki = np.empty((K, K))
    for t in range(M):
        q = sel[t]
        for d in range(K):
            f0 = first[d]
            f1 = second[d]
            for p in range(K):
                p0 = PAIRS[p, 0]
                p1 = PAIRS[p, 1]
                S[t, d, p] = D[q, f0, p0] * D[q, f1, p1] - D[q, f0, p1] * D[q, f1, p0]
        for d in range(K):
            for p in range(K):
                sa_ = 0.0
                sb_ = 0.0
                for u in range(K):
                    sa_ += inv_I[A[q], p, u] * S[t, d, u]
                    sb_ += inv_I[B[q], p, u] * S[t, d, u]
                RA[t, d, p] = sa_
                RB[t, d, p] = sb_
        for d in range(K):
            for e in range(K):
                s_ = 0.0
                for p in range(K):
                    s_ += S[t, d, p] * (RA[t, e, p] + RB[t, e, p])
                Ks[d, e] = s_
        _invert(Ks, Ki)
        for d in range(K):
            for e in range(K):
                Ksi[t, d, e] = Ki[d, e]
    acc = np.zeros((M, K))
    vs = np.empty(K)
    new = np.empty(K)
    for _ in range(npasses):
        for t in range(M):
            q = sel[t]
            ia = A[q]
            ib = B[q]
            for d in range(K):
                s_ = 0.0
                for p in range(K):
                    s_ += S[t, d, p] * (X[ib, N + p] - X[ia, N + p])
                vs[d] = s_
            for d in range(K):
                s_ = 0.0
                for e in range(K):
                    s_ += Ksi[t, d, e] * vs[e]
                new[d] = acc[t, d] - s_
            # rolling part (the first T planes) and spin part, each on its own ball
            for part in range(2):
                lo = 0 if part == 0 else T
                hi = T if part == 0 else K
                lim = roll_c[q] * load[q] if part == 0 else spin_c[q] * load[q]
                nrm2 = 0.0
                for d in range(lo, hi):
                    nrm2 += new[d] * new[d]
                nrm = np.sqrt(nrm2)
                if nrm > lim:
                    f = lim / nrm
                    for d in range(lo, hi):
                        new[d] *= f
            for p in range(K):
                s_ = 0.0
                s2 = 0.0
                for d in range(K):
                    dd = new[d] - acc[t, d]
                    s_ += dd * RA[t, d, p]
                    s2 += dd * RB[t, d, p]
                X[ia, N + p] -= s_
                X[ib, N + p] += s2
            for d in range(K):
                acc[t, d] = new[d]


@njit(cache=True)
def solve(a_in, b_in, sa_in, sb_in, key, man_in, normal, point, depth, mu_k, mu_s, rest, slides_in,
          lam_n_in, lam_t_in, X, inv_m, inv_I, com, dt, passes, bias_free, rate, mscale, iscale, stiff,
          allowance, cap, bounce_thr, stick_tol, slip_speed, relax_tol, relax_extra, relax_push, spec_tol,
          spec_fast, shock_ratio,
          shock_passes, rolling_in, spin_in, couple_passes, tilt_dead, grav_n):
    """Solve M contact rows in place on the body state X (N_bodies, n + k).

    Returns (normal impulses (M,), world tangent impulses (M, n), sliding flags (M,), push
    (N_bodies, n + k)), the impulses in the given row order; X holds the final velocities.
    """
    Mr = a_in.shape[0]
    NB = X.shape[0]
    colour = colour_rows(a_in, b_in, sa_in, sb_in, key, NB)
    maxman = 0
    for i in range(Mr):
        if man_in[i] > maxman:
            maxman = man_in[i]
    ck = colour * (maxman + 1) + man_in
    perm = np.argsort(ck, kind="mergesort")
    M = Mr

    A = np.empty(M, np.int64)
    B = np.empty(M, np.int64)
    man = np.empty(M, np.int64)
    D = np.empty((M, N, N))
    G = np.empty((M, N, W2))
    H = np.empty((M, N, W2))
    k01 = np.empty((M, T))
    kti = np.empty((M, T, T))
    mass_n = np.empty(M)
    unsplit_k = np.empty(M)
    ka0 = np.empty(M)
    kb0 = np.empty(M)
    sA = np.empty(M, np.bool_)
    sB = np.empty(M, np.bool_)
    row_col = np.empty(M, np.int64)
    mu = np.empty(M)
    mu_tol = np.empty(M)
    roll_c = np.empty(M)
    spin_c = np.empty(M)
    sl = np.empty(M, np.bool_)
    sep = np.empty(M)
    e = np.empty(M)
    bias_on = np.empty(M)
    keep_on = np.empty(M)
    gain_on = np.empty(M)
    bias_off = np.empty(M)
    vn0 = np.empty(M)
    tau = np.zeros(M)
    vn_toi = np.empty(M)
    targ = np.empty(M)
    gq = np.empty(M)
    lam_n = np.empty(M)
    lam_t = np.empty((M, T))
    may_b = np.empty(M, np.bool_)

    v = np.empty(N)
    rr = np.empty(N)
    Jm = np.empty((N, K))
    Km = np.empty((N, N))
    Kt = np.empty((T, T))
    Ki = np.empty((T, T))
    for q in range(M):
        i = perm[q]
        ia = a_in[i]
        ib = b_in[i]
        A[q] = ia
        B[q] = ib
        sA[q] = sa_in[i]
        sB[q] = sb_in[i]
        row_col[q] = colour[i]
        man[q] = man_in[i]
        # directions: the normal, then the Householder tangent basis
        j = 0
        best = -1.0
        for t in range(N):
            D[q, 0, t] = normal[i, t]
            if abs(normal[i, t]) > best:
                best = abs(normal[i, t])
                j = t
        s = 1.0 if normal[i, j] >= 0.0 else -1.0
        vv = 0.0
        for t in range(N):
            v[t] = normal[i, t]
        v[j] -= s
        for t in range(N):
            vv += v[t] * v[t]
        coef = 2.0 / vv if vv > 1e-300 else 0.0
        r = 0
        for col in range(N):
            if col == j:
                continue
            for t in range(N):
                D[q, 1 + r, t] = (1.0 if t == col else 0.0) - coef * v[col] * v[t]
            r += 1
        # Jacobians and responses of both sides
        for side in range(2):
            body = ia if side == 0 else ib
            sign = -1.0 if side == 0 else 1.0
            lo = 0 if side == 0 else W
            im = inv_m[body]
            for t in range(N):
                rr[t] = point[i, t] - com[body, t]
            for d in range(N):
                for p in range(K):
                    p0 = PAIRS[p, 0]
                    p1 = PAIRS[p, 1]
                    Jm[d, p] = rr[p0] * D[q, d, p1] - rr[p1] * D[q, d, p0]
            for d in range(N):
                for t in range(N):
                    G[q, d, lo + t] = sign * D[q, d, t]
                    H[q, d, lo + t] = D[q, d, t] * (sign * im)
                for p in range(K):
                    s2 = 0.0
                    for u in range(K):
                        s2 += inv_I[body, p, u] * Jm[d, u]
                    G[q, d, lo + N + p] = sign * Jm[d, p]
                    H[q, d, lo + N + p] = sign * s2
        # effective mass K = G_A H_A^T + G_B H_B^T
        k_a00 = 0.0
        k_b00 = 0.0
        for d in range(N):
            for l2 in range(N):
                sa_ = 0.0
                sb_ = 0.0
                for t in range(W):
                    sa_ += G[q, d, t] * H[q, l2, t]
                    sb_ += G[q, d, W + t] * H[q, l2, W + t]
                Km[d, l2] = sa_ + sb_
                if d == 0 and l2 == 0:
                    k_a00 = sa_
                    k_b00 = sb_
        mn = 1.0 / Km[0, 0]
        mass_n[q] = mn
        unsplit_k[q] = k_a00 + k_b00
        ka0[q] = k_a00
        kb0[q] = k_b00
        unsplit = unsplit_k[q] * mn
        for r in range(T):
            k01[q, r] = Km[0, 1 + r]
            for u in range(T):
                Kt[r, u] = Km[1 + r, 1 + u]
        _invert(Kt, Ki)
        for r in range(T):
            for u in range(T):
                kti[q, r, u] = Ki[r, u]
        # friction: kinetic where the point slid last step, else the larger static coefficient
        sl[q] = slides_in[i]
        if sl[q]:
            mu[q] = mu_k[i]
        else:
            mu[q] = max(mu_s[i], mu_k[i])
        mu_tol[q] = mu[q] * (1.0 + stick_tol)
        roll_c[q] = rolling_in[i]
        spin_c[q] = spin_in[i]
        # bias and softness
        sp = -depth[i]
        sep[q] = sp
        spec = sp > 0.0
        soft = depth[i] > 0.0
        keep_on[q] = 1.0 - (iscale * unsplit if soft else 0.0)
        gain_on[q] = mn * (mscale if soft else 1.0)
        bias_off[q] = sp / dt if spec else 0.0
        # warm impulses in tangent coordinates
        lam_n[q] = lam_n_in[i]
        for r in range(T):
            s3 = 0.0
            for t in range(N):
                s3 += D[q, 1 + r, t] * lam_t_in[i, t]
            lam_t[q, r] = s3
        # normal speed before the solve (for restitution)
        s4 = 0.0
        s5 = 0.0
        for t in range(W):
            s4 += G[q, 0, t] * X[ia, t]
            s5 += G[q, 0, W + t] * X[ib, t]
        vn0[q] = s4 + s5
        e[q] = rest[i]
        # approach speed at the time of impact and the bounce's target (solver.py, step 5)
        g = grav_n[i]
        gq[q] = g
        if spec:
            closing = -vn0[q]
            if closing > 0.0:
                # (closing x dt may underflow to zero for a rounding-noise speed: the numpy path's
                # floor of 1e-300 keeps tau finite, and 1.0 for such a row)
                tq = sp / max(closing * dt, 1e-300)
                tau[q] = tq if tq < 1.0 else 1.0
            vn_toi[q] = vn0[q] + g * (tau[q] - 0.5)
            targ[q] = -e[q] * vn_toi[q] + g * (0.5 - tau[q])
        else:
            vn_toi[q] = vn0[q] - g
            targ[q] = -e[q] * vn_toi[q] + 0.5 * g
        may_b[q] = (e[q] > 0.0) and (vn_toi[q] < -bounce_thr)

    # the spring rests at the allowance less the mean static deflection of its manifold's
    # overlapping points under the warm-started load (solver.py, _load_deflection)
    nman = maxman + 1
    # and less its tilt: the deepest overlap of those points less their mean (_tilt_spread)
    defl_sum = np.zeros(nman)
    defl_cnt = np.zeros(nman)
    depth_sum = np.zeros(nman)
    depth_max = np.zeros(nman)
    for q in range(M):
        if sep[q] < 0.0:
            defl_sum[man[q]] += lam_n[q] * unsplit_k[q] / stiff
            defl_cnt[man[q]] += 1.0
            depth_sum[man[q]] += -sep[q]
            if -sep[q] > depth_max[man[q]]:
                depth_max[man[q]] = -sep[q]
    deep = False
    for q in range(M):
        sp = sep[q]
        if sp > 0.0:
            bias_on[q] = sp / dt
        else:
            mq = man[q]
            cnt = max(defl_cnt[mq], 1.0)
            tilt = max(depth_max[mq] - depth_sum[mq] / cnt - tilt_dead, 0.0)
            rest_at = allowance - defl_sum[mq] / cnt - tilt
            push = rate * min(sp + rest_at, 0.0)
            if push < -cap:
                push = -cap
            bias_on[q] = push
            if push < -relax_push:
                deep = True

    # warm start: every row's accumulated impulses once, side A then side B
    for side in range(2):
        lo = 0 if side == 0 else W
        for q in range(M):
            body = A[q] if side == 0 else B[q]
            for t in range(W):
                s6 = lam_n[q] * H[q, 0, lo + t]
                for r in range(T):
                    s6 += lam_t[q, r] * H[q, 1 + r, lo + t]
                X[body, t] += s6
    max_n = lam_n.copy()
    lam_warm = lam_n.copy()  # last step's load: the couples' limits

    xab = np.empty(W2)
    Vs = np.empty(N)
    dl = np.empty(N)
    vt = np.empty(T)
    nt = np.empty(T)
    for _ in range(passes):
        _pass(True, A, B, G, H, k01, kti, mu, mu_tol, sl, lam_n, lam_t, max_n, bias_on, keep_on, gain_on,
              bias_off, mass_n, X, xab, Vs, dl, vt, nt)
    # more biased passes while a fast speculative row would still close past its gap (solver.py)
    extra = 0
    while (bias_free > 0 and extra < relax_extra
           and _spec_left(A, B, G, sep, vn0, spec_fast, X, dt) > spec_tol):
        _pass(True, A, B, G, H, k01, kti, mu, mu_tol, sl, lam_n, lam_t, max_n, bias_on, keep_on, gain_on,
              bias_off, mass_n, X, xab, Vs, dl, vt, nt)
        extra += 1
    X_biased = X.copy()
    for _ in range(bias_free):
        _pass(False, A, B, G, H, k01, kti, mu, mu_tol, sl, lam_n, lam_t, max_n, bias_on, keep_on, gain_on,
              bias_off, mass_n, X, xab, Vs, dl, vt, nt)
    # more bias-free passes while a row holding an impulse still separates faster than relax_tol
    # (push velocity not yet taken out), at most relax_extra more
    extra = 0
    while deep and bias_free > 0 and extra < relax_extra and _push_left(A, B, G, lam_n, X) > relax_tol:
        _pass(False, A, B, G, H, k01, kti, mu, mu_tol, sl, lam_n, lam_t, max_n, bias_on, keep_on, gain_on,
              bias_off, mass_n, X, xab, Vs, dl, vt, nt)
        extra += 1

    # the push: what the bias moved, taken out of the velocities by the bias-free passes
    push = np.empty((NB, W))
    for i in range(NB):
        for t in range(W):
            push[i, t] = dt * (X_biased[i, t] - X[i, t])

    if bias_free > 0:
        _shock(A, B, sA, sB, row_col, lam_n, lam_t, mu, bias_off, ka0, kb0, G, H, X, shock_ratio,
               shock_passes)
    couples_on = False
    for q in range(M):
        if roll_c[q] > 0.0 or spin_c[q] > 0.0:
            couples_on = True
            break
    if couples_on:
        _couples(A, B, D, inv_I, roll_c, spin_c, lam_warm, man, nman, X, couple_passes)

    # sliding, decided per manifold: all its friction at the limit and a slip left after the solve
    max_slip2 = np.zeros(nman)
    total_t = np.zeros(nman)
    limit = np.zeros(nman)
    for q in range(M):
        ia = A[q]
        ib = B[q]
        sl2 = 0.0
        for r in range(T):
            s7 = 0.0
            for t in range(W):
                s7 += G[q, 1 + r, t] * X[ia, t]
            s8 = 0.0
            for t in range(W):
                s8 += G[q, 1 + r, W + t] * X[ib, t]
            sv = s7 + s8
            sl2 += sv * sv
        mq = man[q]
        if sl2 > max_slip2[mq]:
            max_slip2[mq] = sl2
        l2 = 0.0
        for r in range(T):
            l2 += lam_t[q, r] * lam_t[q, r]
        total_t[mq] += np.sqrt(l2)
        limit[mq] += mu[q] * lam_n[q]

    # restitution: one pass over the rows that approached fast and met within the step
    n_toi = np.zeros(nman, np.int64)
    any_toi = False
    for q in range(M):
        if not (may_b[q] and max_n[q] > 0.0):
            continue
        ia = A[q]
        ib = B[q]
        s9 = 0.0
        s10 = 0.0
        for t in range(W):
            s9 += G[q, 0, t] * X[ia, t]
            s10 += G[q, 0, W + t] * X[ib, t]
        vn = s9 + s10
        old = lam_n[q]
        new = old - mass_n[q] * (vn - targ[q])
        if new < 0.0:
            new = 0.0
        dln = new - old
        lam_n[q] = new
        for t in range(W):
            X[ia, t] += dln * H[q, 0, t]
            X[ib, t] += dln * H[q, 0, W + t]
        if sep[q] > 0.0:
            n_toi[man[q]] += 1
            any_toi = True
    # time of impact: a bounce on a speculative row is moved to where the bounce leaves the bodies
    if any_toi:
        dpos = np.zeros((NB, W))
        for side in range(2):
            lo = 0 if side == 0 else W
            for q in range(M):
                if not (may_b[q] and max_n[q] > 0.0 and sep[q] > 0.0):
                    continue
                body = A[q] if side == 0 else B[q]
                tq = tau[q]
                shift = e[q] * vn_toi[q] * tq * dt - sep[q] + 0.5 * gq[q] * tq * tq * dt
                p_pos = shift / unsplit_k[q] / n_toi[man[q]]
                for t in range(W):
                    dpos[body, t] += p_pos * H[q, 0, lo + t]
        for i in range(NB):
            for t in range(W):
                push[i, t] += dpos[i, t]

    # back to the given row order; tangent impulses as world vectors
    lam_n_out = np.empty(M)
    lam_t_out = np.empty((M, N))
    sliding = np.empty(M, np.bool_)
    for q in range(M):
        i = perm[q]
        lam_n_out[i] = lam_n[q]
        for t in range(N):
            s11 = 0.0
            for r in range(T):
                s11 += lam_t[q, r] * D[q, 1 + r, t]
            lam_t_out[i, t] = s11
        mq = man[q]
        at_limit = total_t[mq] >= (1.0 - 1e-3) * limit[mq]
        sliding[i] = at_limit and limit[mq] > 0.0 and max_slip2[mq] > slip_speed * slip_speed
    return lam_n_out, lam_t_out, sliding, push


def warm_up():
    """Compile every specialisation the engine calls (two bodies, one row)."""
    i1 = np.zeros(1, np.int64)
    b1 = np.ones(1, np.int64)
    f1 = np.zeros(1)
    yes = np.ones(1, np.bool_)
    no = np.zeros(1, np.bool_)
    nrm = np.zeros((1, N))
    nrm[0, N - 1] = 1.0
    X = np.zeros((2, W))
    inv_I = np.zeros((2, K, K))
    inv_I[1] = np.eye(K)
    solve(i1, b1, no, yes, i1.copy(), i1.copy(), nrm, np.zeros((1, N)), f1 + 0.01, f1 + 0.5, f1 + 0.5, f1,
          no.copy(), f1.copy(), np.zeros((1, N)), X, np.array([0.0, 1.0]), inv_I, np.zeros((2, N)),
          1.0 / 60.0, 2, 1, 10.0, 0.5, 0.5, 600.0, 0.005, 3.0, 1.0, 1e-9, 1e-2, 0.05, 2, 0.5, 0.001, 10.0,
          30.0, 1, f1 + 0.001, f1 + 0.004, 1, 0.0005, f1.copy())
