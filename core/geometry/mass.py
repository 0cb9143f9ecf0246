"""Mass properties in n dimensions: simplex moments, the bivector inertia map and its transform rules.

Everything here is stated for a uniform solid of density 1 first and scaled afterwards: volume,
first moment and second moment are linear in the density, so a shape computes them once and any
density or total mass is a multiplication (:meth:`MassProperties.with_density`).

Invariants and conventions (design.md, section 2):

* ``covariance`` is the mass-weighted second moment about the centroid, ``C = int rho r r^T dV``
  (not divided by the mass).
* The inertia map takes the angular-velocity bivector to the angular-momentum bivector, components
  in lexicographic pair order. Derivation, with B the bivector, Bm its antisymmetric matrix
  ``Bm[i, j] = B_ij`` (i < j) and the skew form ``W = -Bm`` (so ``W[j, i] = B_ij``): a particle at
  r moves with ``v = W r``, its angular momentum is ``r ^ p`` with components
  ``L_ij = m (r_i v_j - r_j v_i)``. Summing, ``L = C Bm + Bm C`` as antisymmetric matrices, and
  reading off the (ij) component of ``C E_kl - C E_lk + E_kl C - E_lk C`` gives

      I[(ij), (kl)] = d_jl C_ik + d_ik C_jl - d_il C_jk - d_jk C_il.

  In the eigenframe of C (eigenvalues c_i) this is diagonal with entries c_i + c_j: the per-plane
  principal moments.
* A rotation M maps bivector components through its second compound C2(M) (orthogonal when M is),
  so the inertia of a rotated body is ``C2(M) I C2(M)^T`` (:func:`rotate_inertia`). The inertia map
  is linear in C, and C about a point displaced by d from the centroid is ``C + m d d^T``: the
  parallel-axis rule in bivector form is ``I + inertia_from_covariance(m d d^T)``
  (:func:`shift_inertia`).

Simplex moments: a simplex with vertices ``r, r + a_1, ..., r + a_n`` is the image of the canonical
simplex ``{xi >= 0, sum xi <= 1}`` under ``x = r + A xi``. With the reference point r moved to the
origin, the canonical moments ``int 1 = 1/n!``, ``int xi = 1/(n+1)! * 1`` and
``int xi xi^T = (I + 1 1^T) / (n+2)!`` map to ``det A / n!``, ``det A (A 1) / (n+1)!`` and
``det A (A A^T + (A 1)(A 1)^T) / (n+2)!``. This is the standard simplex-monomial formula
``vol/((n+1)(n+2)) (sum v v^T + (sum v)(sum v)^T)`` with one vertex at the origin. ``det A`` is
signed, so coning every cell of a closed, outward-oriented boundary to any reference point and
summing gives the moments of the enclosed solid, convex or not; the reference point drops out
(the tests check that). All sums are vectorised over cells: one gather, one batched determinant and
two einsums, no Python loop.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import linear_sum_assignment

from ..algebra import Algebra, bivector_pairs, second_compound
from ..errors import InputError, as_float_array, positive_scalar

Array = NDArray[np.float64]
IntArray = NDArray[np.intp]

__all__ = [
    "MassProperties",
    "boundary_moments",
    "combine_mass_properties",
    "inertia_from_covariance",
    "principal_frame",
    "resolve_density",
    "rotate_inertia",
    "shift_inertia",
    "simplex_moments",
]


def _readonly(a: Array) -> Array:
    a = np.array(a, dtype=np.float64)  # own copy, so freezing never touches the caller's array
    a.setflags(write=False)
    return a


# ---------------------------------------------------------------------------------------------
# Inertia map and its transform rules
# ---------------------------------------------------------------------------------------------


def inertia_from_covariance(covariance: Any) -> Array:
    """Bivector inertia maps of second moments: (..., n, n) float -> (..., k, k) float.

    ``I[(ij), (kl)] = d_jl C_ik + d_ik C_jl - d_il C_jk - d_jk C_il`` over pairs i < j, k < l in
    storage order (derivation in the module notes). Linear in C; symmetric when C is.
    """
    C = np.asarray(covariance, dtype=np.float64)
    if C.ndim < 2 or C.shape[-1] != C.shape[-2] or C.shape[-1] < 2:
        raise InputError(f"covariance: expected shape (..., n, n) with n >= 2, got {C.shape}")
    n = C.shape[-1]
    p = bivector_pairs(n)
    i, j = p[:, 0][:, None], p[:, 1][:, None]
    k, l_ = p[:, 0][None, :], p[:, 1][None, :]
    # the Kronecker deltas are fixed (k, k) masks per n; one gather of C per term
    out: Array = (
        C[..., i, k] * (j == l_)
        + C[..., j, l_] * (i == k)
        - C[..., j, k] * (i == l_)
        - C[..., i, l_] * (j == k)
    )
    return out


def rotate_inertia(inertia: Any, rotation: Any) -> Array:
    """Inertia map of a body turned by ``rotation``: ``C2(M) I C2(M)^T``.

    Args:
        inertia: (..., k, k) float, the inertia map in the body's own frame.
        rotation: (..., n, n) float rotation matrix M (orthogonal, det +1): body-frame vectors x map
            to ``M x``.
    Returns:
        (..., k, k) float, the inertia map in the rotated frame.
    """
    M = np.asarray(rotation, dtype=np.float64)
    Ib = np.asarray(inertia, dtype=np.float64)
    C2 = second_compound(M)
    if C2.shape[-1] != Ib.shape[-1]:
        raise InputError(
            f"rotation: a rotation of shape {M.shape} does not fit an inertia map of shape {Ib.shape}"
        )
    return np.asarray(np.einsum("...ab,...bc,...dc->...ad", C2, Ib, C2))


def shift_inertia(inertia: Any, mass: Any, offset: Any) -> Array:
    """Parallel-axis rule in bivector form: inertia about a point other than the centroid.

    Args:
        inertia: (..., k, k) float, inertia map about the centroid.
        mass: (...,) float, the body's mass.
        offset: (..., n) float, the centroid's position relative to the new reference point (the
            sign does not matter: the rule is quadratic in it).
    Returns:
        (..., k, k) float, ``I + inertia_from_covariance(m d d^T)``.
    """
    d = np.asarray(offset, dtype=np.float64)
    m = np.asarray(mass, dtype=np.float64)
    outer = m[..., None, None] * d[..., :, None] * d[..., None, :]
    return np.asarray(inertia, dtype=np.float64) + inertia_from_covariance(outer)


# ---------------------------------------------------------------------------------------------
# Principal frame
# ---------------------------------------------------------------------------------------------


def principal_frame(covariance: Any) -> tuple[Array, Array]:
    """Eigen-decomposition of a covariance with the axes as a proper rotation near the identity.

    Args:
        covariance: (n, n) float, symmetric.
    Returns:
        ``(c, axes)``: c (n,) float eigenvalues, axes (n, n) float rotation (det +1) whose column i
        is the principal direction of ``c[i]``, so that ``covariance = axes @ diag(c) @ axes.T``.

    eigh returns eigenvalues sorted and eigenvectors with arbitrary signs, so an axis-aligned box
    would come back with permuted, sign-flipped axes. We match each eigenvector to the coordinate
    axis it is closest to (an assignment problem on |axes|), make the matched components positive
    and fix det +1 by flipping the least-aligned column: axis-aligned shapes then get exactly the
    identity frame, and nearby covariances get nearby frames. A covariance that is already diagonal
    (isotropic shapes, boxes) takes the identity directly, because eigh's basis of a repeated
    eigenvalue is arbitrary.
    """
    C = np.asarray(covariance, dtype=np.float64)
    n = C.shape[-1]
    C = 0.5 * (C + C.T)
    scale = float(np.max(np.abs(np.diag(C)))) if n else 0.0
    off = C - np.diag(np.diag(C))
    if scale == 0.0 or float(np.max(np.abs(off))) <= 1e-13 * scale:
        return np.diag(C).copy(), np.eye(n)
    c, V = np.linalg.eigh(C)
    rows, cols = linear_sum_assignment(-np.abs(V))  # rows are coordinate axes, cols eigenvectors
    order = np.empty(n, dtype=np.intp)
    order[rows] = cols
    V = V[:, order]
    c = c[order]
    V = V * np.where(np.diag(V) < 0.0, -1.0, 1.0)[None, :]
    if np.linalg.det(V) < 0.0:
        w = int(np.argmin(np.abs(np.diag(V))))
        V[:, w] = -V[:, w]
    return c, V


# ---------------------------------------------------------------------------------------------
# The record
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class MassProperties:
    """Mass properties of a uniform solid, in the shape's local frame.

    Attributes:
        volume: n-volume.
        mass: total mass.
        centroid: (n,) float, centre of mass.
        covariance: (n, n) float, mass-weighted second moment about the centroid.
        inertia: (k, k) float, bivector inertia map about the centroid.
        principal_moments: (k,) float, per-plane principal moments ``c_i + c_j`` in pair order of the
            principal axes.
        principal_axes: (n, n) float rotation (det +1); column i is the principal direction i.
        principal_rotor: (2**(n-1),) float, the rotor of ``principal_axes`` (``R e_i ~R`` = column i).
        principal_covariance: (n,) float, eigenvalues c_i of the covariance.
    """

    volume: float
    mass: float
    centroid: Array
    covariance: Array
    inertia: Array
    principal_moments: Array
    principal_axes: Array
    principal_rotor: Array
    principal_covariance: Array

    @property
    def dim(self) -> int:
        """Dimension n."""
        return int(self.centroid.shape[0])

    @property
    def density(self) -> float:
        """Mass per unit volume."""
        return self.mass / self.volume

    @classmethod
    def from_moments(
        cls, volume: float, centroid: Any, covariance: Any, density: float = 1.0
    ) -> MassProperties:
        """Build the record from the volume, centroid and density-1 covariance of a solid.

        Args:
            volume: n-volume (> 0).
            centroid: (n,) float.
            covariance: (n, n) float, second moment about the centroid for density 1.
            density: mass per unit volume; covariance and inertia scale with it.
        """
        cen = np.asarray(centroid, dtype=np.float64)
        cov = np.asarray(covariance, dtype=np.float64) * density
        cov = 0.5 * (cov + cov.T)  # exact symmetry; the sums leave rounding-level asymmetry
        n = cen.shape[0]
        c, axes = principal_frame(cov)
        p = bivector_pairs(n)
        rotor = Algebra(n).matrix_to_rotor(axes)
        return cls(
            volume=float(volume),
            mass=float(volume * density),
            centroid=_readonly(cen),
            covariance=_readonly(cov),
            inertia=_readonly(inertia_from_covariance(cov)),
            principal_moments=_readonly(c[p[:, 0]] + c[p[:, 1]]),
            principal_axes=_readonly(axes),
            principal_rotor=_readonly(rotor),
            principal_covariance=_readonly(c),
        )

    def with_density(self, density: float) -> MassProperties:
        """The same solid at another density: mass, covariance and inertia scale, the frame stays."""
        f = density / self.density
        return MassProperties(
            volume=self.volume,
            mass=self.volume * density,
            centroid=self.centroid,
            covariance=_readonly(self.covariance * f),
            inertia=_readonly(self.inertia * f),
            principal_moments=_readonly(self.principal_moments * f),
            principal_axes=self.principal_axes,
            principal_rotor=self.principal_rotor,
            principal_covariance=_readonly(self.principal_covariance * f),
        )

    def inertia_about(self, point: Any) -> Array:
        """(k, k) float inertia map about ``point`` (n,) instead of the centroid (parallel-axis rule)."""
        q = as_float_array("point", point, (self.dim,))
        return shift_inertia(self.inertia, self.mass, self.centroid - q)


def resolve_density(volume: float, density: Any = None, mass: Any = None) -> float:
    """Density from exactly one of ``density`` or ``mass`` (default density 1.0), validated."""
    if density is not None and mass is not None:
        raise InputError(
            f"density, mass: give one of them, not both (got density={density!r}, mass={mass!r})"
        )
    if mass is not None:
        return positive_scalar("mass", mass) / volume
    return positive_scalar("density", 1.0 if density is None else density)


# ---------------------------------------------------------------------------------------------
# Integration over simplices and closed boundaries
# ---------------------------------------------------------------------------------------------


def simplex_moments(simplices: Any) -> tuple[Array, Array, Array]:
    """Signed moments of n-simplices about the origin.

    Args:
        simplices: (S, n+1, n) float, vertex coordinates of each simplex.
    Returns:
        ``(volume, first, second)``: (S,) signed volumes ``det[v_1 - v_0, ...] / n!``, (S, n) first
        moments ``int x dV`` and (S, n, n) second moments ``int x x^T dV`` (signed with the volume).
    """
    T = np.asarray(simplices, dtype=np.float64)
    if T.ndim != 3 or T.shape[1] != T.shape[2] + 1:
        raise InputError(f"simplices: expected shape (S, n+1, n), got {T.shape}")
    n = T.shape[2]
    v0 = T[:, 0, :]
    A = T[:, 1:, :] - v0[:, None, :]  # rows a_i = v_i - v_0
    det = np.linalg.det(A)
    vol = det / math.factorial(n)
    s = T.sum(axis=1)  # sum of all n+1 vertices
    first = vol[:, None] * s / (n + 1)
    # simplex-monomial formula: vol / ((n+1)(n+2)) (sum v v^T + (sum v)(sum v)^T)
    second = (vol / ((n + 1) * (n + 2)))[:, None, None] * (
        np.einsum("sai,saj->sij", T, T) + s[:, :, None] * s[:, None, :]
    )
    return vol, first, second


def boundary_moments(vertices: Any, cells: Any, reference: Any = None) -> tuple[float, Array, Array]:
    """Volume, centroid and density-1 covariance of the solid bounded by oriented (n-1)-simplices.

    Each cell is coned to ``reference`` and the signed cone moments are summed (module notes), all
    in one vectorised pass.

    Args:
        vertices: (V, n) float.
        cells: (C, n) int, outward-oriented boundary cells (positive volume when coned to an interior
            point).
        reference: (n,) float cone apex; default the mean of the vertices, which keeps the sums well
            conditioned. The result does not depend on it beyond rounding.
    Returns:
        ``(volume, centroid (n,), covariance (n, n))``.
    """
    V = np.asarray(vertices, dtype=np.float64)
    F = np.asarray(cells, dtype=np.intp)
    n = V.shape[1]
    ref = V.mean(axis=0) if reference is None else np.asarray(reference, dtype=np.float64)
    X = V[F] - ref  # (C, n, n): apex at the origin, rows are the cell's vertices
    det = np.linalg.det(X)
    volume = float(det.sum()) / math.factorial(n)
    s = X.sum(axis=1)  # (C, n): A 1
    first = (det @ s) / math.factorial(n + 1)
    # sum_c det_c (A A^T + (A 1)(A 1)^T) / (n+2)!; A A^T = X^T X with X's rows the vertices
    second = (np.einsum("c,cai,caj->ij", det, X, X) + np.einsum("c,ci,cj->ij", det, s, s)) / math.factorial(
        n + 2
    )
    if not volume > 0.0:
        raise InputError(
            f"cells: the boundary encloses volume {volume:.6g}; expected a positive volume "
            "(outward-oriented cells around a solid)"
        )
    d = first / volume
    cov = second - volume * np.outer(d, d)
    return volume, ref + d, cov


# ---------------------------------------------------------------------------------------------
# Rigid composition (Compound)
# ---------------------------------------------------------------------------------------------


def combine_mass_properties(parts: list[tuple[MassProperties, Array, Array]]) -> MassProperties:
    """Mass properties of rigidly joined parts, through the transform rules.

    Args:
        parts: list of ``(props, position (n,), rotation (n, n))``: each part's own record (in its
            frame, at its own density) and the pose that maps its frame into the common one
            (``x -> position + rotation @ x``).
    Returns:
        The combined record in the common frame. Overlapping parts count twice (their masses add).

    Each part's inertia is turned with :func:`rotate_inertia` and moved to the common centroid with
    :func:`shift_inertia`; the covariance follows the same two rules (``M C M^T`` and ``+ m d d^T``),
    and the principal frame is taken from the combined covariance.
    """
    masses = np.array([p.mass for p, _, _ in parts])
    volume = float(sum(p.volume for p, _, _ in parts))
    mass = float(masses.sum())
    M = np.stack([np.asarray(R, dtype=np.float64) for _, _, R in parts])
    pos = np.stack([np.asarray(t, dtype=np.float64) for _, t, _ in parts])
    cen_parts = pos + np.einsum("pij,pj->pi", M, np.stack([p.centroid for p, _, _ in parts]))
    centroid = masses @ cen_parts / mass
    d = cen_parts - centroid
    cov_parts = np.einsum("pij,pjk,plk->pil", M, np.stack([p.covariance for p, _, _ in parts]), M)
    cov = (cov_parts + masses[:, None, None] * d[:, :, None] * d[:, None, :]).sum(axis=0)
    inertia = shift_inertia(rotate_inertia(np.stack([p.inertia for p, _, _ in parts]), M), masses, d).sum(
        axis=0
    )
    rec = MassProperties.from_moments(volume, centroid, cov / (mass / volume), density=mass / volume)
    # from_moments derives the inertia from the covariance; keep the one built by the transform
    # rules (they agree to rounding, which the tests check) so Compound really uses them.
    return MassProperties(
        volume=rec.volume,
        mass=mass,
        centroid=rec.centroid,
        covariance=rec.covariance,
        inertia=_readonly(0.5 * (inertia + inertia.T)),
        principal_moments=rec.principal_moments,
        principal_axes=rec.principal_axes,
        principal_rotor=rec.principal_rotor,
        principal_covariance=rec.principal_covariance,
    )
