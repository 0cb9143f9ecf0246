"""ndrigid.core: the dimension-generic rigid-body engine (no ECS, no renderer).

Public surface: the algebra (``Algebra``), shapes and mass properties, the ``Simulation`` facade
with its ``Settings``, the component kinds, contact events, scene queries, collision of two
posed shapes without a simulation (``overlap``, ``distance``, ``contact_manifold``,
``raycast_shape``) and slicing. Nothing
here imports esper or pygame.
"""

from pathlib import Path as _Path

from . import kernels
from .algebra import Algebra, bivector_pairs, second_compound, skew, unskew
from .collision.pairs import (
                              ContactPoints,
                              Separation,
                              ShapeRayHit,
                              contact_manifold,
                              distance,
                              overlap,
                              raycast_shape,
)
from .errors import InputError, InputTypeError, StepError
from .geometry.mass import MassProperties, inertia_from_covariance, rotate_inertia, shift_inertia
from .geometry.noff import read_noff, write_noff
from .geometry.polytopes import cell_24, cell_120, cell_600, hypercube, orthoplex, regular_simplex
from .geometry.shapes import Ball, Box, Compound, ConvexPolytope, HalfSpace, Shape, SimplexMesh
from .world.simulation import DYNAMIC, KINEMATIC, STATIC, Settings, Simulation, StepTimings
from .world.snapshot import load_world, save_world

SAMPLE_MESH = _Path(__file__).resolve().parent / "data" / "rock4.noff"
"""A 4-D sample mesh (nOFF): the boundary of a faceted rock, 40 vertices, 195 tetrahedra."""

__all__ = [
    "DYNAMIC",
    "KINEMATIC",
    "SAMPLE_MESH",
    "STATIC",
    "Algebra",
    "Ball",
    "Box",
    "Compound",
    "ContactPoints",
    "ConvexPolytope",
    "HalfSpace",
    "InputError",
    "kernels",
    "InputTypeError",
    "MassProperties",
    "Separation",
    "Settings",
    "Shape",
    "ShapeRayHit",
    "SimplexMesh",
    "Simulation",
    "StepError",
    "StepTimings",
    "bivector_pairs",
    "cell_120",
    "cell_24",
    "cell_600",
    "contact_manifold",
    "distance",
    "hypercube",
    "inertia_from_covariance",
    "load_world",
    "orthoplex",
    "overlap",
    "raycast_shape",
    "read_noff",
    "regular_simplex",
    "rotate_inertia",
    "save_world",
    "second_compound",
    "shift_inertia",
    "skew",
    "unskew",
    "write_noff",
]
