"""Tests of the algebra tables and products in ``core/algebra.py``.

References (named again beside each check):

* kingdon 3.x, an independent geometric-algebra library, for the geometric, outer and
  left-contraction products and the commutator in Cl(n, 0), n = 2..5. Its blades are named with
  1-based indices (``e``, ``e1``, ``e12``, ...); ours are 0-based (``1``, ``e0``, ``e01``, ...).
  Every coefficient is moved between the two by *name*, never by position.
* The definition of the second compound matrix by 2 x 2 minors, and the Cauchy-Binet formula
  C2(AB) = C2(A) C2(B) (Horn and Johnson, *Matrix Analysis*, from memory: 0.8.1).
* Hand-computed blade products (common practice: e_i e_j = -e_j e_i for i != j, e_i e_i = 1).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from conftest import ALL_DIMS, dims
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from kingdon import Algebra as KAlgebra
from ndrigid.bench.algebra import run_algebra_bench
from ndrigid.core.algebra import Algebra, bivector_pairs, second_compound, skew, unskew
from ndrigid.core.errors import InputError, InputTypeError

# ---------------------------------------------------------------------------------------------
# kingdon bridge: coefficients by blade name
# ---------------------------------------------------------------------------------------------


def kname(ours: str) -> str:
    """Our blade name (0-based, scalar '1') -> kingdon's default name (1-based, scalar 'e')."""
    return "e" if ours == "1" else "e" + "".join(str(int(c) + 1) for c in ours[1:])


def to_kingdon(kalg: KAlgebra, alg: Algebra, x: np.ndarray):
    """(N, 2**n) array in our blade order -> one kingdon multivector with (N,) array coefficients."""
    return kalg.multivector({kname(nm): x[:, a].copy() for a, nm in enumerate(alg.blade_names())})


def from_kingdon(kmv, alg: Algebra, count: int) -> np.ndarray:
    """kingdon multivector -> (count, 2**n) array in our blade order (absent blades read as 0)."""
    out = np.zeros((count, alg.size))
    for a, nm in enumerate(alg.blade_names()):
        out[:, a] = np.broadcast_to(np.asarray(getattr(kmv, kname(nm)), dtype=float), (count,))
    return out


def random_multivectors(alg: Algebra, rng: np.random.Generator, count: int) -> np.ndarray:
    """Random multivectors of mixed grades: full ones, single-grade ones and random grade subsets."""
    x = rng.normal(size=(count, alg.size))
    for row in range(count):
        kind = row % 3
        if kind == 1:  # one grade only
            x[row, alg.grades != row % (alg.n + 1)] = 0.0
        elif kind == 2:  # a random subset of grades
            keep = rng.random(alg.n + 1) < 0.5
            x[row, ~keep[alg.grades]] = 0.0
    return x


def basis(alg: Algebra, name: str) -> np.ndarray:
    """Full multivector of one basis blade, by our name."""
    x = np.zeros(alg.size)
    x[alg.blade_names().index(name)] = 1.0
    return x


