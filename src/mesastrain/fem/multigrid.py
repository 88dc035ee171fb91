"""Multigrid preconditioners for the condensed elasticity system.

Two ways to build the hierarchy of coarse spaces, one way to cycle through it:

geometric, for structured brick meshes
    nested tensor-grid spaces from :func:`mesastrain.fem.coarsening.grid_hierarchy`
    (semi-coarsening of the grid lines, trilinear prolongation), restricted to
    the free dofs by :func:`restrict_spaces`;
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
import threading

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from mesastrain.fem.coarsening import COARSEST_UNKNOWNS, GridSpaces
from mesastrain.fem.parallel import RowSplit

log = logging.getLogger(__name__)

#: Stored entries per row chunk of :func:`split_triangles` (bounds its temporaries).
CHUNK_ENTRIES = 8_000_000


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
    step = max(1, CHUNK_ENTRIES // per_row)
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


class _CoarseSolver:
    """Direct solve on the coarsest level: sparse LU, or a pseudo-inverse if it is singular.

    A coarsest operator may be singular when an unheld part or an empty coarse
    dof survives; the pseudo-inverse (symmetric eigendecomposition, eigenvalues
    below 1e-10 of the largest dropped) then projects that part out, as pyamg's
    own "pinv" coarse solver does. Only for small coarsest levels.
    """

    PINV_LIMIT = 6000

    def __init__(self, op: sp.csr_matrix):
        self.lu = self.pinv = None
        self._lock = threading.Lock()
        try:
            self.lu = spla.splu(op.tocsc(), permc_spec="MMD_AT_PLUS_A")
        except RuntimeError:          # "Factor is exactly singular"
            if op.shape[0] > self.PINV_LIMIT:
                raise ValueError(f"the coarsest multigrid level ({op.shape[0]} unknowns) "
                                 "is singular") from None
            w, V = np.linalg.eigh(op.toarray())
            good = w > 1e-10 * max(float(w.max()), 0.0)
            log.debug("coarsest level singular: %d of %d modes dropped",
                      int((~good).sum()), w.size)
            self.pinv = (V[:, good] / w[good]) @ V[:, good].T

    def solve(self, b: np.ndarray) -> np.ndarray:
        if self.lu is None:
            return self.pinv @ b
        with self._lock:            # one SuperLU object: V-cycles on threads take turns
            return self.lu.solve(b)


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
        # the products of the cycle split over the cores (the sweeps stay on one thread)
        self._split = [tuple(RowSplit(M) for M in mats)
                       for mats in zip(self.LD, self.DU, self.P, self.R)]
        # the coarsest level, symmetrised and in double precision, factorised once
        op = sp.csr_matrix(op, dtype=np.float64)
        op = 0.5 * (op + op.T)
        self.coarse_lu = _CoarseSolver(op)

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

    def traffic(self) -> dict:
        """Bytes one V-cycle moves through memory (a streaming model, for benchmarks).

        Every pass over a matrix reads its values, column indices and row
        pointers and the vector entries it touches once, and writes its
        result once. Per level with s sweeps: the forward Gauss-Seidel sweep
        (lower triangle), s - 1 further sweeps (upper product + lower sweep),
        the residual (upper product), restriction and prolongation, and s
        backward sweeps (lower product + upper sweep). The coarsest level's
        direct solve is not counted (a few thousand unknowns).

        Returns
        -------
        dict
            ``bytes`` of one V-cycle, ``single_bytes`` of them in arrays of the
            cycle's precision when that is single (else 0), ``levels`` a list
            of bytes per level.
        """
        item = self.dtype.itemsize

        def passes(M):
            vec = (M.shape[0] + M.shape[1]) * item
            return M.data.nbytes + M.indices.nbytes + M.indptr.nbytes + vec, M.data.nbytes + vec

        total = single = 0
        per_level = []
        for lev in range(len(self.LD)):
            s = self.sweeps[lev] if lev < len(self.sweeps) else 1
            lo, lo_v = passes(self.LD[lev])
            up, up_v = passes(self.DU[lev])
            r, r_v = passes(self.R[lev])
            pr, pr_v = passes(self.P[lev])
            b = lo + (s - 1) * (up + lo) + up + r + pr + s * (lo + up)
            v = lo_v + (s - 1) * (up_v + lo_v) + up_v + r_v + pr_v + s * (lo_v + up_v)
            per_level.append(b)
            total += b
            single += v if item == 4 else 0
        return {"bytes": total, "single_bytes": single, "levels": per_level}

    def _cycle(self, lev: int, b: np.ndarray) -> np.ndarray:
        from pyamg import amg_core

        if lev == len(self.LD):
            return self.coarse_lu.solve(b.astype(np.float64)).astype(self.dtype)
        LD, DU, d = self.LD[lev], self.DU[lev], self.d[lev]
        LDs, DUs, Ps, Rs = self._split[lev]
        n = d.size
        sweeps = self.sweeps[lev] if lev < len(self.sweeps) else 1
        x = np.zeros_like(b)
        gs = amg_core.gauss_seidel
        rhs = b
        gs(LD.indptr, LD.indices, LD.data, x, rhs, 0, n, 1)      # (L + D) x = b
        for _ in range(sweeps - 1):                              # (L + D) x' = b - U x
            rhs = b + d * x
            rhs -= DUs @ x
            gs(LD.indptr, LD.indices, LD.data, x, rhs, 0, n, 1)
        r = b - rhs if sweeps > 1 else np.zeros_like(b)
        r += d * x
        r -= DUs @ x                                             # b - A x = (b - rhs) - U x
        x += Ps @ self._cycle(lev + 1, Rs @ r)
        for _ in range(sweeps):                                  # (D + U) x' = b - L x
            rhs = b - LDs @ x
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


#: Strength of connection per smoothed-aggregation level (pyamg "symmetric" with threshold
#: theta). All connections on the finest level; from the second level on, where the Galerkin
#: operators are denser, theta > 0 keeps the aggregates from swallowing a whole level
#: (5,026 -> 84 unknowns on a P1 level of 45k): on the L-shaped pad, quadratic tetrahedra,
#: 321k unknowns, p-multigrid took 37 iterations with theta = 0 everywhere, 21 with 0.1 there
#: and 60 with theta = 0.1 everywhere (benchmarks/tet_scaling.py). At 975k unknowns theta = 0.1
#: on the coarse levels made a fifth level of 522 unknowns and 39 iterations; theta = 0.05
#: keeps four levels and gave 20, 23, 25 and 23 iterations at 131k, 270k, 515k and 975k
#: (0.1: 20, 22, 23, 39).
STRENGTH = [("symmetric", {"theta": 0.0})] + [("symmetric", {"theta": 0.05})] * 9


def smoothed_aggregation_levels(A: sp.csr_matrix, B: np.ndarray | None
                                ) -> tuple[list, list]:
    """Smoothed-aggregation prolongators and coarse operators (pyamg), finest first.

    The setup runs in double precision: the tentative prolongator orthonormalises
    the near-nullspace candidates on each aggregate (a QR factorisation), and an
    aggregate with too few free dofs for all six rigid-body modes (a corner node
    with a held component, a two-node aggregate of linear tetrahedra) makes some
    of its columns dependent. In double precision pyamg sets those columns to
    zero; in single precision their round-off (1e-7, above pyamg's threshold
    1e-10) survives as spurious unit columns that duplicate others, and the
    coarsest operator becomes singular ("Factor is exactly singular").
    Zero columns are then removed (with the rows and columns of the coarse
    operators they span and the rows of the next prolongator).

    Returns
    -------
    Ps : list of csr_matrix
        P_l (n_l x n_{l+1}).
    ops : list of csr_matrix
        Coarse operators, levels 1 .. L-1, double precision.
    """
    import pyamg

    A64 = sp.csr_matrix((A.data.astype(np.float64, copy=False), A.indices, A.indptr),
                        shape=A.shape)
    ml = pyamg.smoothed_aggregation_solver(
        A64, B=None if B is None else np.ascontiguousarray(B, dtype=np.float64),
        symmetry="hermitian", strength=STRENGTH,
        smooth=("jacobi", {"omega": 4.0 / 3.0, "degree": 1, "weighting": "local"}),
        improve_candidates=None, max_coarse=max(COARSEST_UNKNOWNS // 6, 100),
        max_levels=len(STRENGTH),
        keep=False, presmoother=None, postsmoother=None, coarse_solver=None)
    Ps = [sp.csr_matrix(lvl.P) for lvl in ml.levels[:-1]]
    ops = [sp.csr_matrix(lvl.A) for lvl in ml.levels[1:]]
    del ml, A64
    for lev, P in enumerate(Ps):
        norm = np.sqrt(np.asarray(P.multiply(P).sum(axis=0)).ravel())
        keep = norm > 1e-12 * (norm.max() if norm.size else 1.0)
        if keep.all():
            continue
        log.debug("smoothed aggregation: %d empty coarse dofs removed on level %d",
                  int((~keep).sum()), lev + 1)
        Ps[lev] = P[:, keep].tocsr()
        ops[lev] = ops[lev][keep][:, keep].tocsr()
        if lev + 1 < len(Ps):
            Ps[lev + 1] = Ps[lev + 1][keep].tocsr()
    return Ps, ops


def algebraic_hierarchy(A: sp.csr_matrix, B: np.ndarray | None, dtype=np.float32
                        ) -> Hierarchy:
    """Smoothed-aggregation coarse spaces (pyamg) wrapped as a :class:`Hierarchy`.

    The prolongators come from :func:`smoothed_aggregation_levels` (standard
    aggregation, symmetric strength, one Jacobi smoothing step with row-sum
    weighting); the cycle is the same as for the geometric hierarchy.
    """
    Ps, ops = smoothed_aggregation_levels(A, B)
    return Hierarchy(A, Ps, dtype=dtype, coarse_ops=ops)


def p_hierarchy(A: sp.csr_matrix, E: sp.csr_matrix, B1: np.ndarray | None,
                dtype=np.float32, sweeps=(1,)) -> Hierarchy:
    """p-multigrid: the P2 level, the P1 level E^T A E, then smoothed aggregation on P1.

    See :mod:`mesastrain.fem.pmultigrid`.

    Parameters
    ----------
    A : csr_matrix (n2, n2)
        Free-free block of the P2 matrix.
    E : csr_matrix (n2, n1)
        Prolongation from the free P1 dofs.
    B1 : ndarray (n1, 6) or None
        Rigid-body modes at the free P1 dofs.
    sweeps : sequence of int
        Gauss-Seidel sweeps per level (the first is the P2 level).
    """
    from mesastrain.fem.pmultigrid import galerkin

    A1 = galerkin(A, E)
    Ps, ops = smoothed_aggregation_levels(A1, B1)
    return Hierarchy(A, [E, *Ps], dtype=dtype, coarse_ops=[A1, *ops], sweeps=sweeps)
