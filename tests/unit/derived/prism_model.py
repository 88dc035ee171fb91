"""A one-element-thick periodic prism: the model of the straight-line checks of the sheets.

Test support for ``test_misfit.py``: a tensor grid of bricks one element
thick along the line, whose two end faces share their displacement, solved
directly (SuperLU with the COLAMD ordering).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from skfem import MeshHex

from mesastrain.errors import MesastrainError, SolverError
from mesastrain.fem.assembly import assemble, rigid_body_modes
from mesastrain.fem.discretisation import discretise
from mesastrain.fem.fields import evaluate_at_points, recover
from mesastrain.fem.solve import choose_method, solve_condensed
from mesastrain.model.volterra import brick_bounds


def _direct_2d(K, f, fixed) -> np.ndarray:
    """Direct solve with u = 0 on ``fixed`` for a system with 2-D sparsity.

    SuperLU with the COLAMD ordering: on the prism systems (a 2-D grid of
    nodes) it fills about 5x less than the minimum-degree ordering of
    :func:`mesastrain.fem.solve.solve_condensed` and factors ~15x faster
    (13.7k unknowns: 0.5 s against 8.8 s, measured on the 2-core machine).
    """
    n = K.shape[0]
    free = np.ones(n, dtype=bool)
    free[fixed] = False
    idx = np.flatnonzero(free)
    A = K[idx][:, idx].tocsc()
    b = f[idx]
    u = np.zeros(n)
    if not np.any(b):
        return u
    try:
        x = spla.splu(A, permc_spec="COLAMD").solve(b)
    except RuntimeError as exc:
        raise SolverError("the prism model is not held: singular stiffness matrix") from exc
    res = np.linalg.norm(b - A @ x) / np.linalg.norm(b)
    if not (np.all(np.isfinite(x)) and res < 1e-8):
        raise SolverError(f"direct solve of the prism model failed (relative residual "
                          f"{res:.1e})")
    u[idx] = x
    return u


class PrismModel:
    """A tensor grid one element thick along ``axis``, periodic along it.

    The nodes of the two end faces share their displacement (all three
    components), so nothing varies along ``axis``: the generalized plane
    strain of a straight dislocation along that axis (zero axial strain, all
    three displacement components and the anti-plane shears allowed), which
    is the setting of the closed-form straight-line solutions. Used for the
    checks of the eigenstrain-sheet representation and for cross-sections of
    infinite arrays.

    Parameters
    ----------
    xs, ys, zs : array
        Grid coordinates, nm; the one along ``axis`` has exactly 2 entries.
    axis : int
        The periodic (line) axis, 0, 1 or 2.
    group : ndarray of int (nelems,), optional
        Material group of each element (default all 0). Element order is
        x fastest, then y, then z (:attr:`cell_index` maps grid cells).
    """

    def __init__(self, xs, ys, zs, axis: int, group=None):
        grids = [np.asarray(g, dtype=float) for g in (xs, ys, zs)]
        if len(grids[axis]) != 2:
            raise MesastrainError(f"the periodic axis {axis} must be one element thick "
                                  f"(2 grid coordinates), got {len(grids[axis])}")
        self.grids = grids
        self.axis = axis
        mesh = MeshHex.init_tensor(*grids)
        self.mesh = mesh
        mid = mesh.p[:, mesh.t].mean(axis=1)
        idx = [np.searchsorted(g, m) - 1 for g, m in zip(grids, mid)]
        # reorder elements x fastest, then y, then z
        shape = tuple(len(g) - 1 for g in grids)
        order = np.ravel_multi_index(idx[::-1], shape[::-1])
        perm = np.argsort(order)
        self.mesh = mesh = MeshHex(mesh.p, np.ascontiguousarray(mesh.t[:, perm]))
        self.shape = shape
        self.group = (np.zeros(mesh.t.shape[1], dtype=np.int32) if group is None
                      else np.asarray(group, dtype=np.int32))
        self.disc = discretise(mesh, 1)
        self.lo, self.hi = brick_bounds(mesh)
        self.centroids = 0.5 * (self.lo + self.hi)
        # periodic tie: every node maps to its partner on the first end face
        p = mesh.p
        first = np.isclose(p[axis], grids[axis][0], rtol=0, atol=1e-12 * np.ptp(p))
        other = [a for a in range(3) if a != axis]
        key = np.round(p[other].T / (1e-9 * np.ptp(p)), 0)
        _, inv = np.unique(key, axis=0, return_inverse=True)
        inv = inv.ravel()
        rep_of_key = np.full(inv.max() + 1, -1)
        rep_of_key[inv[first]] = np.arange(int(first.sum()))
        self.node_map = rep_of_key[inv]           # node -> reduced node
        self.reduced_nodes = np.flatnonzero(first)
        if np.any(self.node_map < 0):
            raise MesastrainError("periodic faces of the prism do not match")  # pragma: no cover

    @property
    def nelems(self) -> int:
        return int(self.mesh.t.shape[1])

    def cell_index(self, i, j, k) -> np.ndarray:
        """Element index of grid cell (i, j, k) (x, y, z cell indices)."""
        nx, ny, _ = self.shape
        return np.asarray(i) + nx * (np.asarray(j) + ny * np.asarray(k))

    def boundary_nodes(self, face: str) -> np.ndarray:
        """Reduced node indices on a face: ``"x-"``, ``"x+"``, ``"y-"``, ... ."""
        a = "xyz".index(face[0])
        g = self.grids[a]
        val = g[0] if face[1] == "-" else g[-1]
        p = self.mesh.p[:, self.reduced_nodes]
        return np.flatnonzero(np.abs(p[a] - val) <= 1e-9 * np.ptp(g))

    @property
    def node_points(self) -> np.ndarray:
        """Coordinates of the reduced nodes, (n, 3) nm."""
        return self.mesh.p[:, self.reduced_nodes].T

    def solve(self, stiffness, eigenstrain=None, cell_eigenstrain=None, fixed=(),
              method: str = "direct", tol: float = 1e-10):
        """Solve for the displacement.

        Parameters
        ----------
        stiffness : array (ngroups, 6, 6)
            Voigt stiffness per group, sample frame, GPa.
        eigenstrain : array (ngroups, 3, 3), optional
            Eigenstrain per group (default zero).
        cell_eigenstrain : array (nelems, 3, 3), optional
            Extra eigenstrain per element (e.g.
            :func:`mesastrain.model.volterra.lines_eigenstrain`).
        fixed : sequence of (nodes, components, values)
            Prescribed displacements: reduced node indices, a tuple of
            components (0, 1, 2) and values of shape (len(nodes), ncomp) or a
            scalar, nm.
        method : {"direct", "auto", "iterative"}
            Default direct: the prism has 2-D sparsity (:func:`_direct_2d`).
        tol : float
            Relative residual for the iterative solver.

        Returns
        -------
        u : ndarray (nnodes, 3)
            Displacement at every mesh node, nm.
        """
        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        K, f = assemble(self.disc, self.group, stiff, eig, cell_eigenstrain)
        nn = self.mesh.p.shape[1]
        nr = len(self.reduced_nodes)
        rows = np.arange(3 * nn)
        cols = (3 * self.node_map[:, None] + np.arange(3)).ravel()
        P = sp.csr_matrix((np.ones(3 * nn), (rows, cols)), shape=(3 * nn, 3 * nr))
        Kr = (P.T @ K @ P).tocsr()
        fr = P.T @ f
        g = np.zeros(3 * nr)
        fixed_dofs = []
        for nodes, comps, values in fixed:
            nodes = np.asarray(nodes, dtype=np.int64)
            vals = np.broadcast_to(np.asarray(values, dtype=float), (len(nodes), len(comps)))
            for c_i, c in enumerate(comps):
                g[3 * nodes + c] = vals[:, c_i]
                fixed_dofs.append(3 * nodes + c)
        fixed_dofs = (np.unique(np.concatenate(fixed_dofs)) if fixed_dofs
                      else np.zeros(0, dtype=np.int64))
        rhs = fr - Kr @ g
        if choose_method(method, 3 * nr - len(fixed_dofs)) == "direct":
            w = _direct_2d(Kr, rhs, fixed_dofs)
        else:
            modes = rigid_body_modes(self.mesh.p[:, self.reduced_nodes])
            w, _ = solve_condensed(Kr, rhs, fixed_dofs, modes, method=method, tol=tol)
        return (P @ (w + g)).reshape(-1, 3)

    def fields(self, u, stiffness, eigenstrain=None, cell_eigenstrain=None):
        """Recovered fields (:class:`mesastrain.fem.fields.Fields`) of a displacement.

        Arguments as for :meth:`solve`; ``u`` as it returns. Element averages
        of linear bricks are the values at the brick centres.
        """
        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        return recover(self.disc, np.asarray(u).ravel(), self.group, stiff, eig,
                       self.mesh.p.shape[1], self.mesh.t, cell_eigenstrain)

    def cell_stress(self, u, stiffness, eigenstrain=None, cell_eigenstrain=None) -> np.ndarray:
        """Element-average stress (= stress at the brick centre), MPa, (nelems, 3, 3)."""
        return self.fields(u, stiffness, eigenstrain, cell_eigenstrain).cell_stress

    def locate(self, points) -> np.ndarray:
        """Element containing each point (lower cell on a grid plane), (npts,).

        Raises
        ------
        MesastrainError
            A point outside the grid.
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        for a, g in enumerate(self.grids):
            tol = 1e-9 * (g[-1] - g[0])
            if np.any((pts[:, a] < g[0] - tol) | (pts[:, a] > g[-1] + tol)):
                raise MesastrainError(f"a point lies outside the prism along {'xyz'[a]} "
                                      f"([{g[0]:g}, {g[-1]:g}] nm)")
        ijk = []
        for a, g in enumerate(self.grids):
            i = np.searchsorted(g, pts[:, a], side="left") - 1
            ijk.append(np.clip(i, 0, len(g) - 2))
        return self.cell_index(*ijk)

    def stress_at(self, u, points, stiffness, eigenstrain=None, cell_eigenstrain=None):
        """Exact stress of the FE solution at points, MPa, (npts, 3, 3)."""
        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        _, sig, _ = evaluate_at_points(self.disc, np.asarray(u).ravel(), self.locate(pts), pts,
                                       self.group, stiff, eig, cell_eigenstrain)
        return sig
