"""The contact solver: sequential impulses over batches of contact rows, in any dimension.

What one call of :func:`solve_impulses` does. The method is sequential impulses, i.e. projected
Gauss-Seidel on the velocity-level contact problem (Erleben, "Velocity-based shock propagation for
multibody dynamics animation", ACM TOG 26(2), 2007), with warm starting across steps, and soft
contacts stated as an implicit (backward-Euler) spring-damper, derived in :func:`soft_coefficients`
(common practice):

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
3. *Solve with bias* (``solver_passes``): the normal row, then friction (which then sees
   this iteration's load), per batch. Overlapping rows are soft (bias rate, mass scale and
   impulse scale from ``spring_frequency``, capped at half the step rate, ``spring_damping_ratio``
   and dt); overlap beyond ``overlap_allowance`` is pushed out at the bias rate, the push speed capped
   at ``separation_speed_cap``. Load compensation: a soft row carrying a load W = lambda / dt
   settles W / (m_eff w^2) deeper than its spring's rest point, so the rest point is moved up by
   that static deflection under the warm-started impulse, averaged over the overlapping points of
   the row's manifold (:func:`_load_deflection`); a loaded contact then settles at the allowance
   (stack of ten, deepest overlap 5.07-5.26 mm against 8.4-11.2 mm without), while the points of
   one manifold still share its load by their depths (compensating each point by its own load
   instead lets a stack sway: drift 2.4-8.9 cm against 0.3-0.9 cm). The rest point is also moved up by the
   manifold's tilt (its deepest overlap less its mean, :func:`_tilt_spread`), the same for all
   its points, so that the deepest point, not the mean, settles at the allowance (4-D bin of
   200: lowest point of any body -5.0 to -5.1 mm against -6.9 to -7.1 mm; ``_TILT_DEADBAND``
   says why the stack's small tilts are not exempted). Rejected, measured: rigid
   velocity rows with the overlap removed at the position level after the velocity solve
   (post-stabilisation, Cline and Pai, ICRA 2003): overlap within the allowance, but with no
   load-dependent spring the tilt of a box on its face is free and the stack sways 0.5-1.5 cm
   (2-D to 4-D) and 3.8-5.5 cm (5-D).
   A speculative row (gap g > 0) is rigid and allows a closing speed of g/dt
   (speculative contacts, common practice), so a fast body arrives just touching.
4. *Relax* (``bias_free_passes``) without the bias, which takes the push velocity out again.
   Where that is not enough, in a solve with a deep overlap (a push faster than 0.5 m/s), up to
   27 more bias-free passes run while a row that holds a normal impulse still separates faster
   than 5 cm/s (push velocity not yet taken out): 50 boxes
   created at one point leave at 0.39 m/s at most instead of 6.07 m/s (3-D and 4-D, no
   gravity), while a resting stack of ten never needs an extra pass (660 of 660 steps).
   *Shock propagation* (Guendelman, Bridson and Fedkiw, SIGGRAPH 2003) then runs where a light
   body carries a much heavier one (``_shock_sweep``): from the ground up, the rows of such pairs
   and the rows beneath them are solved again with the lower body held fixed, which Gauss-Seidel
   alone cannot do (it slows the heavy body by about m_light / m_heavy of its sinking speed per
   pass). A 1,000 kg box now rests on a 1 kg box, 2-D to 5-D, within 5.1 mm; before, from 300:1
   the light box was pressed into the floor and the heavy one slid off it.
   *Rolling resistance and spin friction* (``_contact_couples``): a contact of one point takes
   no torque, so balls rolled and spun on the ground for ever and a pile never came to rest; a
   couple against the bodies' relative rotation, up to ``rolling_resistance`` x load in the
   planes that hold the normal and ``spin_friction`` x load in the planes of the tangent space
   (the bodies' material coefficients, lengths, combined by the geometric mean), stands for the
   contact patch (Beer and Johnston; Johnson 1985). The load
   is last step's normal impulse, so impacts are not touched.
5. *Restitution*, one pass: rows whose normal approach speed at the time of impact exceeded
   ``bounce_threshold`` and that took a normal impulse get a separating speed of e times it.
   Velocities of the semi-implicit Euler step are staggered: after ``accelerate`` a body's
   velocity is its mean over the step (the exact one half a step in), so with g_n the step's
   change of the normal speed by gravity, a speculative row meeting at the fraction
   tau = gap / (closing speed x dt) of the step approaches at v_n(toi) = v_n0 + g_n (tau - 1/2);
   the bounce leaves with -e v_n(toi) and the body keeps the velocity half a step into the next
   step, target v_n = -e v_n(toi) + g_n (1/2 - tau). A touching row meets at the step's start,
   with the speed before this step's gravity, v_n0 - g_n (so a resting contact, whose speed then
   is 0, never bounces), target -e (v_n0 - g_n) + g_n / 2 (Newton's law of restitution at the
   impact, ballistic flight after it). Judging and setting the bounce by the end-of-step speed instead
   made low bounces too lively (asked e = 0.5, ball dropped 1 m at 60 Hz: 0.500, 0.537, 0.603
   per bounce; e = 0.8: up to 0.92) and, with a threshold below g dt, a resting body kept
   bouncing and never slept.
   A speculative row that took no impulse (the bodies do not meet within the step) never bounces;
   one that did bounces at its time of impact: the bodies are moved apart by (1 + e) times the
   gap along the normal, where the bounce leaves them. (Rejected: the same arrest and gap
   closing for e = 0, so that an inelastic impact takes its whole impulse in one step; the
   position correction broke the exact conservation of angular momentum in glancing inelastic
   impacts, by 8 % in tests/test_scenes.py. A speculative row lets the body close at gap/dt and
   the rest of the stop comes one step later; contact events add the two, stages.py.)
6. *Position push*: positions and rotors are moved by dt times (velocity after step 3 minus the
   velocity after step 4), so that together with ``advance_poses`` the bodies move with the
   biased velocity, as in the soft step, while the velocities they keep carry no push (the push
   adds no kinetic energy). Our pipeline integrates positions after the solver, so this
   displacement is applied here. Rows that do not overlap are rigid in step 3 too, so where
   nothing overlaps the two velocities agree and nothing is pushed: positions then follow the
   final velocities exactly.
   (Rejected: integrating positions with the pre-restitution velocity as the soft step does; in
   our order it displaces bouncing bodies against their final velocity and breaks the
   conservation of angular momentum about the origin in glancing collisions.)

Momentum: the impulses are equal and opposite at one point, so they conserve linear and angular
momentum exactly (except the shock sweep, which changes only the upper body of a heavy-on-light
row, and runs only in a stack that rests on something static). The two position corrections
(the overlap push of step 6 and the time-of-impact correction of bounces on speculative rows)
move bodies along the contact normal: they keep the
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
an independent set per pass (a loop over passes and colours, never over rows). The priority is the
rank of the contact key XOR a per-step salt (a Weyl sequence of the step counter kept in
``caches["solver"]["step"]``), so the batch order changes every step yet stays deterministic. With
stable feature ids the plain key rank gives the same order every step, and that fixed order biases
a resting stack (stack of ten through the narrowphase, 10 s after a 1 s settle, top-box drift over
four starts, unsalted / salted: 2-D 11-20 / 0.07-0.43 cm, 3-D 1.3-4.4 / 0.35-0.85, 4-D 0.9-2.2 /
0.5-0.8, 5-D 1.8-5.4 / 0.7-1.4). Rejected: alternating forward and backward sweeps over the
colours (2-D 0.9-5.8 cm alone, 0.3-1.5 with the salt), and a full rehash of key and salt in place
of the XOR (no better: 2-D 0.07-0.58, 5-D 0.7-1.9 cm).

Bodies move through the solve as one (N, n + k) state ``X = [v, B]``; a row's Jacobian and its
response (the change of X per unit impulse) are (n, n + k) arrays built once per step, so every
iteration of a batch is a gather, a few einsums and a scatter.

Cost (measured on one core with a settled ``pile`` 4-D of 300 bodies, 3,314 rows, and a 2-D
``pyramid`` of base 100, 29,900 rows; ``solve_impulses`` alone on a pickled snapshot, same
output to the bit before and after each change):

* Where the time goes. The pile needs 59 colours, which is the largest number of rows on one
  body (greedy colouring is optimal here); with 8 + 3 passes that is ~650 batch passes per step.
  A pass is ~45 numpy calls on ~56 rows (2 to 188), ~50 us almost all fixed cost: the sweeps
  are ~70% of the solve, the set-up (colouring 3 ms, Jacobians, inverses) the rest. The pyramid
  has 17 large colours: there the per-row work and the set-up (colouring ~9 ms) dominate.
* Kept: each batch holds views of the sorted per-row arrays (no per-pass slicing of a dozen
  arrays); the pair states are gathered with ``take`` through flat element indices and written
  back by a flat index (2-D, 1,000 rows: 3.0 us against 18.5 us to gather with an (m, 2) index,
  6.4 us against 20 us to write); bias-free passes skip the keep factor and a zero bias; the cone
  clamp and the kinetic "follow the slip" branch run only in batches where some row leaves its
  cone or slid; the largest normal impulse is tracked only in batches that may bounce; no
  split counts (a sort) under point batching; leaner colouring and tangent basis. Solve time
  4-D pile 51 -> 41 ms, 2-D pyramid 107 -> 86 ms.
* Kept for bit-for-bit agreement with the previous solver (and so with the reference path):
  the effective-mass einsums over G and H, the warm start by two scatter-adds. Replacing them
  by the algebraically equal ``(1/m) I + J R^T`` and one scatter-add changed results by one
  rounding step, and the 2-D stack of ten through the narrowphase (``test_stack_of_ten_rests``)
  is chaotic in that: it drifted 0.2 m instead of resting, with the same solver otherwise.
* Rejected, measured: fewer iterations (exact-contact stack of ten, 10 s after a 1 s settle,
  drift in box sizes / peak kinetic energy: 2-D 8+3 0.015 / 4 J, 6+2 0.046 / 182 J, 4+2 0.095 /
  25 J; 3-D 8+3 0.047 / 26 J, 6+2 0.008 / 0.4 J; 4-D 8+3 0.019 / 2 J, 6+2 0.014 / 3 J, 4+2 0.033 /
  11 J: no count below 8+3 holds every dimension). Merging the small tail colours (below 20% of
  the first) into one mass-split batch: 59 -> 33 batches but only -11% solve time in the pile
  (42 against 48 ms) and its deepest overlap doubled (0.017 -> 0.031 m).
* Memory: the solve's peak is per row (G and H alone are 2 n (2n + 2k) floats, 1.3 KB in 4-D);
  building G and H one body side at a time and freeing the pieces early took the peak from 3.7
  to 2.6 KB per 4-D row (~11 rows per body in the pile). The warm-start cache keeps ~95 B per row.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from .. import kernels as _kernels
from ..algebra import Algebra
from ..state.components import DYNAMIC, Bodies
from ..state.contacts import ContactSet, combine_friction

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]

BATCHINGS = ("manifold", "point", "jacobi")
DEFAULT_BATCHING = "point"

# a tangent impulse clamped by less than this relative amount still counts as sticking
_STICK_TOL = 1e-9
# a point that still slips faster than this after the solve counts as sliding, m/s
_SLIP_SPEED = 1e-2
# bias-free passes continue (at most _RELAX_EXTRA more) while a row holding an impulse separates
# faster than _RELAX_TOL, m/s
_RELAX_TOL = 0.05
_RELAX_EXTRA = 27
# ... and only in a solve where some overlap is pushed out faster than _RELAX_PUSH, m/s (a deep
# overlap: 0.5 m/s is 6 cm past the allowance at the default spring). Measured, 4-D pile of 300
# while it settles: the extra passes ran in most steps and cost 7 ms of a 24 ms step, though
# its pushes stay below 0.1 m/s
_RELAX_PUSH = 0.5
# the biased passes go on (at most _RELAX_EXTRA more) while a speculative row that closed faster
# than _SPEC_FAST (m/s) before the solve would still close more than _SPEC_TOL (m) farther than its
# gap within the step: Gauss-Seidel converges slowly on the manifold of a small fast body, and the
# push (the velocity change of the bias-free passes) then carried it through thin walls
# (measured: a 4-D simplex of edge 0.1 m at 200 m/s head-on closed at 62 m/s where its gaps
# allowed 58-59.5 after the fixed passes, and passed a 5 mm wall in 7 of 10 shots; 2 of 10 with
# the extra passes). Without the speed floor the check held in 1,300 of 1,316 solves of the settling 4-D
# pile of 300 (rows between resting bodies that cannot all be met) and ran every extra pass
_SPEC_TOL = 0.001
_SPEC_FAST = 10.0
# shock propagation (_shock_sweep) takes the rows between dynamic bodies whose parts of the normal
# inverse effective mass differ more than _SHOCK_RATIO times. Measured, heavy box on a 1 kg box,
# 3-D, 10 s: Gauss-Seidel alone holds 100:1 (top box 10.8 mm low: two allowances) and fails
# from 300:1 (the light box pressed into the floor, the heavy one slides off); with the sweep
# 100:1 to 1000:1 rest within 5.1 mm in 2-D to 5-D. 30 leaves a margin of three below 100 and
# keeps ordinary stacks (ratio ~1) momentum-conserving Gauss-Seidel.
_SHOCK_RATIO = 30.0
# sweeps over those rows: 3-D 1000:1, top box low by 47 / 9.3 / 5.1 mm with 1 / 2 / 4 sweeps
_SHOCK_PASSES = 4
# a manifold's tilt (deepest overlap less the mean) below this is left alone (_tilt_spread), m.
# Measured with 0.5 mm: the stack of ten drifts less (2-D / 3-D / 5-D 0.27 / 0.61 / 0.81 cm
# against 0.53 / 0.80 / 1.01), but the 4-D bin of 200 slept within 10 s of settling for only
# two of four seeds (4.9-21.5 s) against all four (6.6-8.7 s) without; the stack test holds
# either way, so none.
_TILT_DEADBAND = 0.0
# Gauss-Seidel passes of the rolling-resistance and spin-friction couples (_contact_couples)
_COUPLE_PASSES = 2
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
    # rows of T are the rows of H (symmetric) other than j, built alone (not all of H and then
    # indexed: 2-D, 29,900 normals, 1.5 ms against 3.0 ms), with the same products in the same order
    cols = np.arange(n - 1)[None, :] + (np.arange(n - 1)[None, :] >= j[:, None])
    vc = np.take_along_axis(v, cols, axis=1)
    return np.eye(n)[cols] - coef[:, None, None] * vc[:, :, None] * v[:, None, :]


def _wedge_rows(alg: Algebra, r: Array, D: Array) -> Array:
    """Bivectors (M, R, k) r ^ u for offsets r (M, n) and directions D (M, R, n)."""
    p = alg.pairs
    rr = r[:, None, :]
    return rr[..., p[:, 0]] * D[..., p[:, 1]] - rr[..., p[:, 1]] * D[..., p[:, 0]]


def soft_coefficients(hertz: float, damping_ratio: float, dt: float) -> tuple[float, float, float]:
    """(bias rate 1/s, mass scale, impulse scale) of a soft constraint (an implicit spring-damper).

    With w = 2 pi f and z the damping ratio: bias rate w / (2 z + h w), mass scale
    h w (2 z + h w) / (1 + h w (2 z + h w)), impulse scale 1 / (1 + h w (2 z + h w)).

    Derivation (backward Euler on a spring-damper, common practice): a unit-mass oscillator
    x'' = -w^2 x - 2 z w x' stepped implicitly, v2 = v1 - h (w^2 x2 + 2 z w v2) with
    x2 = x1 + h v2, gives v2 (1 + 2 z w h + h^2 w^2) = v1 - h w^2 x1. Written as a constraint
    impulse on the rigid row (target speed -bias * x, effective mass m), the solved impulse is
    ``mass_scale * m * (-v - bias x) - impulse_scale * accumulated``.
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
    # a side without a slot gets a body of its own (n_bodies + its index), which no other item
    # touches: it can neither block nor lose, exactly as the side being ignored, and every round
    # runs without masks; ``best`` is reset only where a round wrote it (measured, same colours:
    # 2-D pyramid of 5,050 boxes, 29,900 rows, 10.7 -> 9.3 ms; 4-D pile of 300, 4.5 -> 3.2 ms)
    idx = np.arange(count)
    ea = np.where(slot_a, item_a, n_bodies + idx)
    eb = np.where(slot_b, item_b, n_bodies + count + idx)
    size = n_bodies + 2 * count
    used = np.zeros(size, dtype=bool)
    best = np.full(size, -1, dtype=np.int64)
    remaining = idx
    c = 0
    while remaining.size:
        used[:] = False
        cand = remaining
        while cand.size:
            ia, ib, pr = ea[cand], eb[cand], priority[cand]
            np.maximum.at(best, ia, pr)
            np.maximum.at(best, ib, pr)
            win = (best[ia] == pr) & (best[ib] == pr)
            best[ia] = -1  # reset only what this round touched
            best[ib] = -1
            colour[cand[win]] = c
            used[ia[win]] = True
            used[ib[win]] = True
            rest = cand[~win]
            cand = rest[~(used[ea[rest]] | used[eb[rest]])]
        remaining = remaining[colour[remaining] < 0]
        c += 1
    return colour


