"""Cross-sections of n-dimensional shapes by flats, and projections of 3-D sections to the screen.

A *flat* is an affine subspace of codimension c (0 <= c <= n - 1): a point p (n,), c orthonormal
normals U (c, n) and an orthonormal frame F (m, n), m = n - c, whose rows span the rest. A point x
of the flat has slice coordinates s = F (x - p). The common case is a hyperplane (c = 1): a 4-D
world cut across its hidden axis e_3 gives a 3-D slice; a 5-D world is cut across e_3 and e_4
(c = 2); c = 0 simply re-expresses a whole 3-D world in the camera's frame (the 3-D inset).

What a section is, per shape kind (all in slice coordinates, m-dimensional):

* Ball: a ball of radius sqrt(r^2 - d^2), d the distance of the centre from the flat.
* Box / ConvexPolytope: an m-polytope. Its vertices are the intersections of the c-faces of the
  polytope with the flat (c = 1: edges crossing the hyperplane, plus vertices lying on it), and its
  facets are the sections of the polytope's facets, so a section vertex belongs to a section facet
  exactly when its c-face lies in that facet (a static incidence table per shape). A section
  facet's outward normal is the polytope facet's normal projected into the flat, F M n_f.
* SimplexMesh (c <= 1): the section boundary, one face per cut cell (not necessarily convex).
* HalfSpace: a half-space of the slice, (F w) . s <= offset; :func:`halfspace_region` clips it to
  a box for drawing.
* Compound: piece by piece (each piece is sliced with its composed pose).

Drawing order of faces: for m = 2 each face is a segment oriented counter-clockwise around the
section and a convex section also has its whole outline in counter-clockwise order; for m = 3 each
face is a polygon ordered counter-clockwise seen from outside (around its outward normal); for
m >= 4 a face is an unordered vertex set.

Vectorisation and choices:

* Everything is batched over the bodies that share one shape: B poses in, (B, J, m) candidate
  points with a (B, J) validity mask out, where J is the shape's fixed candidate count. The only
  Python loops are over distinct shapes (and compound pieces). Fixed-size masked arrays beat ragged
  per-body lists: the ragged form needs a Python loop per body to build.
* Polygon vertices are ordered by a pseudo-angle (the "diamond angle", a monotone rational function
  of the angle) instead of arctan2, and only faces that the flat actually cuts are ordered.
* 4-D polytopes cut by a hyperplane through none of their vertices (the common case of a 4-D game)
  skip that sort: each facet's section polygon is looked up from a table indexed by the facet's
  vertex sign pattern (cyclic order from the facet's 2-faces, built once per combinatorial type),
  and its orientation, a constant of (shape, facet, pattern) up to the flat's handedness, is
  measured once and remembered. Measured on the 1,000-body bench (half boxes, half 24-cells, all
  cut; ``ndrigid.bench.slicing``, one core): 8.1-10.8 ms with the sort, 2.6-3.0 ms with the table.
  Alternatives measured and kept only in part: planar (one axis at a time) takes instead of 2-D
  fancy indexing, ~3x cheaper; interpolating only the crossing edges (~1/4 of them); in-place
  arithmetic, because a fresh ~1 MB temporary costs page faults on every call (before: ~3,500 minor
  faults and ~4 ms of 10.8 ms per call; now ~700, ~0.8 ms, measured with getrusage against a run
  with glibc's trim threshold raised).
* c = 1 uses signed vertex distances and edge interpolation (exact incidence, no duplicate points).
  c >= 2 solves a small c x c system per c-face and keeps the points inside every facet inequality;
  membership in section facets is then decided geometrically and coincident points (a flat through
  a lower face) are merged. That path costs B x J x F and is meant for the few bodies of a 5-D
  scene, not for thousands. SimplexMesh supports c <= 1 only.
* Degenerate cuts (the flat touching a vertex, an edge, or containing a facet) give sections of
  lower dimension: their points are still reported, faces that do not span (m - 1) dimensions are
  dropped.

Projection (3-D slice -> 2-D screen): a :class:`Camera` holds a view rotation, a target point and a
distance; :func:`project_points` gives screen coordinates (y up, units at the target's depth) and
depths, orthographic or perspective; :func:`facing_camera` is back-face removal and
:func:`paint_order` a painter's sort (far to near). :func:`face_soup` flattens a 3-D slice of a
whole world into one array of faces for those helpers. The core never imports a renderer.
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError, InputTypeError, as_float_array, dimension, positive_scalar
from .shapes import Ball, Compound, ConvexPolytope, HalfSpace, Shape, SimplexMesh

if TYPE_CHECKING:
    from ..world.simulation import Simulation

Array = NDArray[np.float64]
IntArray = NDArray[np.intp]
BoolArray = NDArray[np.bool_]

__all__ = [
    "Camera",
    "Flat",
    "FaceSoup",
    "Section",
    "SectionBatch",
    "WorldSlice",
    "axis_flat",
    "default_frame",
    "face_soup",
    "facing_camera",
    "halfspace_region",
    "hyperplane",
    "orbit_view",
    "paint_order",
    "project_points",
    "slice_bodies",
    "slice_shape",
    "slice_world",
]

# Relative tolerance (times the shape's size) for "a vertex lies on the flat" and for "a point lies
# on a facet". Rounding of the pose arithmetic is ~1e-15 of the size; 1e-10 is far above it and far
# below any visible feature.
_TOL = 1e-10
_ORTHO_TOL = 1e-8  # accepted deviation of a user's flat from orthonormality


# ---------------------------------------------------------------------------------------------
# Flats
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Flat:
    """An affine flat of codimension c in R^n: ``U (x - p) = 0``; slice coordinates ``s = F (x - p)``.

    Attributes:
        point: (n,) float, a point of the flat (the origin of slice coordinates).
        normals: (c, n) float, orthonormal rows, the directions cut across.
        frame: (m, n) float, orthonormal rows orthogonal to the normals; m = n - c >= 1.
    """

    point: Array
    normals: Array
    frame: Array

    @property
    def dim(self) -> int:
        """Dimension n of the space."""
        return int(self.point.shape[0])

    @property
    def codim(self) -> int:
        """Number c of directions cut across."""
        return int(self.normals.shape[0])

    @property
    def slice_dim(self) -> int:
        """Dimension m = n - c of the slice."""
        return int(self.frame.shape[0])

    def to_world(self, s: Any) -> Array:
        """World points (..., n) of slice coordinates s (..., m)."""
        s = as_float_array("s", s, (self.slice_dim,))
        return self.point + s @ self.frame

    def to_slice(self, x: Any) -> Array:
        """Slice coordinates (..., m) of world points x (..., n) (the flat's orthogonal projection)."""
        x = as_float_array("x", x, (self.dim,))
        return (x - self.point) @ self.frame.T


def make_flat(point: Any, normals: Any, frame: Any) -> Flat:
    """Validated :class:`Flat` from a point (n,), normals (c, n) and a frame (n - c, n)."""
    p = np.asarray(point, dtype=np.float64)
    if p.ndim != 1 or p.shape[0] < 2:
        raise InputError(f"point: expected a point of shape (n,) with n >= 2, got shape {p.shape}")
    n = p.shape[0]
    p = as_float_array("point", p, (n,)).copy()
    U = np.asarray(normals, dtype=np.float64).reshape(-1, n) if np.size(normals) else np.zeros((0, n))
    U = as_float_array("normals", U, (n,))
    Fr = as_float_array("frame", np.asarray(frame, dtype=np.float64).reshape(-1, n) if np.size(frame)
                        else np.zeros((0, n)), (n,))
    c, m = U.shape[0], Fr.shape[0]
    if c + m != n or m < 1:
        raise InputError(f"normals, frame: expected c normals and m >= 1 frame rows with c + m = n = {n}, "
                         f"got {c} normals and {m} frame rows")
    basis = np.concatenate([U, Fr])
    err = float(np.max(np.abs(basis @ basis.T - np.eye(n))))
    if not err <= _ORTHO_TOL:
        raise InputError(f"normals, frame: expected orthonormal rows (normals and frame together an "
                         f"orthonormal "
                         f"basis), got a Gram matrix off the identity by {err:.3g}")
    p, U, Fr = p.copy(), U.copy(), Fr.copy()
    for a in (p, U, Fr):
        a.setflags(write=False)
    return Flat(point=p, normals=U, frame=Fr)


def default_frame(normal: Any) -> Array:
    """(n-1, n) orthonormal frame of the hyperplane with unit ``normal`` (n,).

    For a coordinate normal +-e_i the frame is the other basis vectors in order (e_{n-1} gives
    e_0 .. e_{n-2}); otherwise the basis vectors are made orthogonal to the normal by Gram-Schmidt,
    skipping the one most aligned with it, so the frame varies smoothly with the normal.
    """
    u = np.asarray(normal, dtype=np.float64)
    if u.ndim != 1 or u.shape[0] < 2:
        raise InputError(f"normal: expected a vector of shape (n,) with n >= 2, got shape {u.shape}")
    u = as_float_array("normal", u, (u.shape[0],))
    norm = float(np.linalg.norm(u))
    if not norm > 0.0:
        raise InputError(f"normal: expected a non-zero vector, got {u.tolist()}")
    u = u / norm
    n = u.shape[0]
    skip = int(np.argmax(np.abs(u)))
    rows: list[Array] = []
    for i in range(n):  # n - 1 Gram-Schmidt steps: a loop over axes, not bodies
        if i == skip:
            continue
        v = np.eye(n)[i] - u[i] * u
        for r in rows:
            v = v - (v @ r) * r
        rows.append(v / np.linalg.norm(v))
    return np.array(rows)


def hyperplane(point: Any, normal: Any, frame: Any = None) -> Flat:
    """The hyperplane through ``point`` (n,) with unit ``normal`` (n,); ``frame`` (n-1, n) or the default."""
    fr = default_frame(normal) if frame is None else frame  # validates the normal
    u = np.asarray(normal, dtype=np.float64)
    if frame is not None:
        default_frame(u)  # same validation when a frame is given
    return make_flat(point, (u / np.linalg.norm(u)).reshape(1, -1), fr)


def axis_flat(dim: int, offsets: Any = (0.0,)) -> Flat:
    """The flat across the last ``len(offsets)`` axes at those offsets; frame e_0 .. e_{m-1}.

    ``axis_flat(4, [w])`` is the hyperplane x_3 = w with slice coordinates (x_0, x_1, x_2);
    ``axis_flat(5, [a, b])`` is x_3 = a, x_4 = b; ``axis_flat(3, [])`` is the whole 3-D space.
    """
    n = dimension("dim", dim)
    o = np.atleast_1d(np.asarray(offsets, dtype=np.float64))
    if o.ndim != 1 or o.shape[0] > n - 1:
        raise InputError(f"offsets: expected at most n - 1 = {n - 1} offsets (one per hidden axis), got "
                         f"shape "
                         f"{np.shape(offsets)}")
    o = as_float_array("offsets", o, (o.shape[0],))
    c = o.shape[0]
    eye = np.eye(n)
    p = np.zeros(n)
    p[n - c:] = o
    return make_flat(p, eye[n - c:], eye[: n - c])


# ---------------------------------------------------------------------------------------------
# Per-shape slicing tables (static, built once per shape and codimension)
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Topology:
    """Static data for slicing one shape across c directions.

    ``mode`` is "vertices" (c = 0), "edges" (c = 1) or "faces" (c >= 2). Candidates are numbered
    vertices first, then edges ("edges" mode), or are the c-faces ("faces" mode).
    """

    mode: str
    vertices: Array            # (V, n)
    edges: IntArray            # (E, 2)
    face_cand: IntArray        # (F, K) candidate indices of each facet, -1 padded
    face_normals: Array        # (F, n) outward local normals
    face_offsets: Array        # (F,)
    cface_base: Array          # (J, n)   faces mode only
    cface_dirs: Array          # (J, c, n) faces mode only
    size: float                # scale for tolerances

    @cached_property
    def edge_ends(self) -> tuple[IntArray, IntArray]:
        """The edges' first and second vertex indices, (E,) each, contiguous (cheap row takes)."""
        return np.ascontiguousarray(self.edges[:, 0]), np.ascontiguousarray(self.edges[:, 1])

    @cached_property
    def cand_tables(self) -> tuple[IntArray, IntArray, BoolArray]:
        """face_cand (F, K), its entries flattened with padding clipped to 0 (F * K,), (F, K) not padding."""
        fc = self.face_cand
        return fc, np.maximum(fc, 0).ravel(), fc >= 0

    @cached_property
    def edge_cand_tables(self) -> tuple[IntArray, IntArray, BoolArray]:
        """As :attr:`cand_tables` for the edge candidates only (a cut through no vertex has no others)."""
        nv = len(self.vertices)
        fc = _pad([r[r >= nv] for r in self.face_cand])
        return fc, np.maximum(fc, 0).ravel(), fc >= 0


_TOPOLOGY: weakref.WeakKeyDictionary[Shape, dict[int, _Topology]] = weakref.WeakKeyDictionary()


def _pad(rows: list[IntArray]) -> IntArray:
    K = max((len(r) for r in rows), default=0)
    out = np.full((len(rows), K), -1, dtype=np.intp)
    for i, r in enumerate(rows):  # once per shape, cold
        out[i, : len(r)] = r
    return out


def _cell_normals(V: Array, cells: IntArray) -> tuple[Array, Array]:
    """Outward unit normals (C, n) and offsets (C,) of oriented boundary cells (C, n).

    Outward n satisfies det[n, v_1 - v_0, ..., v_(n-1) - v_0] > 0 (the mesh orientation rule
    det[v_i - p] > 0 for p inside, with p = v_0 - eps n).
    """
    P = V[cells]
    D = P[:, 1:] - P[:, :1]  # (C, n-1, n)
    _, _, Vt = np.linalg.svd(D)
    nrm = Vt[:, -1]  # null vector of the edge directions
    sign = np.sign(np.linalg.det(np.concatenate([nrm[:, None, :], D], axis=1)))
    nrm = nrm * np.where(sign == 0, 1.0, sign)[:, None]
    return nrm, np.einsum("ci,ci->c", nrm, P[:, 0])


def _topology(shape: Shape, c: int) -> _Topology:
    per = _TOPOLOGY.get(shape)
    if per is None:
        per = {}
        _TOPOLOGY[shape] = per
    topo = per.get(c)
    if topo is not None:
        return topo
    n = shape.dim
    empty_base, empty_dirs = np.zeros((0, n)), np.zeros((0, c, n))
    if isinstance(shape, ConvexPolytope):
        V = np.asarray(shape.vertices)
        E = np.asarray(shape.edges)
        N, O = np.asarray(shape.facet_normals), np.asarray(shape.facet_offsets)
        size = float(np.max(np.abs(V)))
        if c == 0:
            fc = _pad(list(shape.facet_vertices))
            topo = _Topology("vertices", V, E, fc, N, O, empty_base, empty_dirs, size)
        elif c == 1:
            key = E[:, 0] * len(V) + E[:, 1]
            rows = []
            for fv, fe in zip(shape.facet_vertices, shape.facet_edges, strict=True):
                eid = np.searchsorted(key, np.sort(fe, axis=1) @ np.array([len(V), 1]))
                rows.append(np.concatenate([np.sort(fv), len(V) + eid]))
            topo = _Topology("edges", V, E, _pad(rows), N, O, empty_base, empty_dirs, size)
        else:
            faces = shape.faces(c)
            base = np.stack([V[f[0]] for f in faces])
            dirs = []
            for f in faces:  # cold: once per shape
                _, _, Vt = np.linalg.svd(V[f] - V[f].mean(axis=0))
                dirs.append(Vt[:c])
            J = len(faces)
            fc = np.tile(np.arange(J), (len(N), 1))
            topo = _Topology("faces", V, E, fc, N, O, base, np.stack(dirs), size)
    elif isinstance(shape, SimplexMesh):
        if c > 1:
            raise InputError(f"flat: a SimplexMesh can be sliced across at most one direction, got "
                             f"codimension {c}; "
                             "slice its convex_hull() or convex pieces instead")
        V = np.asarray(shape.vertices)
        cells = np.asarray(shape.cells)
        N, O = _cell_normals(V, cells)
        size = float(np.max(np.abs(V)))
        n_ = cells.shape[1]
        ia, ib = np.triu_indices(n_, 1)
        pairs = np.sort(np.stack([cells[:, ia], cells[:, ib]], axis=-1), axis=-1)  # (C, P, 2)
        keys = pairs[..., 0] * len(V) + pairs[..., 1]
        ukeys, inv = np.unique(keys.ravel(), return_inverse=True)
        E = np.stack([ukeys // len(V), ukeys % len(V)], axis=1).astype(np.intp)
        if c == 0:
            fc = cells.astype(np.intp)
            topo = _Topology("vertices", V, E, fc, N, O, empty_base, empty_dirs, size)
        else:
            fc = np.concatenate([cells, len(V) + inv.reshape(keys.shape)], axis=1).astype(np.intp)
            topo = _Topology("edges", V, E, fc, N, O, empty_base, empty_dirs, size)
    else:
        raise InputTypeError(f"shape: expected a Box, ConvexPolytope or SimplexMesh here, got "
                             f"{type(shape).__name__}")
    per[c] = topo
    return topo


# ---------------------------------------------------------------------------------------------
# Batched sections
# ---------------------------------------------------------------------------------------------


@dataclass
class SectionBatch:
    """Sections of B bodies that share one shape (or one compound piece), in slice coordinates.

    Attributes:
        kind: "polytope", "mesh", "ball" or "halfspace".
        handles: (B,) int, body handles (-1 when sliced without a simulation).
        piece: index of the compound piece, -1 for a plain shape.
        hit: (B,) bool, the flat cuts the body (non-empty section).
        points: (B, J, m) float candidate section vertices (polytope/mesh).
        valid: (B, J) bool, which candidates are vertices of the section.
        faces: (G, K) int, the section faces of all B bodies: ordered candidate indices into
            ``points[face_body[g]]``, -1 padded. Only true (m-1)-dimensional faces are listed.
        face_body: (G,) int, the batch row each face belongs to (non-decreasing).
        face_facet: (G,) int, the shape facet (or mesh cell) each face is the section of.
        face_normals: (G, m) float, outward unit normals of the section faces.
        outline: (B, J) int or None: for convex m = 2 sections, the vertices in counter-clockwise
            order, -1 padded.
        centres: (B, m) float, ball section centres (balls) or the mean of the vertices.
        radii: (B,) float, ball section radii (zero for non-balls).
        normals: (B, m) float, half-space normals in the slice (zero vector: the slice lies
            entirely inside (offset >= 0) or outside the half-space).
        offsets: (B,) float, half-space offsets: the region is normals . s <= offsets.
    """

    kind: str
    handles: NDArray[np.int64]
    piece: int
    hit: BoolArray
    points: Array | None = None
    valid: BoolArray | None = None
    faces: IntArray | None = None
    face_body: IntArray | None = None
    face_facet: IntArray | None = None
    face_normals: Array | None = None
    outline: IntArray | None = None
    centres: Array | None = None
    radii: Array | None = None
    normals: Array | None = None
    offsets: Array | None = None

    def __len__(self) -> int:
        return int(self.hit.shape[0])


@dataclass
class Section:
    """The section of one body (or compound piece), compacted to its own vertices.

    Attributes:
        handle, piece, kind: as in :class:`SectionBatch`.
        vertices: (V, m) float slice-space vertices (empty for balls and half-spaces).
        faces: list of int arrays into ``vertices``, ordered for drawing (module notes).
        face_normals: (len(faces), m) float outward unit normals.
        outline: int array, counter-clockwise vertex order of a convex 2-D section, else None.
        centre: (m,) float; radius: float (balls).
        normal: (m,) float; offset: float (half-spaces).
    """

    handle: int
    piece: int
    kind: str
    vertices: Array
    faces: list[IntArray] = field(default_factory=list)
    face_normals: Array | None = None
    outline: IntArray | None = None
    centre: Array | None = None
    radius: float = 0.0
    normal: Array | None = None
    offset: float = 0.0

    def measure(self) -> float:
        """m-volume of the section: length, area (shoelace) or volume (divergence theorem, m = 3).

        Balls use the m-ball volume formula. Half-spaces are unbounded (inf). m >= 4 is not
        supported here (use scipy.spatial.ConvexHull on the vertices).
        """
        if self.kind == "halfspace":
            return math.inf
        m = int(self.vertices.shape[1])
        if self.kind == "ball":
            return math.pi ** (m / 2) * self.radius**m / math.gamma(m / 2 + 1)
        if len(self.faces) == 0 or len(self.vertices) == 0:
            return 0.0
        V = self.vertices
        if m == 1:
            return float(np.ptp(V[:, 0]))
        if m == 2:
            # sum over oriented boundary segments of (a x b) / 2 (the shoelace formula, segment form)
            a = np.stack([V[f[0]] for f in self.faces])
            b = np.stack([V[f[1]] for f in self.faces])
            return float(0.5 * np.sum(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]))
        if m == 3:
            # divergence theorem: vol = 1/3 sum_f (n_f . x_f) area_f, fan-triangulated polygons
            vol = 0.0
            for f in self.faces:
                P = V[f]
                cr = np.cross(P[1:-1] - P[0], P[2:] - P[0]).sum(axis=0)  # twice the vector area
                vol += float(P[0] @ cr) / 6.0
            return vol
        raise InputError(f"measure: sections of dimension m = {m} >= 4 are not supported; use ConvexHull")


def _check_poses(shape: Shape, positions: Any, rotors: Any, rotations: Any) -> tuple[Array, Array]:
    """Positions (B, n) and rotation matrices (B, n, n) of a public batch of poses: rotors
    (B, 2**(n-1)) or, under the explicit keyword, rotation matrices; neither means identity."""
    from ..algebra import Algebra

    n = shape.dim
    t = as_float_array("positions", positions, (n,)).reshape(-1, n)
    if rotors is not None and rotations is not None:
        raise InputError("rotors, rotations: expected at most one of rotors and rotation matrices, got both")
    if rotations is not None:
        M = as_float_array("rotations", rotations, (n, n)).reshape(-1, n, n)
        if M.size:
            Algebra(n).matrix_to_rotor(M, name="rotations")  # validates: orthogonal, det +1
    elif rotors is not None:
        alg = Algebra(n)
        arr = np.asarray(rotors) if not isinstance(rotors, str) else None
        if arr is not None and arr.ndim >= 2 and arr.shape[-2:] == (n, n) and n * n != alg.even_size:
            raise InputError(f"rotors: expected rotors with {alg.even_size} components, got rotation "
                             f"matrices of shape {arr.shape}; pass matrices as rotations=...")
        R = alg.check_rotor(rotors, "rotors").reshape(-1, alg.even_size)
        M = alg.rotor_to_matrix(alg.rotor_normalize(R, 2))
    else:
        M = np.broadcast_to(np.eye(n), (t.shape[0], n, n)).copy()
    if t.shape[0] != M.shape[0]:
        raise InputError(f"positions, rotations: expected the same number of poses, got {t.shape[0]} "
                         f"positions and {M.shape[0]} orientations")
    return t, M


def _check_flat(flat: Any, n: int) -> Flat:
    if not isinstance(flat, Flat):
        raise InputTypeError(f"flat: expected a Flat (see hyperplane, axis_flat), got {type(flat).__name__}")
    if flat.dim != n:
        raise InputError(f"flat: expected a flat in {n}-D like the shape, got one in {flat.dim}-D")
    return flat


def _pseudo_angle(x: Array, y: Array) -> Array:
    """A monotone stand-in for atan2(y, x) in (-2, 2] (the 'diamond angle'): no transcendental call."""
    r = np.abs(x) + np.abs(y)
    r = np.where(r > 0.0, r, 1.0)
    return np.copysign(1.0 - x / r, y)


def _order_faces(coords: list[Array], cand: IntArray, normals: Array, m: int) -> IntArray:
    """Order each face's points for drawing. Returns (G, K) candidate indices, -1 padded.

    coords: m arrays (G, K), the face points' slice coordinates one axis at a time (planar layout:
    every arithmetic step below runs on contiguous arrays), padding entries repeating a valid point
    of the face; cand (G, K) their candidate indices, -1 padded; normals (G, m) outward unit normals.
    m = 2: the segment runs with the outward normal on its right (counter-clockwise around the
    section); m = 3: counter-clockwise around the normal; otherwise the order is kept.
    """
    if cand.shape[0] == 0 or cand.shape[1] < m:
        return cand
    if m == 3:
        px, py, pz = coords
        nx, ny, nz = normals[:, 0], normals[:, 1], normals[:, 2]
        # in-plane axes: e1 = helper axis (e_0, or e_1 when the normal is nearly e_0) minus its
        # normal part; e2 = n x e1, so (e1, e2, n) is right-handed and increasing angle is CCW seen
        # from +n. Written out per component: numpy's cross/matmul on (G, 3) carry large overheads.
        use_x = np.abs(nx) < 0.9
        h = np.where(use_x, nx, ny)
        a1 = np.where(use_x, 1.0, 0.0) - h * nx
        a2 = np.where(use_x, 0.0, 1.0) - h * ny
        a3 = -h * nz
        inv = 1.0 / np.sqrt(a1 * a1 + a2 * a2 + a3 * a3)
        a1, a2, a3 = a1 * inv, a2 * inv, a3 * inv
        b1, b2, b3 = ny * a3 - nz * a2, nz * a1 - nx * a3, nx * a2 - ny * a1
        # the mean of three of the polygon's vertices lies inside it (vertices of a convex polygon
        # are corners, never three collinear), which is all the angular sort needs
        cx = (px[:, 0] + px[:, 1] + px[:, 2]) / 3.0
        cy = (py[:, 0] + py[:, 1] + py[:, 2]) / 3.0
        cz = (pz[:, 0] + pz[:, 1] + pz[:, 2]) / 3.0
        dx, dy, dz = px - cx[:, None], py - cy[:, None], pz - cz[:, None]
        x = dx * a1[:, None]
        x += dy * a2[:, None]
        x += dz * a3[:, None]
        y = dx * b1[:, None]
        y += dy * b2[:, None]
        y += dz * b3[:, None]
        key = _pseudo_angle(x, y)
    elif m == 2:
        # project on the tangent t = rot90(n) = (-n_y, n_x): the segment runs along +t
        key = coords[1] * normals[:, None, 0] - coords[0] * normals[:, None, 1]
    else:
        return cand
    key[cand < 0] = np.inf
    order = np.argsort(key, axis=1, kind="stable")
    return np.take_along_axis(cand, order, axis=1)


def _select_faces(face_mask: BoolArray, keep: BoolArray, count: IntArray,
                  face_cand: IntArray) -> tuple[IntArray, IntArray]:
    """The kept faces' candidates, left-aligned and -1 padded, straight from the full mask.

    face_mask (B, F, K) which candidates lie in each face; keep (B, F) which faces are listed;
    count (B, F) = face_mask.sum(-1); face_cand (F, K). Returns the flat kept (body, facet) ids
    (G,) = b * F + f in increasing order, and the faces (G, W), W the widest kept face. Working on
    flat indices of the whole mask avoids gathering (G, K) rows of the mask and of the table first.
    """
    B, F, K = face_mask.shape
    keepf = keep.ravel()
    rows = np.flatnonzero(keepf)
    counts = count.ravel()[rows]
    G = rows.size
    width = int(counts.max()) if G else 0
    idx = np.flatnonzero((face_mask & keep[..., None]).ravel())
    # rank of each entry's face among the kept faces, and its place within the face
    rank = np.cumsum(keepf) - 1
    g = rank[idx // K]
    start = np.cumsum(counts) - counts
    slot = g * width + (np.arange(idx.size) - start[g])
    out = np.full(G * width, -1, dtype=np.intp)
    out[slot] = face_cand.ravel()[idx % (F * K)]
    return rows, out.reshape(G, width)


def _finish_polytope(kind: str, topo: _Topology, handles: NDArray[np.int64], piece: int, pts: Array,
                     valid: BoolArray, face_mask: BoolArray, face_cand: IntArray, fn: Array, m: int,
                     tol: float, degenerate: BoolArray) -> SectionBatch:
    """Face selection, normals and drawing order, shared by every polytope mode.

    pts (B, J, m), valid (B, J); face_mask (B, F, K) which candidates lie in each face; face_cand
    (F, K); fn (B, F, m) the facet normals projected into the slice; degenerate (B,) bodies where the
    flat contains a lower face of the polytope, whose faces may repeat or collapse and are checked.
    """
    B, J = pts.shape[:2]
    F = fn.shape[1]
    fnorm = np.sqrt(np.einsum("bfm,bfm->bf", fn, fn))
    count = face_mask.sum(axis=-1)
    rows, faces = _select_faces(face_mask, (count >= m) & (fnorm > 1e-9), count, face_cand)  # (G, Kv)
    bi, fi = rows // F, rows % F
    nrm = np.take(fn.reshape(B * F, m), rows, axis=0) / fnorm.ravel()[rows, None]
    # face points one axis at a time, padded by a copy of the face's first point (flat 1-D takes:
    # several times cheaper than 2-D fancy indexing of pts)
    gidx = bi[:, None] * J + np.where(faces >= 0, faces, faces[:, :1])
    planar = pts.reshape(B * J, m).T
    coords = [np.take(planar[i], gidx) for i in range(m)] if m <= 3 else []
    faces = _order_faces(coords, faces, nrm, m)
    check = np.flatnonzero(degenerate[bi])
    if check.size:
        drop = np.zeros(len(bi), dtype=bool)
        # a ridge lying in the flat is the section of both facets meeting there: keep one copy
        key = np.concatenate([bi[check, None], np.sort(np.where(faces[check] >= 0, faces[check],
                                                                 np.iinfo(np.intp).max), axis=1)], axis=1)
        _, first = np.unique(key, axis=0, return_index=True)
        dup = np.ones(check.size, dtype=bool)
        dup[first] = False
        drop[check[dup]] = True
        if m == 3:
            # a face whose points are collinear (a flat grazing an edge) bounds no volume
            g = pts[bi[check, None], np.maximum(faces[check], 0)]
            Pk = g - g[:, :1]
            cr = np.cross(Pk[:, :-1], Pk[:, 1:])
            pair_ok = (faces[check, 1:] >= 0)[..., None]
            area2 = np.linalg.norm(np.sum(np.where(pair_ok, cr, 0.0), axis=1), axis=-1)
            drop[check[area2 <= tol * max(topo.size, 1.0)]] = True
        keep = ~drop
        bi, fi, nrm, faces = bi[keep], fi[keep], nrm[keep], faces[keep]
    outline = None
    if m == 2 and kind == "polytope":
        cnt = np.maximum(valid.sum(axis=1), 1)[:, None]
        cen = np.where(valid[..., None], pts, 0.0).sum(axis=1) / cnt
        d = pts - cen[:, None, :]
        key2 = np.where(valid, _pseudo_angle(d[..., 0], d[..., 1]), np.inf)
        order = np.argsort(key2, axis=1, kind="stable")
        outline = np.take_along_axis(np.where(valid, np.arange(pts.shape[1]), -1), order, axis=1)
    return _batch(kind, handles, piece, pts, valid, faces, bi, fi, nrm, outline)


def _batch(kind: str, handles: NDArray[np.int64], piece: int, pts: Array, valid: BoolArray, faces: IntArray,
           bi: IntArray, fi: IntArray, nrm: Array, outline: IntArray | None) -> SectionBatch:
    """The :class:`SectionBatch` of a polytope batch, with the mean of each section's vertices."""
    cnt = np.maximum(valid.sum(axis=1), 1)[:, None]
    centres = np.matmul(valid[:, None, :].astype(np.float64), pts)[:, 0] / cnt
    hit = np.asarray(valid.any(axis=1))
    return SectionBatch(kind=kind, handles=handles, piece=piece, hit=hit, points=pts, valid=valid,
                        faces=faces, face_body=bi, face_facet=fi, face_normals=nrm, outline=outline,
                        centres=centres, radii=np.zeros(pts.shape[0]))


# ---------------------------------------------------------------------------------------------
# Cut-pattern tables (4-D polytopes cut by a hyperplane, the common case of a 4-D game)
# ---------------------------------------------------------------------------------------------

# A hyperplane through no vertex cuts a facet (a 3-polytope) in a convex polygon whose corners are
# the facet's crossing edges; two corners are consecutive exactly when their edges share a 2-face
# of the facet. So the polygon's cyclic order is a function of the facet's sign pattern (which of
# its vertices lie on the positive side), and can be tabulated once per combinatorial type: the
# per-frame work becomes a lookup (plus an orientation test for patterns not seen before) instead
# of projecting and sorting every face's points. Facets with more than _PATTERN_MAX_VERTS vertices
# (2^V patterns each), or tables of more than _PATTERN_MAX_ROWS rows, use the geometric ordering.
_PATTERN_MAX_VERTS = 10
_PATTERN_MAX_ROWS = 1 << 14  # facets x patterns: the 24-cell has 24 x 64, a 4-D box 8 x 256 (~15 ms to build)


@dataclass(frozen=True)
class _PatternTable:
    """Section polygons of every facet for every sign pattern of its vertices.

    weights: (V, F) float, 2^i at (vertex, facet) for the facet's i-th vertex: posT @ weights is the
    pattern code of each facet. count: (F * P,) int, crossing edges of the pattern (-1: a pattern no
    hyperplane realises). order: (F * P * 2, W) int candidate indices of the polygon, cyclic order,
    -1 padded; row 2 r + 1 is row 2 r reversed. tri: (F * P, 3) int, three well-spread corners
    (positions 0, c // 3, 2 c // 3) for the orientation test.
    """

    weights: Array
    patterns: int
    count: IntArray
    order: IntArray
    tri: IntArray


_PATTERNS: weakref.WeakKeyDictionary[Shape, _PatternTable | None] = weakref.WeakKeyDictionary()
_PATTERNS_BY_TYPE: dict[tuple[bytes, ...], _PatternTable | None] = {}
_PATTERN_TYPES_KEPT = 64  # tables shared by type (shapes keep theirs through _PATTERNS as long as they live)
# per shape, not per type: a mirror image has the same combinatorics and the opposite orientations
_ORIENT: weakref.WeakKeyDictionary[Shape, NDArray[np.int8]] = weakref.WeakKeyDictionary()


def _pattern_table(shape: Shape, topo: _Topology) -> _PatternTable | None:
    """The cut-pattern table of a 4-D ConvexPolytope (None for other shapes or too-large facets)."""
    if shape in _PATTERNS:
        return _PATTERNS[shape]
    table = None
    if isinstance(shape, ConvexPolytope) and shape.dim == 4:
        ridges = [np.asarray(r, dtype=np.intp) for r in shape.faces(2)]
        key = (topo.edges.tobytes(), topo.face_cand.tobytes(), np.concatenate(ridges).tobytes(),
               np.array([len(r) for r in ridges]).tobytes(), str(len(topo.vertices)).encode())
        if key not in _PATTERNS_BY_TYPE:
            if len(_PATTERNS_BY_TYPE) >= _PATTERN_TYPES_KEPT:  # many one-off polytopes: forget the oldest
                del _PATTERNS_BY_TYPE[next(iter(_PATTERNS_BY_TYPE))]
            _PATTERNS_BY_TYPE[key] = _build_pattern_table(topo, ridges)
        table = _PATTERNS_BY_TYPE[key]
    _PATTERNS[shape] = table
    return table


def _facet_cycle(bits: int, fv: IntArray, fe: list[tuple[int, int, int]],
                 ridge_edges: list[list[int]]) -> list[int] | None:
    """Cyclic order of the crossing edges (candidate ids) of one pattern; None if unrealisable."""
    pos = {int(v) for i, v in enumerate(fv) if (bits >> i) & 1}
    crossing = {cid for cid, a, b in fe if (a in pos) != (b in pos)}
    if not crossing:
        return []
    adj: dict[int, list[int]] = {e: [] for e in crossing}
    for re in ridge_edges:
        hit = [e for e in re if e in crossing]
        if len(hit) == 2:
            adj[hit[0]].append(hit[1])
            adj[hit[1]].append(hit[0])
        elif hit:
            return None
    if any(len(a) != 2 for a in adj.values()):
        return None
    start = min(crossing)
    order, prev, cur = [start], -1, start
    while True:  # walk the cycle: a handful of steps
        a, b = adj[cur]
        prev, cur = cur, (b if a == prev else a)
        if cur == start:
            break
        order.append(cur)
        if len(order) > len(crossing):
            return None
    return order if len(order) == len(crossing) else None


def _build_pattern_table(topo: _Topology, ridges: list[IntArray]) -> _PatternTable | None:
    nv = len(topo.vertices)
    facet_verts = [np.sort(r[r < nv]) for r in topo.face_cand]
    Vmax = max(len(f) for f in facet_verts)
    P = 1 << Vmax
    F = len(facet_verts)
    if Vmax > _PATTERN_MAX_VERTS or F * P > _PATTERN_MAX_ROWS:
        return None
    weights = np.zeros((nv, F))
    cycles: list[list[int] | None] = []
    for f, fv in enumerate(facet_verts):  # cold: once per combinatorial type
        weights[fv, f] = 2.0 ** np.arange(len(fv))
        cand = topo.face_cand[f]
        fe = [(int(c), int(topo.edges[c - nv, 0]), int(topo.edges[c - nv, 1])) for c in cand if c >= nv]
        fset = set(fv.tolist())
        ridge_edges = []
        for r in ridges:
            rs = set(r.tolist())
            if rs <= fset:
                ridge_edges.append([cid for cid, a, b in fe if a in rs and b in rs])
        for bits in range(P):
            cycles.append(_facet_cycle(bits, fv, fe, ridge_edges) if bits < (1 << len(fv)) else [])
    W = max([len(c) for c in cycles if c] + [3])
    count = np.array([-1 if c is None else len(c) for c in cycles], dtype=np.intp)
    order = np.full((len(cycles), 2, W), -1, dtype=np.intp)
    tri = np.zeros((len(cycles), 3), dtype=np.intp)
    for i, c in enumerate(cycles):  # cold
        if c:
            order[i, 0, : len(c)] = c
            order[i, 1, : len(c)] = c[::-1]
            k = len(c)
            tri[i] = [c[0], c[k // 3], c[(2 * k) // 3]]
    return _PatternTable(weights, P, count, order.reshape(-1, W), tri)


def _pattern_faces(table: _PatternTable, orient: NDArray[np.int8], sigma: int, size: float, pos: BoolArray,
                   pts: Array, fnT: Array, fnorm: Array, m: int
                   ) -> tuple[IntArray, IntArray, Array, IntArray] | None:
    """Faces of a batch cut through no vertex, by table lookup: (rows, faces, normals, face_body).

    orient (F * P,) int8 the shape's remembered orientations (0: not seen yet; updated in place);
    sigma +-1 the sign of det[frame; normals] of the flat; size the shape's scale; pos (V, B) the
    vertices on the positive side; pts (B, J, m); fnT (F, B, m) projected facet normals and fnorm
    (B, F) their lengths. Returns rows (G,) = b * F + f, faces (G, W) ordered counter-clockwise
    around the normals (G, m), and b (G,); None when a pattern is not in the table (then the caller
    orders geometrically).
    """
    B, J = pts.shape[:2]
    F = fnT.shape[0]
    code = (pos.T.astype(np.float64) @ table.weights).astype(np.intp)  # (B, F) exact small integers
    code += np.arange(F) * table.patterns
    cnt = table.count[code]
    if (cnt < 0).any():
        return None
    keep = (cnt >= m) & (fnorm > 1e-9)
    rows = np.flatnonzero(keep)
    bi = rows // F
    rc = code.ravel()[rows]
    nrm = np.take(fnT.reshape(F * B, m), (rows - bi * F) * B + bi, axis=0) / fnorm.ravel()[rows, None]
    # Orientation. Whether the tabulated order runs counter-clockwise around the normal is, for one
    # shape, a constant of (facet, pattern) times the handedness sigma of the flat's basis: it is the
    # sign of sigma det[q1 - q0, q2 - q0, n_f, u] in local coordinates, which cannot vanish while the
    # hyperplane (u, d) moves in the convex cone realising the pattern (no three corners of the
    # strictly convex section are collinear there). So it is measured once per (facet, pattern) on a
    # face that is far from degenerate and remembered; other faces of unseen patterns are measured.
    # (Concurrent callers may both measure an unseen entry; they write the same value.)
    o = orient[rc]
    need = np.flatnonzero(o == 0)
    if need.size:
        tri = np.take(table.tri, rc[need], axis=0) + (bi[need] * J)[:, None]
        q = np.take(pts.reshape(B * J, m), tri, axis=0)  # (G', 3, 3) corners q0, q1, q2
        u, v, nn = q[:, 1] - q[:, 0], q[:, 2] - q[:, 0], nrm[need]
        det = (nn[:, 0] * (u[:, 1] * v[:, 2] - u[:, 2] * v[:, 1])
               + nn[:, 1] * (u[:, 2] * v[:, 0] - u[:, 0] * v[:, 2])
               + nn[:, 2] * (u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]))
        got = np.where(det > 0.0, sigma, -sigma).astype(np.int8)  # orientation for sigma = +1
        sure = np.abs(det) > 1e-6 * size * size
        orient[rc[need[sure]]] = got[sure]
        o[need] = got
    faces = np.take(table.order, 2 * rc + (o * sigma < 0), axis=0)
    width = int(cnt.ravel()[rows].max()) if rows.size else 0
    return rows, faces[:, :width], nrm, bi


def _slice_polytope(shape: Shape, t: Array, M: Array, flat: Flat, handles: NDArray[np.int64],
                    piece: int) -> SectionBatch:
    c, m = flat.codim, flat.slice_dim
    topo = _topology(shape, c)
    kind = "mesh" if isinstance(shape, SimplexMesh) else "polytope"
    tol = _TOL * max(topo.size, 1.0)
    V, B, n = topo.vertices, t.shape[0], shape.dim
    A = np.matmul(flat.frame, M)  # local -> slice linear map (B, m, n)
    off = (t - flat.point) @ flat.frame.T  # slice coordinates of the body origin (B, m)
    # one GEMM for all bodies: (V, n) @ (n, B*m), instead of a batched einsum (measured ~5x faster)
    At = A.transpose(2, 0, 1).reshape(n, B * m)
    vT = (V @ At).reshape(len(V), B, m)
    vT += off
    vpts = vT.transpose(1, 0, 2)  # (B, V, m)
    fnT = (topo.face_normals @ At).reshape(-1, B, m)
    fn = fnT.transpose(1, 0, 2)  # projected facet normals (B, F, m)
    F, K = topo.face_cand.shape
    if topo.mode == "vertices":
        valid = np.ones((B, len(V)), dtype=bool)
        face_mask = np.broadcast_to(topo.face_cand >= 0, (B, F, K))
        return _finish_polytope(kind, topo, handles, piece, vpts, valid, face_mask, topo.face_cand, fn, m,
                                tol, np.zeros(B, dtype=bool))
    Ul = np.matmul(flat.normals, M)  # flat normals in local coordinates (B, c, n)
    d = (flat.point - t) @ flat.normals.T  # flat offsets in local coordinates (B, c)
    if topo.mode == "edges":
        # Signed distances and crossings in vertex-major layout (V, B), (E, B): taking edge ends along
        # the first axis copies whole contiguous rows (measured ~9x cheaper than s[:, ea]). Every edge
        # candidate first gets its first end (w = 0, as for an edge the flat does not cross); only the
        # crossing ones (~1/4 of them in a random scene) are interpolated, by flat indices.
        nv, (ea, eb) = len(V), topo.edge_ends
        J = nv + len(ea)
        sT = V @ Ul[:, 0].T
        sT -= d[:, 0]  # signed vertex distances (V, B)
        pos, neg = sT > tol, sT < -tol
        on = ~(pos | neg)
        cross = (pos[ea] & neg[eb]) | (neg[ea] & pos[eb])  # (E, B)
        pts = np.empty((B, J, m))
        pts[:, :nv] = vT.transpose(1, 0, 2)
        pts[:, nv:] = vT[ea].transpose(1, 0, 2)
        ci = np.flatnonzero(cross)
        ce = ci // B
        cb = ci - ce * B
        ia, ib = ea[ce] * B + cb, eb[ce] * B + cb
        sf = sT.ravel()
        sa = sf[ia]
        w = sa / (sa - sf[ib])  # in (0, 1)
        vf = vT.reshape(nv * B, m)
        pa = np.take(vf, ia, axis=0)
        pb = np.take(vf, ib, axis=0)
        pb -= pa
        pb *= w[:, None]
        pb += pa
        pts.reshape(B * J, m)[cb * J + nv + ce] = pb
        valid = np.concatenate([on, cross]).T
        has_on = bool(on.any())
        if m == 3 and not has_on:
            table = _pattern_table(shape, topo)
            fnorm = np.sqrt(np.einsum("bfm,bfm->bf", fn, fn))
            got = None
            if table is not None:
                orient = _ORIENT.get(shape)
                if orient is None:
                    orient = _ORIENT[shape] = np.zeros(len(table.count), dtype=np.int8)
                sigma = 1 if np.linalg.det(np.concatenate([flat.frame, flat.normals])) > 0.0 else -1
                got = _pattern_faces(table, orient, sigma, max(topo.size, 1e-300), pos, pts, fnT, fnorm, m)
            if got is not None:
                rows, faces, nrm, bi = got
                return _batch(kind, handles, piece, pts, valid, faces, bi, rows % F, nrm, None)
        # a cut through no vertex needs only the edge candidates of each facet (smaller masks)
        cand, cflat, cok = topo.cand_tables if has_on else topo.edge_cand_tables
        face_mask = np.take(valid, cflat, axis=1).reshape(B, *cand.shape)
        face_mask &= cok
        return _finish_polytope(kind, topo, handles, piece, pts, valid, face_mask, cand, fn, m, tol,
                                on.any(axis=0) if has_on else np.zeros(B, dtype=bool))
    # faces mode (c >= 2): solve U_l (q + D^T a) = d for each c-face, keep points inside the polytope
    Q, D = topo.cface_base, topo.cface_dirs  # (J, n), (J, c, n)
    mat = np.einsum("bci,jei->bjce", Ul, D)  # (B, J, c, c)
    rhs = d[:, None, :] - np.einsum("bci,ji->bjc", Ul, Q)
    det = np.linalg.det(mat)
    ok = np.abs(det) > 1e-9
    mat = np.where(ok[..., None, None], mat, np.eye(c))
    a = np.linalg.solve(mat, rhs[..., None])[..., 0]  # (B, J, c)
    y = Q + np.einsum("bjc,jci->bji", a, D)  # local points (B, J, n)
    slack = np.einsum("bji,fi->bjf", y, topo.face_normals) - topo.face_offsets  # <= 0 inside
    valid = ok & np.all(slack <= tol, axis=-1)
    pts = np.einsum("bmi,bji->bjm", A, y) + off[:, None, :]
    # merge coincident points (the flat through a lower face): keep the first of each cluster
    dist = np.linalg.norm(pts[:, :, None, :] - pts[:, None, :, :], axis=-1)
    J = pts.shape[1]
    earlier = np.tril(np.ones((J, J), dtype=bool), -1)
    dup = np.any((dist <= 1e3 * tol) & earlier & valid[:, None, :], axis=2)
    valid &= ~dup
    face_mask = valid[:, None, :] & (np.abs(slack) <= 1e3 * tol).transpose(0, 2, 1)
    return _finish_polytope(kind, topo, handles, piece, pts, valid, face_mask, topo.face_cand, fn, m, tol,
                            valid.any(axis=1))


def _slice_ball(shape: Ball, t: Array, flat: Flat, handles: NDArray[np.int64], piece: int) -> SectionBatch:
    rel = t - flat.point
    d2 = np.sum((rel @ flat.normals.T) ** 2, axis=1)
    r2 = shape.radius**2 - d2
    hit = r2 >= 0.0
    return SectionBatch(kind="ball", handles=handles, piece=piece, hit=hit, centres=rel @ flat.frame.T,
                        radii=np.sqrt(np.maximum(r2, 0.0)))


def _slice_halfspace(shape: HalfSpace, t: Array, M: Array, flat: Flat, handles: NDArray[np.int64],
                     piece: int) -> SectionBatch:
    w = np.einsum("bij,j->bi", M, shape.normal)  # world normals (B, n)
    o = shape.offset + np.einsum("bi,bi->b", w, t) - w @ flat.point  # w . (p + F^T s) <= o_world
    nm = w @ flat.frame.T
    norm = np.linalg.norm(nm, axis=1)
    scale = np.where(norm > 1e-12, norm, 1.0)
    nm = np.where((norm > 1e-12)[:, None], nm / scale[:, None], 0.0)
    o = np.where(norm > 1e-12, o / scale, o)
    hit = (norm > 1e-12) | (o >= 0.0)
    return SectionBatch(kind="halfspace", handles=handles, piece=piece, hit=hit, normals=nm, offsets=o)


def slice_bodies(shape: Shape, positions: Any, rotors: Any = None, flat: Flat | None = None,
                 handles: Any = None, piece: int = -1, *, rotations: Any = None) -> list[SectionBatch]:
    """Sections of B bodies sharing ``shape``, posed by positions (B, n) and unit rotors
    (B, 2**(n-1)), or rotation matrices (B, n, n) under the keyword ``rotations`` (neither: identity).

    A body's local point y lies at ``position + rotation @ y``. Returns one :class:`SectionBatch`
    (a Compound gives one per piece). ``handles`` (B,) labels the bodies (default -1).
    """
    if not isinstance(shape, Shape):
        raise InputTypeError(f"shape: expected an ndrigid shape, got {type(shape).__name__}")
    if flat is None:
        raise InputError("flat: expected the Flat to cut across (axis_flat, hyperplane ...), got None")
    t, M = _check_poses(shape, positions, rotors, rotations)
    flat = _check_flat(flat, shape.dim)
    h = np.full(t.shape[0], -1, dtype=np.int64) if handles is None else np.asarray(handles, dtype=np.int64)
    if h.shape != (t.shape[0],):
        raise InputError(f"handles: expected shape ({t.shape[0]},), got {h.shape}")
    return _slice_checked(shape, t, M, flat, h, piece)


def _slice_checked(shape: Shape, t: Array, M: Array, flat: Flat, h: NDArray[np.int64],
                   piece: int) -> list[SectionBatch]:
    if isinstance(shape, Ball):
        return [_slice_ball(shape, t, flat, h, piece)]
    if isinstance(shape, HalfSpace):
        return [_slice_halfspace(shape, t, M, flat, h, piece)]
    if isinstance(shape, Compound):
        out = []
        pieces = zip(shape.shapes, shape.positions, shape.rotations, strict=True)
        for i, (s, pos, R) in enumerate(pieces):  # a loop over few pieces
            out += _slice_checked(s, t + M @ pos, M @ R, flat, h, i)
        return out
    return [_slice_polytope(shape, t, M, flat, h, piece)]


def slice_shape(shape: Shape, position: Any = None, rotor: Any = None, flat: Flat | None = None, *,
                rotation: Any = None) -> list[Section]:
    """Sections of one body posed by ``position`` (n,) and a unit ``rotor``, or a rotation matrix
    (n, n) under the keyword ``rotation`` (a list: one per compound piece, empty when the flat
    misses it).

    >>> from ndrigid.core import Box
    >>> sec = slice_shape(Box([1, 1, 1]), [0, 0, 0.5], flat=axis_flat(3))[0]
    >>> sec.kind, len(sec.vertices)
    ('polytope', 4)
    """
    n = shape.dim if isinstance(shape, Shape) else 0
    if not n:
        raise InputTypeError(f"shape: expected an ndrigid shape, got {type(shape).__name__}")
    pos = np.zeros((1, n)) if position is None else as_float_array("position", position, (n,)).reshape(1, n)
    if pos.shape != (1, n) or (position is not None and np.ndim(position) != 1):
        raise InputError(f"position: expected shape ({n},), got {np.shape(position)}")
    rots = None if rotation is None else as_float_array("rotation", rotation, (n, n)).reshape(1, n, n)
    rtrs = None if rotor is None else np.asarray(rotor)[None] if not isinstance(rotor, str) else rotor
    return records(slice_bodies(shape, pos, rtrs, flat, rotations=rots))


def records(batches: list[SectionBatch]) -> list[Section]:
    """Per-body :class:`Section` records of batches (only bodies the flat cuts)."""
    out: list[Section] = []
    for bt in batches:
        for b in np.flatnonzero(bt.hit):  # building Python records is a per-body loop by nature
            h = int(bt.handles[b])
            if bt.kind == "ball":
                assert bt.centres is not None and bt.radii is not None
                out.append(Section(h, bt.piece, "ball", np.zeros((0, bt.centres.shape[1])),
                                   centre=bt.centres[b].copy(), radius=float(bt.radii[b])))
                continue
            if bt.kind == "halfspace":
                assert bt.normals is not None and bt.offsets is not None
                out.append(Section(h, bt.piece, "halfspace", np.zeros((0, bt.normals.shape[1])),
                                   normal=bt.normals[b].copy(), offset=float(bt.offsets[b])))
                continue
            assert bt.points is not None and bt.valid is not None and bt.faces is not None
            assert bt.face_body is not None and bt.face_normals is not None
            keep = bt.valid[b]
            remap = np.cumsum(keep) - 1
            g0, g1 = np.searchsorted(bt.face_body, [b, b + 1])
            faces = [remap[f[f >= 0]] for f in bt.faces[g0:g1]]
            outline = None
            if bt.outline is not None:
                o = bt.outline[b]
                outline = remap[o[o >= 0]]
            verts = bt.points[b][keep]
            out.append(Section(h, bt.piece, bt.kind, verts, faces, bt.face_normals[g0:g1].copy(),
                               outline, centre=verts.mean(axis=0)))
    return out


# ---------------------------------------------------------------------------------------------
# Whole worlds
# ---------------------------------------------------------------------------------------------


@dataclass
class WorldSlice:
    """The sections of every body of a simulation that the flat cuts, grouped in batches."""

    flat: Flat
    batches: list[SectionBatch]

    def records(self) -> list[Section]:
        """Per-body records (a convenience; renderers drawing many bodies use the batches)."""
        return records(self.batches)


def slice_world(sim: Simulation, flat: Flat, positions: Any = None, rotors: Any = None) -> WorldSlice:
    """Slice every body of ``sim`` by ``flat``: bodies grouped by shape, each group one batch.

    ``positions`` (N, n) and ``rotors`` (N, 2**(n-1)), in row order, replace the bodies' poses
    (e.g. ``FixedStepper.interpolated()`` for drawing between steps); by default the current ones.
    Bodies whose bounding sphere misses the flat are skipped before any per-shape work.
    """
    flat = _check_flat(flat, sim.dim)
    b = sim.bodies
    if b.count == 0:
        return WorldSlice(flat, [])
    pos, rot = b.position, b.rotation
    if positions is not None or rotors is not None:
        n, alg = sim.dim, sim.alg
        pos = pos if positions is None else as_float_array("positions", positions, (b.count, n))
        if rotors is not None:
            R = as_float_array("rotors", rotors, (b.count, alg.even_size))
            R = alg.check_rotor(R, "rotors", tol=1e-4)
            rot = alg.rotor_to_matrix(alg.rotor_normalize(R, 2))
        if pos.shape != (b.count, n):
            raise InputError(f"positions: expected shape ({b.count}, {n}) (one row per body), got "
                             f"{pos.shape}")
    dist = np.linalg.norm((pos - flat.point) @ flat.normals.T, axis=1)
    near = np.flatnonzero(dist <= b.radius * (1.0 + 1e-9))
    sid = b.shape_id[near]
    batches: list[SectionBatch] = []
    order = np.argsort(sid, kind="stable")
    near, sid = near[order], sid[order]
    starts = np.flatnonzero(np.r_[True, sid[1:] != sid[:-1]]) if len(sid) else np.zeros(0, dtype=np.intp)
    ends = np.r_[starts[1:], len(sid)]
    for s0, s1 in zip(starts, ends, strict=True):  # one pass per distinct shape
        rows = near[s0:s1]
        shape = sim.info.shapes[int(sid[s0])]
        batches += _slice_checked(shape, pos[rows], rot[rows], flat, b.handle[rows].copy(), -1)
    return WorldSlice(flat, batches)


def halfspace_region(normal: Any, offset: float, lo: Any, hi: Any) -> Section | None:
    """The part of the box [lo, hi] (m,) with ``normal . s <= offset``, as a polytope section (for drawing).

    Returns None when the region is empty or flat. Faces follow the drawing order of the module notes.
    """
    lo_ = np.asarray(lo, dtype=np.float64)
    m = lo_.shape[0] if lo_.ndim == 1 else 0
    if m < 1:
        raise InputError(f"lo: expected a corner of shape (m,), got shape {lo_.shape}")
    lo_ = as_float_array("lo", lo_, (m,))
    hi_ = as_float_array("hi", hi, (m,))
    u = as_float_array("normal", normal, (m,))
    if np.any(hi_ <= lo_):
        raise InputError(f"lo, hi: expected lo < hi on every axis, got lo={lo_.tolist()} hi={hi_.tolist()}")
    if m == 1:
        raise InputError("lo: a 1-D region is an interval; expected m >= 2")
    from .shapes import Box

    box = Box((hi_ - lo_) / 2.0)
    centre = (hi_ + lo_) / 2.0
    # the box's section by c = 0 is the box itself; clip its edges by the plane (edge interpolation)
    V = np.asarray(box.vertices) + centre
    s = V @ u - float(offset)
    E = np.asarray(box.edges)
    sa, sb = s[E[:, 0]], s[E[:, 1]]
    cr = (sa < 0) != (sb < 0)
    w = sa[cr] / (sa[cr] - sb[cr])
    P = np.concatenate([V[s <= 0], V[E[cr, 0]] + w[:, None] * (V[E[cr, 1]] - V[E[cr, 0]])])
    if len(P) < m + 1:
        return None
    try:
        poly = ConvexPolytope(P)
    except InputError:
        return None
    return slice_shape(poly, np.zeros(m), flat=axis_flat(m, []))[0]


# ---------------------------------------------------------------------------------------------
# Projection of 3-D slices to the screen
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Camera:
    """A camera looking at ``target`` from ``distance`` along the view's third row.

    Attributes:
        view: (3, 3) rotation, rows = camera right, up and back (toward the viewer) in world axes.
        target: (3,) point looked at.
        distance: distance from the target to the eye (> 0).
        perspective: perspective (True) or orthographic (False) projection.
    """

    view: Array
    target: Array
    distance: float
    perspective: bool = True

    @property
    def eye(self) -> Array:
        """(3,) position of the eye."""
        return self.target + self.distance * self.view[2]


def make_camera(view: Any = None, target: Any = None, distance: float = 10.0,
                perspective: bool = True) -> Camera:
    """Validated :class:`Camera` (default: looking down -z at the origin from 10 units)."""
    R = np.eye(3) if view is None else as_float_array("view", view, (3, 3))
    if R.shape != (3, 3):
        raise InputError(f"view: expected one (3, 3) rotation, got shape {R.shape}")
    err = float(np.max(np.abs(R @ R.T - np.eye(3))))
    if err > 1e-6 or np.linalg.det(R) < 0:
        raise InputError(f"view: expected a rotation matrix (orthonormal, det +1), got one off by {err:.3g}, "
                         f"det {np.linalg.det(R):.3g}")
    tgt = np.zeros(3) if target is None else as_float_array("target", target, (3,))
    if tgt.shape != (3,):
        raise InputError(f"target: expected a point of shape (3,), got {tgt.shape}")
    return Camera(view=R.copy(), target=tgt.copy(), distance=positive_scalar("distance", distance),
                  perspective=bool(perspective))


def orbit_view(yaw: float, pitch: float) -> Array:
    """(3, 3) view rotation of a camera orbiting the y axis by ``yaw`` and tilted by ``pitch`` (radians).

    yaw = pitch = 0 looks along -z with y up; positive pitch looks down from above.
    """
    cy, sy, cp, sp = math.cos(yaw), math.sin(yaw), math.cos(pitch), math.sin(pitch)
    Ry = np.array([[cy, 0.0, -sy], [0.0, 1.0, 0.0], [sy, 0.0, cy]])
    Rx = np.array([[1.0, 0.0, 0.0], [0.0, cp, -sp], [0.0, sp, cp]])
    return Rx @ Ry


def project_points(points: Any, camera: Camera) -> tuple[Array, Array]:
    """Screen coordinates (P, 2) (y up, world units at the target's depth) and depths (P,).

    Depth is the distance from the eye along the view direction; perspective divides by it (points
    at or behind the eye get depth <= 0 and should be dropped by the caller).
    """
    X = as_float_array("points", points, (3,))
    q = (X - camera.target) @ camera.view.T
    depth = camera.distance - q[..., 2]
    if not camera.perspective:
        return q[..., :2].copy(), depth
    f = camera.distance / np.where(depth > 1e-9, depth, 1e-9)
    return q[..., :2] * f[..., None], depth


def facing_camera(normals: Any, points: Any, camera: Camera) -> BoolArray:
    """Back-face removal: (F,) True where the outward normal (F, 3) at a face point (F, 3) faces the eye."""
    nrm = as_float_array("normals", normals, (3,))
    X = as_float_array("points", points, (3,))
    if camera.perspective:
        return np.asarray(np.einsum("...i,...i->...", nrm, camera.eye - X) > 0.0)
    return np.asarray(nrm @ camera.view[2] > 0.0)


def paint_order(depths: Any) -> IntArray:
    """Painter's order: indices of ``depths`` (N,) from the farthest to the nearest (stable)."""
    d = np.asarray(depths, dtype=np.float64)
    return np.argsort(-d, kind="stable")


@dataclass
class FaceSoup:
    """All polygon faces of a 3-D world slice in flat arrays, ready to project and sort.

    Attributes:
        points: (P, 3) float, all section vertices.
        faces: (G, K) int indices into ``points``, drawing order, -1 padded.
        normals: (G, 3) float outward unit normals.
        centres: (G, 3) float face centroids (for depth sorting and facing tests).
        handles: (G,) int body handle of each face.
        balls_centre: (Q, 3) float, balls_radius: (Q,), balls_handle: (Q,) for ball sections.
    """

    points: Array
    faces: IntArray
    normals: Array
    centres: Array
    handles: NDArray[np.int64]
    balls_centre: Array
    balls_radius: Array
    balls_handle: NDArray[np.int64]


def face_soup(world: WorldSlice) -> FaceSoup:
    """Flatten the polytope and ball sections of a 3-D slice into one :class:`FaceSoup` (vectorised)."""
    if world.flat.slice_dim != 3:
        raise InputError(f"world: expected a 3-D slice, got one of dimension {world.flat.slice_dim}")
    pts, faces, nrm, hs, bc, br, bh = [], [], [], [], [], [], []
    base = 0
    K = max([bt.faces.shape[1] for bt in world.batches if bt.faces is not None] + [3])
    for bt in world.batches:  # one pass per shape batch
        if bt.kind == "ball":
            assert bt.centres is not None and bt.radii is not None
            bc.append(bt.centres[bt.hit])
            br.append(bt.radii[bt.hit])
            bh.append(bt.handles[bt.hit])
            continue
        if bt.faces is None:
            continue
        assert bt.points is not None and bt.face_body is not None and bt.face_normals is not None
        B, J = bt.points.shape[:2]
        f = bt.faces
        g = np.where(f >= 0, f + (base + bt.face_body * J)[:, None], -1)
        faces.append(np.pad(g, ((0, 0), (0, K - g.shape[1])), constant_values=-1))
        nrm.append(bt.face_normals)
        hs.append(bt.handles[bt.face_body])
        pts.append(bt.points.reshape(-1, 3))
        base += B * J
    P = np.concatenate(pts) if pts else np.zeros((0, 3))
    Fc = np.concatenate(faces) if faces else np.zeros((0, K), dtype=np.intp)
    valid = Fc >= 0
    cen = np.einsum("gk,gki->gi", valid, P[np.maximum(Fc, 0)]) / np.maximum(valid.sum(axis=1), 1)[:, None] \
        if len(Fc) else np.zeros((0, 3))
    return FaceSoup(
        points=P, faces=Fc, normals=np.concatenate(nrm) if nrm else np.zeros((0, 3)), centres=cen,
        handles=np.concatenate(hs) if hs else np.zeros(0, dtype=np.int64),
        balls_centre=np.concatenate(bc) if bc else np.zeros((0, 3)),
        balls_radius=np.concatenate(br) if br else np.zeros(0),
        balls_handle=np.concatenate(bh) if bh else np.zeros(0, dtype=np.int64))
