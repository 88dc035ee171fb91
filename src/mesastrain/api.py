"""The public Python API: ``from mesastrain import api``.

A thin facade over :mod:`mesastrain.run.api`, kept at the package root so that
user scripts do not depend on the internal layout. It sits above every layer
(like :mod:`mesastrain.cli`) and adds nothing of its own.
"""

from mesastrain.run.api import Region, Solution, isotropic_stiffness, read_mesh, solve

__all__ = ["Region", "Solution", "solve", "isotropic_stiffness", "read_mesh"]
