"""The contact solver: sequential impulses over batches of contact rows, in any dimension.

What one call of :func:`solve_contacts` does (Catto, "Iterative Dynamics with Temporal
Coherence", GDC 2005; "Soft Constraints", GDC 2011; the soft-step ordering of his 2024
"Solver2D" notes):

1. *Prepare.* Every contact point is one row with n directions: the normal d (from A to B) and an
   orthonormal basis T of the (n-1)-dimensional tangent space. With offsets r from the world
   centres of mass, the angular Jacobian of direction u is the bivector r ^ u (the speed of the
   point along u is ``u . (v + W r) = u . v + <B, r ^ u>``), and an impulse p at r changes the
   angular velocity by ``I^-1 (r ^ p)``. The n x n effective-mass matrix of a row is
   ``K = (1/m_A + 1/m_B) D D^T + J_A I_A^-1 J_A^T + J_B I_B^-1 J_B^T``; the normal uses the scalar
   ``1 / K_00``, friction the inverse of the (n-1) x (n-1) tangent block.
2. *Warm start* from last step's accumulated impulses, matched by ``contacts.key``, or for a new
   key by the nearest old point of the same body pair within 2 cm (the tangent impulse is kept as
   a world vector and re-projected onto the new tangent plane).
3. *Solve with bias* (``velocity_iterations``): the normal row, then friction (which then sees
   this iteration's load), per batch. Overlapping rows are soft (bias rate, mass scale and
   impulse scale from ``contact_hertz``, capped at half the step rate, ``contact_damping_ratio``
   and dt); overlap beyond ``linear_slop`` is pushed out at the bias rate, the push speed capped
   at ``max_push_speed``. A speculative row (gap g > 0) is rigid and allows a closing speed of g/dt
   (Firth, "Speculative Contacts", 2011), so a fast body arrives just touching.
4. *Relax* (``relax_iterations``) without the bias, which takes the push velocity out again.
5. *Restitution*, one pass: rows whose normal approach speed before the solve exceeded
   ``restitution_threshold`` and that took a normal impulse get a separating speed of e times it.
   A speculative row that took no impulse (the bodies do not meet within the step) never bounces;
   one that did bounces at its time of impact: the bodies are moved apart by (1 + e) times the
   gap along the normal, where the bounce leaves them.
6. *Position push*: positions and rotors are moved by dt times (velocity after step 3 minus the
   velocity after step 4), so that together with ``integrate_positions`` the bodies move with the
   biased velocity, as in the soft step, while the velocities they keep carry no push (the push
   adds no kinetic energy). Our pipeline integrates positions after the solver, so this
   displacement is applied here. Rows that do not overlap are rigid in step 3 too, so where
   nothing overlaps the two velocities agree and nothing is pushed: positions then follow the
   final velocities exactly.
   (Rejected: integrating positions with the pre-restitution velocity as the soft step does; in
   our order it displaces bouncing bodies against their final velocity and breaks the
   conservation of angular momentum about the origin in glancing collisions.)

Momentum: the impulses are equal and opposite at one point, so they conserve linear and angular
momentum exactly. The two position corrections (the overlap push of step 6 and the time-of-impact
correction of bounces on speculative rows) move bodies along the contact normal: they keep the
linear momentum and the centre of mass, but change the orbital angular momentum x ^ m v by about
dt p ^ v_rel when bodies overlap or bounce off-centre (zero for head-on impacts).

Friction is one vector impulse per point in the tangent space, solved with its own
(n-1) x (n-1) effective-mass block and then scaled back onto the ball ``|lambda_t| <= mu
lambda_n`` (an isotropic cone; clamping each tangent direction apart would give a pyramid with a
directional bias). Static and kinetic friction: a point that ended the last step sticking (no
slip left after the solve) uses the static coefficient, one that still slipped uses the kinetic
one; a new point starts static; the sliding state is decided per manifold (every point on its
cone and a slip above 1 cm/s left after the solve). A sliding point
whose block impulse leaves the ball gets it on the ball's rim opposite to its slip (kinetic
friction opposes the slip). The kinetic coefficient is ``contacts.friction`` (geometric
mean of the bodies' ``friction``), the static one the geometric mean of their ``static_friction``
(common practice for both).

Batches (the choice, measured with ``python -m ndrigid.bench.solver``): rows are solved in
batches in which no dynamic body appears twice; static, kinematic and sleeping bodies take no
slot. Three batchings are built and compared:

* ``"point"`` (default): colour single points (pure Gauss-Seidel). A 4-D box has 8 points per face,
  so stacks need ~20 colours of a few rows each and the fixed cost of a numpy pass dominates
  (4-D, 800 points in 20 colours: ~0.95 us per point per iteration against ~0.29 us for
  "manifold" in 3 colours and ~0.25 us for "jacobi"), but it is the only one of the three that
  holds a stack of ten: 4-D, exact face contacts, 10 s after a 1 s settle, the top box drifts
  1.9 cm with peak kinetic energy 2 J (boxes of 1000 kg), where "manifold" drifts 15 cm at up to
  7 kJ and "jacobi" collapses; a 4-D pyramid of 55 boxes drifts 1.5 cm (point) against 88 cm
  (manifold) and collapse (jacobi).
* ``"manifold"``: colour whole manifolds; the points of one manifold are solved together in one
  batch with mass splitting (Tonge, Benevolenski and Voroshilov, SIGGRAPH 2012: each of the c
  points sees the body with c times its inverse mass, and the impulses are summed). A stack needs
  2-3 colours. Fine for piles and short stacks.
* ``"jacobi"``: one batch with mass splitting over every row of a body. Fewest passes; tall
  stacks converge slowly (averaging carries a load one body per iteration).

The colouring is greedy and vectorised: rounds of Luby-style local maxima of a hash priority pick
an independent set per pass (a loop over passes and colours, never over rows).

Bodies move through the solve as one (N, n + k) state ``X = [v, B]``; a row's Jacobian and its
response (the change of X per unit impulse) are (n, n + k) arrays built once per step, so every
iteration of a batch is a gather, a few einsums and a scatter.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from .algebra import Algebra
from .components import DYNAMIC, Bodies
from .contacts import ContactSet, combine_friction

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

BATCHINGS = ("manifold", "point", "jacobi")
DEFAULT_BATCHING = "point"

# a tangent impulse clamped by less than this relative amount still counts as sticking
_STICK_TOL = 1e-9
# a point that still slips faster than this after the solve counts as sliding, m/s
_SLIP_SPEED = 1e-2
# contact stiffness is capped at this fraction of the step rate (a stiffer spring than the step
# can resolve only rings)
HERTZ_CAP = 0.5
# a new contact row inherits the impulses of last step's row of the same pair within this, m
_MATCH_DISTANCE = 0.02


# ---------------------------------------------------------------------------------------------
# geometry of the rows
# ---------------------------------------------------------------------------------------------


def tangent_basis(normal: Array) -> Array:
    """Orthonormal tangent bases (M, n-1, n) of unit normals (M, n).

    A Householder reflection H = I - 2 v v^T / (v . v), v = d - s e_j (j the largest component of
    d, s its sign), maps d to s e_j; its other n-1 columns are then an orthonormal basis of the
    complement of d. Choosing the largest component keeps v . v >= 2 - 2/sqrt(n) away from zero.
    """
    d = np.asarray(normal, dtype=np.float64)
    M, n = d.shape
    m = np.arange(M)
    j = np.argmax(np.abs(d), axis=1)
    s = np.where(d[m, j] >= 0.0, 1.0, -1.0)
    v = d.copy()
    v[m, j] -= s
    vv = np.einsum("mi,mi->m", v, v)
    # vv == 0 only when d == s e_j exactly: then H = I (v = 0) is already right
    coef = np.where(vv > 1e-300, 2.0 / np.where(vv > 1e-300, vv, 1.0), 0.0)
    H = np.eye(n)[None] - coef[:, None, None] * v[:, :, None] * v[:, None, :]
    cols = np.arange(n)[None, :].repeat(M, 0)
    keep = cols != j[:, None]
    cols = cols[keep].reshape(M, n - 1)
    # rows of T are the kept columns of H (H is symmetric, so rows equal columns)
    return H[m[:, None], cols, :]


def _wedge_rows(alg: Algebra, r: Array, D: Array) -> Array:
    """Bivectors (M, R, k) r ^ u for offsets r (M, n) and directions D (M, R, n)."""
    p = alg.pairs
    rr = r[:, None, :]
    return rr[..., p[:, 0]] * D[..., p[:, 1]] - rr[..., p[:, 1]] * D[..., p[:, 0]]


def soft_coefficients(hertz: float, damping_ratio: float, dt: float) -> tuple[float, float, float]:
    """(bias rate 1/s, mass scale, impulse scale) of a soft constraint (Catto, "Soft Constraints").

    With w = 2 pi f and z the damping ratio: bias rate w / (2 z + h w), mass scale
    h w (2 z + h w) / (1 + h w (2 z + h w)), impulse scale 1 / (1 + h w (2 z + h w)).
    """
    w = 2.0 * np.pi * hertz
    a = dt * w * (2.0 * damping_ratio + dt * w)
    return w / (2.0 * damping_ratio + dt * w), a / (1.0 + a), 1.0 / (1.0 + a)


# ---------------------------------------------------------------------------------------------
# batching
# ---------------------------------------------------------------------------------------------


def colour_items(item_a: IntArray, item_b: IntArray, slot_a: NDArray[np.bool_], slot_b: NDArray[np.bool_],
                 priority: IntArray, n_bodies: int) -> IntArray:
    """Greedy colouring (I,) of items (contacts or manifolds) touching bodies a and b.

    No body with a slot appears twice in a colour; bodies without a slot (static, kinematic,
    sleeping) are ignored. Each colour is built by passes of Luby's rule (an item joins when its
    priority is the largest among the remaining candidates of both its bodies), so a colour is a
    maximal independent set; ``priority`` must be distinct integers (ties would both lose).
    """
    count = item_a.shape[0]
    colour = np.full(count, -1, dtype=np.int64)
    remaining = np.arange(count)
    c = 0
    while remaining.size:
        used = np.zeros(n_bodies, dtype=bool)
        cand = remaining
        while cand.size:
            ia, ib, sa, sb, pr = item_a[cand], item_b[cand], slot_a[cand], slot_b[cand], priority[cand]
            best = np.full(n_bodies, -1, dtype=np.int64)
            np.maximum.at(best, ia[sa], pr[sa])
            np.maximum.at(best, ib[sb], pr[sb])
            win = (~sa | (best[ia] == pr)) & (~sb | (best[ib] == pr))
            colour[cand[win]] = c
            used[ia[win & sa]] = True
            used[ib[win & sb]] = True
            rest = cand[~win]
            blocked = (slot_a[rest] & used[item_a[rest]]) | (slot_b[rest] & used[item_b[rest]])
            cand = rest[~blocked]
        remaining = remaining[colour[remaining] < 0]
        c += 1
    return colour


def _ranks(values: IntArray) -> IntArray:
    """Distinct integer priorities from (possibly repeated) hash values: their sort rank."""
    r = np.empty(values.shape[0], dtype=np.int64)
    r[np.argsort(values, kind="stable")] = np.arange(values.shape[0])
    return r


def _batches(batching: str, a: IntArray, b: IntArray, slot_a: NDArray[np.bool_], slot_b: NDArray[np.bool_],
             key: IntArray, manifold: IntArray, n_bodies: int) -> IntArray:
    """Colour (M,) of every row under the chosen batching."""
    M = a.shape[0]
    if batching == "jacobi":
        return np.zeros(M, dtype=np.int64)
    if batching == "point":
        return colour_items(a, b, slot_a, slot_b, _ranks(key), n_bodies)
    uniq, first, inv = np.unique(manifold, return_index=True, return_inverse=True)
    mkey = np.full(uniq.shape[0], np.iinfo(np.int64).min, dtype=np.int64)
    np.maximum.at(mkey, inv, key)
    col = colour_items(a[first], b[first], slot_a[first], slot_b[first], _ranks(mkey), n_bodies)
    return col[inv]


def _split_counts(colour: IntArray, body: IntArray, slot: NDArray[np.bool_], other: IntArray,
                  other_slot: NDArray[np.bool_], n_bodies: int) -> tuple[Array, Array]:
    """Mass-splitting factors (M,), (M,): how many rows of the same batch share body a (resp. b)."""
    ka = colour[slot] * n_bodies + body[slot]
    kb = colour[other_slot] * n_bodies + other[other_slot]
    _, inv, cnt = np.unique(np.concatenate([ka, kb]), return_inverse=True, return_counts=True)
    sa = np.ones(body.shape[0])
    sb = np.ones(body.shape[0])
    sa[slot] = cnt[inv[: ka.shape[0]]]
    sb[other_slot] = cnt[inv[ka.shape[0]:]]
    return sa, sb


# ---------------------------------------------------------------------------------------------
# the solve
# ---------------------------------------------------------------------------------------------


class _Rows:
    """Per-row arrays of the active contact rows, sorted by batch (one contiguous slice each)."""

    def __init__(self, **arrays: Any) -> None:
        self.__dict__.update(arrays)


def _empty_cache(n: int) -> dict[str, Any]:
    z = np.zeros(0, np.int64)
    return {"key": z, "normal": np.zeros(0), "tangent": np.zeros((0, n)), "sliding": np.zeros(0, bool),
            "pair": z.copy(), "point": np.zeros((0, n)), "by_pair": z.copy()}


def _pair_keys(bodies: Bodies, c: ContactSet) -> IntArray:
    """(M,) int64 key of each row's ordered body pair, from the stable handles."""
    h = bodies.handle
    return (h[c.body_a].astype(np.int64) << np.int64(32)) | h[c.body_b].astype(np.int64)


