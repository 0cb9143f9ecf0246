"""Tests of ``core/geometry/shapes.py``: the shapes, their face structure, support functions and mass
properties, and the rejection of bad input.

References (named again beside each check):

* trimesh for 3-D mesh volume, centre of mass and inertia (vector-form tensor J mapped to bivector
  form P J P^T, P = [[0,0,1],[0,-1,0],[1,0,0]], reference-checks.md).
* scipy.spatial.ConvexHull for hull vertices, volumes and facet planes (its ``equations`` rows
  [normal, d] with normal . x + d <= 0 inside).
* scipy.stats.qmc.Sobol for quasi-Monte-Carlo volume, centroid and covariance integrals in 4-D/5-D.
* Handbook formulas: uniform cuboid plane inertia m (L_i^2 + L_j^2) / 12 (Halliday, Resnick and
  Walker); solid sphere 2/5 m r^2; n-ball volume pi^(n/2) r^n / Gamma(n/2 + 1) (NIST DLMF 5.19,
  from memory: eq. 5.19.4) and per-plane inertia 2 m r^2 / (n + 2).
* scipy.linalg.expm for rotation matrices.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import trimesh
from conftest import dims
from ndrigid.core.algebra import Algebra, bivector_pairs
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.mass import rotate_inertia, shift_inertia
from ndrigid.core.geometry.shapes import Ball, Box, Compound, ConvexPolytope, HalfSpace, Shape, SimplexMesh
from scipy.linalg import expm
from scipy.spatial import ConvexHull
from scipy.stats import qmc

P3 = np.array([[0, 0, 1], [0, -1, 0], [1, 0, 0]], dtype=float)


def random_rotation(rng: np.random.Generator, n: int) -> np.ndarray:
    """Rotation matrix from scipy.linalg.expm of a random skew matrix."""
    A = rng.normal(size=(n, n))
    return expm(A - A.T)


def ball_volume(n: int, r: float) -> float:
    """NIST DLMF 5.19 (from memory: eq. 5.19.4)."""
    return math.pi ** (n / 2) * r**n / math.gamma(n / 2 + 1)


def sphere_points(rng: np.random.Generator, n: int, count: int) -> np.ndarray:
    """Random points on the unit sphere plus the 2n points +-e_i (so the origin is interior)."""
    X = rng.normal(size=(count, n))
    X /= np.linalg.norm(X, axis=1, keepdims=True)
    return np.concatenate([X, np.eye(n), -np.eye(n)])


def trimesh_bivector_inertia(mesh: trimesh.Trimesh) -> np.ndarray:
    """trimesh's vector-form inertia about the centre of mass, in bivector form (reference-checks.md)."""
    return P3 @ mesh.moment_inertia @ P3.T


# ---------------------------------------------------------------------------------------------
# 3-D meshes against trimesh
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["box", "icosphere", "torus"])
def test_mesh_mass_properties_match_trimesh(kind: str) -> None:
    """Volume, centroid and inertia of 3-D meshes against trimesh, to 1e-10 (the torus is not convex)."""
    if kind == "box":
        mesh = trimesh.creation.box(extents=[1.0, 2.0, 3.5])
    elif kind == "icosphere":
        mesh = trimesh.creation.icosphere(subdivisions=3, radius=1.3)
    else:
        mesh = trimesh.creation.torus(major_radius=1.2, minor_radius=0.4)
    T = np.eye(4)
    T[:3, :3] = random_rotation(np.random.default_rng(3), 3)
    T[:3, 3] = [0.3, -0.2, 0.5]
    mesh.apply_transform(T)
    rec = SimplexMesh(mesh.vertices, mesh.faces).mass_properties()
    assert rec.volume == pytest.approx(mesh.volume, abs=1e-10)
    np.testing.assert_allclose(rec.centroid, mesh.center_mass, atol=1e-10)
    np.testing.assert_allclose(rec.inertia, trimesh_bivector_inertia(mesh), atol=1e-10)
    # the same at a given total mass: trimesh scales its tensor with density
    mesh.density = 4.0 / mesh.volume
    rec = SimplexMesh(mesh.vertices, mesh.faces).mass_properties(mass=4.0)
    np.testing.assert_allclose(rec.inertia, trimesh_bivector_inertia(mesh), atol=1e-10)


