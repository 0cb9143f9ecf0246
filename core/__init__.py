"""ndrigid.core: the dimension-generic rigid-body engine (no ECS, no renderer).

Public surface: the algebra (``Algebra``), shapes and mass properties, the ``Simulation`` facade,
its component tables and systems, scene queries and slicing. Nothing here imports esper or pygame.
"""

from .algebra import Algebra, bivector_pairs, second_compound, skew, unskew
from .errors import InputError, InputTypeError

__all__ = [
    "Algebra",
    "InputError",
    "InputTypeError",
    "bivector_pairs",
    "second_compound",
    "skew",
    "unskew",
]

# Shapes, mass properties, regular polytopes and nOFF I/O (issue 3); appended after the list above.
from .mass import MassProperties, inertia_from_covariance, rotate_inertia, shift_inertia  # noqa: E402
from .noff import read_noff, write_noff  # noqa: E402
from .polytopes import cell_24, cell_120, cell_600, hypercube, orthoplex, regular_simplex  # noqa: E402
from .shapes import Ball, Box, Compound, ConvexPolytope, HalfSpace, Shape, SimplexMesh  # noqa: E402

__all__ += [
    "Ball",
    "Box",
    "Compound",
    "ConvexPolytope",
    "HalfSpace",
    "MassProperties",
    "Shape",
    "SimplexMesh",
    "cell_120",
    "cell_24",
    "cell_600",
    "hypercube",
    "inertia_from_covariance",
    "orthoplex",
    "read_noff",
    "regular_simplex",
    "rotate_inertia",
    "shift_inertia",
    "write_noff",
]
