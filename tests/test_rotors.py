"""Tests of rotors in ``core/algebra.py``: exponential, logarithm, matrices, clean-up.

References (named again beside each check):

* scipy.linalg.expm: the rotation matrix of a bivector B is expm(W) with W[j, i] = B_ij,
  W[i, j] = -B_ij (design.md section 2), independent of any geometric-algebra code.
* kingdon 3.x: double rotations as the product of commuting simple rotors
  exp(-a/2 P) = cos(a/2) - sin(a/2) P, and the sandwich R x ~R.
* scipy.spatial.transform.Rotation: a quaternion (w, x, y, z) is the rotor (w, -e23, +e13, -e12) in
  1-based naming, i.e. ours (1, e01, e02, e12) = (w, -z, +y, -x) with (e0, e1, e2) = (x, y, z).
* scipy.stats.special_ortho_group for Haar-random rotations.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import dims
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from kingdon import Algebra as KAlgebra
from ndrigid.core.algebra import Algebra, skew, unskew
from ndrigid.core.errors import InputError
from scipy.linalg import expm
from scipy.spatial.transform import Rotation
from scipy.stats import special_ortho_group

ROTOR_DIMS = (2, 3, 4, 5, 6)


def bivector(n: int, planes: dict[tuple[int, int], float]) -> np.ndarray:
    """Bivector components from {(i, j): value}, i < j, in storage order."""
    alg = Algebra(n)
    B = np.zeros(alg.k)
    index = {tuple(int(v) for v in p): c for c, p in enumerate(alg.pairs)}
    for ij, v in planes.items():
        B[index[ij]] = v
    return B


def in_frame(Q: np.ndarray, B: np.ndarray) -> np.ndarray:
    """The bivector B carried into the frame Q: W -> Q W Q^T."""
    return unskew(Q @ skew(B, Q.shape[0]) @ Q.T)


def assert_same_up_to_sign(a: np.ndarray, b: np.ndarray, atol: float) -> None:
    """Rotors a, b (..., E) agree up to an overall sign per item."""
    s = np.sign(np.einsum("...i,...i->...", a, b))[..., None]
    np.testing.assert_allclose(a, s * b, rtol=0, atol=atol)


def assert_is_rotation(M: np.ndarray, atol: float) -> None:
    n = M.shape[-1]
    np.testing.assert_allclose(np.swapaxes(M, -1, -2) @ M, np.broadcast_to(np.eye(n), M.shape), atol=atol)
    np.testing.assert_allclose(np.linalg.det(M), 1.0, atol=atol * n)


def exact_rotor_defect(alg: Algebra, R: np.ndarray) -> float:
    """How far R is from a true rotor, in the full algebra (Algebra.gp): the largest of
    |~R R - 1| and the non-vector parts of R e_i ~R over every basis vector e_i."""
    Rf = alg.even_to_full(R)
    Rr = alg.reverse(Rf)
    worst = float(np.max(alg.rotor_norm_error(R)))
    for i in range(alg.n):
        e = np.zeros(alg.size)
        e[alg.vector_index[i]] = 1.0
        y = alg.gp(alg.gp(Rf, e), Rr)
        worst = max(worst, float(np.max(np.abs(np.delete(y, alg.vector_index, axis=-1)))))
    return worst


# ---------------------------------------------------------------------------------------------
# exponential against scipy.linalg.expm and kingdon
# ---------------------------------------------------------------------------------------------


@dims(*ROTOR_DIMS)
def test_rotor_matrix_is_expm_of_skew(dim, rng):
    """rotor(B) = exp(-B/2) has rotation matrix scipy.linalg.expm(W(B)), random bivectors with plane
    angles up to a few turns; the rotor is a unit rotor."""
    alg = Algebra(dim)
    B = rng.normal(scale=2.0, size=(40, alg.k))
    R = alg.rotor(B)
    M = alg.rotor_to_matrix(R)
    np.testing.assert_allclose(M, expm(skew(B, dim)), rtol=0, atol=1e-12)
    assert np.max(alg.rotor_norm_error(R)) < 1e-14


@dims(*ROTOR_DIMS)
def test_rotor_turns_e_i_toward_e_j(dim):
    """design.md section 2: rotor(t e_i^e_j) = cos(t/2) - sin(t/2) e_ij turns e_i toward e_j by t."""
    alg = Algebra(dim)
    t = 0.7
    for c, (i, j) in enumerate(alg.pairs):
        B = np.zeros(alg.k)
        B[c] = t
        R = alg.rotor(B)
        want = np.zeros(alg.even_size)
        want[0] = np.cos(t / 2)
        want[alg._even_biv[c]] = -np.sin(t / 2)
        np.testing.assert_allclose(R, want, atol=1e-15)
        x = alg.rotate_vectors(R, np.eye(dim)[i])
        np.testing.assert_allclose(x, np.cos(t) * np.eye(dim)[i] + np.sin(t) * np.eye(dim)[j], atol=1e-15)


def kingdon_simple_rotor(kalg: KAlgebra, blade: str, angle: float):
    """exp(-angle/2 P) = cos(angle/2) - sin(angle/2) P for a unit basis 2-blade P (kingdon names)."""
    return kalg.multivector({"e": np.cos(angle / 2), blade: -np.sin(angle / 2)})


def our_rotor_by_name(alg: Algebra, R: np.ndarray) -> dict[str, float]:
    names = [alg.blade_names()[i] for i in alg.even_index]
    return dict(zip(names, R, strict=True))


def kname(ours: str) -> str:
    """Our 0-based blade name -> kingdon's 1-based name."""
    return "e" if ours == "1" else "e" + "".join(str(int(c) + 1) for c in ours[1:])