def test_convex_polytope_of_icosphere_matches_trimesh() -> None:
    """The hull route (ConvexPolytope) gives the same numbers as trimesh on the convex icosphere."""
    mesh = trimesh.creation.icosphere(subdivisions=2, radius=0.8)
    mesh.apply_translation([1.0, 2.0, -0.5])
    rec = ConvexPolytope(mesh.vertices).mass_properties(density=2.0)
    mesh.density = 2.0
    assert rec.mass == pytest.approx(mesh.mass, abs=1e-10)
    np.testing.assert_allclose(rec.centroid, mesh.center_mass, atol=1e-10)
    np.testing.assert_allclose(rec.inertia, trimesh_bivector_inertia(mesh), atol=1e-10)


# ---------------------------------------------------------------------------------------------
# Handbook closed forms
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5, 6)
def test_box_plane_inertia_handbook(dim: int, rng: np.random.Generator) -> None:
    """Uniform cuboid: plane inertia m (L_i^2 + L_j^2) / 12 (Halliday, Resnick and Walker), volume
    prod L_i; the mesh route (boundary triangulation) agrees."""
    h = rng.uniform(0.3, 2.0, size=dim)
    L, m = 2 * h, 3.7
    box = Box(h)
    rec = box.mass_properties(mass=m)
    p = bivector_pairs(dim)
    expect = m * (L[p[:, 0]] ** 2 + L[p[:, 1]] ** 2) / 12
    assert rec.volume == pytest.approx(np.prod(L), rel=1e-14)
    np.testing.assert_allclose(rec.inertia, np.diag(expect), rtol=1e-13, atol=1e-13 * expect.max())
    np.testing.assert_allclose(rec.principal_moments, expect, rtol=1e-13)
    via_mesh = box.boundary_mesh().mass_properties(mass=m)
    np.testing.assert_allclose(via_mesh.inertia, np.diag(expect), rtol=1e-10, atol=1e-12 * expect.max())


@dims(2, 3, 4, 5, 6)
def test_ball_volume_and_plane_inertia_handbook(dim: int) -> None:
    """n-ball: volume pi^(n/2) r^n / Gamma(n/2+1) (DLMF 5.19) and plane inertia 2 m r^2 / (n+2)."""
    r, m = 0.7, 2.0
    rec = Ball(dim, r).mass_properties(mass=m)
    assert rec.volume == pytest.approx(ball_volume(dim, r), rel=1e-14)
    k = dim * (dim - 1) // 2
    np.testing.assert_allclose(rec.inertia, np.eye(k) * 2 * m * r**2 / (dim + 2), rtol=1e-14)
    np.testing.assert_allclose(rec.centroid, 0.0)


def test_solid_sphere_two_fifths() -> None:
    """3-D solid sphere: I = 2/5 m r^2 about every axis (any mechanics handbook)."""
    rec = Ball(3, 1.5).mass_properties(mass=4.0)
    np.testing.assert_allclose(np.diag(rec.inertia), 0.4 * 4.0 * 1.5**2)


@pytest.mark.parametrize(
    ("dim", "count"), [(2, 400), (3, 1500), (4, 1500), (5, 400), (6, 150)], ids=["2d", "3d", "4d", "5d", "6d"]
)
def test_polytope_ball_approximation_within_discretisation_error(dim: int, count: int) -> None:
    """A hull of points on the unit sphere contains the ball of radius r_in (its smallest facet
    offset) and lies in the unit ball. Volume and every per-plane second moment about the origin,
    int (x_i^2 + x_j^2) dV, are monotone under inclusion, so they lie between the handbook values
    (DLMF volume, 2 V r^2 / (n+2)) for r_in and for 1: the discretisation error, bounded exactly."""
    rng = np.random.default_rng(dim)
    poly = ConvexPolytope(sphere_points(rng, dim, count))
    r_in = float(poly.facet_offsets.min())
    assert 0.5 < r_in < 1.0
    rec = poly.mass_properties()
    assert ball_volume(dim, r_in) <= rec.volume <= ball_volume(dim, 1.0)
    about_origin = rec.inertia_about(np.zeros(dim))
    lo = 2 * ball_volume(dim, r_in) * r_in**2 / (dim + 2)
    hi = 2 * ball_volume(dim, 1.0) / (dim + 2)
    d = np.diag(about_origin)
    assert np.all(lo <= d) and np.all(d <= hi)
    # and it does approach the ball: the relative gap to the handbook value is at most 1 - r_in^(n+2)
    assert np.all(np.abs(d / hi - 1) <= 1 - r_in ** (dim + 2))