# ---------------------------------------------------------------------------------------------
# blade tables
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5, 6)
def test_blade_order_is_grade_then_lexicographic(dim):
    """Storage order (design.md section 2): by grade, then lexicographic index tuple; the
    bivector slice is the pair order of bivector_pairs; rotors hold the even blades, scalar first."""
    alg = Algebra(dim)
    combos = [c for r in range(dim + 1) for c in itertools.combinations(range(dim), r)]
    assert alg.blade_names() == ["1" if not c else "e" + "".join(map(str, c)) for c in combos]
    assert list(alg.masks) == [sum(1 << i for i in c) for c in combos]
    assert list(alg.grades) == [len(c) for c in combos]
    names = np.array(alg.blade_names())
    assert list(names[alg.bivector_index]) == [f"e{i}{j}" for i, j in bivector_pairs(dim)]
    assert list(names[alg.vector_index]) == [f"e{i}" for i in range(dim)]
    even = [nm for nm, g in zip(alg.blade_names(), alg.grades, strict=True) if g % 2 == 0]
    assert list(names[alg.even_index]) == even and even[0] == "1"
    assert (alg.k, alg.size, alg.even_size) == (dim * (dim - 1) // 2, 2**dim, 2 ** (dim - 1))


def test_three_d_even_blade_order():
    """The 3-D rotor layout that the scipy quaternion mapping in test_rotors relies on."""
    alg = Algebra(3)
    assert [alg.blade_names()[i] for i in alg.even_index] == ["1", "e01", "e02", "e12"]


def test_algebra_is_cached_per_dimension():
    assert Algebra(4) is Algebra(4)
    assert Algebra(3) is not Algebra(4)


def test_hand_computed_blade_products():
    """Hand-computed products (common practice), and kingdon's operator choice checked on them:
    e0 e1 = e01, e1 e0 = -e01, e01 e01 = -1, e0 ^ e1 = e01, e0 ^ e0 = 0, e0 _| e01 = e1,
    e1 _| e01 = -e0, e01 _| e0 = 0 (a contraction onto a lower grade vanishes)."""
    alg = Algebra(3)
    e0, e1, e01, e012 = (basis(alg, nm) for nm in ("e0", "e1", "e01", "e012"))
    one = basis(alg, "1")
    np.testing.assert_array_equal(alg.gp(e0, e1), e01)
    np.testing.assert_array_equal(alg.gp(e1, e0), -e01)
    np.testing.assert_array_equal(alg.gp(e01, e01), -one)
    np.testing.assert_array_equal(alg.gp(e012, e012), -one)  # I^2 = -1 in 3-D
    np.testing.assert_array_equal(alg.op(e0, e1), e01)
    np.testing.assert_array_equal(alg.op(e0, e0), 0 * one)
    np.testing.assert_array_equal(alg.lc(e0, e01), e1)
    np.testing.assert_array_equal(alg.lc(e1, e01), -e0)
    np.testing.assert_array_equal(alg.lc(e01, e0), 0 * one)
    assert alg.sp(e01, e01) == -1.0
    # kingdon: `lc` is the left contraction (its `|` is the symmetric inner product, which gives
    # e12 | e1 = -e2 where the left contraction gives 0)
    k = KAlgebra(3, 0, 0)
    kb = k.blades
    assert kb["e2"].values()[0] == 1.0
    lc = k.lc(kb["e1"], kb["e12"])
    assert lc.keys() == kb["e2"].keys() and lc.values()[0] == 1.0
    assert not np.any(k.lc(kb["e12"], kb["e1"]).values())


# ---------------------------------------------------------------------------------------------
# products against kingdon
# ---------------------------------------------------------------------------------------------


@dims(*ALL_DIMS)
@pytest.mark.parametrize("product", ["gp", "op", "lc"])
def test_products_match_kingdon(dim, product, rng):
    """Geometric, outer and left-contraction products against kingdon 3.x (by blade name), on random
    multivectors of mixed grades, to 1e-12."""
    alg = Algebra(dim)
    kalg = KAlgebra(dim, 0, 0)
    count = 60
    x = random_multivectors(alg, rng, count)
    y = random_multivectors(alg, rng, count)
    ours = getattr(alg, product)(x, y)
    ref = from_kingdon(getattr(kalg, product)(to_kingdon(kalg, alg, x), to_kingdon(kalg, alg, y)), alg, count)
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)
    # the scalar product is the scalar part of the geometric product (common practice)
    np.testing.assert_allclose(alg.sp(x, y), ref[:, 0] if product == "gp" else alg.gp(x, y)[:, 0],
                               rtol=0, atol=1e-12)


@dims(*ALL_DIMS)
def test_reverse_matches_kingdon(dim, rng):
    """Reverse ~x against kingdon's reverse (by name)."""
    alg = Algebra(dim)
    kalg = KAlgebra(dim, 0, 0)
    x = random_multivectors(alg, rng, 12)
    ref = from_kingdon(kalg.reverse(to_kingdon(kalg, alg, x)), alg, 12)
    np.testing.assert_allclose(alg.reverse(x), ref, rtol=0, atol=0)