def solve_contacts(alg: Algebra, bodies: Bodies, contacts: ContactSet | None, dt: float, settings: Any,
                   caches: dict[str, Any]) -> None:
    """Resolve the contact rows of one step: update velocities (and push positions) in place.

    Args:
        alg: the algebra of the simulation's dimension n (k = n(n-1)/2).
        bodies: the body table; ``velocity`` (N, n) and ``angular_velocity`` (N, k) of dynamic
            awake bodies change, and their ``position``/``rotor``/``rotation`` by the push.
        contacts: the step's contact points (M rows), or None.
        dt: step length, s.
        settings: the simulation :class:`~ndrigid.core.simulation.Settings`.
        caches: the simulation's caches; ``caches["solver"]`` keeps the accumulated impulses by key.
    """
    n = alg.n
    if contacts is None or contacts.count == 0:
        caches["solver"] = _empty_cache(n)
        return
    from . import sleep as _sleep

    # a sleeping body hit by an awake one joins the solve now, not one step late
    _sleep.wake_touched(bodies, contacts, caches)

    N = bodies.count
    a, b = contacts.body_a, contacts.body_b
    dyn = (bodies.kind == DYNAMIC) & bodies.awake
    active = dyn[a] | dyn[b]
    old = caches.get("solver") or _empty_cache(n)
    # impulses of every row of this step (inactive rows keep theirs for when they wake)
    pair = _pair_keys(bodies, contacts)
    lam_n_all, lam_t_all, sliding_all = _warm_values(contacts, pair, old, settings.warm_start,
                                                     _MATCH_DISTANCE)
    rows = np.nonzero(active)[0]
    if rows.size:
        lam_n_all[rows], lam_t_all[rows], sliding_all[rows] = _solve_rows(
            alg, bodies, contacts, rows, dyn, lam_n_all[rows], lam_t_all[rows], sliding_all[rows], dt,
            settings)
    order = np.argsort(contacts.key, kind="stable")
    caches["solver"] = {"key": contacts.key[order], "normal": lam_n_all[order], "tangent": lam_t_all[order],
                        "sliding": sliding_all[order], "pair": pair[order], "point": contacts.point[order],
                        "by_pair": np.argsort(pair[order], kind="stable")}
    del N