# ---------------------------------------------------------------------------------------------
# Random convex polytopes against quasi-Monte-Carlo
# ---------------------------------------------------------------------------------------------


@dims(4, 5)
def test_random_polytope_against_sobol(dim: int, rng: np.random.Generator) -> None:
    """Volume, centroid and covariance of a random convex polytope against scipy.stats.qmc.Sobol
    integration (2^18 scrambled points in the bounding box; membership from scipy ConvexHull's
    equations). For this discontinuous integrand the QMC error at 2^18 points, measured over six
    seeds, stays below 0.4 % (volume) and 1.6 % (covariance, relative to its largest entry); the
    tolerances allow 2-3 times that."""
    pts = rng.normal(size=(30, dim))
    poly = ConvexPolytope(pts)
    hull = ConvexHull(pts)
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    u = qmc.Sobol(dim, scramble=True, seed=rng).random_base2(18)
    x = lo + u * (hi - lo)
    inside = np.all(x @ hull.equations[:, :dim].T + hull.equations[:, dim] <= 0.0, axis=1)
    vol = inside.mean() * float(np.prod(hi - lo))
    xin = x[inside]
    cen = xin.mean(axis=0)
    cov = np.cov(xin.T, bias=True) * vol
    rec = poly.mass_properties()
    assert rec.volume == pytest.approx(hull.volume, rel=1e-12)  # scipy ConvexHull volume, exact
    assert rec.volume == pytest.approx(vol, rel=1e-2)
    np.testing.assert_allclose(rec.centroid, cen, atol=1e-2 * float(np.max(hi - lo)))
    np.testing.assert_allclose(rec.covariance, cov, atol=3e-2 * np.abs(cov).max())


# ---------------------------------------------------------------------------------------------
# Transform rules applied to shapes
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5)
def test_rotating_and_translating_a_polytope(dim: int, rng: np.random.Generator) -> None:
    """Rebuilding a polytope from turned (expm) and shifted points changes its inertia exactly as
    the rules say: C2(M) I C2(M)^T about the new centroid, and the parallel-axis shift about the
    origin; the centroid moves to M c + t."""
    pts = rng.normal(size=(3 * dim + 4, dim))
    M, t = random_rotation(rng, dim), rng.normal(size=dim) * 2
    a = ConvexPolytope(pts).mass_properties()
    b = ConvexPolytope(pts @ M.T + t).mass_properties()
    np.testing.assert_allclose(b.centroid, M @ a.centroid + t, atol=1e-12)
    np.testing.assert_allclose(b.inertia, rotate_inertia(a.inertia, M), atol=1e-11 * np.abs(a.inertia).max())
    about_origin = shift_inertia(rotate_inertia(a.inertia, M), a.mass, M @ a.centroid + t)
    np.testing.assert_allclose(
        b.inertia_about(np.zeros(dim)), about_origin, atol=1e-10 * np.abs(about_origin).max()
    )


@dims(2, 3, 4, 5)
def test_compound_single_piece_equals_transformed_polytope(dim: int, rng: np.random.Generator) -> None:
    """A one-piece Compound with pose (t, R) equals the polytope built from the moved points."""
    pts = rng.normal(size=(2 * dim + 3, dim))
    alg = Algebra(dim)
    M = random_rotation(rng, dim)
    R = alg.matrix_to_rotor(M)
    t = rng.normal(size=dim)
    comp = Compound([(ConvexPolytope(pts), t, R)])
    moved = ConvexPolytope(pts @ M.T + t)
    a, b = comp.mass_properties(density=3.0), moved.mass_properties(density=3.0)
    assert a.mass == pytest.approx(b.mass, rel=1e-12)
    np.testing.assert_allclose(a.centroid, b.centroid, atol=1e-12)
    np.testing.assert_allclose(a.inertia, b.inertia, atol=1e-11 * np.abs(b.inertia).max())
    dirs = rng.normal(size=(7, dim))
    np.testing.assert_allclose(
        np.einsum("ij,ij->i", comp.support(dirs), dirs),
        np.einsum("ij,ij->i", moved.support(dirs), dirs),
        atol=1e-12,
    )
    np.testing.assert_allclose(comp.local_aabb(), moved.local_aabb(), atol=1e-12)
    assert comp.bounding_radius == pytest.approx(moved.bounding_radius)