@dims(*ALL_DIMS)
def test_commutator_matches_kingdon_and_skew_form(dim, rng):
    """Commutator product a x b = grade-2 part of (ab - ba)/2, from kingdon; in skew form
    W(a x b) = W_b W_a - W_a W_b (design.md section 2 convention, follows from W r = r . B)."""
    alg = Algebra(dim)
    kalg = KAlgebra(dim, 0, 0)
    count = 40
    a = rng.normal(size=(count, alg.k))
    b = rng.normal(size=(count, alg.k))
    ka = to_kingdon(kalg, alg, alg.multivector(bivector=a))
    kb = to_kingdon(kalg, alg, alg.multivector(bivector=b))
    ref_full = from_kingdon(0.5 * (kalg.gp(ka, kb) - kalg.gp(kb, ka)), alg, count)
    ref = ref_full[:, alg.bivector_index]
    # (ab - ba)/2 of two bivectors is a pure bivector (common practice): nothing else to drop
    np.testing.assert_allclose(np.delete(ref_full, alg.bivector_index, axis=1), 0.0, atol=1e-12)
    ours = alg.commutator(a, b)
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)
    Wa, Wb = skew(a, dim), skew(b, dim)
    np.testing.assert_allclose(skew(ours, dim), Wb @ Wa - Wa @ Wb, rtol=0, atol=1e-12)
    # the ad-matrix form gives the same map
    np.testing.assert_allclose(np.einsum("nij,nj->ni", alg.commutator_matrix(a), b), ours, atol=1e-12)


@dims(*ALL_DIMS)
def test_multivector_grade_parts(dim, rng):
    """multivector / grade / vector_part / bivector_part place and read components by blade grade."""
    alg = Algebra(dim)
    s, v, B = rng.normal(size=3), rng.normal(size=(3, dim)), rng.normal(size=(3, alg.k))
    x = alg.multivector(scalar=s, vector=v, bivector=B)
    names = alg.blade_names()
    for i in range(dim):
        np.testing.assert_array_equal(x[:, names.index(f"e{i}")], v[:, i])
    for c, (i, j) in enumerate(alg.pairs):
        np.testing.assert_array_equal(x[:, names.index(f"e{i}{j}")], B[:, c])
    np.testing.assert_array_equal(x[:, 0], s)
    np.testing.assert_array_equal(alg.vector_part(x), v)
    np.testing.assert_array_equal(alg.bivector_part(x), B)
    np.testing.assert_array_equal(alg.grade(x, 1)[:, alg.vector_index], v)
    assert not np.any(np.delete(alg.grade(x, 1), alg.vector_index, axis=1))


@dims(*ALL_DIMS)
def test_vector_contraction_is_skew_action(dim, rng):
    """design.md section 2: W r equals the left contraction r _| B (velocity of a point v + W r),
    and a positive B_01 turns e_0 toward e_1."""
    alg = Algebra(dim)
    r = rng.normal(size=(10, dim))
    B = rng.normal(size=(10, alg.k))
    lc = alg.vector_part(alg.lc(alg.multivector(vector=r), alg.multivector(bivector=B)))
    np.testing.assert_allclose(lc, np.einsum("nij,nj->ni", skew(B, dim), r), atol=1e-12)
    e01 = np.zeros(alg.k)
    e01[0] = 1.0
    np.testing.assert_array_equal(skew(e01, dim) @ np.eye(dim)[0], np.eye(dim)[1])


# ---------------------------------------------------------------------------------------------
# hypothesis properties
# ---------------------------------------------------------------------------------------------

_coeffs = st.floats(min_value=-10.0, max_value=10.0, allow_nan=False, allow_infinity=False)


@st.composite
def _mv_triples(draw):
    n = draw(st.integers(min_value=2, max_value=5))
    arr = draw(hnp.arrays(np.float64, (3, 2**n), elements=_coeffs))
    return n, arr


@settings(max_examples=50, deadline=None)
@given(_mv_triples())
def test_geometric_product_is_associative(case):
    """(xy)z = x(yz) (the geometric product is associative: common practice / any GA text)."""
    n, (x, y, z) = case
    alg = Algebra(n)
    left = alg.gp(alg.gp(x, y), z)
    right = alg.gp(x, alg.gp(y, z))
    scale = 1.0 + np.max(np.abs(x)) * np.max(np.abs(y)) * np.max(np.abs(z))
    np.testing.assert_allclose(left, right, rtol=0, atol=1e-12 * scale * 2**n)


