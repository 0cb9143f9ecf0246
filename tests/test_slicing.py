"""Tests of core/geometry/slicing.py: sections of every shape kind and the 3-D -> 2-D projection helpers.

Every geometric result is held against something outside the module: scipy.spatial
(HalfspaceIntersection, ConvexHull), scipy.optimize.linprog, closed forms from handbooks, brute force,
or a fact of the trade marked "(common practice)".
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.algebra import Algebra
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.polytopes import cell_24, hypercube, orthoplex, regular_simplex
from ndrigid.core.geometry.shapes import Ball, Box, Compound, ConvexPolytope, HalfSpace
from ndrigid.core.geometry.slicing import (
    axis_flat,
    default_frame,
    face_soup,
    facing_camera,
    halfspace_region,
    hyperplane,
    make_camera,
    make_flat,
    orbit_view,
    paint_order,
    project_points,
    slice_bodies,
    slice_shape,
    slice_world,
)
from ndrigid.core.world.simulation import Simulation
from scipy.optimize import linprog
from scipy.spatial import ConvexHull, HalfspaceIntersection


def random_rotation(n: int, rng: np.random.Generator) -> np.ndarray:
    """A random rotation matrix (QR of a Gaussian matrix, determinant fixed to +1)."""
    Q, R = np.linalg.qr(rng.normal(size=(n, n)))
    Q = Q * np.sign(np.diag(R))
    if np.linalg.det(Q) < 0:
        Q[:, 0] = -Q[:, 0]
    return Q


def random_flat(n: int, c: int, rng: np.random.Generator, spread: float = 0.2):
    """A flat of codimension c through a random point near the origin with a random orientation."""
    Q = random_rotation(n, rng)
    return make_flat(rng.normal(size=n) * spread, Q[:c], Q[c:])


def reference_section(shape: ConvexPolytope, t: np.ndarray, M: np.ndarray, flat) -> np.ndarray | None:
    """Vertices of the section by scipy: HalfspaceIntersection of the facets restricted to the flat.

    In slice coordinates s the solid is N_w (p + F^T s) <= o_w with N_w = N M^T, o_w = o + N_w t.
    The interior point is the Chebyshev centre from linprog.
    """
    Nw = np.asarray(shape.facet_normals) @ M.T
    ow = np.asarray(shape.facet_offsets) + Nw @ t
    A = Nw @ flat.frame.T
    b = ow - Nw @ flat.point
    m = A.shape[1]
    norms = np.linalg.norm(A, axis=1)
    res = linprog(np.r_[np.zeros(m), -1.0], A_ub=np.c_[A, norms], b_ub=b,
                  bounds=[(None, None)] * m + [(0, None)])
    if not res.success or res.x[-1] < 1e-6:
        return None
    hs = HalfspaceIntersection(np.c_[A, -b], res.x[:m])
    return hs.intersections


def same_point_sets(a: np.ndarray, b: np.ndarray, tol: float = 1e-7) -> bool:
    """True when every point of each set has a partner in the other (sets up to duplicates)."""
    d = np.linalg.norm(a[:, None, :] - b[None, :, :], axis=-1)
    return bool(np.all(d.min(axis=1) < tol) and np.all(d.min(axis=0) < tol))


# ---------------------------------------------------------------------------------------------
# Flats and input checks
# ---------------------------------------------------------------------------------------------


@dims()
def test_default_frame_is_orthonormal_complement(dim: int, rng: np.random.Generator) -> None:
    # orthonormal complement: the Gram matrix of [u; frame] is the identity (definition)
    u = rng.normal(size=dim)
    u /= np.linalg.norm(u)
    Fr = default_frame(u)
    basis = np.vstack([u, Fr])
    assert np.allclose(basis @ basis.T, np.eye(dim), atol=1e-12)
    # the hidden last axis gives e_0 .. e_{n-2} (the agreed default slice)
    assert np.array_equal(default_frame(np.eye(dim)[-1]), np.eye(dim)[:-1])


def test_bad_flats_and_poses_raise_input_errors() -> None:
    with pytest.raises(InputError, match="orthonormal"):
        make_flat(np.zeros(3), [[0, 0, 1]], [[1, 0, 0], [1, 1, 0]])
    with pytest.raises(InputError, match="frame rows"):
        make_flat(np.zeros(3), [[0, 0, 1]], [[1, 0, 0]])
    with pytest.raises(InputError, match="non-zero"):
        hyperplane(np.zeros(3), [0, 0, 0])
    with pytest.raises(InputError, match="offsets"):
        axis_flat(3, [0.0, 0.0, 0.0])
    box = Box([1.0, 1.0, 1.0])
    with pytest.raises(InputError, match="positions"):
        slice_bodies(box, np.zeros((2, 4)), flat=axis_flat(3), rotations=np.tile(np.eye(3), (2, 1, 1)))
    with pytest.raises(InputError, match="same number of poses"):
        slice_bodies(box, np.zeros((2, 3)), flat=axis_flat(3), rotations=np.tile(np.eye(3), (3, 1, 1)))
    with pytest.raises(InputError, match="flat"):
        slice_bodies(box, np.zeros((1, 3)), flat=axis_flat(4), rotations=np.eye(3)[None])
    with pytest.raises(InputTypeError, match="Flat"):
        slice_bodies(box, np.zeros((1, 3)), flat="x_2 = 0", rotations=np.eye(3)[None])
    with pytest.raises(InputError, match="SimplexMesh"):
        slice_shape(box.boundary_mesh(), np.zeros(3), flat=axis_flat(3, [0.0, 0.0]), rotation=np.eye(3))
    with pytest.raises(InputError, match="view"):
        make_camera(view=np.diag([1.0, 1.0, -1.0]))


# ---------------------------------------------------------------------------------------------
# Handbook sections
# ---------------------------------------------------------------------------------------------


def test_cube_cut_across_body_diagonal_is_regular_hexagon() -> None:
    # Coxeter, Regular Polytopes, sections of the cube (from memory): the central section of the cube
    # [-1, 1]^3 perpendicular to a body diagonal is a regular hexagon of area 3 sqrt 3 (side sqrt 2).
    sec = slice_shape(hypercube(3, edge=2.0), np.zeros(3), flat=hyperplane(np.zeros(3), [1, 1, 1]))[0]
    V = sec.vertices
    assert V.shape == (6, 2)
    assert np.allclose(np.linalg.norm(V, axis=1), math.sqrt(2.0))
    ring = V[sec.outline]
    sides = np.linalg.norm(ring - np.roll(ring, 1, axis=0), axis=1)
    assert np.allclose(sides, math.sqrt(2.0))
    assert sec.measure() == pytest.approx(3.0 * math.sqrt(3.0), rel=1e-12)
    assert ConvexHull(V).volume == pytest.approx(3.0 * math.sqrt(3.0), rel=1e-12)  # scipy: 2-D volume = area
    # counter-clockwise outline: positive signed area (shoelace, common practice)
    x, y = ring[:, 0], ring[:, 1]
    assert 0.5 * np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y) > 0


@dims()
@pytest.mark.parametrize("codim", [1, 2], ids=["hyperplane", "codim2"])
def test_ball_section_radius(dim: int, codim: int, rng: np.random.Generator) -> None:
    # Pythagoras: a flat at distance d from the centre cuts an r-ball in a ball of radius sqrt(r^2 - d^2)
    if codim >= dim:
        pytest.skip("a flat needs at least one slice dimension")
    r = 1.3
    flat = random_flat(dim, codim, rng)
    t = rng.normal(size=(40, dim))
    out = slice_bodies(Ball(dim, r), t, flat=flat, rotations=np.tile(np.eye(dim), (40, 1, 1)))[0]
    d = np.linalg.norm((t - flat.point) @ flat.normals.T, axis=1)
    assert np.array_equal(out.hit, d <= r)
    assert np.allclose(out.radii[out.hit], np.sqrt(r * r - d[out.hit] ** 2))
    # the centre is the orthogonal projection of the ball centre onto the flat (brute force)
    along = (t - flat.point) @ flat.normals.T @ flat.normals
    assert np.allclose(flat.to_world(out.centres[out.hit]) + along[out.hit], t[out.hit])


@dims()
def test_simplex_sections_parallel_to_a_facet_are_scaled_facets(dim: int, rng: np.random.Generator) -> None:
    # Elementary geometry (common practice): a section of a simplex parallel to a facet is similar
    # to the facet, scaled by (distance from the apex) / (apex height).
    edge = 1.7
    simplex = regular_simplex(dim, edge=edge)
    M = random_rotation(dim, rng)
    t = rng.normal(size=dim)
    f = 0
    u = M @ simplex.facet_normals[f]  # world facet normal
    world_v = t + simplex.vertices @ M.T
    h = world_v @ u
    apex, base = h.min(), simplex.facet_offsets[f] + u @ t
    for lam in (0.2, 0.5, 0.9):
        flat = hyperplane(u * (apex + lam * (base - apex)), u)
        sec = slice_shape(simplex, t, flat=flat, rotation=M)[0]
        assert len(sec.vertices) == dim
        if dim >= 2:
            dist = np.linalg.norm(sec.vertices[:, None] - sec.vertices[None], axis=-1)
            dist = dist[np.triu_indices(dim, 1)]
            assert np.allclose(dist, lam * edge)


# ---------------------------------------------------------------------------------------------
# Cavalieri: the integral of section volumes is the volume
# ---------------------------------------------------------------------------------------------


def _section_measure(sec, m: int) -> float:
    if m >= 4:
        return ConvexHull(sec.vertices).volume if len(sec.vertices) > m else 0.0
    own = sec.measure()
    if m >= 2 and len(sec.vertices) > m and sec.kind != "ball":
        assert own == pytest.approx(ConvexHull(sec.vertices).volume, rel=1e-9, abs=1e-12)  # scipy cross-check
    return own


SHAPES = {
    "box": lambda n: Box(np.linspace(0.5, 1.1, n)),
    "simplex": lambda n: regular_simplex(n, edge=1.5),
    "orthoplex": lambda n: orthoplex(n, circumradius=1.2),
    "24-cell": lambda n: cell_24(edge=0.8) if n == 4 else None,
}


@dims(3, 4, 5)
@pytest.mark.parametrize("name", list(SHAPES))
def test_cavalieri_recovers_polytope_volume(dim: int, name: str, rng: np.random.Generator) -> None:
    # Cavalieri's principle: vol = integral of the section (n-1)-volumes along the normal. Between two
    # consecutive vertex heights the section volume is a polynomial of degree <= n - 1, so composite
    # Gauss-Legendre with ceil(n / 2) points per interval is exact. Reference: mass_properties().volume.
    shape = SHAPES[name](dim)
    if shape is None:
        pytest.skip("the 24-cell exists only in 4-D")
    M = random_rotation(dim, rng)
    u = random_rotation(dim, rng)[0]
    h = np.sort((shape.vertices @ M.T) @ u)
    xg, wg = np.polynomial.legendre.leggauss((dim + 1) // 2 + 1)
    lo, hi = h[:-1], h[1:]
    keep = hi - lo > 1e-12
    lo, hi = lo[keep], hi[keep]
    s = ((hi - lo)[:, None] * (xg + 1) / 2 + lo[:, None]).ravel()
    w = ((hi - lo)[:, None] * wg / 2).ravel()
    flat = hyperplane(np.zeros(dim), u)
    # one batch: the body translated by -s u is cut by the fixed hyperplane at height s
    batch = slice_bodies(shape, -s[:, None] * u, flat=flat, rotations=np.tile(M, (len(s), 1, 1)))
    from ndrigid.core.geometry.slicing import records

    recs = records(batch)
    assert len(recs) == len(s)
    total = sum(wi * _section_measure(r, dim - 1) for wi, r in zip(w, recs, strict=True))
    assert total == pytest.approx(shape.mass_properties().volume, rel=1e-9)


@dims(3, 4, 5)
def test_cavalieri_recovers_ball_volume(dim: int) -> None:
    # NIST DLMF 5.19 (from memory: eq. 5.19.4): vol = pi^(n/2) r^n / Gamma(n/2 + 1). The section
    # volume (r^2 - s^2)^((n-1)/2) is smooth inside; 200-point Gauss-Legendre is accurate to ~1e-7.
    r = 0.9
    xg, wg = np.polynomial.legendre.leggauss(200)
    s, w = r * xg, r * wg
    flat = axis_flat(dim, [0.0])
    poses = np.outer(-s, np.eye(dim)[-1]), np.tile(np.eye(dim), (len(s), 1, 1))
    out = slice_bodies(Ball(dim, r), poses[0], flat=flat, rotations=poses[1])
    from ndrigid.core.geometry.slicing import records

    total = sum(wi * rec.measure() for wi, rec in zip(w, records(out), strict=True))
    exact = math.pi ** (dim / 2) * r**dim / math.gamma(dim / 2 + 1)
    assert total == pytest.approx(exact, rel=1e-6)
    assert total == pytest.approx(Ball(dim, r).mass_properties().volume, rel=1e-6)


# ---------------------------------------------------------------------------------------------
# Agreement with scipy's half-space intersection
# ---------------------------------------------------------------------------------------------


POLYS = {
    "box": lambda n, rng: Box(rng.uniform(0.3, 1.0, n)),
    "hull": lambda n, rng: ConvexPolytope(rng.normal(size=(3 * n + 4, n))),
    "24-cell": lambda n, rng: cell_24(edge=1.0) if n == 4 else None,
}


@dims(3, 4, 5)
@pytest.mark.parametrize("codim", [1, 2], ids=["hyperplane", "codim2"])
@pytest.mark.parametrize("name", list(POLYS))
def test_sections_match_scipy_halfspace_intersection(dim: int, codim: int, name: str,
                                                     rng: np.random.Generator) -> None:
    # scipy.spatial.HalfspaceIntersection of the polytope's facets restricted to the flat gives the
    # section's vertex set; ours must be the same set.
    shape = POLYS[name](dim, rng)
    if shape is None or dim - codim < 2:
        pytest.skip("24-cell is 4-D only; HalfspaceIntersection needs a slice of dimension >= 2")
    checked = 0
    for _ in range(6):
        M = random_rotation(dim, rng)
        t = rng.normal(size=dim) * 0.1
        flat = random_flat(dim, codim, rng)
        ref = reference_section(shape, t, M, flat)
        secs = slice_shape(shape, t, flat=flat, rotation=M)
        if ref is None:
            continue
        assert len(secs) == 1
        assert same_point_sets(secs[0].vertices, ref)
        checked += 1
    assert checked >= 3


def test_segment_section_in_2d_matches_linprog(rng: np.random.Generator) -> None:
    # 2-D: the section by a line is a segment; its ends are the min and max of the line coordinate
    # over the polygon restricted to the line (scipy.optimize.linprog).
    poly = ConvexPolytope(rng.normal(size=(9, 2)))
    for _ in range(5):
        flat = random_flat(2, 1, rng)
        sec = slice_shape(poly, np.zeros(2), flat=flat)
        A = np.asarray(poly.facet_normals) @ flat.frame.T
        b = np.asarray(poly.facet_offsets) - np.asarray(poly.facet_normals) @ flat.point
        lo = linprog([1.0], A_ub=A, b_ub=b, bounds=[(None, None)])
        hi = linprog([-1.0], A_ub=A, b_ub=b, bounds=[(None, None)])
        if not lo.success:
            assert sec == []
            continue
        assert np.allclose(np.sort(sec[0].vertices[:, 0]), [lo.x[0], hi.x[0]], atol=1e-9)


@dims(3, 4, 5)
def test_section_faces_are_hull_facets_with_outward_order(dim: int, rng: np.random.Generator) -> None:
    # scipy.spatial.ConvexHull of the section vertices: every reported face lies on a hull facet plane
    # with the same outward normal; in 2-D and 3-D slices each face's vertex order agrees with it
    # (segment along rot90(n); polygon counter-clockwise around n: Newell's vector area along n).
    shape = Box(rng.uniform(0.4, 1.0, dim)) if dim != 4 else cell_24()
    M = random_rotation(dim, rng)
    sec = slice_shape(shape, np.zeros(dim), flat=random_flat(dim, 1, rng, spread=0.05), rotation=M)[0]
    hull = ConvexHull(sec.vertices)
    eq = hull.equations
    m = dim - 1
    for f, nrm in zip(sec.faces, sec.face_normals, strict=True):
        P = sec.vertices[f]
        match = np.flatnonzero(np.abs(eq[:, :m] @ nrm - 1.0) < 1e-9)
        assert match.size >= 1
        assert np.allclose(P @ eq[match[0], :m] + eq[match[0], m], 0.0, atol=1e-9)
        if m == 2:
            assert (P[1] - P[0]) @ np.array([-nrm[1], nrm[0]]) > 0
        if m == 3:
            area = 0.5 * np.cross(P, np.roll(P, -1, axis=0)).sum(axis=0)
            assert area @ nrm > 0 and np.allclose(area / np.linalg.norm(area), nrm, atol=1e-9)
    # every hull facet is covered by a reported face (group qhull's triangles by their plane)
    planes = np.unique(np.round(eq, 9), axis=0)
    assert len(sec.faces) == len(planes)


def test_24_cell_cut_through_twelve_vertices_is_a_cuboctahedron() -> None:
    # Brute force: the 24-cell's vertices (+-1, +-1, 0, 0) with x_3 = 0 are the 12 permutations of
    # (+-1, +-1, 0), a cuboctahedron (8 triangles, 6 squares; ConvexHull facets grouped by plane).
    # The flat contains ridges of the 24-cell, so each triangle is the section of two cells: it
    # must be reported once.
    shape = cell_24(edge=math.sqrt(2.0))
    sec = slice_shape(shape, np.zeros(4), flat=axis_flat(4, [0.0]))[0]
    V = np.asarray(shape.vertices)
    brute = V[np.abs(V[:, 3]) < 1e-12, :3]
    assert same_point_sets(sec.vertices, brute)
    sizes = sorted(len(f) for f in sec.faces)
    assert sizes == [3] * 8 + [4] * 6
    assert sec.measure() == pytest.approx(ConvexHull(brute).volume, rel=1e-12)


@dims(3, 4)
def test_mesh_section_matches_polytope_section(dim: int, rng: np.random.Generator) -> None:
    # The boundary mesh of a box encloses the same solid, so its section has the same measure
    # (cross-checked by scipy ConvexHull in _section_measure for the polytope).
    box = Box(rng.uniform(0.4, 1.0, dim))
    M = random_rotation(dim, rng)
    flat = random_flat(dim, 1, rng, spread=0.05)
    a = slice_shape(box, np.zeros(dim), flat=flat, rotation=M)[0]
    b = slice_shape(box.boundary_mesh(), np.zeros(dim), flat=flat, rotation=M)[0]
    assert b.kind == "mesh"
    assert b.measure() == pytest.approx(_section_measure(a, dim - 1), rel=1e-9)


@dims()
def test_halfspace_section_by_sampling(dim: int, rng: np.random.Generator) -> None:
    # Brute force: random slice points satisfy the slice half-space exactly when their world points
    # satisfy the body's half-space.
    hs = HalfSpace(rng.normal(size=dim), 0.3)
    M = random_rotation(dim, rng)
    t = rng.normal(size=dim)
    flat = random_flat(dim, 1, rng)
    sec = slice_shape(hs, t, flat=flat, rotation=M)[0]
    s = rng.normal(size=(500, dim - 1)) * 3
    x = flat.to_world(s)
    inside_world = (x - t) @ M @ hs.normal <= hs.offset
    assert np.array_equal(s @ sec.normal <= sec.offset, inside_world)


def test_halfspace_region_area() -> None:
    # Brute force: the square [-1, 1]^2 below the line y = 0.5 x has area 2 (the line halves it)
    reg = halfspace_region([-0.5, 1.0], 0.0, [-1, -1], [1, 1])
    assert reg is not None and reg.measure() == pytest.approx(2.0)
    assert halfspace_region([0.0, 1.0], -5.0, [-1, -1], [1, 1]) is None


def test_compound_is_sliced_piece_by_piece(rng: np.random.Generator) -> None:
    # Brute force: each piece sliced alone at its composed pose gives the same section.
    alg = Algebra(4)
    R = alg.rotor(rng.normal(size=alg.k))
    comp = Compound([(Box([0.5, 0.3, 0.4, 0.6]), [0.2, 0, 0, 0.1], R), (Ball(4, 0.4), [-0.5, 0.1, 0, 0.05])])
    M = random_rotation(4, rng)
    t = rng.normal(size=4) * 0.1
    flat = axis_flat(4, [0.0])
    secs = slice_shape(comp, t, flat=flat, rotation=M)
    assert [s.piece for s in secs] == [0, 1]
    box_alone = slice_shape(comp.shapes[0], t + M @ comp.positions[0], flat=flat,
                            rotation=M @ comp.rotations[0])[0]
    assert same_point_sets(secs[0].vertices, box_alone.vertices)
    c = t + M @ comp.positions[1]
    assert secs[1].radius == pytest.approx(math.sqrt(0.16 - c[3] ** 2))


def test_slice_world_returns_cut_bodies_with_handles() -> None:
    # Brute force: a body is listed exactly when the hyperplane x_3 = 0 meets it.
    sim = Simulation(4)
    floor = sim.add_body(HalfSpace([0, 1, 0, 0], 0.0), kind="static")
    near = sim.add_body(Box([0.5] * 4), position=[0, 1, 0, 0.3])
    far = sim.add_body(Box([0.5] * 4), position=[2, 1, 0, 0.7])
    ball = sim.add_body(Ball(4, 0.5), position=[-2, 1, 0, -0.4])
    recs = slice_world(sim, axis_flat(4, [0.0])).records()
    got = {r.handle: r for r in recs}
    assert set(got) == {floor, near, ball}
    assert far not in got
    assert got[ball].radius == pytest.approx(math.sqrt(0.25 - 0.16))
    assert got[near].measure() == pytest.approx(1.0)  # a unit cube: 1 x 1 x 1
    assert np.allclose(got[floor].normal, [0, 1, 0]) and got[floor].offset == pytest.approx(0.0)
    soup = face_soup(slice_world(sim, axis_flat(4, [0.0])))
    assert len(soup.faces) == 6 and set(soup.handles.tolist()) == {near}
    assert soup.balls_handle.tolist() == [ball]


# ---------------------------------------------------------------------------------------------
# Projection
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("perspective", [False, True], ids=["orthographic", "perspective"])
def test_back_face_removal_keeps_three_cube_faces(perspective: bool) -> None:
    # Common practice: a convex cube seen from a generic direction shows exactly 3 of its 6 faces,
    # and each shown face is nearer the eye than the hidden face opposite it.
    cube = slice_shape(Box([1.0, 1.0, 1.0]), np.zeros(3), flat=axis_flat(3, []))[0]
    cam = make_camera(orbit_view(0.6, 0.45), distance=12.0, perspective=perspective)
    cen = np.stack([cube.vertices[f].mean(axis=0) for f in cube.faces])
    vis = facing_camera(cube.face_normals, cen, cam)
    assert vis.sum() == 3
    _, depth = project_points(cen, cam)
    for i in np.flatnonzero(vis):
        j = int(np.argmin(cube.face_normals @ cube.face_normals[i]))  # the opposite face
        assert depth[i] < depth[j]
    order = paint_order(depth)
    assert np.all(np.diff(depth[order]) <= 0)  # far to near
    assert set(order[3:].tolist()) == set(np.flatnonzero(vis).tolist())


def test_projection_of_axis_view_matches_pinhole_formula() -> None:
    # Pinhole camera (common practice): with the eye at distance D on +z looking at the origin,
    # a point (x, y, z) maps to (x, y) D / (D - z) and its depth is D - z; orthographic drops z.
    cam = make_camera(np.eye(3), distance=5.0, perspective=True)
    P = np.array([[1.0, 2.0, 1.0], [-1.0, 0.5, -2.0]])
    xy, depth = project_points(P, cam)
    assert np.allclose(depth, 5.0 - P[:, 2])
    assert np.allclose(xy, P[:, :2] * (5.0 / (5.0 - P[:, 2]))[:, None])
    xy2, _ = project_points(P, make_camera(np.eye(3), distance=5.0, perspective=False))
    assert np.allclose(xy2, P[:, :2])
