"""Stiffness matrix and eigenstrain load for anisotropic linear elasticity.

Weak form: find u with  int eps(v) : C : eps(u) dV = int eps(v) : C : eps0 dV
for all admissible v, where C (the crystal stiffness rotated into the sample
frame) and the eigenstrain eps0 are constant per material group.

Two kernels form the element matrices, both vectorised over chunks of elements:

generic (any :class:`Discretisation`: hexahedra, tetrahedra, cross-sections)
    G[e, a, j, b, l] = sum_q w_q dN_a/dx_j dN_b/dx_l
    K[e, a, b, i, k] = sum_jl G[e, a, j, b, l] C_ijkl
    (one matrix product per material group).
axis-aligned bricks (the structured stack mesh)
    the map from the reference cube is x = c + xi * h (h signed, per axis), so
    G[e, a, j, b, l] = |h1 h2 h3| / (h_j h_l) Q_jl[a, b] with the reference
    integrals Q_jl[a, b] = int dN_a/dxi_j dN_b/dxi_l dxi computed once; the
    element matrices are one BLAS product of Q with the per-element
    coefficients |det h| / (h_j h_l) C_ijkl, and no per-element basis data is
    ever stored (a full scikit-fem basis at 10^6 unknowns costs ~1 GB and
    ~15 s to build).

Both kernels give the same matrix to round-off (tests/test_assembly.py checks
them against each other and against scikit-fem's own bilinear form).

Sparse structure. The matrix is written straight into its final CSR arrays:
the symbolic structure (node-to-node pattern and, for every element and pair
of local nodes, the position of their 3x3 block in the CSR data) is computed
once per discretisation, without sorting the ~nel x nloc^2 pairs globally,
and cached; each assembly then only adds the element matrices into place
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

from mesastrain.physics.crystal import voigt_to_full

log = logging.getLogger(__name__)

#: Quadrature orders exact for the stiffness of undistorted bricks.
INTORDER = {1: 3, 2: 5}

#: Elements processed per chunk in field recovery and other per-element passes
#: (bounds the temporary arrays).
CHUNK = 20000

#: Entries of element matrices formed per assembly chunk (bounds the temporaries:
#: ~8 bytes each for the values and for their CSR positions).
CHUNK_ENTRIES = 3_000_000

#: Relative tolerance of the axis-aligned-brick test on vertex coordinates.
BRICK_RTOL = 1e-10


@dataclass(frozen=True)
class Bricks:
    """Geometry of a mesh whose every element is an axis-aligned brick.

    The reference cube [0, 1]^3 maps to element e by x_m = corner[e, m] +
    xi_j h[e, m] with m = axis[j] (h may be negative along an axis when the
    element's local numbering runs against it). ``ref_grad`` is already
    written in sample axes: ref_grad[a, m] = dN_a/dxi_j.

    Attributes
    ----------
    corner : ndarray (nelems, 3)
        Image of the reference origin, nm.
    h : ndarray (nelems, 3)
        Signed edge lengths, nm.
    points : ndarray (3, nqp)
        Reference quadrature points.
    qweights : ndarray (nqp,)
        Reference quadrature weights (sum 1).
    ref_grad : ndarray (nloc, 3, nqp)
        Reference gradients at the quadrature points, indexed by sample axis.
    """

    corner: np.ndarray
    h: np.ndarray
    points: np.ndarray
    qweights: np.ndarray
    ref_grad: np.ndarray

    @property
    def det(self) -> np.ndarray:
        """|h1 h2 h3| per element, nm^3 (the element volume)."""
        return np.abs(np.prod(self.h, axis=1))


class _DeferredBasis:
    """Stand-in for a scikit-fem ``CellBasis`` that is built only when needed.

    ``mesh``, ``elem``, ``intorder`` and ``N`` are available at once; any other
    attribute builds the full basis (all gradients at all quadrature points)
    on first use and forwards to it. The brick kernels never need it.
    """

    def __init__(self, mesh, elem, intorder: int, dofs, nscalar: int):
        self.mesh = mesh
        self.elem = elem
        self.intorder = intorder
        self.N = nscalar
        self._dofs = dofs
        self._basis = None

    def _build(self):
        if self._basis is None:
            from skfem import Basis

            log.info("building the full scikit-fem basis (%d elements)", self.mesh.t.shape[1])
            self._basis = Basis(self.mesh, self.elem, intorder=self.intorder, dofs=self._dofs)
        return self._basis

    def __getattr__(self, name):
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(self._build(), name)


@dataclass(frozen=True)
class Discretisation:
    """Scalar shape-function data shared by assembly and field recovery.

    Attributes
    ----------
    basis : skfem.CellBasis
        Scalar basis (one component); the vector field uses 3 dofs per scalar
        dof. For brick meshes a deferred stand-in that builds the scikit-fem
        basis only if an attribute other than ``mesh``/``elem`` is used.
    order : int
        1 (trilinear, 8 nodes) or 2 (triquadratic, 27 nodes); for other
        element families the polynomial order.
    element_dofs : ndarray (nloc, nelems)
        Scalar dof numbers of each element.
    ndofs : int
        Number of vector unknowns (3 x scalar dofs).
    doflocs : ndarray (3, nscalar)
        Coordinates of the scalar dofs (nm).
    bricks : Bricks or None
        Set when every element is an axis-aligned brick: enables the
        closed-form kernels. None for any other mesh.
    """

    basis: object
    order: int
    element_dofs: np.ndarray
    ndofs: int
    doflocs: np.ndarray
    bricks: Bricks | None = None

    @property
    def nloc(self) -> int:
        return self.element_dofs.shape[0]

    @property
    def nelems(self) -> int:
        return self.element_dofs.shape[1]

    def gradients(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Shape-function gradients dN_a/dx_j at the quadrature points, 1/nm.

        Returns
        -------
        ndarray (nel, nqp, nloc, 3)
        """
        b = self.bricks
        if b is not None:
            inv_h = 1.0 / b.h[elements]                                  # (n,3)
            return b.ref_grad.transpose(2, 0, 1)[None] * inv_h[:, None, None, :]
        g = np.stack([self.basis.basis[a][0].grad[:, elements, :] for a in range(self.nloc)])
        return g.transpose(2, 3, 0, 1)  # (nloc,3,nel,nqp) -> (nel,nqp,nloc,3)

    def weights(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Quadrature weights times the Jacobian, (nel, nqp), in nm^3."""
        b = self.bricks
        if b is not None:
            det = np.abs(np.prod(b.h[elements], axis=1))
            return det[:, None] * b.qweights[None, :]
        return self.basis.dx[elements]

    def mean_gradients(self, elements: np.ndarray | slice = slice(None)
                       ) -> tuple[np.ndarray, np.ndarray]:
        """Element-averaged shape-function gradients and element volumes.

        Returns
        -------
        gbar : ndarray (nel, nloc, 3)
            (1/V) int dN_a/dx_j dV, 1/nm.
        volume : ndarray (nel,)
            nm^3.

        Notes
        -----
        Closed form on bricks; for a discretisation whose elements are signed
        mirror images of a ``parent``'s (attributes ``parent``, ``elem_map``,
        ``signs``, as :class:`mesastrain.mesh.unfold.MirroredDiscretisation`) the
        parent's values with the mirrored components negated; otherwise the
        quadrature of :meth:`gradients` with :meth:`weights`.
        """
        b = self.bricks
        if b is not None:
            ref = np.einsum("ajq,q->aj", b.ref_grad, b.qweights)          # (nloc,3)
            return ref[None] / b.h[elements][:, None, :], b.det[elements]
        parent = getattr(self, "parent", None)
        elem_map = getattr(self, "elem_map", None)
        signs = getattr(self, "signs", None)
        if parent is not None and elem_map is not None and signs is not None:
            # elements that are mirror images of a parent's (mesastrain.mesh.unfold): the
            # gradients are the parent's with the mirrored components negated
            e = np.arange(elem_map.size)[elements]
            g, v = parent.mean_gradients(elem_map[e])
            return g * signs[e][:, None, :], v
        g = self.gradients(elements)
        w = self.weights(elements)
        v = w.sum(axis=1)
        return np.einsum("nq,nqaj->naj", w, g) / v[:, None, None], v


# --------------------------------------------------------------------------
# discretisation of hexahedral meshes
# --------------------------------------------------------------------------
def brick_geometry(mesh) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Corner, signed edge lengths and axis map if every hexahedron is an axis-aligned brick.

    The map from scikit-fem's reference cube is x = corner + J xi with J the
    same signed permutation-times-diagonal matrix pattern for all elements:
    reference axis j runs along sample axis ``axis[j]`` with signed length
    ``h[e, axis[j]]``.

    Parameters
    ----------
    mesh : skfem.MeshHex

    Returns
    -------
    (corner (nelems, 3), h (nelems, 3), axis (3,)) with lengths in nm, or None
    when some element is not such a brick.
    """
    from skfem import ElementHex1

    ref = ElementHex1().doflocs                                          # (8, 3) in {0,1}
    origin = int(np.flatnonzero((ref == 0).all(axis=1))[0])
    unit = [int(np.flatnonzero((ref == np.eye(3)[j]).all(axis=1))[0]) for j in range(3)]
    p, t = mesh.p, mesh.t
    if p.shape[0] != 3 or t.shape[0] != 8 or t.shape[1] == 0:
        return None
    scale = float(np.max(np.ptp(p, axis=1))) or 1.0
    tol = BRICK_RTOL * scale
    corner = p[:, t[origin]].T                                           # (nel, 3)
    J = np.stack([p[:, t[unit[j]]].T - corner for j in range(3)], axis=2)  # (nel, m, j)
    axis = np.argmax(np.abs(J[0]), axis=0)                               # (3,) from element 0
    if sorted(axis.tolist()) != [0, 1, 2]:
        return None
    h = np.empty((t.shape[1], 3))
    for j in range(3):
        h[:, axis[j]] = J[:, axis[j], j]
        off = np.delete(J[:, :, j], axis[j], axis=1)
        if np.any(np.abs(off) > tol):
            return None
    if np.any(np.abs(h) <= tol):
        return None
    for a in range(ref.shape[0]):
        xi = np.zeros(3)
        xi[axis] = ref[a]
        if np.max(np.abs(p[:, t[a]].T - (corner + xi * h))) > tol:
            return None
    return corner, h, axis


#: Relative tolerance when snapping brick corners to grid lines.
GRID_RTOL = 1e-9


def snap_to_lines(x: np.ndarray, lines: np.ndarray, span: float) -> np.ndarray | None:
    """Index of the grid line at each coordinate, or None if one is off every line."""
    i = np.clip(np.searchsorted(lines, x), 0, len(lines) - 1)
    j = np.clip(i - 1, 0, len(lines) - 1)
    best = np.where(np.abs(lines[j] - x) < np.abs(lines[i] - x), j, i)
    if np.max(np.abs(lines[best] - x), initial=0.0) > 1e3 * GRID_RTOL * span:
        return None
    return best


def brick_cells(disc) -> tuple[list, list, float] | None:
    """The tensor-product grid behind a brick discretisation, if there is one.

    Returns
    -------
    (lines, cell, span) or None
        ``lines`` the grid coordinates per axis, ``cell[a][e]`` the grid
        interval of element e along axis a, ``span`` the model size (nm).
        None when the elements are not the cells of one tensor grid.
    """
    b = disc.bricks
    if b is None:
        return None
    lo = np.minimum(b.corner, b.corner + b.h)
    hi = np.maximum(b.corner, b.corner + b.h)
    span = float(np.max(hi.max(axis=0) - lo.min(axis=0))) or 1.0
    lines, cells = [], []
    for a in range(3):
        v = np.sort(np.concatenate([lo[:, a], hi[:, a]]))
        g = v[np.concatenate([[True], np.diff(v) > GRID_RTOL * span])]
        i0 = snap_to_lines(lo[:, a], g, span)
        i1 = snap_to_lines(hi[:, a], g, span)
        if i0 is None or i1 is None or np.any(i1 != i0 + 1):
            return None
        lines.append(g)
        cells.append(i0)
    return lines, cells, span


def discretise(mesh, order: int) -> Discretisation:
    """Build the scalar basis of the given order on a hexahedral mesh.

    When every element is an axis-aligned brick (the structured stack mesh),
    the returned discretisation carries :class:`Bricks` data and a deferred
    scikit-fem basis, so no per-element basis arrays are built.
    """
    from skfem import Basis, ElementHex1, ElementHex2
    from skfem.assembly import Dofs
    from skfem.quadrature import get_quadrature

    elem = {1: ElementHex1, 2: ElementHex2}[order]()
    geo = brick_geometry(mesh)
    if geo is None:
        basis = Basis(mesh, elem, intorder=INTORDER[order])
        return Discretisation(basis=basis, order=order,
                              element_dofs=np.ascontiguousarray(basis.element_dofs),
                              ndofs=3 * basis.N, doflocs=np.asarray(basis.doflocs))
    corner, h, axis = geo
    if order == 1:
        element_dofs = np.ascontiguousarray(mesh.t)
        dofs = None
        doflocs = np.asarray(mesh.p)
        nscalar = mesh.p.shape[1]
    else:
        dofs = Dofs(mesh, elem)
        element_dofs = np.ascontiguousarray(dofs.element_dofs)
        nscalar = int(dofs.N)
        doflocs = np.empty((3, nscalar))
        for a, ref_xi in enumerate(np.asarray(elem.doflocs)):
            xi = np.empty(3)
            xi[axis] = ref_xi
            doflocs[:, element_dofs[a]] = (corner + xi * h).T
    X, W = get_quadrature(elem.refdom, INTORDER[order])
    ref_grad = np.empty((element_dofs.shape[0], 3, X.shape[1]))
    for a in range(element_dofs.shape[0]):
        ref_grad[a, axis] = elem.lbasis(X, a)[1]   # reference axis j -> sample axis axis[j]
    bricks = Bricks(corner=corner, h=h, points=X, qweights=W, ref_grad=ref_grad)
    basis = _DeferredBasis(mesh, elem, INTORDER[order], dofs, nscalar)
    return Discretisation(basis=basis, order=order, element_dofs=element_dofs,
                          ndofs=3 * nscalar, doflocs=doflocs, bricks=bricks)


# --------------------------------------------------------------------------
# symbolic structure
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Pattern:
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


def build_pattern(element_dofs: np.ndarray, nscalar: int) -> Pattern:
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
    Pattern
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
    width = valence * nloc
    deg = np.empty(nscalar, dtype=np.int64)
    # per chunk of rows: neighbour lists and ranks
    rows_per_chunk = max(1, CHUNK_ENTRIES // max(width, 1))
    pos_local = np.empty((nel, nloc, nloc), dtype=np.int32)          # rank within the row
    row_cols = []
    sentinel = nscalar
    edc = ed.astype(ctype, copy=False)
    for r0 in range(0, nscalar, rows_per_chunk):
        r1 = min(nscalar, r0 + rows_per_chunk)
        e = inc_e[r0:r1]                                             # (m, valence)
        valid = e >= 0
        e = np.where(valid, e, 0)
        cand = edc[:, e].transpose(1, 2, 0)                          # (m, valence, nloc)
        cand = np.where(valid[:, :, None], cand, sentinel).reshape(r1 - r0, width)
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
        deg[r0:r1] = rank_sorted[:, -1] + 1
        row_cols.append(srt[new])
        rank = rank.reshape(r1 - r0, valence, nloc)
        vv = np.nonzero(valid)
        pos_local[e[vv], inc_a[r0:r1][vv]] = rank[vv]
    cols_s = np.concatenate(row_cols) if row_cols else np.zeros(0, dtype=np.int64)
    del row_cols, inc_e, inc_a
    p_of = ed.T                                                      # (nel, nloc)
    pos_local *= 3
    return _finish_pattern(deg, cols_s, lambda ptr9: ptr9[p_of][:, :, None] + pos_local)


def _finish_pattern(deg: np.ndarray, cols_s: np.ndarray, base_of) -> Pattern:
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
    return Pattern(indptr=indptr, indices=indices, block_base=block_base,
                   row_stride=row_stride)


def pattern_of(disc: Discretisation) -> Pattern:
    """The symbolic structure of a discretisation, computed once and kept on it."""
    pat = disc.__dict__.get("_pattern")
    if pat is None or pat.block_base.shape[0] != disc.nelems:
        pat = build_pattern(disc.element_dofs, disc.ndofs // 3)
        object.__setattr__(disc, "_pattern", pat)   # a cache, not a field
    return pat


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


def _element_matrices(disc: Discretisation, sl: slice, grp: np.ndarray, Cm: np.ndarray,
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
        det = np.abs(h[:, 0] * h[:, 1] * h[:, 2])
        s = det[:, None, None] / (h[:, :, None] * h[:, None, :])     # (n,3,3) = |det|/(h_j h_l)
        coef = s.reshape(n, 9, 1) * Cm[grp]                          # (n, jl, ik)
        Ke = Qref @ coef.transpose(1, 0, 2).reshape(9, n * 9)        # (ab, n*ik)
        return Ke.reshape(nloc * nloc, n, 3, 3), True
    g = disc.gradients(sl)                                           # (n,q,a,3)
    w = disc.weights(sl)                                             # (n,q)
    n, nq = w.shape
    gw = (g * w[:, :, None, None]).reshape(n, nq, nloc * 3)
    G = np.matmul(gw.transpose(0, 2, 1), g.reshape(n, nq, nloc * 3))  # (n,(a,j),(b,l))
    G = G.reshape(n, nloc, 3, nloc, 3).transpose(0, 1, 3, 2, 4).reshape(n, nloc * nloc, 9)
    Ke = np.empty((n, nloc * nloc, 9))
    for gi in np.unique(grp):
        m = grp == gi
        Ke[m] = G[m] @ Cm[gi]
    return Ke.reshape(n, nloc, nloc, 3, 3), False


class _CoarseSpaces:
    """Deferred geometric coarse spaces of a brick discretisation (see
    :func:`mesastrain.fem.multigrid.grid_hierarchy`); calling it builds them once."""

    def __init__(self, disc: Discretisation, group: np.ndarray):
        self.disc = disc
        self.group = np.asarray(group)

    def __call__(self):
        from mesastrain.fem.multigrid import grid_hierarchy

        cache = self.disc.__dict__.setdefault("_coarse_spaces", {})
        key = hash(self.group.tobytes())
        if key not in cache:
            cache.clear()
            cache[key] = grid_hierarchy(self.disc, self.group)
        return cache[key]


def _chunk(disc: Discretisation) -> int:
    return max(1, CHUNK_ENTRIES // (9 * disc.nloc * disc.nloc))


def assemble_matrix(disc: Discretisation, group: np.ndarray, stiffness: np.ndarray
                    ) -> sp.csr_matrix:
    """Assemble the stiffness matrix only (see :func:`assemble`).

    The symbolic structure is computed on the first call for a discretisation
    and reused by later calls (e.g. a sweep over materials).
    """
    pat = pattern_of(disc)
    group = np.asarray(group)
    _, Cm = _stiffness_tensors(stiffness)
    Qref = _brick_reference(disc.bricks)[0] if disc.bricks is not None else None
    data = np.zeros(pat.nnz)
    nel = disc.nelems
    step = _chunk(disc)
    k_of = np.arange(3)                                              # column component
    i_of = np.arange(3)[:, None]                                     # row component
    nloc = disc.nloc
    for start in range(0, nel, step):
        sl = slice(start, min(start + step, nel))
        Ke, pairs_first = _element_matrices(disc, sl, group[sl], Cm, Qref)
        stride = pat.row_stride[disc.element_dofs[:, sl].T]          # (n, nloc)
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
    if disc.bricks is not None:
        K.coarse_spaces = _CoarseSpaces(disc, group)
    log.info("assembled %d unknowns, %d nonzeros", K.shape[0], K.nnz)
    return K


def assemble_load(disc: Discretisation, group: np.ndarray, stiffness: np.ndarray,
                  eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None
                  ) -> np.ndarray:
    """Assemble the eigenstrain load vector only (see :func:`assemble`), GPa nm^2."""
    group = np.asarray(group)
    C, _ = _stiffness_tensors(stiffness)
    sigma0 = np.einsum("gijkl,gkl->gij", C, np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
    rref = _brick_reference(disc.bricks)[1] if disc.bricks is not None else None
    f = np.zeros(disc.ndofs)
    nel = disc.nelems
    for start in range(0, nel, CHUNK):
        sl = slice(start, min(start + CHUNK, nel))
        grp = group[sl]
        if rref is not None:
            h = disc.bricks.h[sl]
            det = np.abs(h[:, 0] * h[:, 1] * h[:, 2])
            gsum = rref[None] * (det[:, None] / h)[:, None, :]          # (n,a,j)
        else:
            w = disc.weights(sl)
            gsum = np.einsum("nq,nqaj->naj", w, disc.gradients(sl))
        s0 = sigma0[grp]
        if cell_eigenstrain is not None:
            s0 = s0 + np.einsum("nijkl,nkl->nij", C[grp], cell_eigenstrain[sl])
        fe = np.einsum("naj,nij->nai", gsum, s0)
        vd = disc.element_dofs[:, sl].T.astype(np.int64)[:, :, None] * 3 + np.arange(3)
        np.add.at(f, vd.ravel(), fe.ravel())
    return f


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
        Stiffness matrix, GPa nm; int32 indices whenever they fit, sorted
        column indices, no duplicates. On a brick mesh it carries
        ``K.coarse_spaces``, a callable returning the geometric multigrid
        spaces that :func:`mesastrain.fem.solve.solve_condensed` uses.
    f : ndarray (ndofs,)
        Load vector of the eigenstrain, GPa nm^2.
    """
    K = assemble_matrix(disc, group, stiffness)
    f = assemble_load(disc, group, stiffness, eigenstrain, cell_eigenstrain)
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
