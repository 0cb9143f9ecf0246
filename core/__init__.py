"""ndrigid.core: the dimension-generic rigid-body engine (no ECS, no renderer).

Public surface: the algebra (``Algebra``), shapes and mass properties, the ``Simulation`` facade
with its ``Settings``, the component kinds, contact events, scene queries and slicing. Nothing
here imports esper or pygame.
"""

from . import kernels
from .algebra import Algebra, bivector_pairs, second_compound, skew, unskew
from .errors import InputError, InputTypeError
from .geometry.mass import MassProperties, inertia_from_covariance, rotate_inertia, shift_inertia
from .geometry.noff import read_noff, write_noff
from .geometry.polytopes import cell_24, cell_120, cell_600, hypercube, orthoplex, regular_simplex
from .geometry.shapes import Ball, Box, Compound, ConvexPolytope, HalfSpace, Shape, SimplexMesh
from .world.simulation import DYNAMIC, KINEMATIC, STATIC, Settings, Simulation, StepTimings

__all__ = [
    "DYNAMIC",
    "KINEMATIC",
    "STATIC",
    "Algebra",
    "Ball",
    "Box",
    "Compound",
    "ConvexPolytope",
    "HalfSpace",
    "InputError",
    "kernels",
    "InputTypeError",
    "MassProperties",
    "Settings",
    "Shape",
    "SimplexMesh",
    "Simulation",
    "StepTimings",
    "bivector_pairs",
    "cell_120",
    "cell_24",
    "cell_600",
    "hypercube",
    "inertia_from_covariance",
    "orthoplex",
    "read_noff",
    "regular_simplex",
    "rotate_inertia",
    "second_compound",
    "shift_inertia",
    "skew",
    "unskew",
    "write_noff",
]