def _order_salt(step: int) -> int:
    """Signed 64-bit salt of the batch order at a step: step times the golden-ratio odd constant,
    modulo 2^64 (a Weyl sequence: the high bits, which decide the ranks of hashed keys, change
    every step)."""
    x = (step * 0x9E3779B97F4A7C15) & ((1 << 64) - 1)
    return x - (1 << 64) if x >= 1 << 63 else x


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


def solve_impulses(alg: Algebra, bodies: Bodies, contacts: ContactSet | None, dt: float, settings: Any,
                   caches: dict[str, Any], gravity: Any = None) -> None:
    """Resolve the contact rows of one step: update velocities (and push positions) in place.

    Args:
        alg: the algebra of the simulation's dimension n (k = n(n-1)/2).
        bodies: the body table; ``velocity`` (N, n) and ``angular_velocity`` (N, k) of dynamic
            awake bodies change, and their ``position``/``rotor``/``rotation`` by the push.
        contacts: the step's contact points (M rows), or None.
        dt: step length, s.
        settings: the simulation :class:`~ndrigid.core.simulation.Settings`.
        caches: the simulation's caches; ``caches["solver"]`` keeps the accumulated impulses by key.
        gravity: (n,) the gravity ``accelerate`` applied to awake dynamic bodies in this step (None:
            none), so that bounces are judged and set at their time of impact (step 5).
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
    step = np.int64(old.get("step", 0) + 1)  # salts the batch order (module notes)
    # impulses of every row of this step (inactive rows keep theirs for when they wake)
    pair = _pair_keys(bodies, contacts)
    lam_n_all, lam_t_all, sliding_all = _warm_values(contacts, pair, old, settings.warm_start,
                                                     _MATCH_DISTANCE)
    rows = np.nonzero(active)[0]
    if rows.size:
        lam_n_all[rows], lam_t_all[rows], sliding_all[rows] = _solve_rows(
            alg, bodies, contacts, rows, dyn, lam_n_all[rows], lam_t_all[rows], sliding_all[rows], dt,
            settings, _order_salt(int(step)), _gravity_rows(contacts, rows, dyn, gravity, dt))
    contacts.normal_impulse, contacts.tangent_impulse = lam_n_all, lam_t_all
    order = np.argsort(contacts.key, kind="stable")
    caches["solver"] = {"key": contacts.key[order], "normal": lam_n_all[order], "tangent": lam_t_all[order],
                        "sliding": sliding_all[order], "pair": pair[order], "point": contacts.point[order],
                        "by_pair": np.argsort(pair[order], kind="stable"), "step": step}
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


def _gravity_rows(c: ContactSet, rows: IntArray, dyn: NDArray[np.bool_], gravity: Any, dt: float) -> Array:
    """Per row (in ``rows`` order): the change of the normal speed v_n = (v_B - v_A) . n that this
    step's gravity made, dt (g . n) (dyn_B - dyn_A)."""
    if gravity is None:
        return np.zeros(rows.size)
    g = np.asarray(gravity, dtype=np.float64)
    side = dyn[c.body_b[rows]].astype(np.float64) - dyn[c.body_a[rows]]
    return dt * (c.normal[rows] @ g) * side