@dims(2, 3, 4, 5)
def test_compound_of_disjoint_pieces_equals_union_mesh(dim: int, rng: np.random.Generator) -> None:
    """Compound of a box and a ball-free polytope far apart equals the SimplexMesh of the union of
    their moved boundaries (additivity of integrals, common practice); a Ball piece adds the
    handbook ball record shifted by the parallel-axis rule."""
    alg = Algebra(dim)
    M = random_rotation(rng, dim)
    box, poly = Box(rng.uniform(0.5, 1.0, size=dim)), ConvexPolytope(rng.normal(size=(dim + 5, dim)))
    t_box, t_poly = np.zeros(dim), np.full(dim, 6.0)
    comp = Compound([(box, t_box), (poly, t_poly, alg.matrix_to_rotor(M))])
    Vb, Vp = np.asarray(box.vertices), np.asarray(poly.vertices) @ M.T + t_poly
    cells = np.concatenate([box.boundary_triangulation(), poly.boundary_triangulation() + len(Vb)])
    union = SimplexMesh(np.concatenate([Vb, Vp]), cells).mass_properties()
    rec = comp.mass_properties()
    assert rec.volume == pytest.approx(union.volume, rel=1e-12)
    np.testing.assert_allclose(rec.centroid, union.centroid, atol=1e-11)
    np.testing.assert_allclose(rec.inertia, union.inertia, atol=1e-10 * np.abs(union.inertia).max())
    # add a ball: handbook ball (2 m r^2/(n+2) per plane) moved by the parallel-axis rule
    t_ball = -np.full(dim, 5.0)
    with_ball = Compound([(box, t_box), (poly, t_poly, alg.matrix_to_rotor(M)), (Ball(dim, 0.5), t_ball)])
    mb = ball_volume(dim, 0.5)
    r2 = with_ball.mass_properties()
    cen = (rec.mass * rec.centroid + mb * t_ball) / (rec.mass + mb)
    k = dim * (dim - 1) // 2
    expect = shift_inertia(rec.inertia, rec.mass, rec.centroid - cen) + shift_inertia(
        np.eye(k) * 2 * mb * 0.25 / (dim + 2), mb, t_ball - cen
    )
    np.testing.assert_allclose(r2.centroid, cen, atol=1e-12)
    np.testing.assert_allclose(r2.inertia, expect, atol=1e-10 * np.abs(expect).max())


def test_compound_of_boxes_matches_trimesh() -> None:
    """3-D Compound of a plain and a turned box against trimesh on the union of the two meshes."""
    rng = np.random.default_rng(11)
    M = random_rotation(rng, 3)
    t = np.array([0.5, 3.0, 1.0])
    a, b = np.array([1.0, 0.5, 0.25]), np.array([0.4, 0.6, 0.2])
    T = np.eye(4)
    T[:3, :3], T[:3, 3] = M, t
    union = trimesh.util.concatenate(
        [trimesh.creation.box(extents=2 * a), trimesh.creation.box(extents=2 * b, transform=T)]
    )
    assert isinstance(union, trimesh.Trimesh)
    comp = Compound([(Box(a), np.zeros(3)), (Box(b), t, Algebra(3).matrix_to_rotor(M))])
    rec = comp.mass_properties()
    assert rec.volume == pytest.approx(union.volume, rel=1e-12)
    np.testing.assert_allclose(rec.centroid, union.center_mass, atol=1e-12)
    np.testing.assert_allclose(rec.inertia, trimesh_bivector_inertia(union), atol=1e-10)
    lo, hi = comp.local_aabb()
    np.testing.assert_allclose(lo, union.bounds[0], atol=1e-12)
    np.testing.assert_allclose(hi, union.bounds[1], atol=1e-12)


