"""Stiffness matrix and eigenstrain load for anisotropic linear elasticity.

Weak form: find u with  int eps(v) : C : eps(u) dV = int eps(v) : C : eps0 dV
for all admissible v, where C (the crystal stiffness rotated into the sample
frame) and the eigenstrain eps0 are constant per region (material).

Two kernels form the element matrices, both vectorised over chunks of elements:

generic (any :class:`Discretisation`: hexahedra, tetrahedra, cross-sections)
    G[e, a, j, b, l] = sum_q w_q dN_a/dx_j dN_b/dx_l
    K[e, a, b, i, k] = sum_jl G[e, a, j, b, l] C_ijkl
    (one matrix product per region).
axis-aligned bricks (the structured stack mesh)
    the map from the reference cube is x = c + xi * h (h signed, per axis), so
    G[e, a, j, b, l] = |h1 h2 h3| / (h_j h_l) Q_jl[a, b] with the reference
    integrals Q_jl[a, b] = int dN_a/dxi_j dN_b/dxi_l dxi computed once; the
    element matrices are one BLAS product of Q with the per-element
    coefficients |det h| / (h_j h_l) C_ijkl, and no per-element basis data is
    ever stored (a full scikit-fem basis at 10^6 unknowns costs ~1 GB and
    ~15 s to build).

Both kernels give the same matrix to round-off (tests/unit/fem/test_assembly.py checks
them against each other and against scikit-fem's own bilinear form).

Sparse structure. The matrix is written straight into its final CSR arrays:
the symbolic structure (node-to-node pattern and, for every element and pair
of local nodes, the position of their 3x3 block in the CSR data) is computed
once per discretisation, without sorting the ~nel x nloc^2 pairs globally,
and kept in a :class:`SymbolicCache`; each assembly then only adds the element matrices into place
(``numpy.add.at``). Peak memory is the matrix itself plus one chunk of element
matrices, instead of the 3x(data + two index arrays) of a COO assembly.
Degrees of freedom are numbered node-major (3 n + component), which keeps the
three components of a node together for algebraic multigrid; indices are
int32 whenever they fit.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from mesastrain.fem.coarsening import GridSpaces, grid_hierarchy
from mesastrain.fem.discretisation import Bricks, Discretisation
from mesastrain.physics.crystal import voigt_to_full

log = logging.getLogger(__name__)

#: Elements processed per chunk in field recovery and other per-element passes
#: (bounds the temporary arrays).
CHUNK = 20000

#: Entries of element matrices formed per assembly chunk (bounds the temporaries:
#: ~8 bytes each for the values and for their CSR positions).
CHUNK_ENTRIES = 3_000_000

# --------------------------------------------------------------------------
# symbolic structure
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class SparsityPattern:
    """Sparsity of the vector stiffness matrix and where element blocks go.

    Attributes
    ----------
    indptr, indices : ndarray
        CSR structure of the vector matrix (ndofs x ndofs), node-major.
    block_base : ndarray (nelems, nloc, nloc)
        Position in the CSR data of the entry (row 3 p, column 3 q) for the
        local scalar dofs (a, b) of each element (p, q their global numbers).
    row_stride : ndarray (nscalar,)
        Entries in each vector row of scalar dof p (3 x its neighbour count):
        the entry (3 p + i, 3 q + k) sits at block_base + i row_stride[p] + k.
    """

    indptr: np.ndarray
    indices: np.ndarray
    block_base: np.ndarray
    row_stride: np.ndarray

    @property
    def nnz(self) -> int:
        return int(self.indptr[-1])

    @property
    def nbytes(self) -> int:
        return (self.indptr.nbytes + self.indices.nbytes + self.block_base.nbytes
                + self.row_stride.nbytes)


def _index_dtype(maxval: int):
    return np.int32 if maxval < np.iinfo(np.int32).max else np.int64


def build_pattern(element_dofs: np.ndarray, nscalar: int) -> SparsityPattern:
    """Symbolic assembly: CSR structure and element-to-CSR positions.

    For each scalar dof p the candidate neighbours are the dofs of the elements
    around p (at most valence x nloc of them); sorting these short rows gives
    p's sorted neighbour list and, by the inverse permutation, the rank of
    every element's dof q in it. Work and memory are linear in the number of
    elements; no global sort of the nel x nloc^2 pairs is needed.

    Parameters
    ----------
    element_dofs : ndarray (nloc, nelems)
    nscalar : int
        Number of scalar dofs.

    Returns
    -------
    SparsityPattern
    """
    ed = np.asarray(element_dofs)
    nloc, nel = ed.shape
    flat = ed.ravel()                                                # f = a * nel + e
    counts = np.bincount(flat, minlength=nscalar)
    if np.any(counts == 0):
        raise ValueError("some scalar dofs belong to no element")
    order = np.argsort(flat, kind="stable")
    start = np.zeros(nscalar + 1, dtype=np.int64)
    np.cumsum(counts, out=start[1:])
    valence = int(counts.max())
    ctype = np.int32 if nscalar < 2**31 - 1 else np.int64
    node_sorted = flat[order]
    slot = np.arange(flat.size) - start[node_sorted]
    inc_e = np.full((nscalar, valence), -1, dtype=np.int64)
    inc_a = np.zeros((nscalar, valence), dtype=np.int16)
    inc_e[node_sorted, slot] = order % nel
    inc_a[node_sorted, slot] = order // nel
    del order, node_sorted, flat, slot
    deg = np.empty(nscalar, dtype=np.int64)
    # rows in order of valence, in chunks of similar valence: each chunk is padded to its
    # own widest row, not the mesh's (on quadratic tetrahedra an edge dof has about a
    # fifth of a vertex's elements)
    by_valence = np.argsort(counts, kind="stable")
    pos_local = np.empty((nel, nloc, nloc), dtype=np.int32)          # rank within the row
    row_cols, row_ids = [], []
    sentinel = nscalar
    edc = ed.astype(ctype, copy=False)
    a = 0
    while a < nscalar:
        b = min(nscalar, a + max(1, CHUNK_ENTRIES // (int(counts[by_valence[a]]) * nloc)))
        b = min(b, a + max(1, CHUNK_ENTRIES // (int(counts[by_valence[b - 1]]) * nloc)))
        rows = by_valence[a:b]
        v = int(counts[rows].max())
        width = v * nloc
        e = inc_e[rows, :v]                                          # (m, v)
        valid = e >= 0
        e = np.where(valid, e, 0)
        cand = edc[:, e].transpose(1, 2, 0)                          # (m, v, nloc)
        cand = np.where(valid[:, :, None], cand, sentinel).reshape(b - a, width)
        perm = np.argsort(cand, axis=1)
        srt = np.take_along_axis(cand, perm, axis=1)
        new = np.empty(srt.shape, dtype=bool)
        new[:, 0] = True
        np.not_equal(srt[:, 1:], srt[:, :-1], out=new[:, 1:])
        new &= srt < sentinel
        rank_sorted = np.cumsum(new, axis=1, dtype=np.int32)
        rank_sorted -= 1
        rank = np.empty_like(rank_sorted)
        np.put_along_axis(rank, perm, rank_sorted, axis=1)
        deg[rows] = rank_sorted[:, -1] + 1
        row_cols.append(srt[new])
        row_ids.append(rows)
        rank = rank.reshape(b - a, v, nloc)
        vv = np.nonzero(valid)
        pos_local[e[vv], inc_a[rows][:, :v][vv]] = rank[vv]
        a = b
    # the neighbour lists back in dof order
    ptr = np.zeros(nscalar + 1, dtype=np.int64)
    np.cumsum(deg, out=ptr[1:])
    cols_s = np.empty(int(ptr[-1]), dtype=ctype)
    for rows, cols in zip(row_ids, row_cols):
        lens = deg[rows]
        local = np.cumsum(lens) - lens
        cols_s[np.repeat(ptr[rows] - local, lens) + np.arange(cols.size)] = cols
    row_cols = row_ids = None
    del inc_e, inc_a
    p_of = ed.T                                                      # (nel, nloc)
    pos_local *= 3
    return _finish_pattern(deg, cols_s, lambda ptr9: ptr9[p_of][:, :, None] + pos_local)


def _finish_pattern(deg: np.ndarray, cols_s: np.ndarray, base_of) -> SparsityPattern:
    """Vector CSR structure from the scalar neighbour lists.

    Parameters
    ----------
    deg : ndarray (nscalar,)
        Neighbours of each scalar dof (itself included).
    cols_s : ndarray
        The sorted neighbour lists, concatenated in dof order.
    base_of : callable(9 ptr_s) -> ndarray (nelems, nloc, nloc)
        Block positions 9 ptr_s[p] + 3 rank(q in row p) of every element pair,
        given 9 ptr_s in the index type.
    """
    nscalar = deg.size
    ptr_s = np.zeros(nscalar + 1, dtype=np.int64)
    np.cumsum(deg, out=ptr_s[1:])
    nnz = 9 * int(ptr_s[-1])
    itype = _index_dtype(max(nnz, 3 * nscalar))
    # block base: 9 ptr_s[p] + 3 rank  (row 3p starts at 9 ptr_s[p]; column block 3 rank)
    block_base = base_of((9 * ptr_s).astype(itype))
    if block_base.dtype != itype:
        block_base = block_base.astype(itype)
    row_stride = (3 * deg).astype(itype)
    # vector CSR structure: each scalar row p gives 3 rows with the same columns
    indptr = np.empty(3 * nscalar + 1, dtype=itype)
    indptr[0] = 0
    rowlen = np.repeat(3 * deg, 3)
    np.cumsum(rowlen, out=indptr[1:])
    indices = np.empty(nnz, dtype=itype)
    cols3 = cols_s.astype(itype, copy=False)
    node_chunk = max(1, CHUNK_ENTRIES // max(9 * int(deg.max()), 1))
    for p0 in range(0, nscalar, node_chunk):
        p1 = min(nscalar, p0 + node_chunk)
        d = deg[p0:p1].astype(itype)
        seg = (3 * cols3[ptr_s[p0]:ptr_s[p1]][:, None] + np.arange(3, dtype=itype)).ravel()
        seg_start = (3 * (ptr_s[p0:p1] - ptr_s[p0])).astype(itype)
        # each node's segment, three times (one per component row): output position j of
        # row r reads seg[j - out_start[r] + seg_start[r]]
        lens = np.repeat(3 * d, 3)
        out_start = np.cumsum(lens, dtype=itype) - lens
        total = int(out_start[-1] + lens[-1])
        src = np.arange(total, dtype=itype)
        src += np.repeat(np.repeat(seg_start, 3) - out_start, lens)
        out0 = 9 * int(ptr_s[p0])
        indices[out0:out0 + total] = seg[src]
    return SparsityPattern(indptr=indptr, indices=indices, block_base=block_base,
                   row_stride=row_stride)


class SymbolicCache:
    """What assembly and the geometric multigrid compute once per discretisation.

    An explicit cache owned by the caller (the pipeline keeps one per model):
    pass it to :func:`assemble` and :func:`assemble_matrix` to reuse the
    sparsity pattern across assemblies, and ask it for the coarse spaces that
    :func:`mesastrain.fem.solve.solve_condensed` takes as ``spaces``.

    Parameters
    ----------
    disc : Discretisation
        The discretisation every entry belongs to.
    """

    def __init__(self, disc: Discretisation):
        self.disc = disc
        self._pattern: SparsityPattern | None = None
        self._spaces: dict = {}

    @property
    def pattern(self) -> SparsityPattern:
        """The symbolic structure of the discretisation (built on first use)."""
        if self._pattern is None:
            self._pattern = build_pattern(self.disc.element_dofs, self.disc.ndofs // 3)
        return self._pattern

    def coarse_spaces(self, region: np.ndarray) -> GridSpaces | None:
        """Geometric coarse spaces (:func:`mesastrain.fem.coarsening.grid_hierarchy`).

        Built on first use for a region array and kept; None when the
        discretisation is not a tensor grid of bricks (algebraic multigrid
        is then used).
        """
        if self.disc.bricks is None:
            return None
        region = np.asarray(region)
        key = region.tobytes()
        if key not in self._spaces:
            self._spaces.clear()
            self._spaces[key] = grid_hierarchy(self.disc, region)
        return self._spaces[key]

    def deferred_spaces(self, region: np.ndarray):
        """A callable returning :meth:`coarse_spaces` of ``region``, or None off bricks.

        Solvers call it only when they iterate, so a direct solve never
        builds the coarse spaces.
        """
        if self.disc.bricks is None:
            return None
        return lambda: self.coarse_spaces(region)


def _pattern(disc: Discretisation, cache: SymbolicCache | None) -> SparsityPattern:
    if cache is None:
        return build_pattern(disc.element_dofs, disc.ndofs // 3)
    if cache.disc is not disc:
        raise ValueError("the symbolic cache belongs to another discretisation")
    return cache.pattern


# --------------------------------------------------------------------------
# numeric assembly
# --------------------------------------------------------------------------
def _stiffness_tensors(stiffness) -> tuple[np.ndarray, np.ndarray]:
    """Full tensors (g,3,3,3,3) and matrices Cm[g, (j,l), (i,k)] = C_ijkl."""
    C = voigt_to_full(np.asarray(stiffness, dtype=float).reshape(-1, 6, 6))
    return C, np.ascontiguousarray(C.transpose(0, 2, 4, 1, 3).reshape(-1, 9, 9))


def _brick_reference(b: Bricks) -> tuple[np.ndarray, np.ndarray]:
    """Reference integrals Q[(a,b), (j,l)] and r[a, j] = int dN_a/dxi_j."""
    R = b.ref_grad                                                   # (nloc,3,nqp)
    nloc = R.shape[0]
    Q = np.einsum("ajq,blq,q->abjl", R, R, b.qweights).reshape(nloc * nloc, 9)
    r = np.einsum("ajq,q->aj", R, b.qweights)
    return Q, r


def _brick_scale(h: np.ndarray) -> np.ndarray:
    """(n, 3, 3) |det| / (h_j h_l) of bricks with edge lengths h (n, 3): the factor that
    turns the reference integrals Q[(a,b), (j,l)] into the brick's."""
    det = np.abs(h[:, 0] * h[:, 1] * h[:, 2])
    return det[:, None, None] / (h[:, :, None] * h[:, None, :])