def _solve_rows(alg: Algebra, bodies: Bodies, c: ContactSet, rows: IntArray, dyn: NDArray[np.bool_],
                lam_n: Array, lam_t_world: Array, sliding: NDArray[np.bool_], dt: float,
                settings: Any, salt: int = 0, grav_n: Array | None = None
                ) -> tuple[Array, Array, NDArray[np.bool_]]:
    """Solve the active rows; returns their new impulses and sliding flags (in the given order)."""
    n, k = alg.n, alg.k
    w = n + k
    N = bodies.count
    grav_n = np.zeros(rows.size) if grav_n is None else grav_n
    batching = getattr(settings, "solver_batching", DEFAULT_BATCHING)
    if batching == "point" and _kernels.use_compiled(settings):
        return _solve_rows_compiled(alg, bodies, c, rows, dyn, lam_n, lam_t_world, sliding, dt, settings,
                                    salt, grav_n)
    a, b = c.body_a[rows], c.body_b[rows]
    sa, sb = dyn[a], dyn[b]
    colour = _batches(batching, a, b, sa, sb, c.key[rows] ^ np.int64(salt), c.manifold[rows], N)
    # sort rows by batch; everything below is in this order until the end
    # (and by manifold inside a batch, so that a manifold's points are one contiguous segment)
    man = c.manifold[rows]
    perm = np.lexsort((man, colour))
    a, b, sa, sb, colour, man = a[perm], b[perm], sa[perm], sb[perm], colour[perm], man[perm]
    ridx = rows[perm]
    M = ridx.shape[0]
    bounds = np.searchsorted(colour, np.arange(colour[-1] + 2))
    slices = [slice(int(bounds[i]), int(bounds[i + 1])) for i in range(len(bounds) - 1)]
    if batching == "point":
        # no dynamic body twice in a batch: every split count is one (the count costs a sort)
        split_a = split_b = np.ones(M)
    else:
        split_a, split_b = _split_counts(colour, a, sa, b, sb, N)

    # body state X = [v, B] and inverse masses (zero for bodies that take no part)
    inv_m = np.where(dyn, bodies.inv_mass, 0.0)
    inv_I = bodies.world_inv_inertia() * dyn[:, None, None]
    X = np.concatenate([bodies.velocity, bodies.angular_velocity], axis=1)
    com = bodies.centroids()

    d = c.normal[ridx]
    D = np.empty((M, n, n))  # rows: normal, tangents (orthonormal)
    D[:, 0] = d
    D[:, 1:] = tangent_basis(d)
    point = c.point[ridx]
    imA, imB = inv_m[a], inv_m[b]
    # Jacobians G (M, n, 2w) on the pair state [X_A, X_B]: speed along each direction = G . X_ab;
    # responses H (M, n, 2w): X_ab += lambda . H per unit impulse (true masses). Written in place
    # (measured: four concatenations of (M, n, .) pieces cost 40% of the set-up in 2-D), one body
    # side at a time so that its angular pieces are freed before the other's are built
    G = np.empty((M, n, 2 * w))
    H = np.empty((M, n, 2 * w))
    for body, im, lo, sign in ((a, imA, 0, -1.0), (b, imB, w, 1.0)):
        J = _wedge_rows(alg, point - com[body], D)  # (M, n, k): angular Jacobians r ^ u
        R = np.einsum("mij,mdj->mdi", inv_I[body], J)  # I^-1 (r ^ u), (M, n, k)
        if sign < 0.0:
            np.negative(D, out=G[:, :, lo:lo + n])
            np.negative(J, out=G[:, :, lo + n:lo + w])
            np.multiply(D, -im[:, None, None], out=H[:, :, lo:lo + n])
            np.negative(R, out=H[:, :, lo + n:lo + w])
        else:
            G[:, :, lo:lo + n] = D
            G[:, :, lo + n:lo + w] = J
            np.multiply(D, im[:, None, None], out=H[:, :, lo:lo + n])
            H[:, :, lo + n:lo + w] = R
        del J, R
    # effective-mass matrix with split masses: K = s_A G_A H_A^T + s_B G_B H_B^T; the linear parts
    # are (1/m) D D^T = (1/m) I_n, since the rows of D are orthonormal
    KA = np.einsum("mij,mlj->mil", G[:, :, :w], H[:, :, :w])
    KB = np.einsum("mij,mlj->mil", G[:, :, w:], H[:, :, w:])
    K = split_a[:, None, None] * KA + split_b[:, None, None] * KB
    mass_n = 1.0 / K[:, 0, 0]
    # the soft spring of a row should not get c times softer because its bodies are split into c
    # copies: scaling the impulse scale by K_unsplit / K_split keeps each row's stiffness at
    # m_eff w^2 with the row's true effective mass, as in a plain Gauss-Seidel solve
    unsplit_k = KA[:, 0, 0] + KB[:, 0, 0]
    ka0, kb0 = KA[:, 0, 0].copy(), KB[:, 0, 0].copy()
    unsplit = unsplit_k * mass_n
    Kt_inv = np.linalg.inv(K[:, 1:, 1:])
    K01 = np.ascontiguousarray(K[:, 0, 1:])
    # drop the pieces now held in G, H and K before the sweeps: the solve's peak memory is per row
    # (measured, 4-D pile of 300, peak over the call: 3.7 KB per row, ~40 KB per body, before the
    # angular pieces and these went early; see the module notes for after)
    del KA, KB, K

    # friction: kinetic from the contact, static from the bodies' static column
    mu_k = c.friction[ridx]
    mu_s = combine_friction(bodies.static_friction[a], bodies.static_friction[b])
    slides = sliding[perm]
    mu = np.where(slides, mu_k, np.maximum(mu_s, mu_k))

    # bias: speculative rows allow a closing speed gap/dt (rigid, in every pass); touching rows
    # push overlap beyond the slop out softly in the biased passes only
    depth = c.depth[ridx]
    sep = -depth
    spec = sep > 0.0
    hertz = min(float(settings.spring_frequency), HERTZ_CAP / dt)
    rate, mscale, iscale = soft_coefficients(hertz, float(settings.spring_damping_ratio), dt)
    # every overlapping row is soft in the biased pass (rejected: rigid rows within the slop,
    # which toggle between rigid and soft as the depth crosses the slop and measured as jitter in
    # a 3-D stack of ten: residual kinetic energy ~40 J against ~0.01 J). Rows exactly touching
    # (depth 0, where a speculative contact delivers a body) stay rigid: there the biased and
    # unbiased velocities agree, nothing is pushed, and free collisions conserve momentum exactly.
    soft = depth > 0.0
    keep_on = 1.0 - np.where(soft, iscale * unsplit, 0.0)
    gain_on = mass_n * np.where(soft, mscale, 1.0)
    bias_off = np.where(spec, sep / dt, 0.0)

    # tangent impulses in tangent coordinates (M, n-1)
    lam_n = lam_n[perm].copy()
    lam_t = np.einsum("mdi,mi->md", D[:, 1:], lam_t_world[perm])
    # normal speed before the solve, for restitution
    Gn = np.ascontiguousarray(G[:, 0])
    ab = np.stack([a, b], axis=1)
    vn0 = np.einsum("mj,mj->m", Gn[:, :w], X[a]) + np.einsum("mj,mj->m", Gn[:, w:], X[b])

    # warm start: apply the accumulated impulses once (scatter-add; rows share bodies)
    lam_all = np.concatenate([lam_n[:, None], lam_t], axis=1)
    np.add.at(X, a, np.einsum("md,mdj->mj", lam_all, H[:, :, :w]))
    np.add.at(X, b, np.einsum("md,mdj->mj", lam_all, H[:, :, w:]))

    max_n = lam_n.copy()
    lam_warm = lam_n.copy()  # last step's load: the couples' limits (impacts get none)
    # dense manifold ids of the rows (for the per-manifold sliding decision below)
    _, man_id = np.unique(man, return_inverse=True)
    man_id = man_id.reshape(-1)
    n_man = int(man_id.max()) + 1
    # the spring rests at the allowance less its static deflection under last step's load (mean
    # over the manifold's overlapping points), so a loaded contact settles at the allowance, and
    # less the manifold's tilt (its deepest overlap less its mean), so its deepest point does
    rest = (settings.overlap_allowance - _load_deflection(lam_n, unsplit_k, soft, man_id, n_man, hertz, dt)
            - _tilt_spread(depth, soft, man_id, n_man))
    push = np.maximum(rate * np.minimum(sep + rest, 0.0), -settings.separation_speed_cap)
    bias_on = np.where(spec, sep / dt, push)
    # element indices of each row's pair state in X.ravel(): gathering with ``take`` and writing
    # back through a flat index measured 3-6x faster than indexing X (N, w) with an (m, 2) array
    # (2-D, 1,000 rows: 3.0 us against 18.5 us to gather, 6.4 us against 20 us to write)
    el = (ab[:, :, None] * w + np.arange(w)).reshape(M, 2 * w)
    # rows that may bounce: restitution, and approaching faster than the threshold before the solve;
    # only their largest normal impulse is needed (did they meet within the step?)
    e = c.restitution[ridx]
    # the approach speed at the time of impact and the speed the bounce leaves with (module
    # notes, step 5): a speculative row meets at the fraction tau of the step, a touching one at
    # its start
    gn = grav_n[perm]
    closing = -vn0
    tau = np.where(spec & (closing > 0.0), np.minimum(sep / np.maximum(closing * dt, 1e-300), 1.0), 0.0)
    vn_toi = np.where(spec, vn0 + gn * (tau - 0.5), vn0 - gn)
    target = -e * vn_toi + gn * np.where(spec, 0.5 - tau, 0.5)
    may_bounce = (e > 0.0) & (vn_toi < -settings.bounce_threshold)
    batches = [_Batch(batching, s, a, b, man, el, G, H, K01, Kt_inv, mu, slides, lam_n, lam_t, max_n,
                      bias_on, keep_on, gain_on, bias_off, mass_n, may_bounce) for s in slices]
    Xf = X.reshape(-1)  # a view: the batches read and write X through it

    iters = int(settings.solver_passes)
    bias_free = int(settings.bias_free_passes)
    for _ in range(iters):
        _sweep(batches, Xf, X, True)
    # more biased passes while a fast speculative row would still close past its gap: the push
    # below is the change of velocity in the bias-free passes, so these rows must be converged
    # before X_biased is taken, or a fast body is pushed with its unconverged velocity
    extra = 0
    fast = spec & (vn0 < -_SPEC_FAST)
    while bias_free and extra < _RELAX_EXTRA and _spec_left(Gn, Xf, el, sep, fast, dt) > _SPEC_TOL:
        _sweep(batches, Xf, X, True)
        extra += 1
    X_biased = X.copy()
    for _ in range(bias_free):
        _sweep(batches, Xf, X, False)
    # more bias-free passes while a row that holds an impulse still separates faster than the
    # tolerance: that speed is push velocity the passes have not taken out yet
    extra = 0
    deep = bool(np.any(~spec & (push < -_RELAX_PUSH)))
    while deep and bias_free and extra < _RELAX_EXTRA and _push_left(Gn, Xf, el, lam_n) > _RELAX_TOL:
        _sweep(batches, Xf, X, False)
        extra += 1
    # the push: what the bias moved, taken out of the velocities by the bias-free pass
    moved = np.nonzero(dyn)[0]
    push_dX = dt * (X_biased[moved] - X[moved])
    if bias_free and batching == "point":
        _shock_sweep(a, b, sa, sb, colour, lam_n, lam_t, mu, bias_off, ka0, kb0, G, H, Xf, el, dyn)
    roll_c = combine_friction(bodies.rolling_resistance[a], bodies.rolling_resistance[b])
    spin_c = combine_friction(bodies.spin_friction[a], bodies.spin_friction[b])
    if np.any(roll_c > 0.0) or np.any(spin_c > 0.0):
        _contact_couples(alg, batches, X, D, a, b, inv_I, split_a, split_b, roll_c, spin_c, lam_warm, man_id,
                         n_man)
    # a manifold slides (kinetic friction next step) when its total friction is at its limit and
    # it still slips after the solve; one that friction stopped, or that is inside the cone,
    # sticks (static next step). Decided per manifold, not per point: a single point saturating
    # in an unconverged first step switched a block that static friction holds to kinetic.
    slip = np.einsum("mdj,mj->md", G[:, 1:], Xf.take(el))
    slip2 = np.einsum("md,md->m", slip, slip)
    max_slip2 = np.zeros(n_man)
    np.maximum.at(max_slip2, man_id, slip2)
    total_t = np.bincount(man_id, np.sqrt(np.einsum("md,md->m", lam_t, lam_t)), n_man)
    limit = np.bincount(man_id, mu * lam_n, n_man)
    at_limit = total_t >= (1.0 - 1e-3) * limit  # every point of the manifold on its cone
    sliding_now = (at_limit & (limit > 0.0) & (max_slip2 > _SLIP_SPEED ** 2))[man_id]

    # restitution: one pass over the rows that approached fast and met within the step
    bounce = may_bounce & (max_n > 0.0)
    if np.any(bounce):
        for bt in batches:
            s = bt.s
            m = bounce[s]
            if not np.any(m):
                continue
            Xab0 = Xf.take(bt.el).reshape(bt.shape)
            vn = np.einsum("mj,mj->m", Gn[s], Xab0)
            old_n = lam_n[s]
            new_n = np.where(m, np.maximum(old_n - mass_n[s] * (vn - target[s]), 0.0), old_n)
            dln = new_n - old_n  # before the write below: old_n is a view of lam_n
            lam_n[s] = new_n
            bt.apply(Xf, X, Xab0, dln[:, None] * bt.hh[:, 0])

        # time of impact: a bounce on a speculative row happens when the gap g closes, part of
        # the way into the step, but the bodies integrate their separating velocity over the
        # whole step; moving them apart by -(1 + e) g along the normal puts them where the
        # bounce leaves them (measured without it: each bounce at 60 Hz rose ~8% too high, the
        # error compounding over bounces). A manifold's bouncing points share the correction.
        toi = bounce & spec
        if np.any(toi):
            rows_t = np.nonzero(toi)[0]
            share = np.bincount(man_id[rows_t], minlength=n_man)[man_id[rows_t]]
            # with gravity: the bodies close the gap, leave at -e v_n(toi) and fly the rest of the
            # step; the end velocity moved them by dt x target: the difference along the normal is
            # e v_n(toi) tau dt - gap + g_n tau^2 dt / 2 (-(1 + e) gap without gravity)
            tq = tau[rows_t]
            shift = e[rows_t] * vn_toi[rows_t] * tq * dt - sep[rows_t] + 0.5 * gn[rows_t] * tq * tq * dt
            p_pos = shift / unsplit_k[rows_t] / share
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
    return lam_n[inv_perm], lam_t_w[inv_perm], sliding_now[inv_perm]