# ---------------------------------------------------------------------------------------------
# Face structure of polytopes
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5)
def test_polytope_merges_facets_and_drops_non_vertices(dim: int, rng: np.random.Generator) -> None:
    """A cube given with duplicates, interior points and facet-centre points: 2^n vertices, 2n
    facets, n 2^(n-1) edges, each facet with (n-1) 2^(n-2) edges (Coxeter, Regular Polytopes, from
    memory); normals and offsets match scipy ConvexHull's equations grouped by rounding."""
    corners = np.array(list(itertools.product((-1.0, 1.0), repeat=dim)))
    extra = np.concatenate([corners[:3], rng.uniform(-0.9, 0.9, size=(10, dim)), np.eye(dim), -np.eye(dim)])
    pts = np.concatenate([extra[:5], corners, extra[5:]])
    poly = ConvexPolytope(pts)
    assert len(poly.vertices) == 2**dim
    assert {tuple(v) for v in poly.vertices} == {tuple(v) for v in corners}
    assert len(poly.facet_normals) == 2 * dim
    assert len(poly.edges) == dim * 2 ** (dim - 1)
    assert all(len(fe) == ((dim - 1) * 2 ** (dim - 2) if dim > 2 else 1) for fe in poly.facet_edges)
    assert len(poly.facet_adjacency) == 2 * dim * (dim - 1)
    hull = ConvexHull(pts)
    ref = {tuple(np.round(np.append(e[:dim], -e[dim]), 9)) for e in hull.equations}
    ours = {
        tuple(np.round(np.append(u, d), 9))
        for u, d in zip(poly.facet_normals, poly.facet_offsets, strict=True)
    }
    assert ours == ref
    lengths = np.linalg.norm(poly.vertices[poly.edges[:, 0]] - poly.vertices[poly.edges[:, 1]], axis=1)
    np.testing.assert_allclose(lengths, 2.0)


@pytest.mark.parametrize(
    ("dim", "noise", "tolerance"),
    [(3, 1e-11, None), (4, 1e-11, None), (5, 1e-11, None), (4, 1e-7, 1e-6), (5, 1e-7, 1e-6)],
    ids=["3d-1e-11", "4d-1e-11", "5d-1e-11", "4d-1e-7", "5d-1e-7"],
)
def test_noisy_cube_merges_to_true_facets(dim: int, noise: float, tolerance: float | None) -> None:
    """Cube corners with noise (and a noisy 4^n grid for the small noise): the nearly flat faces
    merge back to the cube's 2n facets, 2^n vertices and n 2^(n-1) edges (Coxeter, Regular
    Polytopes, from memory), and the volume stays 2^n to the size of the noise."""
    rng = np.random.default_rng(dim)
    corners = np.array(list(itertools.product((-1.0, 1.0), repeat=dim)))
    if noise < 1e-9:
        g = np.linspace(-1.0, 1.0, 4)
        corners = np.array(list(itertools.product(g, repeat=dim)))
    poly = ConvexPolytope(corners + noise * rng.normal(size=corners.shape), tolerance=tolerance)
    assert (len(poly.vertices), len(poly.facet_normals), len(poly.edges)) == (
        2**dim,
        2 * dim,
        dim * 2 ** (dim - 1),
    )
    assert poly.mass_properties().volume == pytest.approx(2.0**dim, rel=100 * noise)


@dims(2, 3, 4, 5)
def test_random_polytope_structure_against_scipy(dim: int, rng: np.random.Generator) -> None:
    """Random points: vertices are scipy ConvexHull's vertices; every hull equation is one of our
    facets; every input point satisfies normals @ x <= offsets; each facet's vertices lie on its
    plane; facet edges lie in their facets; edges of a simplicial polytope are its simplex edges."""
    pts = rng.normal(size=(6 * dim, dim))
    poly = ConvexPolytope(pts)
    hull = ConvexHull(pts)
    assert {tuple(v) for v in poly.vertices} == {tuple(v) for v in pts[hull.vertices]}
    np.testing.assert_allclose(np.linalg.norm(poly.facet_normals, axis=1), 1.0)
    assert np.all(pts @ poly.facet_normals.T <= poly.facet_offsets + 1e-12)
    for u, d, fv, fe in zip(
        poly.facet_normals, poly.facet_offsets, poly.facet_vertices, poly.facet_edges, strict=True
    ):
        np.testing.assert_allclose(poly.vertices[fv] @ u, d, atol=1e-12)
        assert np.all(np.isin(fe, fv))
    # random points give a simplicial polytope: its edges are the triangulation's edges (scipy)
    ref_edges = {
        tuple(sorted((int(a), int(b)))) for s in hull.simplices for a, b in itertools.combinations(s, 2)
    }
    vid = {tuple(v): i for i, v in enumerate(poly.vertices)}
    ours = {tuple(sorted((vid[tuple(pts[a])], vid[tuple(pts[b])]))) for a, b in ref_edges}
    assert ours == {tuple(e) for e in poly.edges.tolist()}
    assert len(poly.facet_normals) == len(hull.simplices)


