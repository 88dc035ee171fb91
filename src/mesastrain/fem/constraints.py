"""Boundary conditions: supports, periodic cells and the elimination of tied dofs.

A :class:`Boundary` says how a model is held, by position: which displacement
components are zero on which planes (:func:`support_dofs`), which faces are
tied, and which components are pinned at one node.

An infinite array of features with pitch p along an axis is modelled by one
cell with u(x + p) = u(x) on the opposite faces of the cell (no average
strain beyond the one the substrate imposes, which is zero relative to the
substrate lattice). The tie is exact elimination, never a penalty: every
scalar dof on the upper face is replaced by its partner on the lower face,
K_r = P^T K P and f_r = P^T f with P the 0/1 matrix that copies each
independent dof to the dofs tied to it (common practice in finite-element
homogenisation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from mesastrain.errors import MeshError


@dataclass(frozen=True)
class Boundary:
    """Boundary conditions of a model, by position.

    Attributes
    ----------
    supports : tuple of (component, axis, value)
        Hold displacement ``component`` (0 x, 1 y, 2 z) at every dof whose
        coordinate along ``axis`` equals ``value`` (nm).
    periodic : tuple of (axis, lo, hi)
        Tie the dofs on the face ``axis = hi`` to those on ``axis = lo``.
    pin : tuple of int
        Components held at one dof of the bottom to remove a remaining rigid
        translation (periodic cells, cross-sections).
    """

    supports: tuple
    periodic: tuple = ()
    pin: tuple = ()


def support_dofs(doflocs: np.ndarray, boundary: Boundary) -> np.ndarray:
    """Vector dofs held at zero by a :class:`Boundary`.

    A dof is on a support plane when its coordinate is within 1e-9 of the
    model size of the plane. ``boundary.pin`` components are held at the one
    bottom dof nearest the vertical axis (removes the rigid translations a
    periodic cell or a cross-section would otherwise have).
    """
    x = np.asarray(doflocs, dtype=float)
    tol = 1e-9 * (float(np.max(np.ptp(x, axis=1))) or 1.0)
    parts = []
    for comp, axis, value in boundary.supports:
        parts.append(np.flatnonzero(np.abs(x[axis] - value) <= tol) * 3 + comp)
    if boundary.pin:
        bottom = np.flatnonzero(np.abs(x[2] - x[2].min()) <= tol)
        k = bottom[np.argmin(x[0, bottom] ** 2 + x[1, bottom] ** 2)]
        parts.append(np.array([3 * k + c for c in boundary.pin]))
    return np.unique(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.int64)


@dataclass(frozen=True)
class Ties:
    """Scalar-dof ties of a periodic cell.

    Attributes
    ----------
    master : ndarray of int (nscalar,)
        For every scalar dof, the independent dof it equals (itself if free).
    independent : ndarray of int (nind,)
        The independent scalar dofs, increasing.
    """

    master: np.ndarray
    independent: np.ndarray

    @property
    def reduced_index(self) -> np.ndarray:
        """Position of each scalar dof's master in the reduced numbering."""
        pos = np.full(self.master.size, -1, dtype=np.int64)
        pos[self.independent] = np.arange(self.independent.size)
        return pos[self.master]

    def matrix(self) -> sp.csr_matrix:
        """P (3 nscalar, 3 nind): full vector dofs from reduced ones (node-major)."""
        n = self.master.size
        cols = (self.reduced_index[:, None] * 3 + np.arange(3)).ravel()
        rows = np.arange(3 * n)
        shape = (3 * n, 3 * self.independent.size)
        return sp.csr_matrix((np.ones(3 * n), (rows, cols)), shape=shape)


def tie_faces(doflocs: np.ndarray, axes) -> Ties:
    """Tie the dofs on opposite faces of a periodic cell.

    Parameters
    ----------
    doflocs : ndarray (3, nscalar)
        Coordinates of the scalar dofs, nm.
    axes : sequence of (axis, lo, hi)
        Periodic axes with the positions of the lower and upper faces.

    Returns
    -------
    Ties

    Raises
    ------
    MeshError
        A dof on an upper face has no partner on the lower face (the mesh is
        not periodic).
    """
    x = np.asarray(doflocs, dtype=float)
    n = x.shape[1]
    span = float(np.max(np.ptp(x, axis=1))) or 1.0
    tol = 1e-7 * span
    master = np.arange(n)
    for axis, lo, hi in axes:
        upper = np.flatnonzero(np.abs(x[axis] - hi) <= tol)
        lower = np.flatnonzero(np.abs(x[axis] - lo) <= tol)
        if upper.size == 0:
            continue
        other = [a for a in range(3) if a != axis]
        tree = cKDTree(x[other][:, lower].T)
        d, k = tree.query(x[other][:, upper].T)
        if upper.size and np.max(d) > 10 * tol:
            bad = upper[int(np.argmax(d))]
            raise MeshError(f"the mesh is not periodic along {'xyz'[axis]}: the node at "
                            f"{x[:, bad].round(6).tolist()} nm has no partner on the "
                            f"opposite face")
        master[upper] = lower[k]
    # resolve chains (edge and corner dofs tied along two axes)
    for _ in range(4):
        nxt = master[master]
        if np.array_equal(nxt, master):
            break
        master = nxt
    independent = np.flatnonzero(master == np.arange(n))
    return Ties(master=master, independent=independent)


def reduce_system(K: sp.spmatrix, f: np.ndarray, ties: Ties):
    """Eliminate tied dofs: K_r = P^T K P, f_r = P^T f.

    Returns
    -------
    Kr : csr_matrix, fr : ndarray, P : csr_matrix
    """
    P = ties.matrix()
    Kr = (P.T @ K @ P).tocsr()
    Kr.sum_duplicates()
    Kr.indices = Kr.indices.astype(np.int32)
    Kr.indptr = Kr.indptr.astype(np.int32)
    return Kr, P.T @ f, P


def reduce_dofs(fixed: np.ndarray, ties: Ties) -> np.ndarray:
    """Vector dofs held at zero, renumbered into the reduced system."""
    fixed = np.asarray(fixed, dtype=np.int64)
    node, comp = fixed // 3, fixed % 3
    return np.unique(ties.reduced_index[node] * 3 + comp)
