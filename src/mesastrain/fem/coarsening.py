"""Geometric coarse spaces of structured brick discretisations.

The stack mesh is a tensor-product grid of axis-aligned bricks with some
cells removed (the etched region). Coarse grids keep a subset of the grid
lines of each axis; the prolongation is trilinear interpolation (a tensor
product of 1-D linear interpolation), so the coarse spaces are nested and
contain every linear displacement field, the rigid-body modes included.
Lines that carry a material interface, a free surface or an etch boundary
are never removed. Semi-coarsening: a line is removed only where the two
grid intervals next to it are short (below a threshold chosen per level so
that every level has at most about half the nodes of the one above). The
short intervals of a cell are its strongly coupled directions, so thin, tall
and flat cells are coarsened along their strong directions first, which
keeps point Gauss-Seidel an effective smoother on anisotropic cells (semi-
coarsening for anisotropic problems: Trottenberg, Oosterlee and Schueller,
"Multigrid", Academic Press 2001, ch. 5; from memory). For 27-node elements
the first coarse space is the trilinear space on the same mesh
(p-coarsening). The V-cycle that uses these spaces is
:class:`mesastrain.fem.multigrid.Hierarchy`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from mesastrain.fem.discretisation import brick_cells, snap_to_lines

#: Coarsen until a level has at most this many unknowns, then factorise it.
COARSEST_UNKNOWNS = 2500

#: Each geometric level aims at no more than this fraction of the nodes above it
#: (gentle semi-coarsening: 0.25 needs 3x the iterations on the graded stack meshes).
LEVEL_REDUCTION = 0.5


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


def grid_of(disc, region: np.ndarray) -> tuple[TensorGrid, np.ndarray] | None:
    """The tensor grid behind a brick discretisation, if there is one.

    Parameters
    ----------
    disc : mesastrain.fem.discretisation.Discretisation
        Must carry ``bricks`` (axis-aligned bricks).
    region : ndarray of int (nelems,)
        Region (material) index per element (interfaces between regions
        become feature lines).

    Returns
    -------
    (grid, vertex) or None
        ``grid.node`` numbers the grid points 0..nv-1 in the order of
        ``vertex``, the scalar dof of each grid point (the mesh vertices).
        None when the bricks do not form a tensor-product grid.
    """
    got = brick_cells(disc)
    if got is None:
        return None
    lines, ilo, span = got
    shape = tuple(len(g) - 1 for g in lines)
    cell = np.full(shape, -1, dtype=np.int64)
    cell[ilo[0], ilo[1], ilo[2]] = np.asarray(region, dtype=np.int64)
    keep = cell >= 0
    if int(keep.sum()) != disc.nelems:
        return None                                       # two bricks in one cell
    # grid points that are vertices; their scalar dofs
    if disc.order == 1:
        verts = np.arange(disc.doflocs.shape[1])
    else:
        verts = np.unique(_vertex_dofs(disc))
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
    """Lines across which the region or the body changes, plus the ends."""
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


def grid_hierarchy(disc, region: np.ndarray, max_levels: int = 12,
                   coarsest: int = COARSEST_UNKNOWNS) -> GridSpaces | None:
    """Geometric coarse spaces of a brick discretisation, or None if not a tensor grid.

    Parameters
    ----------
    disc : mesastrain.fem.discretisation.Discretisation
    region : ndarray of int (nelems,)
        Region (material) index per element.
    max_levels : int
    coarsest : int
        Stop coarsening at this many vector unknowns.
    """
    got = grid_of(disc, region)
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