def _stiffness(hertz: float, dt: float) -> float:
    """dt w^2 (w = 2 pi hertz): a row's load deflection is lambda / (m_eff dt w^2)."""
    w = 2.0 * np.pi * hertz
    return dt * w * w


def _load_deflection(lam_n: Array, unsplit_k: Array, soft: NDArray[np.bool_], man_id: IntArray, n_man: int,
                     hertz: float, dt: float) -> Array:
    """Static deflection (M,) of each row's contact spring under its warm-started load, m: the
    mean over the overlapping rows of its manifold of lambda / (dt m_eff w^2), w = 2 pi hertz.

    A soft row that carries a load W = lambda / dt rests W / (m_eff w^2) deeper than the spring's
    rest point (the implicit spring-damper's equilibrium, see :func:`soft_coefficients`). Moving
    the rest point up by the manifold's mean deflection puts the loaded contact back at the
    allowance while the points of one manifold still share its load by their depths.
    """
    defl = np.where(soft, lam_n * unsplit_k, 0.0) / _stiffness(hertz, dt)
    cnt = np.bincount(man_id, soft.astype(np.float64), n_man)
    mean = np.bincount(man_id, defl, n_man) / np.maximum(cnt, 1.0)
    return mean[man_id]


def _tilt_spread(depth: Array, soft: NDArray[np.bool_], man_id: IntArray, n_man: int) -> Array:
    """Per row (M,), m: the deepest overlap of its manifold's overlapping rows less their mean.

    A manifold whose load is uneven (a body leaning on one side of a box) tilts on its soft
    points, and the load compensation puts only their mean at the allowance. Moving every point's
    rest point up by the spread puts the deepest one there (measured, 4-D pile of 200 mixed
    bodies: lowest point of any box 6.9-7.1 mm under the floor without, see the module notes).
    The shift is the same for every point of the manifold, so it adds no torque.
    """
    d = np.where(soft, depth, 0.0)
    cnt = np.bincount(man_id, soft.astype(np.float64), n_man)
    mean = np.bincount(man_id, d, n_man) / np.maximum(cnt, 1.0)
    deepest = np.zeros(n_man)
    np.maximum.at(deepest, man_id, d)
    return np.maximum(deepest - mean - _TILT_DEADBAND, 0.0)[man_id]


