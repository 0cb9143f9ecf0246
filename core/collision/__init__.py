"""Collision layer: broadphase (candidate pairs) and narrowphase (contact manifolds).

``broadphase.find_pairs`` and ``narrowphase.find_contacts`` are the two collision stages of a
step; ``sat`` (box/box), ``gjk`` (convex polytopes) and ``clip`` (manifold clipping and point
selection) are the pair kernels behind the narrowphase. Depends on the state layer.
"""
