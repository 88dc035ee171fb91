"""Stiffness matrix and eigenstrain load for anisotropic linear elasticity.

Weak form: find u with  int eps(v) : C : eps(u) dV = int eps(v) : C : eps0 dV
for all admissible v, where C (the crystal stiffness rotated into the sample
frame) and the eigenstrain eps0 are constant per material group.

scikit-fem supplies the mesh, the element and the quadrature; the element
matrices are formed here by a vectorised kernel over all elements at once:

    G[e, a, j, b, l] = sum_q w_q dN_a/dx_j dN_b/dx_l
    K[e, a, i, b, k] = sum_jl C_ijkl G[e, a, j, b, l]

The second line is one matrix product per material group. Degrees of freedom
are numbered node-major (3 n + component), which keeps the three components of
a node together for algebraic multigrid.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .crystal import voigt_to_full

log = logging.getLogger(__name__)

#: Quadrature orders exact for the stiffness of undistorted bricks.
INTORDER = {1: 3, 2: 5}

#: Elements processed per chunk (bounds the temporary arrays).
CHUNK = 20000


@dataclass(frozen=True)
class Discretisation:
    """Scalar shape-function data shared by assembly and field recovery.

    Attributes
    ----------
    basis : skfem.CellBasis
        Scalar basis (one component); the vector field uses 3 dofs per scalar dof.
    order : int
        1 (trilinear, 8 nodes) or 2 (triquadratic, 27 nodes).
    element_dofs : ndarray (nloc, nelems)
        Scalar dof numbers of each element.
    ndofs : int
        Number of vector unknowns (3 x scalar dofs).
    doflocs : ndarray (3, nscalar)
        Coordinates of the scalar dofs (nm).
    """

    basis: object
    order: int
    element_dofs: np.ndarray
    ndofs: int
    doflocs: np.ndarray

    @property
    def nloc(self) -> int:
        return self.element_dofs.shape[0]

    def gradients(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Shape-function gradients dN_a/dx_j at the quadrature points.

        Returns
        -------
        ndarray (nel, nqp, nloc, 3)
        """
        g = np.stack([self.basis.basis[a][0].grad[:, elements, :] for a in range(self.nloc)])
        return g.transpose(2, 3, 0, 1)  # (nloc,3,nel,nqp) -> (nel,nqp,nloc,3)

    def weights(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Quadrature weights times the Jacobian, (nel, nqp), in nm^3."""
        return self.basis.dx[elements]


def discretise(mesh, order: int) -> Discretisation:
    """Build the scalar basis of the given order on a hexahedral mesh."""
    from skfem import Basis, ElementHex1, ElementHex2

    elem = {1: ElementHex1, 2: ElementHex2}[order]()
    basis = Basis(mesh, elem, intorder=INTORDER[order])
    return Discretisation(basis=basis, order=order,
                          element_dofs=np.ascontiguousarray(basis.element_dofs),
                          ndofs=3 * basis.N, doflocs=basis.doflocs)


def _vector_dofs(element_dofs: np.ndarray) -> np.ndarray:
    """(nloc, nel) scalar dofs -> (nel, 3 nloc) vector dofs, order (a, i)."""
    d = element_dofs.T.astype(np.int64)[:, :, None] * 3 + np.arange(3)
    return d.reshape(d.shape[0], -1)


def assemble(disc: Discretisation, group: np.ndarray, stiffness: np.ndarray,
             eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None
             ) -> tuple[sp.csr_matrix, np.ndarray]:
    """Assemble the stiffness matrix and the eigenstrain load vector.

    Parameters
    ----------
    disc : Discretisation
    group : ndarray of int (nelems,)
        Material group of each element (index into ``stiffness``).
    stiffness : ndarray (ngroups, 6, 6)
        Voigt stiffness of each group in the sample frame, GPa.
    eigenstrain : ndarray (ngroups, 3, 3)
        Stress-free strain of each group in the sample frame.
    cell_eigenstrain : ndarray (nelems, 3, 3), optional
        Extra stress-free strain per element (sample frame), added to the
        group's (e.g. a dislocation's eigenstrain slab).

    Returns
    -------
    K : scipy.sparse.csr_matrix (ndofs, ndofs)
        Stiffness matrix, GPa nm (int32 indices).
    f : ndarray (ndofs,)
        Load vector of the eigenstrain, GPa nm^2.
    """
    nel = disc.element_dofs.shape[1]
    nloc = disc.nloc
    nd = 3 * nloc
    C = voigt_to_full(np.asarray(stiffness, dtype=float))          # (g,3,3,3,3)
    # matrix form C[(j,l),(i,k)] for K[e,a,b,i,k] = G[e,a,b,(j,l)] @ Cm
    Cm = C.transpose(0, 2, 4, 1, 3).reshape(-1, 9, 9)
    sigma0 = np.einsum("gijkl,gkl->gij", C, np.asarray(eigenstrain, dtype=float))
    vdofs = _vector_dofs(disc.element_dofs)                         # (nel, nd)
    f = np.zeros(disc.ndofs)
    data = np.empty((nel, nd, nd))
    for start in range(0, nel, CHUNK):
        sl = slice(start, min(start + CHUNK, nel))
        g = disc.gradients(sl)                                      # (n,q,a,3)
        w = disc.weights(sl)                                        # (n,q)
        gw = g * w[:, :, None, None]
        # G[e,(a,j),(b,l)]
        n = g.shape[0]
        G = np.matmul(gw.reshape(n, -1, nloc * 3).transpose(0, 2, 1),
                      g.reshape(n, -1, nloc * 3))
        G = G.reshape(n, nloc, 3, nloc, 3).transpose(0, 1, 3, 2, 4).reshape(n, nloc * nloc, 9)
        grp = group[sl]
        Ke = np.empty((n, nloc * nloc, 9))
        for gi in np.unique(grp):
            m = grp == gi
            Ke[m] = G[m] @ Cm[gi]
        # (n, a, b, i, k) -> (n, a, i, b, k)
        data[sl] = Ke.reshape(n, nloc, nloc, 3, 3).transpose(0, 1, 3, 2, 4).reshape(n, nd, nd)
        # load: f[a,i] = sum_q w dN_a/dx_j sigma0_ij
        gsum = gw.sum(axis=1)                                       # (n,a,3)
        s0 = sigma0[grp]
        if cell_eigenstrain is not None:
            s0 = s0 + np.einsum("nijkl,nkl->nij", C[grp], cell_eigenstrain[sl])
        fe = np.einsum("naj,nij->nai", gsum, s0).reshape(n, nd)
        np.add.at(f, vdofs[sl].ravel(), fe.ravel())
    rows = np.repeat(vdofs, nd, axis=1).ravel()
    cols = np.tile(vdofs, (1, nd)).ravel()
    K = sp.coo_matrix((data.ravel(), (rows, cols)), shape=(disc.ndofs, disc.ndofs)).tocsr()
    del data, rows, cols
    K.sum_duplicates()
    K.indices = K.indices.astype(np.int32)
    K.indptr = K.indptr.astype(np.int32)
    log.info("assembled %d unknowns, %d nonzeros", K.shape[0], K.nnz)
    return K, f


def rigid_body_modes(doflocs: np.ndarray) -> np.ndarray:
    """The six rigid-body displacement modes at the dofs, (ndofs, 6).

    Columns: translations x, y, z and rotations about x, y, z (about the
    centroid, scaled to the model size), node-major dof order.
    """
    x = doflocs - doflocs.mean(axis=1, keepdims=True)
    scale = np.max(np.abs(x)) or 1.0
    x = x / scale
    n = x.shape[1]
    B = np.zeros((n, 3, 6))
    B[:, 0, 0] = B[:, 1, 1] = B[:, 2, 2] = 1.0
    # rotation about x: (0, -z, y); about y: (z, 0, -x); about z: (-y, x, 0)
    B[:, 1, 3], B[:, 2, 3] = -x[2], x[1]
    B[:, 0, 4], B[:, 2, 4] = x[2], -x[0]
    B[:, 0, 5], B[:, 1, 5] = -x[1], x[0]
    return B.reshape(3 * n, 6)
