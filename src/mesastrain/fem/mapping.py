"""Element maps for point queries: x = F(X) on given elements, vectorised.

scikit-fem's isoparametric mapping evaluates the Jacobian one entry at a time
(nine passes over the element's shape functions, each with a fancy-indexed
gather of the node coordinates and a hash of the arguments for its cache).
For point queries (probes, cuts, readouts) that costs about 100 basis calls
per Newton step. :class:`IsoMapping` evaluates the shape functions once per
call and contracts them with node coordinates gathered once, with the same
``F``, ``DF``, ``detDF`` and ``invDF`` signatures, so it can stand in for scikit-fem's
mapping wherever points are mapped. Affine (simplex) mappings are already
cheap and are returned unchanged by :func:`fast_mapping`.
"""

from __future__ import annotations

import numpy as np


def fast_mapping(mesh):
    """The mapping of a scikit-fem mesh for point queries.

    Parameters
    ----------
    mesh : scikit-fem mesh

    Returns
    -------
    IsoMapping or scikit-fem MappingAffine
    """
    return as_fast(mesh.mapping())


def as_fast(mapping):
    """``mapping`` itself when affine or already fast; else an :class:`IsoMapping`."""
    if isinstance(mapping, IsoMapping) or "Affine" in type(mapping).__name__:
        return mapping
    return IsoMapping(mapping)


class IsoMapping:
    """Isoparametric map x = sum_a N_a(X) x_a of a scikit-fem mesh (nm).

    Parameters
    ----------
    mapping : scikit-fem ``MappingIsoparametric``
        Gives the mesh (node coordinates ``doflocs``, ``element_dofs``) and the
        geometry element (``lbasis``).
    """

    def __init__(self, mapping):
        self.mesh = mapping.mesh
        self.elem = mapping.elem
        self.dim = self.mesh.p.shape[0]
        self._p = np.asarray(self.mesh.doflocs, dtype=float)
        self._t = self.mesh.dofs.element_dofs

    def nodes(self, tind) -> np.ndarray:
        """Node coordinates (dim, nloc, n) of elements ``tind``, nm."""
        return self._p[:, self._t[:, tind]]

    def basis(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Shape functions (nloc, ...) and their reference gradients (nloc, dim, ...) at X."""
        out = [self.elem.lbasis(X, a) for a in range(self._t.shape[0])]
        return np.stack([o[0] for o in out]), np.stack([o[1] for o in out])

    @staticmethod
    def _shape(X, n):
        X = np.asarray(X, dtype=float)
        if X.ndim == 2:                                  # the same points in every element
            X = np.broadcast_to(X[:, None, :], (X.shape[0], n, X.shape[1]))
        return X

    def F(self, X, tind=None) -> np.ndarray:
        """Physical coordinates (dim, n, nq) of reference points X (dim, n, nq) or (dim, nq)."""
        tind = np.arange(self._t.shape[1]) if tind is None else np.asarray(tind)
        X = self._shape(X, len(tind))
        phi, _ = self.basis(X)
        return np.einsum("dan,anq->dnq", self.nodes(tind), phi)

    def DF(self, X, tind=None) -> np.ndarray:
        """Jacobian dx_i/dX_j, (dim, dim, n, nq)."""
        tind = np.arange(self._t.shape[1]) if tind is None else np.asarray(tind)
        X = self._shape(X, len(tind))
        _, dphi = self.basis(X)
        return np.einsum("ian,ajnq->ijnq", self.nodes(tind), dphi)

    def detDF(self, X, tind=None) -> np.ndarray:
        """Jacobian determinant (n, nq) (volume or area per reference volume)."""
        J = self.DF(X, tind)
        return np.linalg.det(np.moveaxis(J, (0, 1), (-2, -1)))

    def invDF(self, X, tind=None) -> np.ndarray:
        """Inverse Jacobian dX_i/dx_j, (dim, dim, n, nq)."""
        J = self.DF(X, tind)
        return np.moveaxis(np.linalg.inv(np.moveaxis(J, (0, 1), (-2, -1))), (-2, -1), (0, 1))

    def newton_step(self, X, x, nodes) -> np.ndarray:
        """Newton correction dX (dim, n, nq) for F(X) = x on elements with ``nodes``."""
        phi, dphi = self.basis(X)
        r = x - np.einsum("dan,anq->dnq", nodes, phi)
        J = np.einsum("ian,ajnq->nqij", nodes, dphi)
        dX = np.linalg.solve(J, np.moveaxis(r, 0, -1)[..., None])[..., 0]
        return np.moveaxis(dX, -1, 0)