_DOUBLE = {
    "generic": (0.4, 1.3),
    "isoclinic": (0.9, 0.9),
    "anti-isoclinic": (0.9, -0.9),
    "near-isoclinic-1e-12": (0.9, 0.9 + 1e-12),
    "near-isoclinic-1e-9": (0.9, 0.9 + 1e-9),
    "near-isoclinic-1e-8": (0.9, 0.9 + 1e-8),  # where B ^ B loses the plane split to rounding
    "near-isoclinic-3e-8": (0.9, 0.9 + 3e-8),
    "near-isoclinic-1e-6": (0.9, 0.9 + 1e-6),
    "near-isoclinic-5e-5": (0.9, 0.9 + 5e-5),  # either side of the closed form's fallback threshold
    "near-isoclinic-2e-4": (0.9, 0.9 + 2e-4),
    "near-isoclinic-1e-2": (0.9, 0.91),
    "half-turns": (np.pi, np.pi),
    "one-half-turn": (np.pi, 0.3),
    "beyond-a-turn": (5.0, 7.0),
    "tiny": (1e-9, 3e-9),
}


@pytest.mark.parametrize("case", list(_DOUBLE), ids=list(_DOUBLE))
@pytest.mark.parametrize("dim,planes", [(4, ("e01", "e23")), (5, ("e01", "e34")), (5, ("e02", "e14"))],
                         ids=["4d-e01-e23", "5d-e01-e34", "5d-e02-e14"])
def test_double_rotation_matches_kingdon_and_expm(dim, planes, case, rng):
    """Double rotations a P1 + b P2 in two orthogonal planes: the rotor equals kingdon's product of
    the commuting simple rotors exp(-a/2 P1) exp(-b/2 P2) (by blade name), and its matrix equals
    expm(W). Also in a random frame (planes not aligned with the axes) against expm."""
    a, b = _DOUBLE[case]
    alg = Algebra(dim)
    kalg = KAlgebra(dim, 0, 0)
    (i1, j1), (i2, j2) = ((int(p[1]), int(p[2])) for p in planes)
    B = bivector(dim, {(i1, j1): a, (i2, j2): b})
    R = alg.rotor(B)
    ref = kalg.gp(kingdon_simple_rotor(kalg, kname(planes[0]), a),
                  kingdon_simple_rotor(kalg, kname(planes[1]), b))
    for nm, v in our_rotor_by_name(alg, R).items():
        assert abs(v - float(getattr(ref, kname(nm)))) < 1e-14, nm
    # expm itself is good to ~1e-14 at angles of several radians, hence 1e-12
    np.testing.assert_allclose(alg.rotor_to_matrix(R), expm(skew(B, dim)), rtol=0, atol=1e-12)
    # the same double rotation seen in a random frame: no axis-aligned shortcut can help
    Q = special_ortho_group.rvs(dim, random_state=rng)
    Bq = in_frame(Q, B)
    Rq = alg.rotor(Bq)
    np.testing.assert_allclose(alg.rotor_to_matrix(Rq), expm(skew(Bq, dim)), rtol=0, atol=1e-12)
    assert np.max(alg.rotor_norm_error(Rq)) < 1e-14