def _warm_values(contacts: ContactSet, pair: IntArray, old: dict[str, Any], warm: bool,
                 match_distance: float) -> tuple[Array, Array, NDArray[np.bool_]]:
    """Last step's normal impulses (M,), world tangent impulses (M, n) and sliding flags (M,).

    A row takes the values of last step's row with the same key; a row whose key is new takes
    those of the nearest last-step row of the same body pair within ``match_distance`` (world
    points), so that a manifold whose feature ids changed while its points stayed keeps its
    impulses (measured: box/box feature ids of a resting 3-D stack changed on ~20% of the rows per
    step, and cold rows let a stack of ten sag).
    """
    M, n = contacts.count, contacts.normal.shape[1]
    lam_n = np.zeros(M)
    lam_t = np.zeros((M, n))
    sliding = np.zeros(M, dtype=bool)
    okeys = old["key"]
    if okeys.size == 0:
        return lam_n, lam_t, sliding
    pos = np.minimum(np.searchsorted(okeys, contacts.key), okeys.size - 1)
    hit = okeys[pos] == contacts.key
    src = np.where(hit, pos, -1)
    miss = np.nonzero(~hit)[0]
    if miss.size and old["pair"].size:
        # candidates: the old rows of the same pair (a padded (U, C) table, no loop over rows)
        by_pair = old["by_pair"]
        opair = old["pair"][by_pair]
        lo = np.searchsorted(opair, pair[miss], "left")
        cnt = np.searchsorted(opair, pair[miss], "right") - lo
        width = int(cnt.max())
        if width:
            j = np.arange(width)
            cand = by_pair[np.minimum(lo[:, None] + j, by_pair.size - 1)]
            d2 = np.sum((old["point"][cand] - contacts.point[miss][:, None, :]) ** 2, axis=2)
            d2 = np.where(j < cnt[:, None], d2, np.inf)
            best = np.argmin(d2, axis=1)
            near = d2[np.arange(miss.size), best] <= match_distance ** 2
            src[miss[near]] = cand[np.arange(miss.size), best][near]
    got = src >= 0
    sliding[got] = old["sliding"][src[got]]
    if warm:
        lam_n[got] = old["normal"][src[got]]
        t = old["tangent"][src[got]]
        d = contacts.normal[got]
        # re-project the old tangent impulse onto the new tangent plane
        lam_t[got] = t - np.einsum("mi,mi->m", t, d)[:, None] * d
    return lam_n, lam_t, sliding


