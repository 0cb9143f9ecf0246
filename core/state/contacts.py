"""Contact arrays: what the narrowphase hands to the solver, one row per contact point.

Conventions (design.md): the normal points from body A to body B; ``depth`` is positive when the
shapes overlap and negative (minus the gap) for speculative contacts kept within the margin; the
``point`` lies midway between the two surfaces along the normal. ``feature`` identifies the
contact point within its pair (reference facet, clip planes, incident vertex ...) so that impulses
can be carried from one step to the next; ``key`` combines it with the pair's two body handles.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

Array = NDArray[np.float64]
IntArray = NDArray[np.int64]


class ManifoldPoints(NamedTuple):
    """Contact points of a batch of P pairs of one pair kind (M points in all).

    pair: (M,) int, index of the pair (0..P-1) in the batch the kernel was given.
    normal: (M, n) unit normals from A to B.
    point: (M, n) world contact points.
    depth: (M,) overlap (> 0) or minus the gap (< 0).
    feature: (M,) int64 feature id, unique within a pair and stable while the pair's contact
        features do not change.
    """

    pair: IntArray
    normal: Array
    point: Array
    depth: Array
    feature: IntArray

    @staticmethod
    def empty(n: int) -> ManifoldPoints:
        return ManifoldPoints(np.zeros(0, np.int64), np.zeros((0, n)), np.zeros((0, n)), np.zeros(0),
                              np.zeros(0, np.int64))

    @staticmethod
    def concat(parts: Sequence[ManifoldPoints], offsets: Sequence[int], n: int) -> ManifoldPoints:
        """Concatenate batches, adding ``offsets[i]`` to the pair index of batch i."""
        # drop empty batches together with their offsets, so each offset stays with its batch
        kept = [(p, o) for p, o in zip(parts, offsets, strict=True) if len(p.pair)]
        parts = [p for p, _ in kept]
        if not parts:
            return ManifoldPoints.empty(n)
        return ManifoldPoints(
            np.concatenate([p.pair + o for p, o in kept]),
            np.concatenate([p.normal for p in parts]),
            np.concatenate([p.point for p in parts]),
            np.concatenate([p.depth for p in parts]),
            np.concatenate([p.feature for p in parts]),
        )


@dataclass
class ContactSet:
    """All contact points of one step (M rows), sorted by pair.

    body_a, body_b: (M,) body rows (A's row < B's row is not assumed).
    normal, point, depth, feature: as in :class:`ManifoldPoints`.
    manifold: (M,) index of the contact's pair in this step's list of touching pairs.
    key: (M,) int64 persistent key of the point: hash of (handle A, handle B, feature).
    friction, restitution: (M,) combined material coefficients.
    normal_impulse: (M,) normal impulse of each point in the step's solve, N s (None until the
        solver ran; the impulse pushes B along ``normal`` and A against it).
    tangent_impulse: (M, n) friction impulse on B of each point (world vector, -that on A), N s.
    """

    body_a: IntArray
    body_b: IntArray
    normal: Array
    point: Array
    depth: Array
    feature: IntArray
    manifold: IntArray
    key: IntArray
    friction: Array
    restitution: Array
    normal_impulse: Array | None = None
    tangent_impulse: Array | None = None

    @property
    def count(self) -> int:
        return int(self.body_a.shape[0])

    @staticmethod
    def empty(n: int) -> ContactSet:
        z = np.zeros(0, np.int64)
        return ContactSet(z, z.copy(), np.zeros((0, n)), np.zeros((0, n)), np.zeros(0), z.copy(), z.copy(),
                          z.copy(), np.zeros(0), np.zeros(0))


def contact_keys(handle_a: IntArray, handle_b: IntArray, feature: IntArray) -> IntArray:
    """Persistent int64 keys of contact points from the two handles and the feature id.

    A 64-bit mix (splitmix-style multiply-xorshift) of the three values; collisions are possible
    in principle but have probability ~M^2 / 2^64 per step, and cost at worst one poor warm start.
    """
    with np.errstate(over="ignore"):
        x = handle_a.astype(np.uint64) * np.uint64(0x9E3779B97F4A7C15)
        x ^= (handle_b.astype(np.uint64) + np.uint64(0x632BE59BD9B4E019)
              + (x << np.uint64(6)) + (x >> np.uint64(2)))
        x ^= feature.astype(np.uint64) * np.uint64(0xBF58476D1CE4E5B9)
        x ^= x >> np.uint64(31)
        x *= np.uint64(0x94D049BB133111EB)
        x ^= x >> np.uint64(29)
    return x.view(np.int64)


def combine_friction(fa: Array, fb: Array) -> Array:
    """Friction of a contact: geometric mean of the two materials' coefficients (common practice)."""
    return np.sqrt(fa * fb)


def combine_restitution(ra: Array, rb: Array) -> Array:
    """Restitution of a contact: the larger of the two coefficients (common practice)."""
    return np.maximum(ra, rb)
