"""p-multigrid for quadratic tetrahedra: smooth on P2, algebraic multigrid on P1.

Smoothed aggregation applied to the P2 matrix directly needs 60-130 conjugate-
gradient iterations and grows with the mesh (SOLVER-NOTES.md, pitfall 6): its
aggregates do not see that a P2 function is a piecewise-linear one plus local
bubbles along the edges. The p-multigrid of Ronquist and Patera (Int. J. Numer.
Meth. Eng. 24, 1987) and Helenbrook, Mavriplis and Atkins (AIAA J. 41, 2003)
uses that: the coarse space of the P2 space is the P1 space on the same
tetrahedra, which it contains exactly (a linear function on a tetrahedron is
a quadratic one). The prolongation E is the natural embedding:

* a vertex dof of P2 takes the P1 value at that vertex;
* an edge-midpoint dof takes the mean of its two end vertices;

and the restriction is E^T, so the P1 operator E^T K E is the P1 stiffness
matrix (Galerkin). The P2 level is smoothed with symmetric Gauss-Seidel; the
P1 level is handed to smoothed aggregation with the rigid-body modes as
near-nullspace (Vanek, Mandel and Brezina, Computing 56, 1996), whose
iteration counts stay nearly constant on linear elements. One V-cycle through
all levels is the preconditioner of conjugate gradients.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp


@dataclass(frozen=True)
class LinearSpace:
    """The P1 coarse space of a P2 tetrahedral discretisation.

    Attributes
    ----------
    embedding : csr_matrix (nscalar2, nvertices)
        Scalar P2 <- P1 prolongation (vertex dofs 1, edge dofs 1/2 and 1/2).
    vertices : ndarray of int (nvertices,)
        The P2 scalar dof at each vertex (its P1 dof).
    """

    embedding: sp.csr_matrix
    vertices: np.ndarray

    def vector_prolongation(self, free2: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray]:
        """Prolongation between the free vector dofs of both spaces.

        Parameters
        ----------
        free2 : ndarray of bool (3 nscalar2,)
            Free dofs of the P2 space (node-major: 3 per scalar dof).

        Returns
        -------
        E : csr_matrix (n_free2, n_free1)
        free1 : ndarray of bool (3 nvertices,)
            Free P1 dofs: a vertex component is free when the P2 dof at that
            vertex is (a support plane holds both ends of any edge on it).
        """
        E = self.embedding.tocoo()
        rows = (3 * E.row[:, None] + np.arange(3)).ravel()
        cols = (3 * E.col[:, None] + np.arange(3)).ravel()
        vals = np.repeat(E.data, 3)
        free1 = free2.reshape(-1, 3)[self.vertices].ravel()
        new2 = np.cumsum(free2) - 1
        new1 = np.cumsum(free1) - 1
        keep = free2[rows] & free1[cols]
        Ev = sp.csr_matrix((vals[keep], (new2[rows[keep]], new1[cols[keep]])),
                           shape=(int(free2.sum()), int(free1.sum())))
        return Ev, free1


def linear_space(disc) -> LinearSpace | None:
    """The P1 space inside a P2 tetrahedral discretisation, or None for other ones.

    Relies on scikit-fem's numbering of P2 dofs on tetrahedra (vertex dofs
    first, numbered as the vertices, then one dof per edge numbered
    nvertices + edge index); this is checked against the dof locations.
    """
    basis = getattr(disc, "basis", None)
    mesh = getattr(basis, "mesh", None)
    if disc.order != 2 or mesh is None or getattr(disc, "bricks", None) is not None:
        return None
    if mesh.t.shape[0] != 4 or mesh.p.shape[0] != 3 or disc.nloc != 10:
        return None
    nv = mesh.p.shape[1]
    edges = mesh.edges
    nscalar = disc.doflocs.shape[1]
    if nscalar != nv + edges.shape[1]:
        return None
    mid = 0.5 * (mesh.p[:, edges[0]] + mesh.p[:, edges[1]])
    scale = float(np.max(np.abs(mesh.p))) or 1.0
    if (np.max(np.abs(disc.doflocs[:, :nv] - mesh.p)) > 1e-9 * scale
            or np.max(np.abs(disc.doflocs[:, nv:] - mid)) > 1e-9 * scale):
        return None
    ne = edges.shape[1]
    rows = np.concatenate([np.arange(nv), nv + np.arange(ne), nv + np.arange(ne)])
    cols = np.concatenate([np.arange(nv), edges[0], edges[1]])
    vals = np.concatenate([np.ones(nv), np.full(2 * ne, 0.5)])
    E = sp.csr_matrix((vals, (rows, cols)), shape=(nscalar, nv))
    return LinearSpace(E, np.arange(nv))


def galerkin(A: sp.csr_matrix, E: sp.csr_matrix) -> sp.csr_matrix:
    """E^T A E in double precision, exactly symmetric, int32 indices."""
    Ac = (E.T.tocsr() @ (A @ E)).tocsr()
    Ac = 0.5 * (Ac + Ac.T)
    Ac = sp.csr_matrix(Ac)
    Ac.sum_duplicates()
    Ac.sort_indices()
    Ac.eliminate_zeros()
    return sp.csr_matrix((Ac.data, Ac.indices.astype(np.int32), Ac.indptr.astype(np.int32)),
                         shape=Ac.shape)