def _solve_rows(alg: Algebra, bodies: Bodies, c: ContactSet, rows: IntArray, dyn: NDArray[np.bool_],
                lam_n: Array, lam_t_world: Array, sliding: NDArray[np.bool_], dt: float,
                settings: Any) -> tuple[Array, Array, NDArray[np.bool_]]:
    """Solve the active rows; returns their new impulses and sliding flags (in the given order)."""
    n, k = alg.n, alg.k
    N = bodies.count
    batching = getattr(settings, "solver_batching", DEFAULT_BATCHING)
    a, b = c.body_a[rows], c.body_b[rows]
    sa, sb = dyn[a], dyn[b]
    colour = _batches(batching, a, b, sa, sb, c.key[rows], c.manifold[rows], N)
    # sort rows by batch; everything below is in this order until the end
    # (and by manifold inside a batch, so that a manifold's points are one contiguous segment)
    man = c.manifold[rows]
    perm = np.lexsort((man, colour))
    a, b, sa, sb, colour, man = a[perm], b[perm], sa[perm], sb[perm], colour[perm], man[perm]
    ridx = rows[perm]
    bounds = np.searchsorted(colour, np.arange(colour[-1] + 2))
    slices = [slice(int(bounds[i]), int(bounds[i + 1])) for i in range(len(bounds) - 1)]
    split_a, split_b = _split_counts(colour, a, sa, b, sb, N)
    scatters = [_Scatter(batching, a[s], b[s], man[s]) for s in slices]

    # body state X = [v, B] and inverse masses (zero for bodies that take no part)
    inv_m = np.where(dyn, bodies.inv_mass, 0.0)
    inv_I = bodies.world_inv_inertia() * dyn[:, None, None]
    X = np.concatenate([bodies.velocity, bodies.angular_velocity], axis=1)
    com = bodies.centroids()

    d = c.normal[ridx]
    D = np.concatenate([d[:, None, :], tangent_basis(d)], axis=1)  # (M, n, n): normal, tangents
    rA = c.point[ridx] - com[a]
    rB = c.point[ridx] - com[b]
    JA = _wedge_rows(alg, rA, D)  # (M, n, k)
    JB = _wedge_rows(alg, rB, D)
    RA = np.einsum("mij,mdj->mdi", inv_I[a], JA)  # I^-1 (r ^ u), (M, n, k)
    RB = np.einsum("mij,mdj->mdi", inv_I[b], JB)
    imA, imB = inv_m[a], inv_m[b]
    # Jacobians G (M, n, n+k): speed along each direction = G_A . X_A + G_B . X_B
    GA = -np.concatenate([D, JA], axis=2)
    GB = np.concatenate([D, JB], axis=2)
    # responses H (M, n, n+k): X_A += lambda . H_A per unit impulse (true masses)
    HA = -np.concatenate([imA[:, None, None] * D, RA], axis=2)
    HB = np.concatenate([imB[:, None, None] * D, RB], axis=2)
    # effective-mass matrix with split masses: K = s_A G_A H_A^T + s_B G_B H_B^T
    KA = np.einsum("mij,mlj->mil", GA, HA)
    KB = np.einsum("mij,mlj->mil", GB, HB)
    K = split_a[:, None, None] * KA + split_b[:, None, None] * KB
    mass_n = 1.0 / K[:, 0, 0]
    # the soft spring of a row should not get c times softer because its bodies are split into c
    # copies: scaling the impulse scale by K_unsplit / K_split keeps each row's stiffness at
    # m_eff w^2 with the row's true effective mass, as in a plain Gauss-Seidel solve
    unsplit = (KA[:, 0, 0] + KB[:, 0, 0]) * mass_n
    Kt_inv = np.linalg.inv(K[:, 1:, 1:])

    # friction: kinetic from the contact, static from the bodies' static column
    mu_k = c.friction[ridx]
    mu_s = combine_friction(bodies.static_friction[a], bodies.static_friction[b])
    mu = np.where(sliding[perm], mu_k, np.maximum(mu_s, mu_k))

    # bias: speculative rows allow a closing speed gap/dt (rigid, in every pass); touching rows
    # push overlap beyond the slop out softly in the biased passes only
    sep = -c.depth[ridx]
    spec = sep > 0.0
    hertz = min(float(settings.contact_hertz), HERTZ_CAP / dt)
    rate, mscale, iscale = soft_coefficients(hertz, float(settings.contact_damping_ratio), dt)
    push = np.maximum(rate * np.minimum(sep + settings.linear_slop, 0.0), -settings.max_push_speed)
    bias_on = np.where(spec, sep / dt, push)
    # every overlapping row is soft in the biased pass (rejected: rigid rows within the slop,
    # which toggle between rigid and soft as the depth crosses the slop and measured as jitter in
    # a 3-D stack of ten: residual kinetic energy ~40 J against ~0.01 J). Rows exactly touching
    # (depth 0, where a speculative contact delivers a body) stay rigid: there the biased and
    # relaxed velocities agree, nothing is pushed, and free collisions conserve momentum exactly.
    soft = c.depth[ridx] > 0.0
    ms_on = np.where(soft, mscale, 1.0)
    is_on = np.where(soft, iscale * unsplit, 0.0)
    bias_off = np.where(spec, sep / dt, 0.0)
    ones, zeros = np.ones_like(sep), np.zeros_like(sep)

    # tangent impulses in tangent coordinates (M, n-1)
    lam_n = lam_n[perm].copy()
    lam_t = np.einsum("mdi,mi->md", D[:, 1:], lam_t_world[perm])
    # normal speed before the solve, for restitution
    vn0 = np.einsum("mj,mj->m", GA[:, 0], X[a]) + np.einsum("mj,mj->m", GB[:, 0], X[b])

    # warm start: apply the accumulated impulses once (scatter-add; rows share bodies)
    lam_all = np.concatenate([lam_n[:, None], lam_t], axis=1)
    np.add.at(X, a, np.einsum("md,mdj->mj", lam_all, HA))
    np.add.at(X, b, np.einsum("md,mdj->mj", lam_all, HB))

    max_n = lam_n.copy()
    # dense manifold ids of the rows (for the per-manifold sliding decision below)
    _, man_id = np.unique(man, return_inverse=True)
    man_id = man_id.reshape(-1)
    n_man = int(man_id.max()) + 1
    slides = sliding[perm]
    # per-batch arrays, the two bodies side by side: G, H (m, n, 2(n+k)) act on the pair state
    # [X_A, X_B] (m, 2(n+k)), gathered in one indexing op; K01 (m, n-1) couples a tangent impulse
    # into the normal speed of the same row (with the split masses of the row's body copies)
    G = np.concatenate([GA, GB], axis=2)
    H = np.concatenate([HA, HB], axis=2)
    K01 = K[:, 0, 1:]
    ab = np.stack([a, b], axis=1)
    views = [(s, sc, ab[s], G[s], H[s], K01[s], Kt_inv[s], mu[s], slides[s])
             for s, sc in zip(slices, scatters, strict=True)]
    w = n + k

    def sweep(bias: Array, keep: Array, gain: Array) -> None:
        """One Gauss-Seidel pass over the batches: new lambda_n = max(keep lambda_n - gain (v_n +
        bias), 0), where keep = 1 - impulse scale and gain = mass scale x normal mass."""
        for (s, sc, iab, g, hh, k01, kti, mus, sl) in views:
            Xab0 = X[iab].reshape(-1, 2 * w)
            V = np.einsum("mdj,mj->md", g, Xab0)  # speeds along normal and tangents
            dl = np.empty((V.shape[0], n))
            # normal first (friction then sees this iteration's load): accumulated impulse
            # clamped at zero
            old_n = lam_n[s]  # a view: the deltas are taken before lam_n is written
            new_n = np.maximum(keep[s] * old_n - gain[s] * (V[:, 0] + bias[s]), 0.0)
            dl[:, 0] = new_n - old_n
            lam_n[s] = new_n
            np.maximum(max_n[s], new_n, out=max_n[s])
            # friction: one vector impulse in the tangent space, with the tangent speeds after
            # the normal impulse (K is symmetric: K[1:, 0] = K01), clamped onto the cone's ball
            vt = V[:, 1:] + k01 * dl[:, :1]
            old_t = lam_t[s]
            new_t = old_t - np.einsum("mde,me->md", kti, vt)
            radius = mus * new_n
            norm = np.sqrt(np.einsum("md,md->m", new_t, new_t))
            over = norm > radius * (1.0 + _STICK_TOL)
            # a sliding point (kinetic, from the last step) beyond the cone gets its impulse on the
            # ball's rim opposite to its slip: kinetic friction opposes the slip, and the block
            # solve's direction is skewed by the anisotropic effective mass (measured: 6% too
            # little friction on a sliding 3-D box). A sticking point is scaled back onto the ball
            # (following the slip there made a box that static friction holds jitter and creep).
            vnorm = np.sqrt(np.einsum("md,md->m", vt, vt))
            follow = over & sl & (vnorm > 1e-9)
            new_t *= np.where(over, radius / np.where(over, norm, 1.0), 1.0)[:, None]
            new_t = np.where(follow[:, None], -(radius / np.where(follow, vnorm, 1.0))[:, None] * vt, new_t)
            dl[:, 1:] = new_t - old_t
            lam_t[s] = new_t
            sc.apply(X, iab, Xab0, np.einsum("md,mdj->mj", dl, hh))

    iters = int(settings.velocity_iterations)
    relax = int(settings.relax_iterations)
    keep_on, gain_on = 1.0 - is_on, mass_n * ms_on
    for _ in range(iters):
        sweep(bias_on, keep_on, gain_on)
    X_biased = X.copy()
    for _ in range(relax):
        sweep(bias_off, ones, mass_n)
    del zeros
    # a manifold slides (kinetic friction next step) when its total friction is at its limit and
    # it still slips after the solve; one that friction stopped, or that is inside the cone,
    # sticks (static next step). Decided per manifold, not per point: a single point saturating
    # in an unconverged first step switched a block that static friction holds to kinetic.
    slip = np.einsum("mdj,mj->md", G[:, 1:], X[ab].reshape(-1, 2 * w))
    slip2 = np.einsum("md,md->m", slip, slip)
    max_slip2 = np.zeros(n_man)
    np.maximum.at(max_slip2, man_id, slip2)
    total_t = np.bincount(man_id, np.sqrt(np.einsum("md,md->m", lam_t, lam_t)), n_man)
    limit = np.bincount(man_id, mu * lam_n, n_man)
    at_limit = total_t >= (1.0 - 1e-3) * limit  # every point of the manifold on its cone
    sliding_now = (at_limit & (limit > 0.0) & (max_slip2 > _SLIP_SPEED ** 2))[man_id]
    # the push: what the bias moved, taken out of the velocities by the relax pass
    moved = np.nonzero(dyn)[0]
    push_dX = dt * (X_biased[moved] - X[moved])

    # restitution: one pass over the rows that approached fast and met within the step
    e = c.restitution[ridx]
    bounce = (e > 0.0) & (vn0 < -settings.restitution_threshold) & (max_n > 0.0)
    if np.any(bounce):
        for (s, sc, iab, g, hh, *_rest) in views:
            m = bounce[s]
            if not np.any(m):
                continue
            Xab0 = X[iab].reshape(-1, 2 * w)
            vn = np.einsum("mj,mj->m", g[:, 0], Xab0)
            old_n = lam_n[s]
            new_n = np.where(m, np.maximum(old_n - mass_n[s] * (vn + e[s] * vn0[s]), 0.0), old_n)
            dln = new_n - old_n  # before the write below: old_n is a view of lam_n
            lam_n[s] = new_n
            sc.apply(X, iab, Xab0, dln[:, None] * hh[:, 0])

        # time of impact: a bounce on a speculative row happens when the gap g closes, part of
        # the way into the step, but the bodies integrate their separating velocity over the
        # whole step; moving them apart by -(1 + e) g along the normal puts them where the
        # bounce leaves them (measured without it: each bounce at 60 Hz rose ~8% too high, the
        # error compounding over bounces). A manifold's bouncing points share the correction.
        toi = bounce & spec
        if np.any(toi):
            rows_t = np.nonzero(toi)[0]
            share = np.bincount(man_id[rows_t], minlength=n_man)[man_id[rows_t]]
            unsplit_mass = 1.0 / (KA[rows_t, 0, 0] + KB[rows_t, 0, 0])
            p_pos = -(1.0 + e[rows_t]) * sep[rows_t] * unsplit_mass / share
            dpos = np.zeros_like(X)
            dab = (p_pos[:, None] * H[rows_t, 0]).reshape(-1, 2, w)
            np.add.at(dpos, a[rows_t], dab[:, 0])
            np.add.at(dpos, b[rows_t], dab[:, 1])
            push_dX += dpos[moved]

    bodies.velocity[moved] = X[moved, :n]
    bodies.angular_velocity[moved] = X[moved, n:]
    _push_positions(alg, bodies, moved, push_dX)

    # back to the caller's row order; tangent impulses as world vectors
    inv_perm = np.empty_like(perm)
    inv_perm[perm] = np.arange(perm.size)
    lam_t_w = np.einsum("md,mdi->mi", lam_t, D[:, 1:])
    del k
    return lam_n[inv_perm], lam_t_w[inv_perm], sliding_now[inv_perm]