def _solve_rows_compiled(alg: Algebra, bodies: Bodies, c: ContactSet, rows: IntArray, dyn: NDArray[np.bool_],
                         lam_n: Array, lam_t_world: Array, sliding: NDArray[np.bool_], dt: float,
                         settings: Any, salt: int, grav_n: Array) -> tuple[Array, Array, NDArray[np.bool_]]:
    """:func:`_solve_rows` under point batching, by the compiled kernel (same rows, same order)."""
    n = alg.n
    kern = _kernels.load("solver", n)
    a = np.ascontiguousarray(c.body_a[rows])
    b = np.ascontiguousarray(c.body_b[rows])
    inv_m = np.where(dyn, bodies.inv_mass, 0.0)
    inv_I = np.ascontiguousarray(bodies.world_inv_inertia() * dyn[:, None, None])
    X = np.concatenate([bodies.velocity, bodies.angular_velocity], axis=1)
    com = np.ascontiguousarray(bodies.centroids())
    mu_s = combine_friction(bodies.static_friction[a], bodies.static_friction[b])
    hertz = min(float(settings.spring_frequency), HERTZ_CAP / dt)
    rate, mscale, iscale = soft_coefficients(hertz, float(settings.spring_damping_ratio), dt)
    lam_n_out, lam_t_out, sliding_now, push = kern.solve(
        a, b, np.ascontiguousarray(dyn[a]), np.ascontiguousarray(dyn[b]), c.key[rows] ^ np.int64(salt),
        np.ascontiguousarray(c.manifold[rows]), np.ascontiguousarray(c.normal[rows]),
        np.ascontiguousarray(c.point[rows]), np.ascontiguousarray(c.depth[rows]),
        np.ascontiguousarray(c.friction[rows]), mu_s, np.ascontiguousarray(c.restitution[rows]),
        np.ascontiguousarray(sliding), np.ascontiguousarray(lam_n, dtype=np.float64),
        np.ascontiguousarray(lam_t_world, dtype=np.float64), X, inv_m, inv_I, com, float(dt),
        int(settings.solver_passes), int(settings.bias_free_passes), float(rate), float(mscale),
        float(iscale), _stiffness(hertz, dt), float(settings.overlap_allowance),
        float(settings.separation_speed_cap),
        float(settings.bounce_threshold), _STICK_TOL, _SLIP_SPEED, _RELAX_TOL, _RELAX_EXTRA, _RELAX_PUSH,
        _SPEC_TOL, _SPEC_FAST,
        _SHOCK_RATIO,
        _SHOCK_PASSES, combine_friction(bodies.rolling_resistance[a], bodies.rolling_resistance[b]),
        combine_friction(bodies.spin_friction[a], bodies.spin_friction[b]), _COUPLE_PASSES,
        _TILT_DEADBAND, np.ascontiguousarray(grav_n, dtype=np.float64))
    moved = np.nonzero(dyn)[0]
    bodies.velocity[moved] = X[moved, :n]
    bodies.angular_velocity[moved] = X[moved, n:]
    _kernels.load("integrate", n).push_poses(moved, np.ascontiguousarray(push[moved]), bodies.local_centroid,
                                             bodies.position, bodies.rotor, bodies.rotation)
    return lam_n_out, lam_t_out, sliding_now


