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