class _Scatter:
    """How one batch adds its change of the pair states (m, 2(n+k)) back into X (N, n+k).

    * ``"point"``: one row per dynamic body in the batch, so a plain assignment is exact (rows
      repeat only bodies without a slot, whose state the batch cannot change).
    * ``"manifold"``: the rows of a manifold share its two bodies (mass splitting: the impulses of
      the copies add up on the one body). The changes are summed per manifold segment with
      ``np.add.reduceat`` and added with plain indexing, since a dynamic body takes only one
      manifold per batch (``np.add.at`` over rows measured ~7x slower: 21 us vs 3 us for 270 4-D
      rows).
    * ``"jacobi"``: as manifold, but a body takes many manifolds: the segment sums are added with
      ``np.add.at`` (over manifolds, not rows).
    """

    def __init__(self, batching: str, a: IntArray, b: IntArray, manifold: IntArray) -> None:
        self.mode = batching
        if batching != "point":
            starts = np.r_[0, np.nonzero(manifold[1:] != manifold[:-1])[0] + 1]
            self.starts = starts
            self.seg = np.stack([a[starts], b[starts]], axis=1)

    def apply(self, X: Array, iab: IntArray, Xab0: Array, dXab: Array) -> None:
        w = X.shape[1]
        if self.mode == "point":
            X[iab] = (Xab0 + dXab).reshape(-1, 2, w)
            return
        d = np.add.reduceat(dXab, self.starts, axis=0).reshape(-1, 2, w)
        if self.mode == "manifold":
            X[self.seg] += d
        else:
            np.add.at(X, self.seg.reshape(-1), d.reshape(-1, w))


def _push_positions(alg: Algebra, bodies: Bodies, rows: IntArray, dX: Array) -> None:
    """Move bodies (rows) by a displacement [dx, dB] (R, n + k): centre of mass by dx, orientation
    by the rotor exp(-dB/2), keeping the body origin attached to the centre of mass."""
    n = alg.n
    busy = np.any(dX != 0.0, axis=1)
    if not np.any(busy):
        return
    r = rows[busy]
    dX = dX[busy]
    rot = bodies.rotation[r]
    c_local = bodies.local_centroid[r]
    com = bodies.position[r] + np.einsum("nij,nj->ni", rot, c_local) + dX[:, :n]
    R = alg.rotor_normalize(alg.rotor_mul(alg.rotor(dX[:, n:]), bodies.rotor[r]), steps=1)
    Mx = alg.rotor_to_matrix(R)
    bodies.rotor[r] = R
    bodies.rotation[r] = Mx
    bodies.position[r] = com - np.einsum("nij,nj->ni", Mx, c_local)


__all__ = ["BATCHINGS", "DEFAULT_BATCHING", "colour_items", "soft_coefficients", "solve_contacts",
           "tangent_basis"]