def _element_matrices(disc: Discretisation, sl: slice, reg: np.ndarray, Cm: np.ndarray,
                      Qref: np.ndarray | None) -> tuple[np.ndarray, bool]:
    """Element stiffness matrices of a chunk (GPa nm).

    Returns
    -------
    Ke : ndarray
        (nloc*nloc, n, 3, 3) for bricks (pairs of local nodes first: the
        natural output of one BLAS product), else (n, nloc, nloc, 3, 3).
    pairs_first : bool
    """
    nloc = disc.nloc
    if Qref is not None:
        h = disc.bricks.h[sl]                                        # (n,3)
        n = h.shape[0]
        coef = _brick_scale(h).reshape(n, 9, 1) * Cm[reg]            # (n, jl, ik)
        Ke = Qref @ coef.transpose(1, 0, 2).reshape(9, n * 9)        # (ab, n*ik)
        return Ke.reshape(nloc * nloc, n, 3, 3), True
    g = disc.gradients(sl)                                           # (n,q,a,3)
    w = disc.weights(sl)                                             # (n,q)
    n, nq = w.shape
    gw = (g * w[:, :, None, None]).reshape(n, nq, nloc * 3)
    G = np.matmul(gw.transpose(0, 2, 1), g.reshape(n, nq, nloc * 3))  # (n,(a,j),(b,l))
    G = G.reshape(n, nloc, 3, nloc, 3).transpose(0, 1, 3, 2, 4).reshape(n, nloc * nloc, 9)
    Ke = np.empty((n, nloc * nloc, 9))
    for r in np.unique(reg):
        m = reg == r
        Ke[m] = G[m] @ Cm[r]
    return Ke.reshape(n, nloc, nloc, 3, 3), False