@dims(3, 4, 5)
def test_rotor_sandwich_matches_kingdon(dim, rng):
    """rotate_vectors(R, x) = R x ~R computed by kingdon (sandwich R * x * ~R), by name."""
    alg = Algebra(dim)
    kalg = KAlgebra(dim, 0, 0)
    R = alg.rotor(rng.normal(size=alg.k))
    x = rng.normal(size=dim)
    kR = kalg.multivector({kname(nm): v for nm, v in our_rotor_by_name(alg, R).items()})
    kx = kalg.multivector({f"e{i + 1}": x[i] for i in range(dim)})
    y = kalg.gp(kalg.gp(kR, kx), kalg.reverse(kR))
    ref = np.array([float(getattr(y, f"e{i + 1}")) for i in range(dim)])
    np.testing.assert_allclose(alg.rotate_vectors(R, x), ref, rtol=0, atol=1e-13)


@dims(*ROTOR_DIMS)
def test_exp_is_rotor_of_minus_two_b(dim, rng):
    """Algebra.exp(B) (plain e^B) equals Algebra.rotor(-2B), and e^B e^-B = 1."""
    alg = Algebra(dim)
    B = rng.normal(size=(30, alg.k))
    np.testing.assert_allclose(alg.exp(B), alg.rotor(-2.0 * B), rtol=0, atol=1e-14)
    np.testing.assert_allclose(alg.rotor_mul(alg.exp(B), alg.exp(-B)), alg.identity_rotor((30,)), atol=1e-13)


def _plane_cases(dim: int, rng: np.random.Generator) -> np.ndarray:
    """Random bivectors plus degenerate ones (isoclinic, zero planes) in random frames."""
    alg = Algebra(dim)
    out = [rng.normal(size=alg.k) for _ in range(10)]
    m = dim // 2
    for angles in ([0.8] * m, [0.8] + [0.0] * (m - 1), [1.0 + 1e-9 * q for q in range(m)], [0.0] * m):
        B = bivector(dim, {(2 * q, 2 * q + 1): t for q, t in enumerate(angles)})
        out.append(in_frame(special_ortho_group.rvs(dim, random_state=rng) if dim > 2 else np.eye(2), B))
    return np.array(out)