def test_polygon_and_polyhedron_facet_order() -> None:
    """2-D facets run counter-clockwise; 3-D facets are counter-clockwise seen from outside (the OFF
    convention): the polygon's normal by the right-hand rule is the outward one."""
    sq = Box([1.0, 2.0])
    for u, (a, b) in zip(sq.facet_normals, sq.facet_vertices, strict=True):
        t = sq.vertices[b] - sq.vertices[a]
        assert float(np.cross(np.append(t, 0), np.append(u, 0))[2]) < 0  # u is to the right of travel
    cube = ConvexPolytope(np.asarray(Box([1.0, 1.0, 1.0]).vertices) * [1, 2, 3])
    for u, fv in zip(cube.facet_normals, cube.facet_vertices, strict=True):
        P = cube.vertices[fv]
        area = sum(np.cross(P[i], P[(i + 1) % len(P)]) for i in range(len(P)))
        assert float(area @ u) > 0


# ---------------------------------------------------------------------------------------------
# Support, bounds, immutability
# ---------------------------------------------------------------------------------------------


@dims(2, 3, 4, 5)
def test_support_and_bounds(dim: int, rng: np.random.Generator) -> None:
    """Support points maximise d . x over the shape (brute force over vertices / the ball formula
    r |d|, common practice); AABB and bounding radius follow."""
    dirs = rng.normal(size=(4, 5, dim))
    h = rng.uniform(0.5, 2.0, size=dim)
    box = Box(h)
    corners = np.array(list(itertools.product(*[(-x, x) for x in h])))
    s = box.support(dirs)
    assert s.shape == dirs.shape
    np.testing.assert_allclose(np.einsum("...i,...i", s, dirs), (dirs @ corners.T).max(axis=-1))
    np.testing.assert_allclose(box.bounding_radius, np.linalg.norm(h))
    np.testing.assert_allclose(box.local_aabb(), (-h, h))
    ball = Ball(dim, 0.8)
    np.testing.assert_allclose(
        np.einsum("...i,...i", ball.support(dirs), dirs), 0.8 * np.linalg.norm(dirs, axis=-1)
    )
    np.testing.assert_allclose(ball.support(np.zeros(dim)), 0.0)
    pts = rng.normal(size=(3 * dim, dim)) + 2.0
    poly = ConvexPolytope(pts)
    np.testing.assert_allclose(np.einsum("...i,...i", poly.support(dirs), dirs), (dirs @ pts.T).max(axis=-1))
    np.testing.assert_allclose(poly.local_aabb(), (pts.min(axis=0), pts.max(axis=0)))
    assert poly.bounding_radius == pytest.approx(np.linalg.norm(pts, axis=1).max())
    mesh = poly.boundary_mesh()
    np.testing.assert_allclose(mesh.support(dirs), poly.support(dirs))
    assert mesh.bounding_radius == pytest.approx(poly.bounding_radius)


def test_shapes_are_immutable() -> None:
    """No attribute can be rebound; arrays are read-only; the caller's arrays are copied."""
    pts = np.random.default_rng(0).normal(size=(10, 3))
    poly = ConvexPolytope(pts)
    before = poly.vertices.copy()
    pts[:] = 0.0
    np.testing.assert_array_equal(poly.vertices, before)
    shapes: list[Shape] = [
        poly,
        Box([1.0, 2.0]),
        Ball(3, 1.0),
        HalfSpace([0.0, 1.0], 0.0),
        poly.boundary_mesh(),
    ]
    for s in shapes:
        with pytest.raises(AttributeError):
            s.foo = 1
    with pytest.raises(AttributeError):
        poly.vertices = before
    with pytest.raises(ValueError):
        poly.vertices[0, 0] = 5.0
    with pytest.raises(ValueError):
        poly.facet_vertices[0][0] = 5
    with pytest.raises(ValueError):
        poly.mass_properties().inertia[0, 0] = 5.0


# ---------------------------------------------------------------------------------------------
# SimplexMesh validation
# ---------------------------------------------------------------------------------------------


def icosphere() -> tuple[np.ndarray, np.ndarray]:
    m = trimesh.creation.icosphere(subdivisions=1)
    return np.asarray(m.vertices), np.asarray(m.faces)


def test_mesh_open_boundary_names_cells() -> None:
    """A mesh with a missing cell is open; the error names the cells around the hole."""
    V, F = icosphere()
    with pytest.raises(InputError, match="not closed") as err:
        SimplexMesh(V, F[1:])
    nbrs = [i - 1 for i in range(1, len(F)) if len(set(F[i]) & set(F[0])) == 2]
    for c in nbrs:
        assert str(c) in str(err.value)