def _blocks(flag: np.ndarray, region: np.ndarray, step: int):
    """Blocks of at most ``step`` elements whose region is flagged: slices when every
    region is (views of the element arrays), else index arrays."""
    if np.all(flag[np.unique(region)]):
        for start in range(0, region.size, step):
            yield slice(start, min(start + step, region.size))
        return
    active = np.flatnonzero(flag[region])
    for start in range(0, active.size, step):
        yield active[start:start + step]


def _chunk(disc: Discretisation) -> int:
    return max(1, CHUNK_ENTRIES // (9 * disc.nloc * disc.nloc))


def assemble_matrix(disc: Discretisation, region: np.ndarray, stiffness: np.ndarray,
                    cache: SymbolicCache | None = None) -> sp.csr_matrix:
    """Assemble the stiffness matrix only (see :func:`assemble`).

    With a ``cache`` the symbolic structure is computed on the first call for
    its discretisation and reused by later calls (e.g. a sweep over
    materials); without one it is computed each time.
    """
    pat = _pattern(disc, cache)
    region = np.asarray(region)
    _, Cm = _stiffness_tensors(stiffness)
    Qref = _brick_reference(disc.bricks)[0] if disc.bricks is not None else None
    data = np.zeros(pat.nnz)
    nel = disc.nelems
    step = _chunk(disc)
    k_of = np.arange(3)                                              # column component
    i_of = np.arange(3)[:, None]                                     # row component
    nloc = disc.nloc
    # each local node of a tensor-product grid is a different global node in every element:
    # then the entries of one local pair (a, b) never meet, and each pair is added with a
    # plain gather and scatter (several times faster than the unbuffered np.add.at)
    nn = disc.ndofs // 3
    distinct = Qref is not None and all(
        np.bincount(disc.element_dofs[a], minlength=nn).max() <= 1 for a in range(nloc))
    comp_i, comp_k = np.repeat(np.arange(3), 3), np.tile(np.arange(3), 3)
    for start in range(0, nel, step):
        sl = slice(start, min(start + step, nel))
        Ke, pairs_first = _element_matrices(disc, sl, region[sl], Cm, Qref)
        stride = pat.row_stride[disc.element_dofs[:, sl].T]          # (n, nloc)
        if pairs_first and distinct:                                 # (ab, n, i, k)
            base = pat.block_base[sl].reshape(-1, nloc * nloc)       # (n, ab)
            Kf = Ke.reshape(nloc * nloc, -1, 9)
            for ab in range(nloc * nloc):
                idx = (base[:, ab, None] + stride[:, ab // nloc, None] * comp_i + comp_k).ravel()
                x = np.take(data, idx)
                x += Kf[ab].ravel()
                data[idx] = x
            continue
        if pairs_first:                                              # (ab, n, i, k)
            base = pat.block_base[sl].reshape(-1, nloc * nloc).T
            st = np.repeat(stride.T, nloc, axis=0)
            pos = base[:, :, None, None] + st[:, :, None, None] * i_of + k_of
        else:                                                        # (n, a, b, i, k)
            pos = (pat.block_base[sl][:, :, :, None, None]
                   + stride[:, :, None, None, None] * i_of + k_of)
        np.add.at(data, pos.ravel(), Ke.ravel())
    K = sp.csr_matrix((data, pat.indices, pat.indptr), shape=(disc.ndofs, disc.ndofs))
    K.has_sorted_indices = True
    K.has_canonical_format = True
    log.info("assembled %d unknowns, %d nonzeros", K.shape[0], K.nnz)
    return K


def apply_stiffness(disc: Discretisation, region: np.ndarray, stiffness: np.ndarray,
                    u: np.ndarray) -> np.ndarray:
    """K u without assembling K (element by element, in chunks), GPa nm^2 for u in nm.

    The same element matrices as :func:`assemble_matrix`, applied to the element
    displacements and summed: no matrix of the whole mesh is held (the sensitivity
    right-hand sides of :mod:`mesastrain.run.sensitivity` need (dK/dt) u while the
    main solve's matrix and preconditioner are alive).

    Parameters
    ----------
    disc : Discretisation
    region : ndarray of int (nelems,)
    stiffness : ndarray (nregions, 6, 6)
        Voigt stiffness per region, sample frame, GPa.
    u : ndarray (ndofs,)
        Node-major displacement, nm.

    Returns
    -------
    ndarray (ndofs,)
    """
    region = np.asarray(region)
    _, Cm = _stiffness_tensors(stiffness)
    Qref = _brick_reference(disc.bricks)[0] if disc.bricks is not None else None
    U = np.asarray(u, dtype=float).reshape(-1, 3)
    out = np.zeros(disc.ndofs)
    nloc = disc.nloc
    step = _chunk(disc)
    # regions with a zero stiffness (a sensitivity's dC outside the varied material)
    # contribute nothing: only the elements of the others are visited
    held = np.any(np.asarray(stiffness).reshape(-1, 36) != 0, axis=1)
    if Qref is not None:
        # bricks: f_nai = sum_{b,k,jl} Q[a,b,jl] s_n[jl] C[jl,ik] u_nbk without forming the
        # element matrices: one product over b for every element, then one over (jl, k)
        # per region (a third of the memory traffic of the element matrices)
        Qb = Qref.reshape(nloc, nloc, 9).transpose(0, 2, 1).reshape(nloc * 9, nloc)
        Ck = Cm.reshape(-1, 9, 3, 3).transpose(0, 1, 3, 2).reshape(-1, 27, 3)  # (r, jl k, i)
    else:
        # Cm[(j, l), (i, k)] = C_ijkl, as (l k) -> (j i) for the stress at quadrature points
        Cs = Cm.reshape(-1, 3, 3, 3, 3).transpose(0, 2, 4, 1, 3).reshape(-1, 9, 9)
    for sl in _blocks(held, region, step):
        nodes = disc.element_dofs[:, sl].T.astype(np.int64)              # (n, nloc)
        ue = U[nodes]                                                    # (n, b, k)
        if Qref is not None:
            n = ue.shape[0]
            s = _brick_scale(disc.bricks.h[sl]).reshape(n, 1, 9, 1)
            Y = Qb @ ue.transpose(1, 0, 2).reshape(nloc, n * 3)          # (a jl, n k)
            Z = Y.reshape(nloc, 9, n, 3).transpose(2, 0, 1, 3) * s       # (n, a, jl, k)
            reg = region[sl]
            fe = np.empty((n, nloc, 3))
            for r in np.unique(reg):
                m = reg == r
                fe[m] = (Z[m].reshape(-1, 27) @ Ck[r]).reshape(-1, nloc, 3)
        else:
            # f_ai = sum_q w (dN_a/dx_j) C_ijkl (du_k/dx_l): the gradient and the stress at
            # the quadrature points, without the element matrices
            g = disc.gradients(sl)                                       # (n, q, a, j)
            w = disc.weights(sl)                                         # (n, q)
            n, nq = w.shape
            grad = np.matmul(g.transpose(0, 1, 3, 2), ue[:, None])      # (n, q, l, k)
            reg = np.repeat(region[sl], nq)
            grad = grad.reshape(n * nq, 9)
            sig = np.empty((n * nq, 9))                                  # (n q, j i)
            for r in np.unique(reg):
                m = reg == r
                sig[m] = grad[m] @ Cs[r]
            gw = (g * w[:, :, None, None]).transpose(0, 2, 1, 3).reshape(n, nloc, nq * 3)
            fe = np.matmul(gw, sig.reshape(n, nq * 3, 3))                # (n, a, i)
        vd = nodes[:, :, None] * 3 + np.arange(3)
        np.add.at(out, vd.ravel(), fe.ravel())
    return out


def assemble_load(disc: Discretisation, region: np.ndarray, stiffness: np.ndarray,
                  eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None
                  ) -> np.ndarray:
    """Assemble the eigenstrain load vector only (see :func:`assemble`), GPa nm^2."""
    region = np.asarray(region)
    C, _ = _stiffness_tensors(stiffness)
    sigma0 = np.einsum("gijkl,gkl->gij", C, np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
    rref = _brick_reference(disc.bricks)[1] if disc.bricks is not None else None
    f = np.zeros(disc.ndofs)
    # regions without an eigenstress load nothing (unless a per-cell eigenstrain is given)
    loaded = np.any(sigma0.reshape(len(sigma0), -1) != 0, axis=1) | (cell_eigenstrain is not None)
    for sl in _blocks(loaded, region, CHUNK):
        reg = region[sl]
        if rref is not None:
            h = disc.bricks.h[sl]
            det = np.abs(h[:, 0] * h[:, 1] * h[:, 2])
            gsum = rref[None] * (det[:, None] / h)[:, None, :]          # (n,a,j)
        else:
            w = disc.weights(sl)
            gsum = np.einsum("nq,nqaj->naj", w, disc.gradients(sl))
        s0 = sigma0[reg]
        if cell_eigenstrain is not None:
            s0 = s0 + np.einsum("nijkl,nkl->nij", C[reg], cell_eigenstrain[sl])
        fe = np.einsum("naj,nij->nai", gsum, s0)
        vd = disc.element_dofs[:, sl].T.astype(np.int64)[:, :, None] * 3 + np.arange(3)
        np.add.at(f, vd.ravel(), fe.ravel())
    return f


def assemble(disc: Discretisation, region: np.ndarray, stiffness: np.ndarray,
             eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None,
             cache: SymbolicCache | None = None) -> tuple[sp.csr_matrix, np.ndarray]:
    """Assemble the stiffness matrix and the eigenstrain load vector.

    Parameters
    ----------
    disc : Discretisation
    region : ndarray of int (nelems,)
        Region of each element (index into ``stiffness``).
    stiffness : ndarray (nregions, 6, 6)
        Voigt stiffness of each region in the sample frame, GPa.
    eigenstrain : ndarray (nregions, 3, 3)
        Stress-free strain of each region in the sample frame.
    cell_eigenstrain : ndarray (nelems, 3, 3), optional
        Extra stress-free strain per element (sample frame), added to the
        region's (e.g. a dislocation's eigenstrain slab).
    cache : SymbolicCache, optional
        Keeps the sparsity pattern for later assemblies on ``disc``.

    Returns
    -------
    K : scipy.sparse.csr_matrix (ndofs, ndofs)
        Stiffness matrix, GPa nm; int32 indices whenever they fit, sorted
        column indices, no duplicates. The geometric multigrid spaces of a
        brick mesh come from :meth:`SymbolicCache.coarse_spaces`.
    f : ndarray (ndofs,)
        Load vector of the eigenstrain, GPa nm^2.
    """
    K = assemble_matrix(disc, region, stiffness, cache)
    f = assemble_load(disc, region, stiffness, eigenstrain, cell_eigenstrain)
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
