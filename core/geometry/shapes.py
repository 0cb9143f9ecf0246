"""Collision and mass shapes in n dimensions (n >= 2).

Shapes: :class:`Ball`, :class:`Box`, :class:`ConvexPolytope`, :class:`SimplexMesh`,
:class:`Compound` and :class:`HalfSpace`. Every shape lives in its own local frame (its centroid
need not be the origin; the body system shifts by :attr:`MassProperties.centroid`) and is
immutable: attributes cannot be rebound and every array is read-only, so one shape can be shared by
many bodies. Derived data (mass properties, boundary triangulation, k-faces) are computed at most
once and cached inside the shape; the cache never changes what the shape is.

Validation happens in the constructor before anything is stored, so bad input raises
:class:`InputError` (naming the argument, what it got and what was expected) and no shape exists.

Choices worth knowing:

* ConvexPolytope goes through qhull (scipy.spatial.ConvexHull) rather than a hand-written hull.
  qhull returns a triangulated boundary; its simplices are merged into true facets by clustering
  their (unit normal, offset / size) rows within a tolerance (a KD-tree pair query plus connected
  components), which, unlike rounding the rows, cannot split a facet whose rows straddle a rounding
  boundary. Nearly coplanar facets (noisy input) are merged by qhull itself during construction
  (centrum pre-merge, ``ConvexPolytope(points, tolerance=...)``), so noise does not leave thin
  sliver facets where a face should be flat. The face structure is then derived from the
  facet-vertex incidence alone: a point is a true vertex when the normals of its facets have rank
  n, a vertex pair is a true edge when the normals of the facets containing both have rank n - 1
  (a 1-face has exactly two vertices), and the edges of a facet are the edges whose two ends lie
  on it. Duplicate input points are merged and
  points that are not vertices (interior, or on a face) are dropped.
* Box is a ConvexPolytope (isinstance holds) whose vertices, facets and edges are generated
  combinatorially for any n: vertex v has coordinate +h_i where bit i of v is set.
* SimplexMesh rejects an inside-out boundary (negative enclosed volume) with a message saying how
  to fix it; ``flip_inside_out=True`` flips it instead. Silently flipping would hide a mesh whose
  cells are wrong for other reasons.
* HalfSpace is static only: :meth:`HalfSpace.mass_properties` raises InputError. Returning an
  infinite mass would push inf/nan into inverse-inertia arithmetic; a caller that wants static
  bodies checks :attr:`Shape.static_only`.
* Compound takes convex pieces only (Ball, Box, ConvexPolytope); a SimplexMesh piece should be
  replaced by convex parts (for example its :meth:`SimplexMesh.convex_hull`), and a nested Compound
  by its pieces. Overlapping pieces count their overlap twice in the mass.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from typing import Any, ClassVar

import numpy as np
from numpy.typing import NDArray
from scipy import sparse
from scipy.sparse.csgraph import connected_components
from scipy.spatial import ConvexHull, QhullError, cKDTree

from ..algebra import Algebra
from ..errors import (
    MAX_MAGNITUDE,
    MIN_SIZE,
    InputError,
    InputTypeError,
    as_float_array,
    dimension,
    numeric_array,
    positive_scalar,
    shape_size,
    vector,
)
from .mass import MassProperties, boundary_moments, combine_mass_properties, resolve_density

Array = NDArray[np.float64]
IntArray = NDArray[np.intp]

__all__ = [
    "Ball",
    "Box",
    "Compound",
    "ConvexPolytope",
    "HalfSpace",
    "Shape",
    "SimplexMesh",
]

# Relative tolerances (times the shape's size). Facet rows from qhull for one true facet agree to
# ~1e-15; distinct facets of any sane polytope differ by far more than 1e-9.
_FACET_MERGE_TOL = 1e-9
# Default relative pre-merge distance for nearly coplanar facets (ConvexPolytope(tolerance=...)).
_DEFAULT_TOLERANCE = 1e-9
# Eigenvalue threshold on sums of unit-normal outer products when counting the rank of a facet set.
_RANK_TOL = 1e-9


def _frozen(a: Any, dtype: Any = np.float64) -> Any:
    out = np.array(a, dtype=dtype)  # own copy: freezing must not touch the caller's array
    out.setflags(write=False)
    return out


def _points(name: str, value: Any) -> Array:
    """(N, n) float points with n >= 2, finite."""
    arr = numeric_array(name, value, "an (N, n) array of points")
    if arr.ndim != 2:
        raise InputError(f"{name}: expected an (N, n) array of points, got shape {np.shape(arr)}")
    arr = as_float_array(name, arr, (arr.shape[1],), bound=MAX_MAGNITUDE)
    if arr.shape[1] < 2:
        raise InputError(f"{name}: expected points of dimension n >= 2, got n = {arr.shape[1]}")
    return arr


def _orient_facet(vertices: Array, normal: Array, idx: IntArray) -> IntArray:
    """Facet vertex indices in boundary order for n = 2 and 3; sorted otherwise.

    2-D: the facet segment (a, b) runs counter-clockwise around the polygon. 3-D: the polygon is
    listed counter-clockwise seen from outside (the OFF convention), so it can be drawn or written
    directly. In higher n a facet has no single cyclic order; indices are sorted, except that a
    simplex facet is put in outward orientation (so a simplicial polytope's facets form a valid
    SimplexMesh boundary, as in 2-D and 3-D).
    """
    n = vertices.shape[1]
    if n == 2 and idx.size == 2:
        t = np.array([-normal[1], normal[0]])
        a, b = idx
        return idx if float((vertices[b] - vertices[a]) @ t) > 0.0 else idx[::-1].copy()
    if n == 3 and idx.size >= 3:
        P = vertices[idx]
        c = P.mean(axis=0)
        e1 = P[0] - c
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(normal, e1)
        ang = np.arctan2((P - c) @ e2, (P - c) @ e1)
        return idx[np.argsort(ang, kind="stable")]
    idx = np.sort(idx)
    if idx.size == n:
        # outward: det[v_i - p] > 0 for p on the inner side of the facet's hyperplane
        P = vertices[idx]
        if np.linalg.det(P - (P.mean(axis=0) - normal)) < 0.0:
            idx[[0, 1]] = idx[[1, 0]]
    return idx


def _normal_rank(rows: IntArray, cols: IntArray, normals: Array, count: int) -> IntArray:
    """Rank of the facet-normal set of each of ``count`` items; item ``rows[e]`` has facet ``cols[e]``.

    The rank of a set of unit vectors is the rank of the sum of their outer products, whose
    eigenvalues are O(1) for independent directions and ~0 for dependent ones.
    """
    n = normals.shape[1]
    G = np.zeros((count, n, n))
    np.add.at(G, rows, normals[cols, :, None] * normals[cols, None, :])
    ev = np.linalg.eigvalsh(G)
    return np.asarray((ev > _RANK_TOL).sum(axis=-1), dtype=np.intp)


def _pairs_within(groups: Sequence[IntArray]) -> tuple[IntArray, IntArray, IntArray]:
    """All index pairs (a < b) inside each group: returns (a, b, group id), vectorised per group size."""
    out_a, out_b, out_g = [], [], []
    sizes = np.array([g.size for g in groups])
    for m in np.unique(sizes):
        if m < 2:
            continue
        sel = np.flatnonzero(sizes == m)
        G = np.stack([np.sort(groups[int(i)]) for i in sel])  # (g, m)
        comb = np.array(list(itertools.combinations(range(int(m)), 2)), dtype=np.intp)
        out_a.append(G[:, comb[:, 0]].ravel())
        out_b.append(G[:, comb[:, 1]].ravel())
        out_g.append(np.repeat(sel, len(comb)))
    if not out_a:
        e = np.zeros(0, dtype=np.intp)
        return e, e, e
    return np.concatenate(out_a), np.concatenate(out_b), np.concatenate(out_g)


def _facet_edges(edges: IntArray, facet_vertices: Sequence[IntArray], nverts: int) -> tuple[IntArray, ...]:
    """Edges (global vertex indices, (E_f, 2) int) lying in each facet: both ends on the facet.

    Vectorised: every vertex pair within a facet is tested for membership in the edge set.
    """
    a, b, g = _pairs_within(facet_vertices)
    key = a * nverts + b
    hit = np.isin(key, edges[:, 0] * nverts + edges[:, 1])
    a, b, g = a[hit], b[hit], g[hit]
    order = np.lexsort((b, a, g))
    a, b, g = a[order], b[order], g[order]
    bounds = np.searchsorted(g, np.arange(len(facet_vertices) + 1))
    pairs = np.stack([a, b], axis=1)
    return tuple(_frozen(pairs[bounds[f] : bounds[f + 1]], np.intp) for f in range(len(facet_vertices)))


class Shape:
    """Base of all shapes: immutable, defined in a local frame.

    Every shape has ``dim``, ``bounding_radius`` (largest distance of the solid from the local
    origin), ``support(directions)``, ``local_aabb()`` and ``mass_properties(density, mass)``.
    """

    #: True for shapes that can only belong to static bodies (no finite mass).
    static_only: ClassVar[bool] = False

    _dim: int
    _cache: dict[str, Any]

    def __setattr__(self, name: str, value: Any) -> None:
        raise AttributeError(f"{type(self).__name__} is immutable (tried to set {name!r}); build a new shape")

    def __delattr__(self, name: str) -> None:
        raise AttributeError(f"{type(self).__name__} is immutable (tried to delete {name!r})")

    def _set(self, **fields: Any) -> None:
        for key, value in fields.items():
            object.__setattr__(self, key, value)

    @property
    def dim(self) -> int:
        """Dimension n of the space the shape lives in."""
        return self._dim

    @property
    def bounding_radius(self) -> float:
        """Largest distance of any point of the shape from its local origin."""
        raise NotImplementedError

    def support(self, directions: Any) -> Array:
        """Farthest points along directions: (..., n) float -> (..., n) float, local coordinates.

        A zero direction returns some point of the shape.
        """
        raise NotImplementedError

    def local_aabb(self) -> tuple[Array, Array]:
        """Axis-aligned bounds ``(lo (n,), hi (n,))`` in local coordinates (exact: from the support)."""
        e = np.eye(self._dim)
        hi = np.einsum("ii->i", self.support(e))
        lo = np.einsum("ii->i", self.support(-e))
        return lo, hi

    def _unit_mass_properties(self) -> MassProperties:
        """Mass properties at density 1 (computed once, cached)."""
        mp = self._cache.get("mass")
        if mp is None:
            mp = self._compute_mass_properties()
            self._cache["mass"] = mp
        return mp

    def _compute_mass_properties(self) -> MassProperties:
        raise NotImplementedError

    def mass_properties(self, density: Any = None, mass: Any = None) -> MassProperties:
        """Mass properties for a uniform ``density`` or a total ``mass`` (exactly one; default density 1)."""
        unit = self._unit_mass_properties()
        rho = resolve_density(unit.volume, density, mass)
        return unit if rho == 1.0 else unit.with_density(rho)

    def _directions(self, directions: Any) -> Array:
        return as_float_array("directions", directions, (self._dim,))


# ---------------------------------------------------------------------------------------------
# Ball
# ---------------------------------------------------------------------------------------------


class Ball(Shape):
    """Solid n-ball of ``radius`` centred at the local origin.

    Closed forms: volume ``pi^(n/2) r^n / Gamma(n/2 + 1)``; covariance ``m r^2 / (n+2) I``, so every
    plane has inertia ``2 m r^2 / (n+2)``.
    """

    radius: float

    def __init__(self, dim: int, radius: float) -> None:
        n = dimension("dim", dim)
        r = shape_size("radius", radius)
        self._set(_dim=n, radius=r, _cache={})

    def __repr__(self) -> str:
        return f"Ball(dim={self._dim}, radius={self.radius!r})"

    @property
    def bounding_radius(self) -> float:
        return self.radius

    def support(self, directions: Any) -> Array:
        d = self._directions(directions)
        norm = np.linalg.norm(d, axis=-1, keepdims=True)
        # a zero direction maps to the centre (any point maximises a zero direction)
        return d * (self.radius / np.where(norm > 0.0, norm, np.inf))

    def local_aabb(self) -> tuple[Array, Array]:
        r = np.full(self._dim, self.radius)
        return -r, r

    def _compute_mass_properties(self) -> MassProperties:
        n, r = self._dim, self.radius
        vol = math.pi ** (n / 2) * r**n / math.gamma(n / 2 + 1)
        return MassProperties.from_moments(vol, np.zeros(n), np.eye(n) * (vol * r * r / (n + 2)))


# ---------------------------------------------------------------------------------------------
# ConvexPolytope and Box
# ---------------------------------------------------------------------------------------------


class ConvexPolytope(Shape):
    """Convex hull of a point set in n dimensions, with its face structure.

    Attributes:
        vertices: (V, n) float, the true vertices, in the order of the input points they came from.
        facet_normals: (F, n) float, outward unit normals; the solid is
            ``facet_normals @ x <= facet_offsets``.
        facet_offsets: (F,) float.
        facet_vertices: tuple of F int arrays, the vertex indices of each (merged) facet; for n = 2 the
            segment runs counter-clockwise, for n = 3 the polygon is counter-clockwise seen from outside.
        facet_edges: tuple of F (E_f, 2) int arrays, the polytope edges lying in each facet (the
            facet's own edge graph, for clipping and slicing).
        edges: (E, 2) int, true edges (i < j, sorted); for n = 2 these are the facets.
        facet_adjacency: (A, 2) int, facet pairs (f < g) that share a ridge ((n-2)-face).
    """

    vertices: Array
    facet_normals: Array
    facet_offsets: Array
    facet_vertices: tuple[IntArray, ...]
    facet_edges: tuple[IntArray, ...]
    edges: IntArray
    facet_adjacency: IntArray
    _tolerance: float

    def __init__(self, points: Any, *, tolerance: float | None = None) -> None:
        """Hull of ``points`` (N, n) float, N >= n + 1, spanning n-D.

        ``tolerance`` (relative to the size of the point set, default 1e-9) is the distance below
        which nearly coplanar hull facets are merged while qhull builds the hull (its centrum
        pre-merge, option ``C-``). Exact input (regular polytopes, boxes) needs nothing; points
        that carry noise, such as float32 exports, want about 1e-6, or thin sliver facets appear
        where faces should be flat.
        """
        P = _points("points", points)
        N, n = P.shape
        tol = _DEFAULT_TOLERANCE if tolerance is None else positive_scalar("tolerance", tolerance)
        if N < n + 1:
            raise InputError(f"points: expected at least n + 1 = {n + 1} points to span {n}-D, got {N}")
        _, first = np.unique(P, axis=0, return_index=True)
        P = P[np.sort(first)]  # merge exact duplicates, keep the input order
        if P.shape[0] < n + 1:
            raise InputError(f"points: expected at least n + 1 = {n + 1} distinct points, got {P.shape[0]}")
        parts = _hull_parts(P, tol)
        self._set(_dim=n, _tolerance=tol, _cache={"qhull_triangulation": parts.pop("triangulation")}, **parts)

    def __repr__(self) -> str:
        return (
            f"{type(self).__name__}(dim={self._dim}, vertices={len(self.vertices)}, "
            f"facets={len(self.facet_normals)}, edges={len(self.edges)})"
        )

    @property
    def bounding_radius(self) -> float:
        return float(np.max(np.linalg.norm(self.vertices, axis=1)))

    def support(self, directions: Any) -> Array:
        d = self._directions(directions)
        flat = d.reshape(-1, self._dim)
        best = np.argmax(flat @ self.vertices.T, axis=1)
        return np.asarray(self.vertices[best].reshape(d.shape))

    def local_aabb(self) -> tuple[Array, Array]:
        return self.vertices.min(axis=0), self.vertices.max(axis=0)

    def boundary_triangulation(self) -> IntArray:
        """(S, n) int: the boundary as outward-oriented (n-1)-simplices (vertex indices) that meet
        face to face, so that they form a valid :class:`SimplexMesh`.

        A simplicial polytope's facets are used as they are. Otherwise each face is split by the
        pulling rule: a face is coned from its lowest-index vertex over the (recursively split)
        faces of it that miss that vertex. The split of a face depends on the face alone, so two
        facets split their shared ridge the same way. (qhull's own triangulation, used for the mass
        properties, splits every facet on its own and need not match across ridges in n >= 4.)
        """
        tri = self._cache.get("triangulation")
        if tri is None:
            tri = _frozen(_pulling_triangulation(self), np.intp)
            self._cache["triangulation"] = tri
        return np.asarray(tri)

    def boundary_mesh(self) -> SimplexMesh:
        """The boundary as a closed, outward-oriented :class:`SimplexMesh` (same vertices)."""
        return SimplexMesh(self.vertices, self.boundary_triangulation())

    def faces(self, k: int) -> tuple[IntArray, ...]:
        """Vertex-index sets (sorted int arrays) of all k-faces, 0 <= k <= n - 1.

        k = 0 are the vertices, 1 the edges, n - 1 the facets and n - 2 the ridges (intersections of
        adjacent facets). Other k come from the facets, each taken as an (n-1)-polytope in its own
        hyperplane, recursively; the faces of a face are faces of the polytope.
        """
        n = self._dim
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 0 <= int(k) <= n - 1:
            raise InputError(f"k: expected an integer face dimension in 0..{n - 1}, got {k!r}")
        k = int(k)
        key = f"faces{k}"
        cached = self._cache.get(key)
        if cached is not None:
            return tuple(cached)
        if k == 0:
            out = [np.array([i], dtype=np.intp) for i in range(len(self.vertices))]
        elif k == 1:
            out = list(self.edges)
        elif k == n - 1:
            out = [np.sort(f) for f in self.facet_vertices]
        elif k == n - 2:
            out = [
                np.intersect1d(self.facet_vertices[f], self.facet_vertices[g])
                for f, g in self.facet_adjacency
            ]
        else:
            seen: dict[tuple[int, ...], IntArray] = {}
            for f, fv in enumerate(self.facet_vertices):
                sub = _facet_polytope(np.asarray(self.vertices), self.facet_normals[f], fv, self._tolerance)
                for face in sub.faces(k):
                    g = np.sort(fv[face])
                    seen.setdefault(tuple(int(i) for i in g), g)
            out = [seen[t] for t in sorted(seen)]
        frozen = tuple(_frozen(f, np.intp) for f in out)
        self._cache[key] = frozen
        return frozen

    def _compute_mass_properties(self) -> MassProperties:
        # cone qhull's boundary triangulation (facets split one by one: exact for integration) from
        # the vertex mean, an interior point
        vol, cen, cov = boundary_moments(self.vertices, self._cache["qhull_triangulation"])
        return MassProperties.from_moments(vol, cen, cov)


def _pulling_triangulation(poly: ConvexPolytope) -> IntArray:
    """Face-to-face triangulation of the boundary (see ConvexPolytope.boundary_triangulation)."""
    n = poly.dim
    V = np.asarray(poly.vertices)
    nv = len(V)
    if all(len(f) == n for f in poly.facet_vertices):
        tri = np.stack(poly.facet_vertices).astype(np.intp)
    else:
        faces = {d: poly.faces(d) for d in range(1, n)}

        def incidence(d: int) -> sparse.csr_matrix:
            fs = faces[d]
            rows = np.repeat(np.arange(len(fs)), [len(f) for f in fs])
            return sparse.csr_matrix((np.ones(len(rows)), (rows, np.concatenate(fs))), shape=(len(fs), nv))

        # subfaces[d][j]: the (d-1)-faces inside d-face j (counts of shared vertices = subface size)
        inc = {d: incidence(d) for d in range(1, n)}
        subfaces: dict[int, list[IntArray]] = {}
        for d in range(2, n):
            shared = (inc[d - 1] @ inc[d].T).tocsc()
            size = np.array([len(f) for f in faces[d - 1]])
            lists = []
            for j in range(len(faces[d])):
                rows = shared.indices[shared.indptr[j] : shared.indptr[j + 1]]
                vals = shared.data[shared.indptr[j] : shared.indptr[j + 1]]
                lists.append(rows[vals == size[rows]])
            subfaces[d] = lists
        memo: dict[tuple[int, int], list[tuple[int, ...]]] = {}

        def split(d: int, j: int) -> list[tuple[int, ...]]:
            key = (d, j)
            if key not in memo:
                f = faces[d][j]
                if d == 1 or len(f) == d + 1:  # an edge or a simplex face splits into itself
                    memo[key] = [tuple(int(i) for i in f)]
                else:
                    v = int(f.min())
                    memo[key] = [
                        (v,) + s
                        for g in subfaces[d][j]
                        if v not in faces[d - 1][g]
                        for s in split(d - 1, int(g))
                    ]
            return memo[key]

        tri = np.array([s for j in range(len(faces[n - 1])) for s in split(n - 1, j)], dtype=np.intp)
    # outward orientation: positive cone volume from the vertex mean (an interior point)
    det = np.linalg.det(V[tri] - V.mean(axis=0))
    flip = det < 0.0
    tri[flip, 0], tri[flip, 1] = tri[flip, 1].copy(), tri[flip, 0].copy()
    return tri


def _facet_polytope(vertices: Array, normal: Array, idx: IntArray, tol: float) -> ConvexPolytope:
    """A facet as an (n-1)-polytope in an orthonormal frame of its hyperplane (vertex order kept)."""
    _, _, Vt = np.linalg.svd(normal[None, :])
    basis = Vt[1:]  # (n-1, n), orthonormal complement of the normal
    P = vertices[idx]
    return ConvexPolytope((P - P.mean(axis=0)) @ basis.T, tolerance=tol)


def _qhull(P: Array, tol: float, size: float) -> ConvexHull:
    """qhull with a centrum pre-merge of ``tol * size``; retried with more forgiving options.

    ``Qx`` (exact pre-merges) is what scipy uses by default above 4-D. Nearly degenerate input can
    still end in a qhull topology error; ``Q12`` allows qhull's wide merges and, as a last resort,
    ``QJ`` joggles the input (its facets are then merged back by the clustering below).
    """
    n = P.shape[1]
    base = f"C-{tol * size:.6g}" + (" Qx" if n > 4 else "")
    last: Exception | None = None
    for extra in ("", " Q12", " QJ"):
        try:
            return ConvexHull(P, qhull_options=base + extra)
        except QhullError as exc:
            last = exc
    msg = str(last).strip().splitlines()[0] if last is not None and str(last).strip() else "qhull error"
    raise InputError(f"points: qhull could not build the hull of these {P.shape[0]} points ({msg})")


def _hull_parts(P: Array, tol: float = 1e-9) -> dict[str, Any]:
    """Face structure of conv(P) for distinct points P (N, n). See the module notes."""
    N, n = P.shape
    size = float(np.max(np.ptp(P, axis=0)))
    if size == 0.0:
        raise InputError(f"points: all {N} points coincide; expected points spanning {n}-D")
    # flat input is caught here, before qhull, so that the message can say so plainly
    sv = np.linalg.svd(P - P.mean(axis=0), compute_uv=False)
    if not sv[n - 1] > 1e-12 * sv[0]:
        raise InputError(
            f"points: the {N} points do not span {n}-D (they are flat: zero {n}-volume, spread "
            f"{sv[n - 1]:.3g} across their thinnest direction against {sv[0]:.3g} along the widest)"
        )
    hull = _qhull(P, tol, size)
    if not hull.volume > 1e-12 * size**n:
        raise InputError(
            f"points: the hull has {n}-volume {hull.volume:.3g}, which is flat for points "
            f"of size {size:.3g}; expected points spanning {n}-D"
        )

    # -- merge triangulation simplices into true facets --------------------------------------------
    eq = hull.equations
    keys = np.concatenate([eq[:, :n], (-eq[:, n:] / size)], axis=1)
    close = cKDTree(keys).query_pairs(_FACET_MERGE_TOL * 10, output_type="ndarray")
    S = len(eq)
    graph = sparse.coo_matrix((np.ones(len(close)), (close[:, 0], close[:, 1])), shape=(S, S))
    nf, label = connected_components(graph, directed=False)
    # number facets by their first simplex, so the order follows qhull deterministically
    _, first_s = np.unique(label, return_index=True)
    rank_of = np.empty(nf, dtype=np.intp)
    rank_of[np.argsort(first_s)] = np.arange(nf)
    label = rank_of[label]
    normals = np.zeros((nf, n))
    np.add.at(normals, label, eq[:, :n])
    normals /= np.linalg.norm(normals, axis=1, keepdims=True)

    # -- facet/point incidence from the simplices of each facet -----------------------------------
    simp = hull.simplices
    inc = sparse.csr_matrix((np.ones(simp.size), (np.repeat(label, n), simp.ravel())), shape=(nf, N))
    inc.sum_duplicates()
    inc.data[:] = 1.0
    fi, pi = inc.nonzero()
    # a true vertex lies on facets whose normals span R^n; drop points lying inside a face
    used = np.unique(pi)
    rank = _normal_rank(np.searchsorted(used, pi), fi, normals, len(used))
    true_v = used[rank == n]
    if len(true_v) < len(used):
        # qhull kept a point that is not a vertex; rebuild from the true vertices only
        return _hull_parts(P[true_v], tol)
    # every point is now a true vertex; renumber in input order
    vmap = np.full(N, -1, dtype=np.intp)
    vmap[true_v] = np.arange(len(true_v))
    V = P[true_v]
    pi = vmap[pi]
    offsets = np.full(nf, -np.inf)
    np.maximum.at(offsets, fi, np.einsum("ei,ei->e", normals[fi], V[pi]))
    order = np.lexsort((pi, fi))
    fi, pi = fi[order], pi[order]
    splits = np.flatnonzero(np.diff(fi)) + 1
    facet_vertices = [
        _orient_facet(V, normals[f], g.astype(np.intp)) for f, g in enumerate(np.split(pi, splits))
    ]

    # -- edges: vertex pairs whose common facets have normal rank n - 1 ----------------------------
    a, b, g = _pairs_within(facet_vertices)
    nv = len(V)
    pair_key = a * nv + b
    ukey, inv = np.unique(pair_key, return_inverse=True)
    count = np.bincount(inv, minlength=len(ukey))
    cand = count >= n - 1
    sel = cand[inv]
    cidx = np.cumsum(cand) - 1
    r = _normal_rank(cidx[inv[sel]], g[sel], normals, int(cand.sum()))
    ekey = ukey[cand][r == n - 1]
    edges = np.stack([ekey // nv, ekey % nv], axis=1).astype(np.intp)

    # -- facet adjacency across ridges, from qhull's simplex neighbours ---------------------------
    nb = hull.neighbors
    fa = np.repeat(label, n)
    fb = label[nb.ravel()]
    diff = fa != fb
    adj = np.unique(np.sort(np.stack([fa[diff], fb[diff]], axis=1), axis=1), axis=0)

    # -- outward-oriented boundary triangulation (for mass properties and meshes) -----------------
    tri = vmap[simp]
    centre = V.mean(axis=0)
    det = np.linalg.det(V[tri] - centre)
    flip = det < 0.0
    tri[flip, 0], tri[flip, 1] = tri[flip, 1].copy(), tri[flip, 0].copy()

    return {
        "vertices": _frozen(V),
        "facet_normals": _frozen(normals),
        "facet_offsets": _frozen(offsets),
        "facet_vertices": tuple(_frozen(f, np.intp) for f in facet_vertices),
        "facet_edges": _facet_edges(edges, facet_vertices, nv),
        "edges": _frozen(edges, np.intp),
        "facet_adjacency": _frozen(adj.reshape(-1, 2), np.intp),
        "triangulation": _frozen(tri, np.intp),
    }


class Box(ConvexPolytope):
    """Axis-aligned box ``|x_i| <= h_i`` centred at the local origin; also a :class:`ConvexPolytope`.

    Vertex v has coordinate ``+h_i`` where bit i of v is set, else ``-h_i`` (2^n vertices). Facet i
    (i < n) has normal +e_i and facet n + i has normal -e_i (2n facets). Edges join vertices that
    differ in one bit (n 2^(n-1) edges). All of it is generated without a hull. Closed forms:
    volume ``prod 2 h_i``; covariance ``diag(m h_i^2 / 3)`` (edge L = 2h: ``m L^2 / 12``).
    """

    half_extents: Array

    def __init__(self, half_extents: Any) -> None:
        h = numeric_array("half_extents", half_extents, "one half-extent per axis, shape (n,)")
        if h.ndim != 1 or h.shape[0] < 2:
            raise InputError(
                f"half_extents: expected one half-extent per axis, shape (n,) with n >= 2, "
                f"got shape {np.shape(h)}"
            )
        h = as_float_array("half_extents", h, (h.shape[0],))
        if np.any(h <= 0.0):
            i = int(np.flatnonzero(h <= 0.0)[0])
            raise InputError(f"half_extents: expected every half-extent > 0, got {float(h[i])!r} on axis {i}")
        if np.any((h < MIN_SIZE) | (h > MAX_MAGNITUDE)):
            i = int(np.flatnonzero((h < MIN_SIZE) | (h > MAX_MAGNITUDE))[0])
            raise InputError(f"half_extents: expected every half-extent in [{MIN_SIZE:g}, "
                             f"{MAX_MAGNITUDE:g}] m, "
                             f"got {float(h[i])!r} on axis {i}")
        n = h.shape[0]
        idx = np.arange(1 << n)
        bits = (idx[:, None] >> np.arange(n)[None, :]) & 1
        V = np.where(bits == 1, h, -h)
        normals = np.concatenate([np.eye(n), -np.eye(n)])
        facet_vertices = [_orient_facet(V, normals[i], np.flatnonzero(bits[:, i] == 1)) for i in range(n)]
        facet_vertices += [
            _orient_facet(V, normals[n + i], np.flatnonzero(bits[:, i] == 0)) for i in range(n)
        ]
        lo = np.concatenate([idx[bits[:, i] == 0] for i in range(n)])
        hi = np.concatenate([idx[bits[:, i] == 0] | (1 << i) for i in range(n)])
        edges = np.stack([lo, hi], axis=1)
        edges = edges[np.lexsort((edges[:, 1], edges[:, 0]))]
        # facets are adjacent unless they are the two ends of one axis
        ax = np.arange(2 * n) % n
        fa, fb = np.triu_indices(2 * n, 1)
        keep = ax[fa] != ax[fb]
        self._set(
            _dim=n,
            _cache={},
            _tolerance=_DEFAULT_TOLERANCE,
            half_extents=_frozen(h),
            vertices=_frozen(V),
            facet_normals=_frozen(normals),
            facet_offsets=_frozen(np.concatenate([h, h])),
            facet_vertices=tuple(_frozen(f, np.intp) for f in facet_vertices),
            facet_edges=_facet_edges(edges, facet_vertices, len(V)),
            edges=_frozen(edges, np.intp),
            facet_adjacency=_frozen(np.stack([fa[keep], fb[keep]], axis=1), np.intp),
        )

    def __repr__(self) -> str:
        return f"Box(half_extents={self.half_extents.tolist()!r})"

    @property
    def bounding_radius(self) -> float:
        return float(np.linalg.norm(self.half_extents))

    def support(self, directions: Any) -> Array:
        d = self._directions(directions)
        return np.where(d >= 0.0, self.half_extents, -self.half_extents)

    def local_aabb(self) -> tuple[Array, Array]:
        return -np.asarray(self.half_extents), np.asarray(self.half_extents).copy()

    def faces(self, k: int) -> tuple[IntArray, ...]:
        """k-faces combinatorially: k free axes, the other n - k bits fixed (2^(n-k) C(n, k) faces)."""
        n = self._dim
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 0 <= int(k) <= n - 1:
            raise InputError(f"k: expected an integer face dimension in 0..{n - 1}, got {k!r}")
        k = int(k)
        out = []
        for free in itertools.combinations(range(n), k):
            fixed = [i for i in range(n) if i not in free]
            sub = np.array(
                [sum(1 << free[j] for j in range(k) if (m >> j) & 1) for m in range(1 << k)], dtype=np.intp
            )
            for bitsv in range(1 << len(fixed)):
                base = sum(1 << fixed[j] for j in range(len(fixed)) if (bitsv >> j) & 1)
                out.append(_frozen(np.sort(base + sub), np.intp))
        return tuple(out)

    def _compute_mass_properties(self) -> MassProperties:
        h = np.asarray(self.half_extents)
        vol = float(np.prod(2.0 * h))
        return MassProperties.from_moments(vol, np.zeros(self._dim), np.diag(vol * h * h / 3.0))


# ---------------------------------------------------------------------------------------------
# SimplexMesh
# ---------------------------------------------------------------------------------------------


def _inversion_parity(order: IntArray) -> IntArray:
    """Parity (0/1) of each row's permutation, by counting inversions (rows are short)."""
    m = order.shape[1]
    par = np.zeros(order.shape[0], dtype=np.intp)
    for a in range(m):
        for b in range(a + 1, m):
            par += order[:, a] > order[:, b]
    return par & 1


def _row_ids(rows: IntArray, nverts: int) -> tuple[IntArray, IntArray]:
    """Unique-row ids of an int matrix: (inverse (R,), counts (U,)), by packing rows into int64."""
    m = rows.shape[1]
    if m * math.log2(max(nverts, 2)) < 62:
        key = np.zeros(rows.shape[0], dtype=np.int64)
        for j in range(m):
            key = key * nverts + rows[:, j]
        _, inv, cnt = np.unique(key, return_inverse=True, return_counts=True)
    else:
        _, inv, cnt = np.unique(rows, axis=0, return_inverse=True, return_counts=True)
    return inv.ravel(), cnt


def _cells_list(ids: IntArray, limit: int = 8) -> str:
    ids = np.unique(ids)
    shown = ", ".join(str(int(i)) for i in ids[:limit])
    return f"[{shown}{', ...' if len(ids) > limit else ''}] ({len(ids)} cells)"


class SimplexMesh(Shape):
    """A closed, consistently oriented boundary of (n-1)-simplices; the solid it encloses.

    Convex or not; used for mass properties and as a source of convex pieces. The enclosed solid is
    what the signed cone sum measures (module notes of ``mass``); self-intersection is not checked.

    Args:
        vertices: (V, n) float.
        cells: (C, n) int vertex indices; a cell's orientation is its vertex order, outward when
            ``det[v_0 - p, ..., v_(n-1) - p] > 0`` for a point p inside (3-D: counter-clockwise seen
            from outside; 2-D: the polygon runs counter-clockwise).
        flip_inside_out: if the whole boundary is inside-out (negative enclosed volume), flip every
            cell instead of raising.

    Validation: every (n-2)-face is shared by exactly two cells (closed, manifold), it appears once
    with each induced orientation (consistently oriented), no cell repeats a vertex, and the
    enclosed volume is positive. Errors name the offending cells.
    """

    vertices: Array
    cells: IntArray
    _used: Array  # the vertices that some cell references (support, bounds, hull)

    def __init__(self, vertices: Any, cells: Any, *, flip_inside_out: bool = False) -> None:
        V = _points("vertices", vertices)
        nv, n = V.shape
        F = np.asarray(cells)
        if F.dtype.kind not in "iu" or F.dtype == np.bool_:
            raise InputTypeError(f"cells: expected an integer array of vertex indices, got dtype {F.dtype}")
        if F.ndim != 2 or F.shape[1] != n or F.shape[0] == 0:
            raise InputError(
                f"cells: expected shape (C, {n}) (each cell an ({n - 1})-simplex of {n} vertex "
                f"indices, C >= 1), got shape {F.shape}"
            )
        F = F.astype(np.intp)
        bad = np.flatnonzero(np.any((F < 0) | (F >= nv), axis=1))
        if bad.size:
            raise InputError(
                f"cells: vertex indices must lie in 0..{nv - 1}; cells {_cells_list(bad)} "
                f"do not (first: {F[bad[0]].tolist()})"
            )
        Fs = np.sort(F, axis=1)
        bad = np.flatnonzero(np.any(Fs[:, 1:] == Fs[:, :-1], axis=1))
        if bad.size:
            raise InputError(
                f"cells: cells {_cells_list(bad)} repeat a vertex (first: {F[bad[0]].tolist()}); "
                "expected n distinct vertices per cell"
            )
        _check_closed_oriented(F, nv)
        ref = V[np.unique(F)].mean(axis=0)
        vol = float(np.linalg.det(V[F] - ref).sum()) / math.factorial(n)
        if not abs(vol) > 0.0:
            raise InputError(
                "cells: the boundary encloses zero volume; expected a closed boundary around a solid"
            )
        if vol < 0.0:
            if not flip_inside_out:
                raise InputError(
                    f"cells: the boundary is inside-out (enclosed volume {vol:.6g} < 0: the cells face "
                    "inward); swap two vertices of every cell (e.g. cells[:, [1, 0, 2, ...]]) or pass "
                    "flip_inside_out=True"
                )
            F = F.copy()
            F[:, [0, 1]] = F[:, [1, 0]]
        used = np.unique(F)
        self._set(_dim=n, vertices=_frozen(V), cells=_frozen(F, np.intp), _cache={}, _used=_frozen(V[used]))

    def __repr__(self) -> str:
        return f"SimplexMesh(dim={self._dim}, vertices={len(self.vertices)}, cells={len(self.cells)})"

    @property
    def bounding_radius(self) -> float:
        return float(np.max(np.linalg.norm(self._used, axis=1)))

    def support(self, directions: Any) -> Array:
        d = self._directions(directions)
        U = self._used
        flat = d.reshape(-1, self._dim)
        return np.asarray(U[np.argmax(flat @ U.T, axis=1)].reshape(d.shape))

    def local_aabb(self) -> tuple[Array, Array]:
        U = self._used
        return U.min(axis=0), U.max(axis=0)

    def convex_hull(self) -> ConvexPolytope:
        """The convex hull of the mesh's (used) vertices, as a ConvexPolytope."""
        return ConvexPolytope(self._used)

    def _compute_mass_properties(self) -> MassProperties:
        vol, cen, cov = boundary_moments(self.vertices, self.cells)
        return MassProperties.from_moments(vol, cen, cov)


def _check_closed_oriented(F: IntArray, nverts: int) -> None:
    """Raise InputError unless every (n-2)-face is shared by two cells with opposite orientations.

    Dropping vertex i of the oriented cell [v_0 .. v_(n-1)] gives a face with induced orientation
    (-1)^i (the simplicial boundary operator); with the face's vertices sorted, the orientation is
    further multiplied by the parity of the sorting permutation. Two cells meet consistently when
    they induce opposite orientations on their shared face.
    """
    C, n = F.shape
    cols = np.array([[j for j in range(n) if j != i] for i in range(n)], dtype=np.intp)  # (n, n-1)
    faces = F[:, cols].reshape(C * n, n - 1)
    cell_of = np.repeat(np.arange(C), n)
    sign = np.tile(np.where(np.arange(n) % 2 == 0, 1, -1), C)
    order = np.argsort(faces, axis=1, kind="stable")
    faces = np.take_along_axis(faces, order, axis=1)
    orient = sign * np.where(_inversion_parity(order) == 1, -1, 1)
    inv, cnt = _row_ids(faces, nverts)
    wrong = cnt[inv] != 2
    if np.any(wrong):
        e = int(np.flatnonzero(wrong)[0])
        raise InputError(
            f"cells: the boundary is not closed: every {n - 2}-face must be shared by exactly 2 cells, "
            f"but face {faces[e].tolist()} is shared by {int(cnt[inv[e]])}; cells at such faces: "
            f"{_cells_list(cell_of[wrong])}"
        )
    total = np.bincount(inv, weights=orient, minlength=len(cnt))
    wrong = total[inv] != 0
    if np.any(wrong):
        e = int(np.flatnonzero(wrong)[0])
        raise InputError(
            f"cells: the boundary is not consistently oriented: the two cells at face {faces[e].tolist()} "
            f"induce the same orientation on it; cells at such faces: {_cells_list(cell_of[wrong])}"
        )


# ---------------------------------------------------------------------------------------------
# Compound
# ---------------------------------------------------------------------------------------------


class Compound(Shape):
    """Rigid union of convex pieces, each placed by a pose in the compound's frame.

    Args:
        pieces: sequence of ``(shape, position)`` or ``(shape, position, rotor)``; shape a Ball, Box
            or ConvexPolytope of the common dimension n, position (n,), rotor (2**(n-1),) a unit
            rotor (default identity). A point x of the piece lies at ``position + R x ~R``.

    Attributes:
        shapes: tuple of the piece shapes.
        positions: (P, n) float.
        rotors: (P, 2**(n-1)) float.
        rotations: (P, n, n) float, the rotors as matrices.

    Mass properties combine the pieces' records through the transform rules (``rotate_inertia``,
    ``shift_inertia``); overlapping pieces count twice.
    """

    shapes: tuple[Shape, ...]
    positions: Array
    rotors: Array
    rotations: Array

    def __init__(self, pieces: Sequence[Any]) -> None:
        if isinstance(pieces, (str, bytes)) or not isinstance(pieces, Sequence) or len(pieces) == 0:
            raise InputError(
                f"pieces: expected a non-empty sequence of (shape, position[, rotor]), got {pieces!r}"
            )
        shapes: list[Shape] = []
        pos: list[Array] = []
        rot: list[Array] = []
        n: int | None = None
        for i, piece in enumerate(pieces):
            if not isinstance(piece, (tuple, list)) or len(piece) not in (2, 3):
                raise InputError(
                    f"pieces[{i}]: expected (shape, position) or (shape, position, rotor), got {piece!r}"
                )
            shape = piece[0]
            if not isinstance(shape, (Ball, ConvexPolytope)):
                hint = {
                    SimplexMesh: "use convex pieces, e.g. mesh.convex_hull()",
                    Compound: "list its pieces directly",
                    HalfSpace: "a half-space is static only",
                }
                raise InputTypeError(
                    f"pieces[{i}]: expected a convex piece (Ball, Box, ConvexPolytope), got "
                    f"{type(shape).__name__}; {hint.get(type(shape), 'not a shape')}"
                )
            if n is None:
                n = shape.dim
            elif shape.dim != n:
                raise InputError(
                    f"pieces[{i}]: expected a {n}-D shape like pieces[0], got a {shape.dim}-D one"
                )
            alg = Algebra(n)
            pos.append(vector(f"pieces[{i}] position", piece[1], n))
            R = alg.identity_rotor() if len(piece) == 2 or piece[2] is None else piece[2]
            rot.append(alg.check_rotor(R, f"pieces[{i}] rotor", single=True))
            shapes.append(shape)
        assert n is not None
        alg = Algebra(n)
        R = np.stack(rot)
        R = alg.rotor_normalize(R)
        self._set(
            _dim=n,
            _cache={},
            shapes=tuple(shapes),
            positions=_frozen(np.stack(pos)),
            rotors=_frozen(R),
            rotations=_frozen(alg.rotor_to_matrix(R)),
        )

    def __repr__(self) -> str:
        return f"Compound(dim={self._dim}, pieces=[{', '.join(type(s).__name__ for s in self.shapes)}])"

    @property
    def pieces(self) -> tuple[tuple[Shape, Array, Array], ...]:
        """The pieces as ``(shape, position, rotor)`` tuples."""
        return tuple(zip(self.shapes, self.positions, self.rotors, strict=True))

    def _piece_points(self, i: int) -> Array | None:
        s = self.shapes[i]
        if isinstance(s, ConvexPolytope):
            return np.asarray(self.positions[i] + s.vertices @ self.rotations[i].T)
        return None

    @property
    def bounding_radius(self) -> float:
        r = 0.0
        for i, s in enumerate(self.shapes):
            pts = self._piece_points(i)
            if pts is None:  # a ball
                r = max(r, float(np.linalg.norm(self.positions[i])) + s.bounding_radius)
            else:
                r = max(r, float(np.max(np.linalg.norm(pts, axis=1))))
        return r

    def support(self, directions: Any) -> Array:
        d = self._directions(directions)
        flat = d.reshape(-1, self._dim)
        best = np.full(flat.shape[0], -np.inf)
        out = np.zeros_like(flat)
        for s, t, M in zip(
            self.shapes, self.positions, self.rotations, strict=True
        ):  # a loop over few pieces
            p = t + s.support(flat @ M) @ M.T  # piece-frame direction is M^T d
            h = np.einsum("ij,ij->i", p, flat)
            take = h > best
            out[take] = p[take]
            best = np.maximum(best, h)
        return out.reshape(d.shape)

    def _compute_mass_properties(self) -> MassProperties:
        parts = [
            (s._unit_mass_properties(), t, M)
            for s, t, M in zip(self.shapes, self.positions, self.rotations, strict=True)
        ]
        return combine_mass_properties(parts)


# ---------------------------------------------------------------------------------------------
# HalfSpace
# ---------------------------------------------------------------------------------------------


def _axis_vector(dim: Any, axis: Any, sign: float) -> Array:
    """sign * e_axis in ``dim`` dimensions, with the checks of the axis-aligned half-space helpers."""
    n = dimension("dim", dim)
    if not isinstance(axis, (int, np.integer)) or isinstance(axis, bool) or not 0 <= int(axis) < n:
        raise InputError(f"axis: expected an integer in [0, {n}), got {axis!r}")
    u = np.zeros(n)
    u[int(axis)] = sign
    return u


class HalfSpace(Shape):
    """The solid ``normal . x <= offset`` (static ground and walls).

    A non-unit normal is normalised together with the offset (the solid is unchanged); a zero normal
    is rejected. Static only: :meth:`mass_properties` raises InputError.

    Attributes:
        normal: (n,) float, outward unit normal.
        offset: float, signed distance of the boundary plane from the local origin along the normal.
    """

    static_only: ClassVar[bool] = True
    normal: Array
    offset: float

    def __init__(self, normal: Any, offset: float = 0.0) -> None:
        u = numeric_array("normal", normal, "a vector of shape (n,)")
        if u.ndim != 1 or u.shape[0] < 2:
            raise InputError(f"normal: expected a vector of shape (n,) with n >= 2, got shape {np.shape(u)}")
        u = as_float_array("normal", u, (u.shape[0],))
        d = float(as_float_array("offset", offset, (), exact=True))
        scale = float(np.max(np.abs(u)))
        if not scale > 0.0:
            raise InputError(f"normal: expected a non-zero vector, got {u.tolist()}")
        # scaled first, so that the norm of a long normal (components near 1e200) does not overflow
        u, d = u / scale, d / scale
        norm = float(np.linalg.norm(u))
        if abs(d / norm) > MAX_MAGNITUDE:
            raise InputError(f"offset: expected a plane within {MAX_MAGNITUDE:g} m of the origin, got "
                             f"{d / norm!r} m (offset / |normal|)")
        self._set(_dim=u.shape[0], _cache={}, normal=_frozen(u / norm), offset=d / norm)

    def __repr__(self) -> str:
        return f"HalfSpace(normal={self.normal.tolist()!r}, offset={self.offset!r})"

    @classmethod
    def below(cls, dim: int, axis: int, at: float = 0.0) -> HalfSpace:
        """The solid ``x[axis] <= at``: a floor (axis 1) whose surface is at height ``at``, or a
        wall whose open side is ``x[axis] > at``. Outward normal +e_axis.

        >>> HalfSpace.below(3, 1, 0.0)
        HalfSpace(normal=[0.0, 1.0, 0.0], offset=0.0)
        """
        return cls(_axis_vector(dim, axis, 1.0), float(at))

    @classmethod
    def above(cls, dim: int, axis: int, at: float = 0.0) -> HalfSpace:
        """The solid ``x[axis] >= at``: a ceiling (axis 1) or a wall whose open side is
        ``x[axis] < at``. Outward normal -e_axis.

        >>> HalfSpace.above(2, 0, 5.0)
        HalfSpace(normal=[-1.0, 0.0], offset=-5.0)
        """
        return cls(_axis_vector(dim, axis, -1.0), -float(at))

    @property
    def bounding_radius(self) -> float:
        return math.inf

    def support(self, directions: Any) -> Array:
        """Farthest points: ``offset * normal`` for directions along +normal; infinite otherwise.

        Any direction not parallel to the outward normal is unbounded; its coordinates are
        ``+-inf`` with the direction's signs (a zero component gives +inf).
        """
        d = self._directions(directions)
        along = d @ self.normal
        perp = d - along[..., None] * self.normal
        bounded = (along > 0.0) & (np.linalg.norm(perp, axis=-1) <= 1e-12 * np.abs(along))
        inf = np.where(d < 0.0, -np.inf, np.inf)
        return np.where(bounded[..., None], self.offset * self.normal, inf)

    def local_aabb(self) -> tuple[Array, Array]:
        n = self._dim
        lo, hi = np.full(n, -np.inf), np.full(n, np.inf)
        axis = np.flatnonzero(np.abs(self.normal) == 1.0)
        if axis.size == 1:  # an axis-aligned half-space is bounded on one side of one axis
            i = int(axis[0])
            if self.normal[i] > 0:
                hi[i] = self.offset
            else:
                lo[i] = -self.offset
        return lo, hi

    def mass_properties(self, density: Any = None, mass: Any = None) -> MassProperties:
        raise InputError(
            "HalfSpace: a half-space has infinite volume and no finite mass properties; it is "
            "static only (attach it to a static body)"
        )
