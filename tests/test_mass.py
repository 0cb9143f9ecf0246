"""Tests of ``core/geometry/mass.py``: the bivector inertia map, its transform rules, simplex integration and
the mass-property record.

References (named again beside each check):

* kingdon 3.x for the outer product: the angular momentum of a point cloud is computed from its
  definition ``L = sum m r ^ v`` with ``v = W r`` (skew form of design.md), independently of our
  index formula. kingdon names blades 1-based (``e12`` is our (0, 1) plane).
* scipy.linalg.expm for rotation matrices (``expm`` of a skew matrix).
* sympy for exact integrals over a simplex with rational vertices.
* numpy.linalg.eigh for the eigenvalues of a covariance.
* trimesh for 3-D mesh mass properties (vector-form tensor J mapped to bivector form P J P^T with
  P = [[0,0,1],[0,-1,0],[1,0,0]], reference-checks.md).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import sympy as sp
import trimesh
from conftest import dims
from kingdon import Algebra as KAlgebra
from ndrigid.core.algebra import Algebra, bivector_pairs
from ndrigid.core.errors import InputError
from ndrigid.core.geometry.mass import (
    MassProperties,
    boundary_moments,
    combine_mass_properties,
    inertia_from_covariance,
    principal_frame,
    rotate_inertia,
    shift_inertia,
    simplex_moments,
)
from ndrigid.core.geometry.shapes import Box, ConvexPolytope
from scipy.linalg import expm

P3 = np.array([[0, 0, 1], [0, -1, 0], [1, 0, 0]], dtype=float)


def random_rotation(rng: np.random.Generator, n: int) -> np.ndarray:
    """A rotation matrix from scipy.linalg.expm of a random skew matrix (independent of our algebra)."""
    A = rng.normal(size=(n, n))
    return expm(A - A.T)


def skew_of(B: np.ndarray, n: int) -> np.ndarray:
    """Skew form of design.md: W[j, i] = B_ij, W[i, j] = -B_ij (written out here, not imported)."""
    W = np.zeros((n, n))
    for q, (i, j) in enumerate(itertools.combinations(range(n), 2)):
        W[j, i] = B[q]
        W[i, j] = -B[q]
    return W


def kingdon_inertia(points: np.ndarray, masses: np.ndarray) -> np.ndarray:
    """(k, k) inertia about the origin from the definition L = sum m r ^ (W r), wedge by kingdon.

    Column q is the angular momentum for the unit angular velocity in plane q.
    """
    n = points.shape[1]
    alg = KAlgebra(n)
    pairs = list(itertools.combinations(range(n), 2))
    r = alg.vector(points.T)
    cols = []
    for q in range(len(pairs)):
        B = np.zeros(len(pairs))
        B[q] = 1.0
        v = points @ skew_of(B, n).T  # v_p = W r_p
        L = r ^ alg.vector((masses[:, None] * v).T)
        cols.append([np.sum(getattr(L, f"e{i + 1}{j + 1}")) for i, j in pairs])
    return np.array(cols).T


def point_cloud(rng: np.random.Generator, n: int, count: int = 9) -> tuple[np.ndarray, np.ndarray]:
    return rng.normal(size=(count, n)) + rng.normal(size=n), rng.uniform(0.5, 2.0, size=count)


# ---------------------------------------------------------------------------------------------
# The inertia map and the transform rules
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5, 6)
def test_inertia_from_covariance_matches_angular_momentum_definition(
    dim: int, rng: np.random.Generator
) -> None:
    """I(C) B equals sum m r ^ (W r), the wedge computed by kingdon (definition, design.md)."""
    pts, m = point_cloud(rng, dim)
    C = np.einsum("p,pi,pj->ij", m, pts, pts)  # second moment about the origin
    np.testing.assert_allclose(inertia_from_covariance(C), kingdon_inertia(pts, m), atol=1e-11)


@dims(2, 3, 4, 5)
def test_inertia_is_diagonal_in_principal_frame(dim: int, rng: np.random.Generator) -> None:
    """In the eigenframe of C (numpy.linalg.eigh) the map is diagonal with c_i + c_j (design.md)."""
    pts, m = point_cloud(rng, dim)
    c_ref = np.linalg.eigh(np.einsum("p,pi,pj->ij", m, pts, pts))[0]
    C = np.einsum("p,pi,pj->ij", m, pts, pts)
    c, axes = principal_frame(C)
    np.testing.assert_allclose(np.sort(c), c_ref, rtol=1e-12, atol=1e-12)
    assert np.linalg.det(axes) == pytest.approx(1.0, abs=1e-12)
    I_body = rotate_inertia(inertia_from_covariance(C), axes.T)
    p = bivector_pairs(dim)
    np.testing.assert_allclose(I_body, np.diag(c[p[:, 0]] + c[p[:, 1]]), atol=1e-10)


@dims(2, 3, 4, 5)
def test_rotate_inertia_matches_rotated_cloud(dim: int, rng: np.random.Generator) -> None:
    """C2(M) I C2(M)^T equals the inertia of the cloud rotated by M (expm, kingdon definition)."""
    pts, m = point_cloud(rng, dim)
    M = random_rotation(rng, dim)
    rotated = kingdon_inertia(pts @ M.T, m)
    np.testing.assert_allclose(rotate_inertia(kingdon_inertia(pts, m), M), rotated, atol=1e-10)


@dims(2, 3, 4, 5)
def test_shift_inertia_is_parallel_axis_rule(dim: int, rng: np.random.Generator) -> None:
    """Inertia about a point q equals the centroidal inertia shifted by the parallel-axis rule
    (reference: the definition about q, wedge by kingdon)."""
    pts, m = point_cloud(rng, dim)
    q = rng.normal(size=dim) * 3
    cen = m @ pts / m.sum()
    about_q = kingdon_inertia(pts - q, m)
    about_c = kingdon_inertia(pts - cen, m)
    np.testing.assert_allclose(shift_inertia(about_c, m.sum(), cen - q), about_q, atol=1e-10)
    np.testing.assert_allclose(shift_inertia(about_c, m.sum(), q - cen), about_q, atol=1e-10)


def test_transform_rules_are_batched(rng: np.random.Generator) -> None:
    """Batched calls equal per-item calls (same rules as above, any leading axes)."""
    n = 4
    Ms = np.stack([random_rotation(rng, n) for _ in range(3)])
    Cs = np.stack([np.cov(rng.normal(size=(n, 20))) for _ in range(3)])
    Is = inertia_from_covariance(Cs)
    for a in range(3):
        np.testing.assert_allclose(Is[a], inertia_from_covariance(Cs[a]))
        np.testing.assert_allclose(rotate_inertia(Is, Ms)[a], rotate_inertia(Is[a], Ms[a]), atol=1e-14)
    d = rng.normal(size=(3, n))
    m = np.array([1.0, 2.0, 3.0])
    np.testing.assert_allclose(shift_inertia(Is, m, d)[1], shift_inertia(Is[1], m[1], d[1]))


# ---------------------------------------------------------------------------------------------
# Simplex and boundary integration
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4)
def test_simplex_moments_match_sympy(dim: int, rng: np.random.Generator) -> None:
    """A random simplex with rational vertices against exact integration with sympy: volume, first
    and second moments as nested integrals over the canonical simplex times |det A|."""
    Vq = [[sp.Rational(int(x), 7) for x in row] for row in rng.integers(-20, 21, size=(dim + 1, dim))]
    xi = sp.symbols(f"u0:{dim}")
    v0 = sp.Matrix(Vq[0])
    A = sp.Matrix([[Vq[c + 1][r] - Vq[0][r] for c in range(dim)] for r in range(dim)])
    if A.det() == 0:
        pytest.skip("degenerate draw")  # pragma: no cover - the fixed seed gives a proper simplex
    x = v0 + A * sp.Matrix(xi)
    jac = abs(A.det())

    def integrate(expr: sp.Expr) -> sp.Expr:
        for a in reversed(range(dim)):  # u_a from 0 to 1 - u_0 - ... - u_(a-1)
            expr = sp.integrate(expr, (xi[a], 0, 1 - sum(xi[:a])))
        return expr * jac

    vol_ref = float(integrate(sp.Integer(1)))
    first_ref = np.array([float(integrate(x[i])) for i in range(dim)])
    second_ref = np.array(
        [[float(integrate(sp.expand(x[i] * x[j]))) for j in range(dim)] for i in range(dim)]
    )
    T = np.array([[float(v) for v in row] for row in Vq])
    vol, first, second = simplex_moments(T[None])
    sign = np.sign(vol[0])  # simplex_moments is signed by vertex order; sympy's |det| is not
    assert sign * vol[0] == pytest.approx(vol_ref, rel=1e-13)
    np.testing.assert_allclose(sign * first[0], first_ref, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(sign * second[0], second_ref, rtol=1e-12, atol=1e-14)


def test_boundary_moments_do_not_depend_on_reference_point() -> None:
    """Non-convex 3-D mesh (a torus): cone sums from several reference points, one far outside,
    all agree with trimesh (volume, centroid, covariance via its vector-form tensor)."""
    mesh = trimesh.creation.torus(major_radius=1.0, minor_radius=0.35, major_sections=24, minor_sections=12)
    mesh.apply_translation([0.4, -0.3, 0.2])
    ref_J = P3 @ mesh.moment_inertia @ P3.T
    for q in ([0.0, 0.0, 0.0], [5.0, -7.0, 3.0], [0.4, -0.3, 0.2], None):
        vol, cen, cov = boundary_moments(mesh.vertices, mesh.faces, reference=q)
        assert vol == pytest.approx(mesh.volume, rel=1e-12)
        np.testing.assert_allclose(cen, mesh.center_mass, atol=1e-12)
        np.testing.assert_allclose(inertia_from_covariance(cov), ref_J, atol=1e-10)


@dims(2, 3, 4, 5)
def test_boundary_moments_reference_point_independent_in_nd(dim: int, rng: np.random.Generator) -> None:
    """In n-D: cone sums from an interior and two exterior points agree; the reference is the
    closed-form box (volume prod L_i, centroid at its centre, covariance m L_i^2 / 12: handbook)."""
    h = rng.uniform(0.5, 1.5, size=dim)
    t = rng.normal(size=dim)
    box = Box(h)
    tri = box.boundary_triangulation()
    V = np.asarray(box.vertices) + t
    expect_cov = np.diag(np.prod(2 * h) * (2 * h) ** 2 / 12)
    for q in (t, t + 10.0, -4.0 * np.ones(dim)):
        vol, cen, cov = boundary_moments(V, tri, reference=q)
        assert vol == pytest.approx(np.prod(2 * h), rel=1e-12)
        np.testing.assert_allclose(cen, t, atol=1e-11)
        np.testing.assert_allclose(cov, expect_cov, atol=1e-12 * np.max(expect_cov))


def test_boundary_moments_reject_inside_out() -> None:
    """A reversed boundary encloses negative volume: rejected (bad input)."""
    mesh = trimesh.creation.box()
    with pytest.raises(InputError, match="volume"):
        boundary_moments(mesh.vertices, mesh.faces[:, ::-1])


# ---------------------------------------------------------------------------------------------
# The record and its combination
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5)
def test_record_fields_and_density_scaling(dim: int, rng: np.random.Generator) -> None:
    """Covariance of a box at density rho is rho V L^2/12 (handbook); the principal frame and rotor
    are consistent (rotor matrix = axes), and arrays are read-only."""
    h = rng.uniform(0.5, 1.5, size=dim)
    V = float(np.prod(2 * h))
    rec = MassProperties.from_moments(V, np.zeros(dim), np.diag(V * (2 * h) ** 2 / 12), density=2.5)
    assert rec.mass == pytest.approx(2.5 * V)
    np.testing.assert_allclose(rec.principal_covariance, rec.mass * (2 * h) ** 2 / 12)
    np.testing.assert_allclose(rec.principal_axes, np.eye(dim))
    np.testing.assert_allclose(
        Algebra(dim).rotor_to_matrix(rec.principal_rotor), rec.principal_axes, atol=1e-12
    )
    other = rec.with_density(5.0)
    np.testing.assert_allclose(other.inertia, 2 * rec.inertia)
    assert other.mass == pytest.approx(2 * rec.mass)
    with pytest.raises(ValueError):
        rec.inertia[0, 0] = 1.0
    p = bivector_pairs(dim)
    L = 2 * h
    np.testing.assert_allclose(np.diag(rec.inertia), rec.mass * (L[p[:, 0]] ** 2 + L[p[:, 1]] ** 2) / 12)


@dims(3, 4, 5)
def test_principal_frame_of_rotated_box(dim: int, rng: np.random.Generator) -> None:
    """A box turned by M (expm): principal covariance m L_i^2 / 12 (handbook) along M's columns, up
    to order and sign; the axes form a proper rotation whose rotor reproduces them."""
    h = np.linspace(0.5, 1.5, dim)
    M = random_rotation(rng, dim)
    poly = ConvexPolytope(np.asarray(Box(h).vertices) @ M.T)
    rec = poly.mass_properties(mass=3.0)
    expect = 3.0 * (2 * h) ** 2 / 12
    np.testing.assert_allclose(np.sort(rec.principal_covariance), np.sort(expect), rtol=1e-10)
    dots = np.abs(rec.principal_axes.T @ M)  # a permutation matrix
    np.testing.assert_allclose(np.sort(dots, axis=1)[:, -1], 1.0, atol=1e-9)
    assert np.linalg.det(rec.principal_axes) == pytest.approx(1.0)
    np.testing.assert_allclose(
        Algebra(dim).rotor_to_matrix(rec.principal_rotor), rec.principal_axes, atol=1e-10
    )
    np.testing.assert_allclose(
        rec.principal_axes @ np.diag(rec.principal_covariance) @ rec.principal_axes.T,
        rec.covariance,
        atol=1e-10,
    )


def test_combination_matches_trimesh_union() -> None:
    """Two disjoint boxes, one turned, combined through the transform rules, against trimesh on the
    union of the two meshes (its vector-form tensor mapped to bivector form)."""
    rng = np.random.default_rng(7)
    M = random_rotation(rng, 3)
    t = np.array([3.0, 0.5, -1.0])
    a, b = np.array([0.5, 1.0, 1.5]), np.array([0.3, 0.4, 0.8])
    ma = trimesh.creation.box(extents=2 * a)
    T = np.eye(4)
    T[:3, :3], T[:3, 3] = M, t
    mb = trimesh.creation.box(extents=2 * b, transform=T)
    union = trimesh.util.concatenate([ma, mb])
    assert isinstance(union, trimesh.Trimesh)
    rec = combine_mass_properties(
        [
            (Box(a).mass_properties(), np.zeros(3), np.eye(3)),
            (Box(b).mass_properties(), t, M),
        ]
    )
    assert rec.volume == pytest.approx(union.volume, rel=1e-12)
    np.testing.assert_allclose(rec.centroid, union.center_mass, atol=1e-12)
    np.testing.assert_allclose(rec.inertia, P3 @ union.moment_inertia @ P3.T, atol=1e-10)
    # the rule-built inertia agrees with the map of the combined covariance (module notes)
    np.testing.assert_allclose(rec.inertia, inertia_from_covariance(rec.covariance), atol=1e-12)