class _Batch:
    """The rows of one batch: views of the sorted per-row arrays (contiguous slices) and how the
    batch writes its change of the pair states (m, 2w) back into X (N, w).

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

    def __init__(self, batching: str, s: slice, a: IntArray, b: IntArray, man: IntArray, el: IntArray,
                 G: Array, H: Array, K01: Array, Kt_inv: Array, mu: Array, slides: NDArray[np.bool_],
                 lam_n: Array, lam_t: Array, max_n: Array, bias_on: Array, keep_on: Array,
                 gain_on: Array, bias_off: Array, gain_off: Array, may_bounce: NDArray[np.bool_]) -> None:
        self.mode = batching
        self.s = s
        self.el = el[s].reshape(-1)
        m = s.stop - s.start
        self.shape = (m, G.shape[2])
        self.g, self.hh, self.k01, self.kti, self.mu = G[s], H[s], K01[s], Kt_inv[s], mu[s]
        self.mu_tol = mu[s] * (1.0 + _STICK_TOL)
        # sliding rows only matter where a row leaves its cone: most batches of a resting pile
        # have none, and skip that branch
        self.sl = slides[s]
        self.any_sliding = bool(np.any(self.sl))
        self.lam_n, self.lam_t, self.max_n = lam_n[s], lam_t[s], max_n[s]
        self.track_max = bool(np.any(may_bounce[s]))
        self.bias_on, self.keep_on, self.gain_on = bias_on[s], keep_on[s], gain_on[s]
        # the bias-free pass has keep = 1 and, without speculative rows, no bias at all
        self.bias_off = bias_off[s] if np.any(bias_off[s] != 0.0) else None
        self.gain_off = gain_off[s]
        if batching != "point":
            seg = man[s]
            starts = np.r_[0, np.nonzero(seg[1:] != seg[:-1])[0] + 1]
            self.starts = starts
            self.seg = np.stack([a[s][starts], b[s][starts]], axis=1)

    def apply(self, Xf: Array, X: Array, Xab0: Array, dXab: Array) -> None:
        """Add the change dXab (m, 2w) of the batch's pair states (gathered as Xab0) into X."""
        w = X.shape[1]
        if self.mode == "point":
            Xab0 += dXab
            Xf[self.el] = Xab0.reshape(-1)
            return
        dseg = np.add.reduceat(dXab, self.starts, axis=0).reshape(-1, 2, w)
        if self.mode == "manifold":
            X[self.seg] += dseg
        else:
            np.add.at(X, self.seg.reshape(-1), dseg.reshape(-1, w))