@settings(max_examples=50, deadline=None)
@given(_mv_triples())
def test_products_are_bilinear_and_outer_is_associative(case):
    """x(y + 2z) = xy + 2xz for gp, op, lc; (x ^ y) ^ z = x ^ (y ^ z) (common practice)."""
    n, (x, y, z) = case
    alg = Algebra(n)
    scale = 1.0 + np.max(np.abs(x)) * (np.max(np.abs(y)) + np.max(np.abs(z))) * (1 + np.max(np.abs(z)))
    tol = 1e-12 * scale * 2**n
    for prod in (alg.gp, alg.op, alg.lc):
        np.testing.assert_allclose(prod(x, y + 2 * z), prod(x, y) + 2 * prod(x, z), rtol=0, atol=tol)
    np.testing.assert_allclose(alg.op(alg.op(x, y), z), alg.op(x, alg.op(y, z)), rtol=0, atol=tol)


# ---------------------------------------------------------------------------------------------
# second compound matrix
# ---------------------------------------------------------------------------------------------


def second_compound_by_minors(M: np.ndarray) -> np.ndarray:
    """C2 from its definition: the 2 x 2 minor of rows (i, j), columns (k, l), explicit loops
    (Horn and Johnson, Matrix Analysis, from memory: 0.8.1)."""
    n = M.shape[0]
    pairs = list(itertools.combinations(range(n), 2))
    C = np.zeros((len(pairs), len(pairs)))
    for r, (i, j) in enumerate(pairs):
        for c, (k, l_) in enumerate(pairs):
            C[r, c] = np.linalg.det(M[np.ix_([i, j], [k, l_])])
    return C


@dims(2, 3, 4, 5, 6)
def test_second_compound_is_matrix_of_minors(dim, rng):
    """second_compound against the definition by 2 x 2 minors, for general (non-orthogonal) M."""
    for _ in range(3):
        M = rng.normal(size=(dim, dim))
        np.testing.assert_allclose(second_compound(M), second_compound_by_minors(M), rtol=0, atol=1e-12)