@dims(*ROTOR_DIMS)
def test_planes_recompose_into_unit_simple_orthogonal_parts(dim, rng):
    """planes(B): sum angle_q unit_q = B; each unit (with positive angle) is unit and simple
    (u ^ u = 0); units are mutually orthogonal (u_p . u_q = 0 and, as planes, W_p W_q = 0) and
    commute (u_p x u_q = 0). Includes isoclinic and zero-angle cases in random frames."""
    alg = Algebra(dim)
    B = _plane_cases(dim, rng)
    lam, U = alg.planes(B)
    m = dim // 2
    assert lam.shape == (len(B), m) and U.shape == (len(B), m, alg.k)
    assert np.all(lam >= 0.0)
    np.testing.assert_allclose(np.einsum("nm,nmk->nk", lam, U), B, rtol=0, atol=1e-12)
    zero = ~np.any(B, axis=-1)
    assert np.any(zero) and not np.any(lam[zero]) and not np.any(U[zero])  # B = 0: no planes at all
    for p in range(m):
        live = lam[:, p] > 1e-12
        up = U[live, p]
        np.testing.assert_allclose(np.linalg.norm(up, axis=-1), 1.0, atol=1e-12)
        wedge = alg.op(alg.multivector(bivector=up), alg.multivector(bivector=up))
        np.testing.assert_allclose(wedge, 0.0, atol=1e-12)  # simple
        for q in range(p + 1, m):
            both = live & (lam[:, q] > 1e-12)
            a, b = U[both, p], U[both, q]
            np.testing.assert_allclose(np.einsum("nk,nk->n", a, b), 0.0, atol=1e-12)
            np.testing.assert_allclose(skew(a, dim) @ skew(b, dim), 0.0, atol=1e-12)
            np.testing.assert_allclose(alg.commutator(a, b), 0.0, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# 3-D: against scipy's quaternions
# ---------------------------------------------------------------------------------------------


def quat_to_rotor(q_wxyz: np.ndarray) -> np.ndarray:
    """(w, x, y, z) -> our 3-D rotor (1, e01, e02, e12) = (w, -z, +y, -x): the rotor
    (w, -e23, +e13, -e12) of reference-checks.md with 1-based e1, e2, e3 = our e0, e1, e2."""
    w, x, y, z = np.moveaxis(q_wxyz, -1, 0)
    return np.stack([w, -z, y, -x], axis=-1)


def test_three_d_rotors_match_scipy_rotation(rng):
    """3-D rotors against scipy.spatial.transform.Rotation: matrices, rotor components up to sign,
    composition (scipy's r1 * r2 applies r2 first, as does R1 R2), and the rotation vector."""
    alg = Algebra(3)
    rot = Rotation.random(50, random_state=rng)
    q = rot.as_quat(scalar_first=True)
    R = quat_to_rotor(q)
    np.testing.assert_allclose(alg.rotor_to_matrix(R), rot.as_matrix(), rtol=0, atol=1e-14)
    assert_same_up_to_sign(alg.matrix_to_rotor(rot.as_matrix()), R, atol=1e-14)
    # composition
    rot2 = Rotation.random(50, random_state=rng)
    R2 = quat_to_rotor(rot2.as_quat(scalar_first=True))
    both = quat_to_rotor((rot * rot2).as_quat(scalar_first=True))
    assert_same_up_to_sign(alg.rotor_mul(R, R2), both, atol=1e-14)
    # rotation vector v = angle * axis: skew form [v]_x gives B = (v_z, -v_y, v_x) in (e01, e02, e12)
    v = rot.as_rotvec()
    B = np.stack([v[:, 2], -v[:, 1], v[:, 0]], axis=-1)
    r = np.array([1.0, 2.0, 3.0])
    np.testing.assert_allclose(skew(B, 3) @ r, np.cross(v, r), atol=1e-14)
    assert_same_up_to_sign(alg.rotor(B), R, atol=1e-14)
    # and back: rotation_bivector recovers the same rotation (angle in [0, 2 pi] with the rotor's sign)
    np.testing.assert_allclose(alg.rotor(alg.rotation_bivector(R)), R, rtol=0, atol=1e-13)


# ---------------------------------------------------------------------------------------------
# matrices to rotors
# ---------------------------------------------------------------------------------------------


@dims(*ROTOR_DIMS)
def test_matrix_to_rotor_round_trip(dim, rng):
    """matrix -> rotor -> matrix for Haar-random rotations (scipy.stats.special_ortho_group); the
    rotor is unit with non-negative scalar part; rotor -> matrix -> rotor returns it up to sign."""
    alg = Algebra(dim)
    M = special_ortho_group.rvs(dim, size=30, random_state=rng)
    R = alg.matrix_to_rotor(M)
    np.testing.assert_allclose(alg.rotor_to_matrix(R), M, rtol=0, atol=1e-13)
    assert np.max(alg.rotor_norm_error(R)) < 1e-14
    assert np.all(R[:, 0] >= 0.0)
    R0 = alg.rotor(rng.normal(scale=2.0, size=(30, alg.k)))
    assert_same_up_to_sign(alg.matrix_to_rotor(alg.rotor_to_matrix(R0)), R0, atol=1e-13)
    # exact special cases: identity, and half turns (scalar part 0)
    np.testing.assert_allclose(alg.matrix_to_rotor(np.eye(dim)), alg.identity_rotor(), atol=1e-15)
    half = alg.rotor(in_frame(M[0], bivector(dim, {(0, 1): np.pi})))
    assert_same_up_to_sign(alg.matrix_to_rotor(alg.rotor_to_matrix(half)), half, atol=1e-13)


@dims(*ROTOR_DIMS)
def test_matrix_to_rotor_sign_follows_previous(dim, rng):
    """With ``previous``, the rotor's sign is continuous: along t -> rotation by t in a fixed plane for
    t in [0, 3 pi] (the scalar part changes sign at t = pi), chaining previous reproduces the continuous
    lift rotor(t P); without it the scalar part stays >= 0 (the other lift past t = pi)."""
    alg = Algebra(dim)
    P = in_frame(special_ortho_group.rvs(dim, random_state=rng), bivector(dim, {(0, 1): 1.0}))
    ts = np.linspace(0.0, 3 * np.pi, 48)  # steps of 0.2 rad; t = pi is not hit exactly
    want = alg.rotor(ts[:, None] * P)
    M = alg.rotor_to_matrix(want)
    prev = alg.identity_rotor()
    for k in range(len(ts)):  # the sequential use: each step's previous is the last result
        prev = alg.matrix_to_rotor(M[k], previous=prev)
        np.testing.assert_allclose(prev, want[k], rtol=0, atol=1e-12)
    plain = alg.matrix_to_rotor(M)
    assert np.any(want[:, 0] < -0.1)  # the path does cross into the other lift
    np.testing.assert_allclose(plain, np.sign(want[:, :1]) * want, rtol=0, atol=1e-12)
    # batched previous with mixed signs
    R = alg.rotor(rng.normal(size=(6, alg.k)))
    signs = np.array([1, -1, 1, -1, -1, 1.0])[:, None]
    np.testing.assert_allclose(alg.matrix_to_rotor(alg.rotor_to_matrix(R), previous=signs * R), signs * R,
                               atol=1e-13)


# ---------------------------------------------------------------------------------------------
# logarithm
# ---------------------------------------------------------------------------------------------


def _log_cases(dim: int, rng: np.random.Generator) -> np.ndarray:
    """Bivectors whose rotors test the logarithm: identity, random, half turns in one and in two
    planes (axis-aligned and in random frames), near half turns, and angles past a full turn."""
    alg = Algebra(dim)
    out = [np.zeros(alg.k)]
    out += list(rng.normal(scale=1.5, size=(8, alg.k)))
    m = dim // 2
    special = [[np.pi], [np.pi - 1e-7], [2 * np.pi], [2 * np.pi - 0.1], [3 * np.pi]]
    if m >= 2:
        special += [[np.pi, np.pi], [np.pi, 0.6], [np.pi, np.pi - 1e-6], [0.5, 0.5], [2 * np.pi, np.pi]]
    if m >= 3:
        special += [[np.pi, np.pi, np.pi], [np.pi, 2.0, 1.0]]
    for angles in special:
        B = bivector(dim, {(2 * q, 2 * q + 1): t for q, t in enumerate(angles)})
        out.append(B)
        for _ in range(2):
            out.append(in_frame(special_ortho_group.rvs(dim, random_state=rng), B))
    return np.array(out)


@dims(*ROTOR_DIMS)
def test_rotation_bivector_and_log_invert_the_exponentials(dim, rng):
    """rotor(rotation_bivector(R)) = R and exp(log(R)) = R, including the identity and half turns in
    one or two planes (where M + 1 is singular); log_matrix(M) gives expm(W) = M with plane angles
    in [0, pi]; log(R) = -rotation_bivector(R)/2."""
    alg = Algebra(dim)
    B = _log_cases(dim, rng)
    R = alg.rotor(B)
    Bb = alg.rotation_bivector(R)
    np.testing.assert_allclose(alg.rotor(Bb), R, rtol=0, atol=1e-12)
    L = alg.log(R)
    np.testing.assert_allclose(alg.exp(L), R, rtol=0, atol=1e-12)
    np.testing.assert_allclose(L, -0.5 * Bb, rtol=0, atol=1e-15)
    lam, _ = alg.planes(L)
    assert np.all(lam <= np.pi + 1e-9)  # principal: plane angles of log in [0, pi]
    M = alg.rotor_to_matrix(R)
    Lm = alg.log_matrix(M)
    np.testing.assert_allclose(expm(skew(Lm, dim)), M, rtol=0, atol=1e-12)
    assert np.all(alg.planes(Lm)[0] <= np.pi + 1e-9)
    np.testing.assert_allclose(alg.rotation_bivector(alg.identity_rotor()), 0.0, atol=0)


@dims(2, 3, 4, 5)
def test_log_of_half_turn_in_a_generic_frame(dim, rng):
    """Regression: a half turn whose -1 eigenvalues the real Schur form does not put side by side
    (here: a 3-D half turn in a random frame gives diag(-1, 1, -1)) used to give a wrong logarithm.
    Checked against scipy.linalg.expm."""
    alg = Algebra(dim)
    for seed in range(6):
        Q = special_ortho_group.rvs(dim, random_state=seed) if dim > 2 else np.eye(2)
        B = in_frame(Q, bivector(dim, {(0, 1): np.pi}))
        M = expm(skew(B, dim))
        np.testing.assert_allclose(expm(skew(alg.log_matrix(M), dim)), M, rtol=0, atol=1e-12)
        R = alg.rotor(B)
        np.testing.assert_allclose(alg.rotor(alg.rotation_bivector(R)), R, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# clean-up of drifted rotors
# ---------------------------------------------------------------------------------------------


@dims(4, 5)
def test_cleanup_after_long_compounding(dim):
    """100,000 compounding small updates R <- rotor(h B) R (one Python loop of rotor_mul on a batch of
    8 rotors) drift off the unit rotors by rounding; rotor_cleanup and rotor_normalize bring them
    back: |~R R - 1| and the matrix's orthogonality error at rounding level (asserted < 1e-14, the
    required bound being 1e-12), and the clean rotor moves by no more than the drift."""
    alg = Algebra(dim)
    rng = np.random.default_rng(2024 + dim)
    steps, count = 100_000, 8
    R = alg.identity_rotor((count,))
    chunk = 10_000
    for _ in range(steps // chunk):
        U = alg.rotor(rng.normal(scale=0.02, size=(chunk, count, alg.k)))
        for s in range(chunk):
            R = alg.rotor_mul(U[s], R)
    drift = np.max(alg.rotor_norm_error(R))
    assert drift > 1e-14  # the loop really did accumulate rounding error
    M = alg.rotor_to_matrix(R)
    for clean in (alg.rotor_cleanup(R), alg.rotor_normalize(R)):
        assert np.max(alg.rotor_norm_error(clean)) < 1e-14
        Mc = alg.rotor_to_matrix(clean)
        assert_is_rotation(Mc, atol=1e-14)
        np.testing.assert_allclose(clean, R, rtol=0, atol=10 * drift)
        np.testing.assert_allclose(Mc, M, rtol=0, atol=10 * drift)


@dims(2, 3, 4, 5, 6)
@pytest.mark.parametrize("noise", [1e-9, 1e-6, 1e-3], ids=lambda v: f"noise{v:g}")
def test_cleanup_of_perturbed_rotors_gives_exact_rotors(dim, noise, rng):
    """Rotors perturbed in every even component (which for n >= 4 leaves the rotor group) are
    cleaned to exact rotors, checked in the full algebra with Algebra.gp: ~R R = 1 and R e_i ~R a pure
    vector, to 1e-12. For n = 6 this goes through the SVD + matrix_to_rotor route."""
    alg = Algebra(dim)
    R0 = alg.rotor(rng.normal(size=(10, alg.k)))
    R = R0 + noise * rng.normal(size=R0.shape)
    clean = alg.rotor_cleanup(R)
    assert exact_rotor_defect(alg, clean) < 1e-12
    assert_is_rotation(alg.rotor_to_matrix(clean), atol=1e-12)
    np.testing.assert_allclose(clean, R0, rtol=0, atol=100 * noise)  # near the original, same sign
    if dim <= 5:
        # the default two Newton steps square the error twice: enough for per-step drift, not for
        # an error of 1e-3 (about 1e-10 left in 5-D); a third step finishes it
        steps = 2 if noise <= 1e-6 else 3
        assert exact_rotor_defect(alg, alg.rotor_normalize(R, steps=steps)) < 1e-12


def test_six_d_cleanup_handles_non_rotor_with_unit_norm():
    """In 6-D, X = cos(a) + sin(a) e012345 has ~X X = 1 but is no rotor (X e_0 ~X has a grade-5 part):
    the algebraic renormalisation keeps it, rotor_cleanup returns a true rotor. X's matrix is
    cos(2a) I (from the vector part of the sandwich), whose nearest rotation is I, so the clean rotor
    is the identity (sign continuous with X's scalar part)."""
    alg = Algebra(6)
    a = 0.3
    X = np.zeros(alg.even_size)
    X[0] = np.cos(a)
    X[-1] = np.sin(a)
    assert alg.blade_names()[alg.even_index[-1]] == "e012345"
    assert alg.rotor_norm_error(X) < 1e-15
    assert exact_rotor_defect(alg, alg.rotor_normalize(X)) > 0.1  # not a rotor, and normalize can't tell
    clean = alg.rotor_cleanup(X)
    assert exact_rotor_defect(alg, clean) < 1e-12
    np.testing.assert_allclose(clean, alg.identity_rotor(), atol=1e-12)


# ---------------------------------------------------------------------------------------------
# hypothesis properties
# ---------------------------------------------------------------------------------------------

_angles = st.floats(min_value=-7.0, max_value=7.0, allow_nan=False, allow_infinity=False)


@st.composite
def _bivector_pairs(draw):
    n = draw(st.integers(min_value=2, max_value=6))
    k = n * (n - 1) // 2
    return n, draw(hnp.arrays(np.float64, (2, k), elements=_angles))


@settings(max_examples=50, deadline=None)
@given(_bivector_pairs())
def test_rotor_composition_is_matrix_product(case):
    """rotor_to_matrix(R1 R2) = M1 M2 (R1 R2 applies R2 first), and each M = expm(W) (scipy)."""
    n, (B1, B2) = case
    alg = Algebra(n)
    R1, R2 = alg.rotor(B1), alg.rotor(B2)
    M1, M2 = alg.rotor_to_matrix(R1), alg.rotor_to_matrix(R2)
    np.testing.assert_allclose(alg.rotor_to_matrix(alg.rotor_mul(R1, R2)), M1 @ M2, rtol=0, atol=1e-13)
    np.testing.assert_allclose(M1, expm(skew(B1, n)), rtol=0, atol=1e-11)


@settings(max_examples=50, deadline=None)
@given(_bivector_pairs())
def test_exp_of_log_is_identity_map(case):
    """exp(log R) = R and rotor(rotation_bivector(R)) = R for rotors of arbitrary bivectors."""
    n, (B, _) = case
    alg = Algebra(n)
    R = alg.rotor(B)
    np.testing.assert_allclose(alg.exp(alg.log(R)), R, rtol=0, atol=1e-10)
    np.testing.assert_allclose(alg.rotor(alg.rotation_bivector(R)), R, rtol=0, atol=1e-10)


@settings(max_examples=50, deadline=None)
@given(_bivector_pairs())
def test_matrix_rotor_matrix_round_trip(case):
    """rotation matrix -> matrix_to_rotor -> rotor_to_matrix returns the matrix."""
    n, (B, _) = case
    alg = Algebra(n)
    M = expm(skew(B, n))
    np.testing.assert_allclose(alg.rotor_to_matrix(alg.matrix_to_rotor(M)), M, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# batching over leading axes
# ---------------------------------------------------------------------------------------------


@dims(*ROTOR_DIMS)
def test_rotor_operations_accept_leading_axes(dim, rng):
    """(3, 4, m, ...) inputs give the flattened batch's results reshaped; the batch mixes generic and
    isoclinic bivectors, so the exponential's masked fallback writes into a multi-axis batch."""
    alg = Algebra(dim)
    lead = (3, 4, 5)
    B = rng.normal(size=lead + (alg.k,))
    if dim >= 4:
        B[1, 2, 3] = in_frame(special_ortho_group.rvs(dim, random_state=rng),
                              bivector(dim, {(0, 1): 0.6, (2, 3): 0.6}))
        B[0, 0, 0] = 0.0
    Bf = B.reshape(-1, alg.k)

    def same(fn, *args, trailing, atol=1e-13):
        out = fn(*args)
        flat = fn(*(a.reshape((-1,) + a.shape[len(lead):]) for a in args))
        assert out.shape == lead + trailing
        np.testing.assert_allclose(out, flat.reshape(out.shape), rtol=0, atol=atol)
        return out

    E = alg.even_size
    R = same(alg.rotor, B, trailing=(E,))
    same(alg.exp, B, trailing=(E,))
    np.testing.assert_allclose(R.reshape(-1, E), np.array([alg.rotor(b) for b in Bf]), rtol=0, atol=1e-14)
    R2 = alg.rotor(rng.normal(size=lead + (alg.k,)))
    same(alg.rotor_mul, R, R2, trailing=(E,))
    M = same(alg.rotor_to_matrix, R, trailing=(dim, dim))
    same(alg.matrix_to_rotor, M, trailing=(E,))
    # the logarithm's plane split is ill-conditioned when two plane angles are close (here 2.22 and
    # 2.25 in one 6-D item): rounding-level differences between the two evaluations grow to ~1e-13
    same(alg.rotation_bivector, R, trailing=(alg.k,), atol=1e-11)
    same(alg.log, R, trailing=(alg.k,), atol=1e-11)
    same(alg.rotor_normalize, 1.01 * R, trailing=(E,))
    same(alg.rotor_cleanup, 1.01 * R, trailing=(E,))
    same(alg.rotate_vectors, R, rng.normal(size=lead + (dim,)), trailing=(dim,))
    same(alg.rotate_bivectors, R, rng.normal(size=lead + (alg.k,)), trailing=(alg.k,))
    lam, U = alg.planes(B)
    assert lam.shape == lead + (dim // 2,) and U.shape == lead + (dim // 2, alg.k)
    assert alg.rotor_norm_error(R).shape == lead
    # one rotor broadcasts against a batch
    single = R[0, 0, 0]
    np.testing.assert_allclose(alg.rotor_mul(single, R2),
                               alg.rotor_mul(np.broadcast_to(single, R2.shape), R2), atol=1e-15)


# ---------------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------------


def test_rotor_functions_refuse_bad_input():
    """Wrong trailing shapes, non-finite values, non-rotations and non-unit rotors: an InputError
    (a ValueError) naming the argument and the got/expected shape or value."""
    alg = Algebra(4)
    R = alg.rotor(np.full(6, 0.3))
    with pytest.raises(InputError, match=r"bivector: expected trailing shape \(6,\) \(components last\), "
                                         r"got shape \(2, 5\)"):
        alg.rotor(np.zeros((2, 5)))
    with pytest.raises(InputError, match=r"bivector: expected finite values, got nan at index \(1, 2\)"):
        B = np.zeros((2, 6))
        B[1, 2] = np.nan
        alg.rotor(B)
    with pytest.raises(InputError, match=r"bivector: expected finite values, got inf"):
        alg.exp(np.array([0, 0, np.inf, 0, 0, 0]))
    with pytest.raises(InputError, match=r"R1: expected a rotor \(even multivector\) with trailing length 8 "
                                         r"\(2\*\*3\), got shape \(3, 16\)"):
        alg.rotor_mul(np.zeros((3, 16)), R)
    with pytest.raises(InputError, match=r"R2: .*trailing length 8.*got shape \(7,\)"):
        alg.rotor_mul(R, np.zeros(7))
    with pytest.raises(InputError, match=r"R: .*trailing length 8.*got shape \(4, 4\)"):
        alg.rotor_to_matrix(np.eye(4))
    with pytest.raises(InputError, match=r"M: expected trailing shape \(4, 4\).*got shape \(3, 3\)"):
        alg.matrix_to_rotor(np.eye(3))
    with pytest.raises(InputError, match=r"M: expected finite values, got nan"):
        alg.matrix_to_rotor(np.full((4, 4), np.nan))
    with pytest.raises(InputError, match=r"M: expected rotation matrices .*det -1"):
        alg.matrix_to_rotor(np.diag([1.0, 1.0, 1.0, -1.0]))
    with pytest.raises(InputError, match=r"M: expected rotation matrices .*orthogonality error 0\.21"):
        alg.matrix_to_rotor(1.1 * np.eye(4))
    with pytest.raises(InputError, match=r"previous: .*trailing length 8.*got shape \(6,\)"):
        alg.matrix_to_rotor(np.eye(4), previous=np.zeros(6))
    with pytest.raises(InputError, match=r"M: expected trailing shape \(4, 4\)"):
        alg.log_matrix(np.eye(5))


def test_check_rotor_names_the_argument_and_the_error():
    """check_rotor passes unit rotors through and refuses far-from-unit ones, wrong shapes and NaN,
    naming the argument (default 'rotor') and the measured |~R R - 1|."""
    alg = Algebra(4)
    R = alg.rotor(np.array([[0.3, -0.2, 0.5, 0.1, 0.9, -1.0]]))
    np.testing.assert_array_equal(alg.check_rotor(R), R)
    with pytest.raises(InputError, match=r"rotor: expected a unit rotor \(\|~R R - 1\| <= 1e-06\), "
                                         r"got one with \|~R R - 1\| = 3"):
        alg.check_rotor(2.0 * R)
    with pytest.raises(InputError, match=r"orientation: expected a unit rotor .* = 0\.21"):
        alg.check_rotor(1.1 * R, name="orientation")
    with pytest.raises(InputError, match=r"orientation: expected trailing shape \(8,\).*got shape \(1, 6\)"):
        alg.check_rotor(np.zeros((1, 6)), name="orientation")
    with pytest.raises(InputError, match=r"rotor: expected finite values, got nan"):
        alg.check_rotor(np.full(8, np.nan))
    assert alg.check_rotor(1.0001 * R, tol=1e-3).shape == R.shape