def _sweep(batches: list[_Batch], Xf: Array, X: Array, biased: bool) -> None:
    """One Gauss-Seidel pass over the batches.

    Normal row: new lambda_n = max(keep lambda_n - gain (v_n + bias), 0) with keep = 1 - impulse
    scale and gain = mass scale x normal mass in the biased pass, keep = 1 and gain = normal mass
    in the bias-free one. Then friction, which sees this iteration's load.
    """
    for bt in batches:
        Xab0 = Xf.take(bt.el).reshape(bt.shape)
        V = np.einsum("mdj,mj->md", bt.g, Xab0)  # speeds along normal and tangents
        dl = np.empty(V.shape)
        # normal first (friction then sees this iteration's load): accumulated impulse clamped
        # at zero
        old_n = bt.lam_n  # a view: the deltas are taken before lam_n is written
        if biased:
            new_n = bt.keep_on * old_n - bt.gain_on * (V[:, 0] + bt.bias_on)
        elif bt.bias_off is None:
            new_n = old_n - bt.gain_off * V[:, 0]
        else:
            new_n = old_n - bt.gain_off * (V[:, 0] + bt.bias_off)
        np.maximum(new_n, 0.0, out=new_n)
        np.subtract(new_n, old_n, out=dl[:, 0])
        old_n[...] = new_n
        if bt.track_max:
            np.maximum(bt.max_n, new_n, out=bt.max_n)
        # friction: one vector impulse in the tangent space, with the tangent speeds after the
        # normal impulse (K is symmetric: K[1:, 0] = K01), clamped onto the cone's ball
        vt = V[:, 1:]
        vt += bt.k01 * dl[:, :1]
        old_t = bt.lam_t
        new_t = old_t - np.einsum("mde,me->md", bt.kti, vt)
        norm = np.sqrt(np.einsum("md,md->m", new_t, new_t))
        over = norm > bt.mu_tol * new_n
        if over.any():
            radius = bt.mu * new_n
            # a sliding point (kinetic, from the last step) beyond the cone gets its impulse on
            # the ball's rim opposite to its slip: kinetic friction opposes the slip, and the block
            # solve's direction is skewed by the anisotropic effective mass (measured: 6% too
            # little friction on a sliding 3-D box). A sticking point is scaled back onto the ball
            # (following the slip there made a box that static friction holds jitter and creep).
            new_t *= np.divide(radius, norm, out=np.ones_like(norm), where=over)[:, None]
            if bt.any_sliding:
                vnorm = np.sqrt(np.einsum("md,md->m", vt, vt))
                follow = over & bt.sl & (vnorm > 1e-9)
                if follow.any():
                    scale = np.divide(radius, vnorm, out=np.ones_like(vnorm), where=follow)
                    new_t = np.where(follow[:, None], -scale[:, None] * vt, new_t)
        np.subtract(new_t, old_t, out=dl[:, 1:])
        old_t[...] = new_t
        bt.apply(Xf, X, Xab0, np.einsum("md,mdj->mj", dl, bt.hh))


def _shock_sweep(a: IntArray, b: IntArray, sa: NDArray[np.bool_], sb: NDArray[np.bool_], colour: IntArray,
                 lam_n: Array, lam_t: Array, mu: Array, bias_off: Array, ka0: Array, kb0: Array, G: Array,
                 H: Array, Xf: Array, el: IntArray, dyn: NDArray[np.bool_]) -> None:
    """Shock propagation (Guendelman, Bridson and Fedkiw, "Nonconvex rigid bodies with stacking",
    ACM TOG 22(3), SIGGRAPH 2003) on the rows that hold a light body under a much heavier one,
    and on the rows beneath them down to the ground; changes X (through Xf) in place.

    Levels: a body that is not dynamic has level 0, a dynamic one the fewest load-carrying rows
    (normal impulse > 0) to such a body. A row between two dynamic bodies whose parts of the
    normal's inverse effective mass (``ka0``, ``kb0``) differ more than ``_SHOCK_RATIO`` times,
    between different levels, is taken, and so is every load-carrying row between levels under
    the lower body of a taken row. The taken rows are visited from the lowest level up (then by
    batch) ``_SHOCK_PASSES`` times; each treats its lower body as fixed: its normal and friction
    impulses (accumulated apart from the solve's and not warm-started) change only the upper
    body, with the upper body's own effective mass, so that it cannot sink into the lower one
    whatever their mass ratio. Speculative rows still allow closing at gap/dt; the friction of
    solve and shock together stays on the ball of the total load. Gauss-Seidel alone reduces the
    heavy body's sinking speed by about m_light / m_heavy per pass, which is why it cannot.
    """
    held = lam_n > 0.0
    ratio = np.maximum(ka0, kb0) / np.maximum(np.minimum(ka0, kb0), 1e-300)
    cand = held & sa & sb & (ratio > _SHOCK_RATIO)
    if not np.any(cand):
        return
    N = dyn.shape[0]
    big = N + 1
    level = np.where(dyn, big, 0)
    ea, eb = a[held], b[held]
    for _ in range(N):
        new = level.copy()
        np.minimum.at(new, eb, level[ea] + 1)
        np.minimum.at(new, ea, level[eb] + 1)
        new[~dyn] = 0
        if np.array_equal(new, level):
            break
        level = new
    la, lb = level[a], level[b]
    steps = held & (la != lb) & (np.minimum(la, lb) < big)
    cand &= steps
    if not np.any(cand):
        return
    # the rows under the heavy-on-light ones, down to the ground: their lower bodies carry the load
    low_body = np.where(la < lb, a, b)
    up_body = np.where(la < lb, b, a)
    under = np.zeros(N, dtype=bool)
    under[low_body[cand]] = True
    take = cand.copy()
    for _ in range(N):
        more = steps & ~take & under[up_body]
        if not np.any(more):
            break
        take |= more
        under[low_body[more]] = True
    q = np.nonzero(take)[0]
    low_a = la[q] < lb[q]
    low = np.minimum(la[q], lb[q])
    order = np.lexsort((colour[q], low))
    q, low_a, low = q[order], low_a[order], low[order]
    grp = low * (int(colour.max()) + 1) + colour[q]
    cuts = np.r_[0, np.nonzero(grp[1:] != grp[:-1])[0] + 1, q.size]
    w = G.shape[2] // 2
    mask = np.where(low_a[:, None], np.r_[np.zeros(w), np.ones(w)], np.r_[np.ones(w), np.zeros(w)])
    Gq = G[q]
    Hq = H[q] * mask[:, None, :]
    Kup = np.einsum("mij,mlj->mil", Gq, Hq)
    k_up = Kup[:, 0, 0]
    kt_inv = np.linalg.inv(Kup[:, 1:, 1:])
    k01 = Kup[:, 0, 1:]
    acc = np.zeros((q.size, Gq.shape[1]))
    gap_v = bias_off[q]
    load = lam_n[q]
    muq = mu[q]
    for _ in range(_SHOCK_PASSES):
        for i in range(cuts.size - 1):
            s = slice(int(cuts[i]), int(cuts[i + 1]))
            r = q[s]
            e = el[r].reshape(-1)
            Xab = Xf.take(e).reshape(r.size, 2 * w)
            V = np.einsum("mdj,mj->md", Gq[s], Xab)
            old = acc[s].copy()
            new_n = np.maximum(old[:, 0] - (V[:, 0] + gap_v[s]) / k_up[s], 0.0)
            dn = new_n - old[:, 0]
            vt = V[:, 1:] + k01[s] * dn[:, None]
            new_t = old[:, 1:] - np.einsum("mde,me->md", kt_inv[s], vt)
            # total friction (solve + shock) inside the cone of the total load
            lt = lam_t[r] + new_t
            norm = np.sqrt(np.einsum("md,md->m", lt, lt))
            radius = muq[s] * (load[s] + new_n)
            f = np.divide(radius, norm, out=np.ones_like(norm), where=norm > radius)
            new_t = lt * f[:, None] - lam_t[r]
            acc[s, 0] = new_n
            acc[s, 1:] = new_t
            dl = acc[s] - old
            Xab += np.einsum("md,mdj->mj", dl, Hq[s])
            Xf[e] = Xab.reshape(-1)