def test_mesh_inconsistent_orientation_names_cells() -> None:
    """One flipped cell makes the orientation inconsistent; the error names it."""
    V, F = icosphere()
    F = F.copy()
    F[7] = F[7, [1, 0, 2]]
    with pytest.raises(InputError, match="consistently oriented") as err:
        SimplexMesh(V, F)
    assert "7" in str(err.value)


def test_mesh_inside_out_rejected_or_flipped() -> None:
    """A fully inverted mesh is rejected with a fix hint, or flipped on request (volume vs trimesh)."""
    m = trimesh.creation.icosphere(subdivisions=1)
    inv = m.faces[:, ::-1]
    with pytest.raises(InputError, match="inside-out"):
        SimplexMesh(m.vertices, inv)
    mesh = SimplexMesh(m.vertices, inv, flip_inside_out=True)
    assert mesh.mass_properties().volume == pytest.approx(m.volume, rel=1e-12)


@dims(2, 3, 4, 5)
def test_mesh_non_manifold_rejected(dim: int) -> None:
    """Two simplices' boundaries glued at a shared vertex set twice over: a face shared by 4 cells."""
    s = Box(np.ones(dim)).boundary_triangulation()
    V = np.asarray(Box(np.ones(dim)).vertices)
    with pytest.raises(InputError, match="shared by 4"):
        SimplexMesh(V, np.concatenate([s, s]))


@dims(2, 3, 4, 5)
def test_mesh_with_cavity_subtracts(dim: int) -> None:
    """Outer box boundary plus a reversed inner box: volume and covariance are those of the hollow
    box, outer minus inner closed forms (handbook cuboid, m L^2 / 12 per axis)."""
    outer, inner = Box(np.full(dim, 2.0)), Box(np.full(dim, 1.0))
    to, ti = outer.boundary_triangulation(), inner.boundary_triangulation()[:, ::-1].copy()
    if dim % 4 in (0, 1):  # reversing n columns is an even permutation for these n; swap two instead
        ti[:, [0, 1]] = ti[:, [1, 0]]
    V = np.concatenate([outer.vertices, inner.vertices])
    rec = SimplexMesh(V, np.concatenate([to, ti + len(outer.vertices)])).mass_properties()
    vo, vi = 4.0**dim, 2.0**dim
    assert rec.volume == pytest.approx(vo - vi, rel=1e-12)
    np.testing.assert_allclose(rec.covariance, np.eye(dim) * (vo * 16 - vi * 4) / 12, rtol=1e-12, atol=1e-12)


@dims(2, 3, 4)
def test_mesh_convex_hull(dim: int, rng: np.random.Generator) -> None:
    """SimplexMesh.convex_hull of a non-convex mesh has scipy ConvexHull's volume."""
    outer = Box(np.ones(dim))
    V = np.asarray(outer.vertices).copy()
    V[0] *= -0.2  # pull one corner through to the inside: no longer convex
    mesh = SimplexMesh(V, outer.boundary_triangulation())
    hull = mesh.convex_hull()
    assert hull.mass_properties().volume == pytest.approx(ConvexHull(V).volume, rel=1e-12)
    assert mesh.mass_properties().volume < hull.mass_properties().volume


# ---------------------------------------------------------------------------------------------
# HalfSpace
# ---------------------------------------------------------------------------------------------


def test_half_space() -> None:
    """Normalised with its offset (same solid), static only, support along the normal (common practice)."""
    h = HalfSpace([0.0, 2.0, 0.0], 3.0)
    np.testing.assert_allclose(h.normal, [0.0, 1.0, 0.0])
    assert h.offset == pytest.approx(1.5)
    assert h.static_only and not Ball(3, 1.0).static_only
    np.testing.assert_allclose(h.support([0.0, 5.0, 0.0]), [0.0, 1.5, 0.0])
    assert np.all(np.isinf(h.support([1.0, 1.0, 0.0])))
    lo, hi = h.local_aabb()
    assert hi[1] == pytest.approx(1.5) and np.isinf(hi[0]) and np.all(np.isinf(lo))
    assert math.isinf(h.bounding_radius)
    with pytest.raises(InputError, match="static only"):
        h.mass_properties()


# ---------------------------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------------------------

