"""Multigrid preconditioners for the condensed elasticity system.

Two ways to build the hierarchy of coarse spaces, one way to cycle through it:

geometric, for structured brick meshes (:func:`grid_hierarchy`)
    The stack mesh is a tensor-product grid of axis-aligned bricks with some
    cells removed (the etched region). Coarse grids keep a subset of the grid
    lines of each axis; the prolongation is trilinear interpolation (a tensor
    product of 1-D linear interpolation), so the coarse spaces are nested and
    contain every linear displacement field, the rigid-body modes included.
    Coarse operators are Galerkin products P^T A P. Lines that carry a
    material interface, a free surface or an etch boundary are never removed.
    Semi-coarsening: a line is removed only where the two grid intervals next
    to it are short (below a threshold chosen per level so that every level
    has at most about half the nodes of the one above). The short
    intervals of a cell are its strongly coupled directions, so thin, tall and
    flat cells are coarsened along their strong directions first, which keeps
    point Gauss-Seidel an effective smoother on anisotropic cells (semi-
    coarsening for anisotropic problems: Trottenberg, Oosterlee and Schueller,
    "Multigrid", Academic Press 2001, ch. 5; from memory). For 27-node
    elements the first coarse space is the trilinear space on the same mesh
    (p-coarsening).
algebraic, for any other mesh (:func:`algebraic_hierarchy`)
    pyamg smoothed aggregation with the rigid-body modes as near-nullspace
    (Vanek, Mandel and Brezina, Computing 56, 1996).

:class:`Hierarchy` holds the operators in single precision: the V-cycle is a
preconditioner, so its round-off (1e-7) does not limit the accuracy of the
double-precision conjugate gradients around it, and single precision halves
the memory traffic that bounds its speed.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

log = logging.getLogger(__name__)

#: Coarsen until a level has at most this many unknowns, then factorise it.
COARSEST_UNKNOWNS = 2500

#: Each geometric level aims at no more than this fraction of the nodes above it
#: (gentle semi-coarsening: 0.25 needs 3x the iterations on the graded stack meshes).
LEVEL_REDUCTION = 0.5


# --------------------------------------------------------------------------
# tensor grids of brick meshes
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class TensorGrid:
    """A tensor-product grid with some cells removed.

    Attributes
    ----------
    lines : tuple of 3 ndarray
        Grid coordinates along x, y, z (nm).
    keep : ndarray of bool (nx, ny, nz)
        Cells that belong to the body.
    node : ndarray of int (nx+1, ny+1, nz+1)
        Node (scalar dof) number of each grid point, -1 outside the body.
    feature : tuple of 3 ndarray of bool
        Lines that must survive coarsening (ends, material interfaces,
        boundaries of the removed region).
    """

    lines: tuple
    keep: np.ndarray
    node: np.ndarray
    feature: tuple

    @property
    def nnodes(self) -> int:
        return int((self.node >= 0).sum())


def grid_of(disc, group: np.ndarray) -> tuple[TensorGrid, np.ndarray] | None:
    """The tensor grid behind a brick discretisation, if there is one.

    Parameters
    ----------
    disc : mesastrain.fem.assembly.Discretisation
        Must carry ``bricks`` (axis-aligned bricks).
    group : ndarray of int (nelems,)
        Material group per element (interfaces between groups become
        feature lines).

    Returns
    -------
    (grid, vertex) or None
        ``grid.node`` numbers the grid points 0..nv-1 in the order of
        ``vertex``, the scalar dof of each grid point (the mesh vertices).
        None when the bricks do not form a tensor-product grid.
    """
    from mesastrain.fem.assembly import brick_cells

    got = brick_cells(disc)
    if got is None:
        return None
    lines, ilo, span = got
    shape = tuple(len(g) - 1 for g in lines)
    cell = np.full(shape, -1, dtype=np.int64)
    cell[ilo[0], ilo[1], ilo[2]] = np.asarray(group, dtype=np.int64)
    keep = cell >= 0
    if int(keep.sum()) != disc.nelems:
        return None                                       # two bricks in one cell
    # grid points that are vertices; their scalar dofs
    if disc.order == 1:
        verts = np.arange(disc.doflocs.shape[1])
    else:
        verts = np.unique(_vertex_dofs(disc))
    from mesastrain.fem.assembly import snap_to_lines

    x = disc.doflocs[:, verts]
    idx = [snap_to_lines(x[a], lines[a], span) for a in range(3)]
    if any(i is None for i in idx):
        return None
    node = np.full(tuple(s + 1 for s in shape), -1, dtype=np.int64)
    node[idx[0], idx[1], idx[2]] = np.arange(len(verts))
    feature = _feature_lines(cell)
    return TensorGrid(tuple(lines), keep, node, feature), verts


def _vertex_dofs(disc) -> np.ndarray:
    """Scalar dofs at element vertices (corners of the reference cube)."""
    from skfem import ElementHex2

    ref = np.asarray(ElementHex2().doflocs)
    corner = np.flatnonzero(np.all((ref == 0) | (ref == 1), axis=1))
    return disc.element_dofs[corner].ravel()


def _feature_lines(cell: np.ndarray) -> tuple:
    """Lines across which the group or the body changes, plus the ends."""
    out = []
    for a in range(3):
        c = np.moveaxis(cell, a, 0)
        f = np.zeros(c.shape[0] + 1, dtype=bool)
        f[0] = f[-1] = True
        f[1:-1] = np.any(c[1:] != c[:-1], axis=(1, 2))
        out.append(f)
    return tuple(out)


def _merge_candidates(d: np.ndarray, feature: np.ndarray, threshold: float) -> np.ndarray:
    """Lines kept on one axis when intervals are merged pairwise below ``threshold``."""
    n = len(d)
    keep = np.ones(n + 1, dtype=bool)
    i = 1
    while i < n:
        if not feature[i] and d[i - 1] + d[i] <= threshold and keep[i - 1]:
            keep[i] = False
            i += 2
        else:
            i += 1
    return keep


def choose_coarse_lines(grid: TensorGrid, reduction: float = LEVEL_REDUCTION) -> list:
    """Lines kept on each axis for the next coarser grid (semi-coarsening).

    The threshold on the merged length of two neighbouring intervals is the
    smallest one that brings the number of grid points to ``reduction`` of the
    current number (or as far as the feature lines allow).
    """
    d = [np.diff(g) for g in grid.lines]
    cand = np.unique(np.concatenate([dd[1:] + dd[:-1] for dd in d if len(dd) > 1] or [[0.0]]))
    full = np.prod([len(g) for g in grid.lines])

    def kept(th):
        return [_merge_candidates(d[a], grid.feature[a], th) for a in range(3)]

    def count(k):
        return np.prod([int(x.sum()) for x in k])

    lo, hi = 0, len(cand) - 1
    if count(kept(cand[hi] * (1 + 1e-12))) > reduction * full:
        return kept(cand[hi] * (1 + 1e-12))
    while lo < hi:
        mid = (lo + hi) // 2
        if count(kept(cand[mid] * (1 + 1e-12))) <= reduction * full:
            hi = mid
        else:
            lo = mid + 1
    return kept(cand[lo] * (1 + 1e-12))


def _interp_1d(n_fine: int, keep: np.ndarray, g: np.ndarray):
    """For each fine line: coarse neighbours (lo, hi) and weights (wlo, whi)."""
    cidx = np.cumsum(keep) - 1                             # coarse index of kept lines
    kept_pos = np.flatnonzero(keep)
    i = np.arange(n_fine)
    lo_line = kept_pos[np.searchsorted(kept_pos, i, side="right") - 1]
    hi_line = kept_pos[np.minimum(np.searchsorted(kept_pos, i, side="left"), len(kept_pos) - 1)]
    same = lo_line == hi_line
    span = np.where(same, 1.0, g[hi_line] - g[lo_line])
    whi = np.where(same, 0.0, (g[i] - g[lo_line]) / span)
    return cidx[lo_line], cidx[hi_line], 1.0 - whi, whi


def coarsen(grid: TensorGrid, keep_lines: list) -> tuple[TensorGrid, sp.csr_matrix, np.ndarray]:
    """Coarse grid and the scalar trilinear prolongation from it.

    Returns
    -------
    coarse : TensorGrid
    P : csr_matrix (fine nodes, coarse nodes)
    injection : ndarray of int
        Fine node at the position of each coarse node.
    """
    lines = tuple(g[k] for g, k in zip(grid.lines, keep_lines))
    keep = grid.keep
    for a in range(3):
        starts = np.flatnonzero(keep_lines[a])[:-1]
        keep = np.logical_or.reduceat(keep, starts, axis=a)
    # coarse grid points adjacent to a kept coarse cell
    shape = tuple(len(g) for g in lines)
    adj = np.zeros(shape, dtype=bool)
    for dx in (0, 1):
        for dy in (0, 1):
            for dz in (0, 1):
                adj[dx:dx + shape[0] - 1, dy:dy + shape[1] - 1, dz:dz + shape[2] - 1] |= keep
    node = np.full(shape, -1, dtype=np.int64)
    node[adj] = np.arange(int(adj.sum()))
    feature = tuple(f[k] for f, k in zip(grid.feature, keep_lines))
    coarse = TensorGrid(lines, keep, node, feature)
    # prolongation: tensor product of 1-D interpolation, for every fine node
    fi = np.nonzero(grid.node >= 0)
    fnode = grid.node[fi]
    maps = [_interp_1d(len(grid.lines[a]), keep_lines[a], grid.lines[a]) for a in range(3)]
    rows, cols, vals = [], [], []
    for sx in (0, 1):
        for sy in (0, 1):
            for sz in (0, 1):
                w = np.ones(len(fnode))
                ci = []
                for a, s in enumerate((sx, sy, sz)):
                    lo, hi, wlo, whi = maps[a]
                    ci.append((hi if s else lo)[fi[a]])
                    w = w * (whi if s else wlo)[fi[a]]
                m = w > 1e-14
                c = node[ci[0][m], ci[1][m], ci[2][m]]
                if np.any(c < 0):
                    raise AssertionError("coarse interpolation reaches outside the body")
                rows.append(fnode[m])
                cols.append(c)
                vals.append(w[m])
    P = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(len(fnode), coarse.nnodes))
    # injection: fine node at each coarse grid point
    pos = [np.flatnonzero(k) for k in keep_lines]
    ci = np.nonzero(node >= 0)
    inj = grid.node[pos[0][ci[0]], pos[1][ci[1]], pos[2][ci[2]]]
    order = np.argsort(node[ci])
    injection = inj[order]
    if np.any(injection < 0):
        raise AssertionError("a coarse grid point is not a fine node")
    return coarse, P, injection


def _vector(P: sp.csr_matrix) -> sp.csr_matrix:
    """Scalar prolongation -> node-major vector prolongation (3 components)."""
    Pc = P.tocoo()
    r = (3 * Pc.row[:, None] + np.arange(3)).ravel()
    c = (3 * Pc.col[:, None] + np.arange(3)).ravel()
    v = np.repeat(Pc.data, 3)
    return sp.csr_matrix((v, (r, c)), shape=(3 * P.shape[0], 3 * P.shape[1]))


def _quadratic_to_linear(disc, verts: np.ndarray) -> sp.csr_matrix:
    """Scalar prolongation from the trilinear space (on ``verts``) to the 27-node space."""
    from skfem import ElementHex1, ElementHex2

    e1, e2 = ElementHex1(), ElementHex2()
    ref2 = np.asarray(e2.doflocs).T                              # (3, 27)
    W = np.stack([e1.lbasis(ref2, a)[0] for a in range(8)])      # (8, 27): N1_a at Q2 dof b
    # the 8 vertex dofs of each element, in ElementHex1's local order
    ref1 = np.asarray(e1.doflocs)
    loc = [int(np.flatnonzero(np.all(np.isclose(ref2.T, r), axis=1))[0]) for r in ref1]
    ed = disc.element_dofs
    vpos = np.full(disc.doflocs.shape[1], -1, dtype=np.int64)
    vpos[verts] = np.arange(len(verts))
    vert_of_elem = vpos[ed[loc]]                                 # (8, nel)
    nloc = ed.shape[0]
    rows = np.broadcast_to(ed[None, :, :], (8, nloc, ed.shape[1]))
    cols = np.broadcast_to(vert_of_elem[:, None, :], (8, nloc, ed.shape[1]))
    vals = np.broadcast_to(W[:, :, None], (8, nloc, ed.shape[1]))
    m = np.abs(vals) > 1e-14
    rows, cols, vals = rows[m], cols[m], vals[m]
    # every Q2 dof gets the same row from each element around it: keep one copy
    key = rows * len(verts) + cols
    _, first = np.unique(key, return_index=True)
    return sp.csr_matrix((vals[first], (rows[first], cols[first])),
                         shape=(disc.doflocs.shape[1], len(verts)))


@dataclass(frozen=True)
class GridSpaces:
    """Nested coarse spaces of a structured brick discretisation.

    Attributes
    ----------
    prolongations : list of csr_matrix
        Vector prolongations in full dof numbering, finest first: P[0] maps
        level 1 to the discretisation's dofs, P[1] level 2 to level 1, ...
    injections : list of ndarray
        For each coarse level, the finer-level scalar dof at each coarse node
        (used to carry fixed dofs down).
    """

    prolongations: list
    injections: list


def grid_hierarchy(disc, group: np.ndarray, max_levels: int = 12,
                   coarsest: int = COARSEST_UNKNOWNS) -> GridSpaces | None:
    """Geometric coarse spaces of a brick discretisation, or None if not a tensor grid.

    Parameters
    ----------
    disc : mesastrain.fem.assembly.Discretisation
    group : ndarray of int (nelems,)
        Material group per element.
    max_levels : int
    coarsest : int
        Stop coarsening at this many vector unknowns.
    """
    got = grid_of(disc, group)
    if got is None:
        return None
    grid, verts = got
    Ps, injs = [], []
    if disc.order != 1:
        Ps.append(_vector(_quadratic_to_linear(disc, verts)).tocsr())
        injs.append(verts)
    elif not np.array_equal(verts, np.arange(len(verts))):
        return None
    n = 3 * grid.nnodes
    while n > coarsest and len(Ps) < max_levels:
        keep_lines = choose_coarse_lines(grid)
        if all(k.all() for k in keep_lines):
            break                                           # nothing left to merge
        grid, P, inj = coarsen(grid, keep_lines)
        Ps.append(_vector(P))
        injs.append(inj)
        n = 3 * grid.nnodes
    return GridSpaces(Ps, injs) if Ps else None


# --------------------------------------------------------------------------
# the hierarchy and its V-cycle
# --------------------------------------------------------------------------
def _csr(M, dtype) -> sp.csr_matrix:
    M = sp.csr_matrix(M)
    M.sum_duplicates()
    M.sort_indices()
    itype = np.int32 if max(M.nnz, M.shape[0], M.shape[1]) < 2**31 - 1 else np.int64
    return sp.csr_matrix((M.data.astype(dtype, copy=False), M.indices.astype(itype, copy=False),
                          M.indptr.astype(itype, copy=False)), shape=M.shape)


def split_triangles(M: sp.csr_matrix, dtype, keep: np.ndarray | None = None
                    ) -> tuple[sp.csr_matrix, sp.csr_matrix, np.ndarray]:
    """Lower and upper triangles (both with the diagonal) and the diagonal of M.

    Only the lower triangle is read; the upper one is its transpose, so the
    pair is exactly symmetric even when M carries round-off asymmetry (a
    Galerkin product), which keeps the V-cycle a symmetric preconditioner.

    Parameters
    ----------
    M : csr_matrix (n, n), symmetric, without duplicate entries (columns in any order)
    dtype : numpy dtype of the returned values
    keep : ndarray of bool (n,), optional
        Rows and columns to keep (the others are dropped and the kept ones
        renumbered in order): the triangles of M[keep][:, keep] without
        forming that submatrix.

    Returns
    -------
    LD, DU : csr_matrix (m, m)
        DU = LD^T.
    d : ndarray (m,)
    """
    M = sp.csr_matrix(M)
    n = M.shape[0]
    rows_kept = np.arange(n) if keep is None else np.flatnonzero(keep)
    m = rows_kept.size
    itype = np.int32 if max(M.nnz, n) < 2**31 - 1 else np.int64
    newidx = newrow = None
    if keep is not None:
        # dropped columns map to the largest index and dropped rows to -1, so that the
        # one test column <= row also removes them
        newidx = np.full(n, np.iinfo(itype).max, dtype=itype)
        newidx[rows_kept] = np.arange(m, dtype=itype)
        newrow = np.where(keep, newidx, -1).astype(itype)
    lo_cnt = np.zeros(n, dtype=np.int64)
    cols_parts, vals_parts = [], []
    per_row = max(1, M.nnz // max(n, 1))
    step = max(1, 8_000_000 // per_row)
    lengths = np.diff(M.indptr)
    if np.any(lengths[rows_kept] == 0):
        raise ValueError("an empty row (a dof that belongs to no element)")
    for r0 in range(0, n, step):                      # contiguous rows of M
        r1 = min(n, r0 + step)
        lens = lengths[r0:r1]
        a, b = M.indptr[r0], M.indptr[r1]
        if b == a:
            continue
        cols = M.indices[a:b]
        if newidx is None:
            low = cols <= np.repeat(np.arange(r0, r1, dtype=cols.dtype), lens)
        else:
            cols = newidx[cols]
            low = cols <= np.repeat(newrow[r0:r1], lens)
        nz = lens > 0
        seg = (M.indptr[r0:r1] - a)[nz]
        lo_cnt[r0:r1][nz] = np.add.reduceat(low, seg, dtype=np.int64)
        cols_parts.append(cols[low].astype(itype, copy=False))
        vals_parts.append(M.data[a:b][low].astype(dtype, copy=False))
    diag = M.diagonal()[rows_kept].astype(dtype)
    if np.any(diag <= 0):
        raise ValueError("a diagonal entry is not positive (an unheld or empty dof)")
    ptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(lo_cnt[rows_kept], out=ptr[1:])
    LD = sp.csr_matrix((np.concatenate(vals_parts), np.concatenate(cols_parts),
                        ptr.astype(itype)), shape=(m, m))
    del cols_parts, vals_parts
    DU = LD.T.tocsr()
    return LD, DU, diag


def _expand_rows(P: sp.csr_matrix, keep: np.ndarray) -> sp.csr_matrix:
    """P (m x k) with zero rows inserted where ``keep`` is False (n x k)."""
    n = keep.size
    cnt = np.zeros(n, dtype=np.int64)
    cnt[keep] = np.diff(P.indptr)
    ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(cnt, out=ptr[1:])
    return sp.csr_matrix((P.data, P.indices, ptr), shape=(n, P.shape[1]))


class Hierarchy:
    """Operators of a multigrid V-cycle (finest first) and the cycle itself.

    Smoothing is one forward Gauss-Seidel sweep before and one backward sweep
    after the coarse correction (a symmetric preconditioner). Each level keeps
    its operator split into lower and upper triangles (both with the
    diagonal, the upper one the transpose of the lower): starting from zero,
    the forward sweep only needs the lower triangle and leaves the residual
    -U x, and the backward sweep needs b - L x and the upper triangle. A level
    then costs two passes over its operator instead of three (sweep, residual,
    sweep). Coarse operators are formed from the lower triangle as
    M + M^T - P^T D P with M = P^T (L + D) P.

    Parameters
    ----------
    A : csr_matrix
        The finest operator (double precision; it is converted).
    prolongations : list of csr_matrix
        P_l (n_l x n_{l+1}) for l = 0 .. L-2, already restricted to free dofs.
    dtype : numpy dtype
        Precision of the cycle (float32 or float64).
    coarse_ops : list of csr_matrix, optional
        Precomputed coarse operators (levels 1..L-1); Galerkin products
        P^T A P are formed when absent.
    keep : ndarray of bool, optional
        When given, ``A`` is the full matrix and the finest level is
        A[keep][:, keep] (the free dofs), formed without copying A in double
        precision; ``prolongations[0]`` has one row per kept dof.
    sweeps : sequence of int
        Gauss-Seidel sweeps before (forward) and after (backward) the coarse
        correction on each level, finest first; levels beyond the sequence
        use one. Each extra sweep costs one more pass over the level.
    """

    def __init__(self, A, prolongations, dtype=np.float32, coarse_ops=None,
                 keep: np.ndarray | None = None, sweeps=(1,)):
        self.dtype = np.dtype(dtype)
        self.sweeps = tuple(int(k) for k in sweeps)
        Ps = [sp.csr_matrix(P) for P in prolongations]
        self.LD, self.DU, self.d = [], [], []
        self.P, self.R = [], []
        n0 = A.shape[0] if keep is None else int(np.count_nonzero(keep))
        self.nnz, self.sizes = [A.nnz], [n0]
        op, mask = A, keep
        for lev, P in enumerate(Ps):
            lower, upper, diag = split_triangles(op, self.dtype, mask)
            Pl = _csr(P, self.dtype)
            Rl = _csr(P.T, self.dtype)
            if coarse_ops is not None:
                Ac = sp.csr_matrix(coarse_ops[lev])
            else:
                # Galerkin product from the lower triangle: with M = P^T (L + D) P,
                # P^T A P = M + M^T - P^T D P (exactly symmetric; half the product work
                # of P^T A P and no single-precision copy of A)
                M = Rl @ (lower @ Pl)
                Ac = (M + M.T).tocsr()
                del M
                Ac -= Rl @ sp.csr_matrix(Pl.multiply(diag[:, None]))
            if lev == 0:
                self.nnz[0] = lower.nnz + upper.nnz - diag.size
            self.LD.append(lower)
            self.DU.append(upper)
            self.d.append(diag)
            self.P.append(Pl)
            self.R.append(Rl)
            self.nnz.append(Ac.nnz)
            self.sizes.append(Ac.shape[0])
            op, mask = Ac.astype(self.dtype, copy=False), None
        if mask is not None:
            op = op[mask][:, mask]
        # the coarsest level, symmetrised and in double precision, factorised once
        op = sp.csr_matrix(op, dtype=np.float64)
        op = 0.5 * (op + op.T)
        self.coarse_lu = spla.splu(op.tocsc(), permc_spec="MMD_AT_PLUS_A")

    @property
    def levels(self) -> int:
        return len(self.sizes)

    @property
    def operator_complexity(self) -> float:
        return float(sum(self.nnz)) / self.nnz[0]

    @property
    def nbytes(self) -> int:
        tot = 0
        for M in self.LD + self.DU + self.P + self.R:
            tot += M.data.nbytes + M.indices.nbytes + M.indptr.nbytes
        return tot

    def _cycle(self, lev: int, b: np.ndarray) -> np.ndarray:
        from pyamg import amg_core

        if lev == len(self.LD):
            return self.coarse_lu.solve(b.astype(np.float64)).astype(self.dtype)
        LD, DU, d = self.LD[lev], self.DU[lev], self.d[lev]
        n = d.size
        sweeps = self.sweeps[lev] if lev < len(self.sweeps) else 1
        x = np.zeros_like(b)
        gs = amg_core.gauss_seidel
        rhs = b
        gs(LD.indptr, LD.indices, LD.data, x, rhs, 0, n, 1)      # (L + D) x = b
        for _ in range(sweeps - 1):                              # (L + D) x' = b - U x
            rhs = b + d * x
            rhs -= DU @ x
            gs(LD.indptr, LD.indices, LD.data, x, rhs, 0, n, 1)
        r = b - rhs if sweeps > 1 else np.zeros_like(b)
        r += d * x
        r -= DU @ x                                              # b - A x = (b - rhs) - U x
        x += self.P[lev] @ self._cycle(lev + 1, self.R[lev] @ r)
        for _ in range(sweeps):                                  # (D + U) x' = b - L x
            rhs = b - LD @ x
            rhs += d * x
            gs(DU.indptr, DU.indices, DU.data, x, rhs, n - 1, -1, -1)
        return x

    def __call__(self, r: np.ndarray) -> np.ndarray:
        """Apply one V-cycle to a residual (returns float64)."""
        return self._cycle(0, r.astype(self.dtype)).astype(np.float64)


def restrict_spaces(spaces: GridSpaces, free0: np.ndarray) -> list:
    """Prolongations restricted to free dofs on every level.

    Parameters
    ----------
    spaces : GridSpaces
    free0 : ndarray of bool (ndofs,)
        Free dofs of the finest level.

    Returns
    -------
    list of csr_matrix
        P_l[free_l][:, free_{l+1}], finest first. A coarse dof is held when
        the finer dof at the same node (same component) is held.
    """
    out = []
    free = free0
    for P, inj in zip(spaces.prolongations, spaces.injections):
        free_c = free.reshape(-1, 3)[inj].ravel()
        out.append(P[free][:, free_c].tocsr())
        free = free_c
    return out


def algebraic_hierarchy(A: sp.csr_matrix, B: np.ndarray | None, dtype=np.float32
                        ) -> Hierarchy:
    """Smoothed-aggregation coarse spaces (pyamg) wrapped as a :class:`Hierarchy`.

    The prolongators come from pyamg (standard aggregation, symmetric strength,
    one Jacobi smoothing step with row-sum weighting); the cycle is the same as
    for the geometric hierarchy.
    """
    import pyamg

    A32 = sp.csr_matrix((A.data.astype(dtype), A.indices, A.indptr), shape=A.shape)
    ml = pyamg.smoothed_aggregation_solver(
        A32, B=None if B is None else np.ascontiguousarray(B, dtype=dtype),
        symmetry="hermitian", strength="symmetric",
        smooth=("jacobi", {"omega": 4.0 / 3.0, "degree": 1, "weighting": "local"}),
        improve_candidates=None, max_coarse=max(COARSEST_UNKNOWNS // 6, 100), max_levels=10,
        keep=False, presmoother=None, postsmoother=None, coarse_solver=None)
    Ps = [lvl.P for lvl in ml.levels[:-1]]
    ops = [lvl.A.astype(np.float64) for lvl in ml.levels[1:]]
    del ml, A32
    return Hierarchy(A, Ps, dtype=dtype, coarse_ops=ops)