def _contact_couples(alg: Algebra, batches: list[_Batch], X: Array, D: Array, a: IntArray, b: IntArray,
                     inv_I: Array, split_a: Array, split_b: Array, roll_c: Array, spin_c: Array, load: Array,
                     man_id: IntArray, n_man: int) -> None:
    """Rolling resistance and spin friction at single-point contacts: a couple against the
    relative angular velocity B_B - B_A of the two bodies, in the planes n ^ t_i (rolling) at most
    b lambda, and in the planes t_i ^ t_j of the tangent space (spin) at most c lambda, with
    lambda the row's normal impulse of the last step (``load``) and b, c the row's combined
    ``rolling_resistance`` and ``spin_friction`` (``roll_c``, ``spin_c``, m); changes X in place.

    A point contact takes no torque, so a ball would roll and spin on the ground for ever and a
    pile of balls never comes to rest. A real contact is a small patch: its pressure, shifted
    ahead of a rolling body, gives a couple b N with b the coefficient of rolling resistance, a
    length (Beer and Johnston, "Vector Mechanics for Engineers", sec. 8.9), and its friction a
    couple up to c N against spin about the normal, c a length as well (for uniform pressure over
    a patch of radius a, c = (2/3) mu a: Johnson, "Contact Mechanics", Cambridge University
    Press 1985, sec. 7.3). In n-D
    the n - 1 planes n ^ t_i and the (n-1)(n-2)/2 planes t_i ^ t_j (t the tangent basis) make an
    orthonormal bivector basis S adapted to the contact (2-D: one rolling plane, no spin).

    * Only manifolds of one point get couples: the points of a larger manifold already resist
      rotation with their normal and friction impulses (measured: couples on every point let the
      3-D stack of ten drift 1.2 cm against 0.6 cm).
    * The limits use last step's normal impulse, the load the contact carries at rest, so an
      impact (a new contact) takes no couple and collisions keep their energy and momenta.
    * The k x k block S (I_A^-1 + I_B^-1) S^T (split masses as for friction) is solved as one,
      then the accumulated rolling and spin parts are each kept on their own ball; solved after
      the relax passes, ``_COUPLE_PASSES`` Gauss-Seidel passes over the batches, not
      warm-started. A couple acts on both bodies, so it conserves angular momentum.
    """
    lone = np.bincount(man_id, minlength=n_man)[man_id] == 1
    sel = np.nonzero(lone & (load > 0.0))[0]
    if sel.size == 0:
        return
    n = alg.n
    p = alg.pairs
    ii, jj = np.triu_indices(n - 1, 1)
    first = np.concatenate([np.zeros(n - 1, dtype=np.intp), 1 + ii])  # planes u ^ v: n ^ t_i, t_i ^ t_j
    second = np.concatenate([1 + np.arange(n - 1), 1 + jj])
    U, V = D[sel][:, first], D[sel][:, second]  # (m, k, n)
    S = U[..., p[:, 0]] * V[..., p[:, 1]] - U[..., p[:, 1]] * V[..., p[:, 0]]  # (m, k, k)
    sa_, sb_ = a[sel], b[sel]
    RA = np.einsum("mij,mdj->mdi", inv_I[sa_], S)
    RB = np.einsum("mij,mdj->mdi", inv_I[sb_], S)
    Ks = (split_a[sel, None, None] * np.einsum("mdi,mei->mde", S, RA)
          + split_b[sel, None, None] * np.einsum("mdi,mei->mde", S, RB))
    Ks_inv = np.linalg.inv(Ks)
    roll_limit = roll_c[sel] * load[sel]
    spin_limit = spin_c[sel] * load[sel]
    acc = np.zeros(S.shape[:2])
    r = n - 1
    # the selected rows of each batch (rows are sorted by batch)
    starts = np.searchsorted(sel, [bt.s.start for bt in batches] + [batches[-1].s.stop])
    groups = [slice(int(starts[i]), int(starts[i + 1])) for i in range(len(batches))
              if starts[i + 1] > starts[i]]
    for _ in range(_COUPLE_PASSES):
        for g in groups:
            ga, gb = sa_[g], sb_[g]
            spin = X[gb, n:] - X[ga, n:]  # B_B - B_A, read at the batch start
            vs = np.einsum("mdk,mk->md", S[g], spin)
            old = acc[g].copy()
            new = old - np.einsum("mde,me->md", Ks_inv[g], vs)
            for part, lim in ((slice(0, r), roll_limit[g]), (slice(r, None), spin_limit[g])):
                block = new[:, part]
                norm = np.sqrt(np.einsum("md,md->m", block, block))
                block *= np.divide(lim, norm, out=np.ones_like(norm), where=norm > lim)[:, None]
            acc[g] = new
            dl = new - old
            # summed per body: in "jacobi" batches a body takes several rows (split masses)
            np.add.at(X[:, n:], ga, -np.einsum("md,mdk->mk", dl, RA[g]))
            np.add.at(X[:, n:], gb, np.einsum("md,mdk->mk", dl, RB[g]))


def _push_left(Gn: Array, Xf: Array, el: IntArray, lam_n: Array) -> float:
    """The largest separating normal speed (m/s) of a row that holds a normal impulse: push
    velocity left in the velocities (0 when there is none)."""
    vn = np.einsum("mj,mj->m", Gn, Xf.take(el))
    held = vn[lam_n > 0.0]
    return float(held.max()) if held.size else 0.0


def _spec_left(Gn: Array, Xf: Array, el: IntArray, sep: Array, spec: NDArray[np.bool_], dt: float) -> float:
    """How much farther than its gap a speculative row of ``spec`` (the fast ones) would close
    within the step at the current velocities, m (the largest; 0 when none does)."""
    if not np.any(spec):
        return 0.0
    vn = np.einsum("mj,mj->m", Gn[spec], Xf.take(el[spec]))
    return float(max(np.max(-vn * dt - sep[spec]), 0.0))


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


__all__ = ["BATCHINGS", "DEFAULT_BATCHING", "colour_items", "soft_coefficients", "solve_impulses",
           "tangent_basis"]
