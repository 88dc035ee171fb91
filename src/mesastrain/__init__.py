"""mesastrain: strain and stress in patterned, lattice-mismatched crystalline film stacks.

A case file describes a substrate, its layers, their crystal orientation and an
etched pattern; a finite-element solve with each material's anisotropic
stiffness rotated from its crystal axes into the sample frame gives the 3-D
strain and stress fields. Results are linear-elastic estimates.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