BAD_INPUT = {
    "too-few-points": (lambda: ConvexPolytope(np.eye(3)), "at least n \\+ 1"),
    "duplicates-leave-too-few": (lambda: ConvexPolytope([[0, 0], [1, 0], [1, 0], [0, 0]]), "distinct"),
    "flat-points": (lambda: ConvexPolytope([[0, 0, 0], [1, 0, 0], [0, 1, 0], [1, 1, 0], [3, 2, 0]]), "flat"),
    "coincident-points": (lambda: ConvexPolytope(np.ones((5, 2))), "distinct|coincide"),
    "bad-tolerance": (lambda: ConvexPolytope([[0, 0], [1, 0], [0, 1]], tolerance=-1.0), "tolerance"),
    "nan-point": (lambda: ConvexPolytope([[0, 0], [1, 0], [np.nan, 1]]), "finite"),
    "1d-points": (lambda: ConvexPolytope([[0.0], [1.0]]), "n >= 2"),
    "zero-radius": (lambda: Ball(3, 0.0), "radius"),
    "inf-radius": (lambda: Ball(3, np.inf), "radius"),
    "dim-1-ball": (lambda: Ball(1, 1.0), "dim"),
    "negative-half-extent": (lambda: Box([1.0, -2.0]), "half_extents"),
    "one-axis-box": (lambda: Box([1.0]), "half_extents"),
    "nan-half-extent": (lambda: Box([1.0, np.nan]), "finite"),
    "zero-normal": (lambda: HalfSpace([0.0, 0.0], 1.0), "non-zero"),
    "inf-offset": (lambda: HalfSpace([0.0, 1.0], np.inf), "offset"),
    "zero-density": (lambda: Ball(2, 1.0).mass_properties(density=0.0), "density"),
    "negative-mass": (lambda: Box([1.0, 1.0]).mass_properties(mass=-1.0), "mass"),
    "nan-mass": (lambda: Box([1.0, 1.0]).mass_properties(mass=np.nan), "mass"),
    "density-and-mass": (lambda: Ball(2, 1.0).mass_properties(density=1.0, mass=1.0), "not both"),
    "mesh-bad-index": (lambda: SimplexMesh([[0, 0], [1, 0], [0, 1]], [[0, 1], [1, 2], [2, 3]]), "0..2"),
    "mesh-wrong-cell-size": (lambda: SimplexMesh([[0, 0], [1, 0], [0, 1]], [[0, 1, 2]]), "shape"),
    "mesh-repeated-vertex": (
        lambda: SimplexMesh([[0, 0], [1, 0], [0, 1]], [[0, 0], [1, 2], [2, 0]]),
        "repeat",
    ),
    "mesh-open": (lambda: SimplexMesh([[0, 0], [1, 0], [0, 1]], [[0, 1], [1, 2]]), "not closed"),
    "mesh-zero-volume": (lambda: SimplexMesh([[0, 0], [1, 0]], [[0, 1], [1, 0]]), "zero volume"),
    "compound-empty": (lambda: Compound([]), "non-empty"),
    "compound-dim-mismatch": (lambda: Compound([(Ball(3, 1.0), [0, 0, 0]), (Ball(2, 1.0), [0, 0])]), "3-D"),
    "compound-bad-rotor": (lambda: Compound([(Ball(3, 1.0), [0, 0, 0], [2.0, 0, 0, 0])]), "unit rotor"),
    "compound-bad-position": (lambda: Compound([(Ball(3, 1.0), [0, 0])]), "position"),
}


@pytest.mark.parametrize("case", list(BAD_INPUT), ids=list(BAD_INPUT))
def test_bad_input_is_rejected(case: str) -> None:
    """Bad input raises InputError (a ValueError) naming the problem; no shape is returned."""
    build, pattern = BAD_INPUT[case]
    with pytest.raises(InputError, match=pattern):
        build()


def test_bad_types_are_rejected() -> None:
    """Wrong Python types raise InputTypeError (a TypeError)."""
    with pytest.raises(InputTypeError):
        SimplexMesh([[0, 0], [1, 0], [0, 1]], [[0.0, 1.0], [1.0, 2.0], [2.0, 0.0]])
    with pytest.raises(InputTypeError, match="convex piece"):
        Compound([(Box([1.0, 1.0]).boundary_mesh(), [0.0, 0.0])])
    with pytest.raises(InputTypeError, match="static only"):
        Compound([(HalfSpace([0.0, 1.0]), [0.0, 0.0])])
    with pytest.raises(InputTypeError):
        Ball(2.5, 1.0)
