"""Scalar bases for every kind of mesh, as :class:`mesastrain.fem.assembly.Discretisation`.

* hexahedra (the structured stack): :func:`mesastrain.fem.assembly.discretise`
  (trilinear or 27-node triquadratic);
* tetrahedra (gmsh shapes, imported meshes, the Python API): P1 (4-node) or
  P2 (10-node) Lagrange elements on straight-sided tetrahedra;
* quadrilaterals of a cross-section (the stripe, generalized plane strain):
  :class:`SectionDiscretisation` in :mod:`mesastrain.mesh.section`.

Assembly, solve and field recovery work on any of them unchanged.
"""

from __future__ import annotations

import numpy as np

from mesastrain.fem.assembly import Discretisation, discretise
from mesastrain.errors import MeshError

#: Quadrature order per polynomial order on affine tetrahedra: exact for the
#: stiffness (products of gradients of degree order-1) and the constant-per-element load.
TET_INTORDER = {1: 1, 2: 2}


def discretise_tet(mesh, order: int) -> Discretisation:
    """P1 or P2 scalar basis on a tetrahedral scikit-fem mesh."""
    from skfem import Basis, ElementTetP1, ElementTetP2

    elem = {1: ElementTetP1, 2: ElementTetP2}[order]()
    basis = Basis(mesh, elem, intorder=TET_INTORDER[order])
    return Discretisation(basis=basis, order=order,
                          element_dofs=np.ascontiguousarray(basis.element_dofs),
                          ndofs=3 * basis.N, doflocs=np.asarray(basis.doflocs))


def discretise_mesh(model_mesh, order: int) -> Discretisation:
    """The discretisation of any mesh object of the pipeline.

    Parameters
    ----------
    model_mesh : StackMesh, UnstructuredMesh or SectionMesh
        Anything with a ``discretise(order)`` method is asked first; otherwise
        its scikit-fem mesh ``.mesh`` decides (hexahedra or tetrahedra).
    order : int
        1 or 2.
    """
    own = getattr(model_mesh, "discretise", None)
    if callable(own):
        return own(order)
    from skfem import MeshHex, MeshTet

    m = model_mesh.mesh
    if isinstance(m, MeshHex):
        return discretise(m, order)
    if isinstance(m, MeshTet):
        return discretise_tet(m, order)
    raise MeshError(f"no finite element for a {type(m).__name__}; use hexahedra or tetrahedra")