@dims(2, 3, 4, 5, 6)
def test_second_compound_cauchy_binet(dim, rng):
    """C2(AB) = C2(A) C2(B) (Cauchy-Binet; Horn and Johnson, Matrix Analysis, from memory), batched."""
    A = rng.normal(size=(8, dim, dim))
    B = rng.normal(size=(8, dim, dim))
    np.testing.assert_allclose(second_compound(A @ B), second_compound(A) @ second_compound(B),
                               rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(second_compound(np.eye(dim)), np.eye(dim * (dim - 1) // 2), atol=0)


@dims(*ALL_DIMS)
def test_second_compound_rotates_bivectors_like_the_sandwich(dim, rng):
    """C2(M) B = R B ~R with M = rotor_to_matrix(R), the sandwich computed with Algebra.gp in the full
    algebra (design.md section 2: bivectors transform by the second compound). rotate_bivectors
    gives the same; in skew form the rotated bivector is M W M^T (common practice)."""
    alg = Algebra(dim)
    count = 20
    R = alg.rotor(rng.normal(size=(count, alg.k)))
    B = rng.normal(size=(count, alg.k))
    Rf = alg.even_to_full(R)
    sandwich = alg.gp(alg.gp(Rf, alg.multivector(bivector=B)), alg.reverse(Rf))
    np.testing.assert_allclose(np.delete(sandwich, alg.bivector_index, axis=1), 0.0, atol=1e-12)
    M = alg.rotor_to_matrix(R)
    via_c2 = np.einsum("nij,nj->ni", second_compound(M), B)
    np.testing.assert_allclose(via_c2, sandwich[:, alg.bivector_index], rtol=0, atol=1e-12)
    np.testing.assert_allclose(alg.rotate_bivectors(R, B), via_c2, rtol=0, atol=1e-12)
    np.testing.assert_allclose(skew(via_c2, dim), M @ skew(B, dim) @ np.swapaxes(M, -1, -2), atol=1e-12)


@dims(*ALL_DIMS)
def test_skew_and_unskew_are_inverse(dim, rng):
    """skew/unskew follow W[j, i] = B_ij, W[i, j] = -B_ij (design.md section 2)."""
    B = rng.normal(size=(4, dim * (dim - 1) // 2))
    W = skew(B)
    for c, (i, j) in enumerate(bivector_pairs(dim)):
        np.testing.assert_array_equal(W[:, j, i], B[:, c])
        np.testing.assert_array_equal(W[:, i, j], -B[:, c])
    np.testing.assert_array_equal(W, -np.swapaxes(W, -1, -2))
    np.testing.assert_array_equal(unskew(W), B)


# ---------------------------------------------------------------------------------------------
# batching over leading axes
# ---------------------------------------------------------------------------------------------


@dims(*ALL_DIMS)
def test_products_accept_leading_axes(dim, rng):
    """(3, 4, m, 2**n) inputs give the flattened batch's results, reshaped; large enough to take the
    blocked path of the product kernel in 4-D and 5-D; a single operand broadcasts over a batch."""
    alg = Algebra(dim)
    shape = (3, 4, 30)
    x = rng.normal(size=shape + (alg.size,))
    y = rng.normal(size=shape + (alg.size,))
    flat = (-1, alg.size)
    for prod in (alg.gp, alg.op, alg.lc):
        out = prod(x, y)
        assert out.shape == shape + (alg.size,)
        np.testing.assert_allclose(out, prod(x.reshape(flat), y.reshape(flat)).reshape(out.shape),
                                   rtol=0, atol=1e-13)
        one = prod(x[0, 0, 0], y)
        np.testing.assert_allclose(one, prod(np.broadcast_to(x[0, 0, 0], y.shape), y), rtol=0, atol=1e-13)
    assert alg.sp(x, y).shape == shape
    a, b = rng.normal(size=(2, 3, 4, alg.k))
    np.testing.assert_allclose(alg.commutator(a, b),
                               alg.commutator(a.reshape(-1, alg.k), b.reshape(-1, alg.k)).reshape(a.shape),
                               rtol=0, atol=1e-13)
    M = rng.normal(size=(3, 4, dim, dim))
    C = second_compound(M)
    assert C.shape == (3, 4, alg.k, alg.k)
    np.testing.assert_array_equal(C[2, 1], second_compound(M[2, 1]))


# ---------------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------------


def test_dimension_is_validated():
    """Algebra(n) refuses n < 2 and non-integers with a message naming n and the value."""
    with pytest.raises(InputError, match=r"n: expected an integer dimension >= 2, got 1"):
        Algebra(1)
    with pytest.raises(InputError, match=r"got -3"):
        Algebra(-3)
    with pytest.raises(InputTypeError, match=r"n: expected an integer dimension >= 2, got 2\.5"):
        Algebra(2.5)
    with pytest.raises(InputTypeError, match=r"got True"):
        Algebra(True)
    with pytest.raises(InputTypeError, match=r"got '3'"):
        Algebra("3")
    with pytest.raises(InputError, match=r"n: expected an integer dimension >= 2, got 0"):
        bivector_pairs(0)
    assert issubclass(InputError, ValueError) and issubclass(InputTypeError, TypeError)
    assert Algebra(np.int64(3)) is Algebra(3)


def test_products_refuse_wrong_trailing_length():
    """Wrong trailing length: InputError naming the argument, the expected length and the shape."""
    alg = Algebra(4)
    good = np.zeros((3, 16))
    with pytest.raises(InputError, match=r"x: expected a multivector with trailing length 16 \(2\*\*4\), "
                                         r"got shape \(3, 8\)"):
        alg.gp(np.zeros((3, 8)), good)
    with pytest.raises(InputError, match=r"y: .*trailing length 16.*got shape \(16, 3\)"):
        alg.op(good, np.zeros((16, 3)))
    with pytest.raises(InputError, match=r"x: .*got shape \(\)"):
        alg.lc(1.0, good)
    with pytest.raises(InputError, match=r"a: expected trailing shape \(6,\) \(components last\), "
                                         r"got shape \(3, 5\)"):
        alg.commutator(np.zeros((3, 5)), np.zeros((3, 6)))
    with pytest.raises(InputError, match=r"bivector: expected trailing shape \(6,\).*got shape \(2, 4\)"):
        alg.multivector(bivector=np.zeros((2, 4)))
    with pytest.raises(InputError, match=r"bivector: expected a trailing length n\(n-1\)/2.*got 4"):
        skew(np.zeros(4))


def test_bench_rows_have_the_documented_fields():
    """bench/algebra.py returns one row per (op, dim) with a positive time (no timing asserted)."""
    rows = run_algebra_bench(batch=64, dims=(2, 3), repeats=1)
    assert {(r["op"], r["dim"]) for r in rows} == {(op, n) for op in ("rotor_mul", "rotor_to_matrix", "rotor")
                                                   for n in (2, 3)}
    for r in rows:
        assert set(r) == {"op", "dim", "batch", "ns_per_item"}
        assert r["batch"] == 64 and r["ns_per_item"] > 0.0
