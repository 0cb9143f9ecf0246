"""Geometry layer: shapes and their mass properties, regular polytopes, nOFF files, slicing.

Depends only on ``ndrigid.core.algebra`` and ``ndrigid.core.errors``.
"""
