"""Linear solve of the condensed elasticity system.

One small interface, :func:`solve_condensed`, takes the assembled matrix, the
load, the fixed dofs and the rigid-body modes and returns the displacement
with solver statistics. A distributed solver would replace only this module
(see README, "Beyond one machine").

Fixed dofs are condensed out (never penalised: a penalty makes conjugate
gradients stop early on a wrong answer). Small systems use a sparse direct
factorisation (SuperLU). Larger ones use conjugate gradients in double
precision preconditioned by one multigrid V-cycle in single precision:

* geometric semi-coarsening multigrid when the caller passes the coarse
  spaces of a structured brick mesh (``spaces``, from
  :meth:`mesastrain.fem.assembly.SymbolicCache.coarse_spaces`; see
  :mod:`mesastrain.fem.coarsening`);
* otherwise pyamg smoothed aggregation with the rigid-body modes as
  near-nullspace.

:func:`solve_model` puts supports and periodic ties (:mod:`mesastrain.fem.constraints`)
around it.

Stopping: the relative residual ||b - A x|| / ||b|| must reach ``tol`` AND the
estimated energy-norm error of the iterate must reach ``stress_tol`` relative
to the energy norm of the solution. The energy norm of a displacement error e
is exactly the stress error measured with the compliance,
||e||_A^2 = int (sigma_h - sigma_k) : C^-1 : (sigma_h - sigma_k) dV, so this is
a check that the stress has converged, not only the residual. The error is
estimated from quantities conjugate gradients computes anyway (Hestenes and
Stiefel 1952; Strakos and Tichy, ETNA 13, 2002: ||x - x_k||_A^2 =
sum_{j>=k} alpha_j r_j.z_j), with the tail beyond the last iteration
extrapolated from the observed decay (Arioli, Numer. Math. 97, 2004, uses the
same estimate as a stopping rule for finite elements; from memory).
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from mesastrain.errors import SolverError
from mesastrain.fem import multigrid
from mesastrain.fem.assembly import rigid_body_modes
from mesastrain.fem.constraints import Boundary, reduce_dofs, reduce_system, support_dofs, tie_faces
from mesastrain.fem.discretisation import Discretisation
from mesastrain.fem.parallel import RowSplit
from mesastrain.fem.pmultigrid import linear_space

log = logging.getLogger(__name__)

#: Up to this many free unknowns "auto" uses the direct solver (SuperLU); above it the
#: multigrid-preconditioned iteration is faster. Measured on the demo mesa: about equal at
#: 2,700 unknowns, SuperLU 7x slower at 5,500 and 20-70x slower from 30,000 to 127,000
#: (benchmarks/solver_scaling.py, "direct x").
DIRECT_LIMIT = 3000

#: Default relative energy-norm (stress) error at which the iteration may stop.
STRESS_TOL = 1e-4

#: Iterations of delay in the energy-error estimate.
ESTIMATE_DELAY = 4

#: Precisions of the multigrid preconditioner.
PRECISIONS = {"single": np.float32, "double": np.float64}


class _FreePart:
    """The free-free block K[idx][:, idx] as an operator, without copying K."""

    def __init__(self, K: sp.csr_matrix, idx: np.ndarray):
        K = sp.csr_matrix(K)
        if K.indices.dtype != np.int32 and max(K.nnz, K.shape[0]) < 2**31 - 1:
            K = sp.csr_matrix((K.data, K.indices.astype(np.int32), K.indptr.astype(np.int32)),
                              shape=K.shape)
        self.K = K
        self._Ks = RowSplit(K)                 # the product split over the cores
        self.idx = idx
        self.shape = (idx.size, idx.size)
        self._local = threading.local()

    def __matmul__(self, p: np.ndarray) -> np.ndarray:
        # one full-length vector per thread, kept between products (the held entries stay
        # zero): several solves on the same operator may run on threads at once
        full = getattr(self._local, "full", None)
        if full is None:
            full = self._local.full = np.zeros(self.K.shape[0])
        full[self.idx] = p
        return (self._Ks @ full)[self.idx]


@dataclass(frozen=True)
class SolverReport:
    """What the solve did.

    Attributes
    ----------
    method : str
        ``"direct"``, ``"amg-cg"`` (smoothed aggregation), ``"gmg-cg"``
        (geometric multigrid), ``"pmg-cg"`` (p-multigrid on quadratic
        tetrahedra), or ``"none"`` for a zero load.
    unknowns : int
        Free unknowns after condensation.
    iterations : int
        Conjugate-gradient iterations (0 for direct).
    residual : float
        True relative residual ||f - K u|| / ||f||.
    setup_seconds, solve_seconds : float
        Factorisation or hierarchy setup; triangular solves or iterations.
    energy_error : float
        Estimated relative energy-norm error ||u - u_h||_K / ||u_h||_K (the
        compliance-weighted RMS stress error relative to the stress of the
        displacement); 0 for a direct solve.
    levels : int
        Multigrid levels (0 for direct).
    operator_complexity : float
        Stored nonzeros of all levels / those of the finest.
    precision : str
        Precision of the preconditioner.
    cycle_bytes, iteration_bytes : int
        Memory traffic of one V-cycle and of one whole iteration (matrix-vector
        product, V-cycle, vector updates) by the streaming model of
        :meth:`mesastrain.fem.multigrid.Hierarchy.traffic` (0 for direct);
        for benchmarks, not written to the summary.
    single_share : float
        Share of an iteration's traffic in single-precision arrays.
    """

    method: str
    unknowns: int
    iterations: int
    residual: float
    setup_seconds: float
    solve_seconds: float
    energy_error: float = 0.0
    levels: int = 0
    operator_complexity: float = 1.0
    precision: str = "double"
    cycle_bytes: int = 0
    iteration_bytes: int = 0
    single_share: float = 0.0

    def to_dict(self) -> dict:
        return {"method": self.method, "unknowns": self.unknowns,
                "iterations": self.iterations, "relative_residual": self.residual,
                "energy_error_estimate": self.energy_error,
                "multigrid_levels": self.levels,
                "operator_complexity": round(self.operator_complexity, 3),
                "preconditioner_precision": self.precision,
                "setup_time": round(self.setup_seconds, 3),
                "solve_time": round(self.solve_seconds, 3),
                "units": {"setup_time": "s", "solve_time": "s"}}


def choose_method(method: str, n_free: int, direct_limit: int | None = None) -> str:
    """Resolve ``"auto"`` to ``"direct"`` or ``"iterative"`` by problem size."""
    if method == "auto":
        limit = DIRECT_LIMIT if direct_limit is None else direct_limit
        return "direct" if n_free <= limit else "iterative"
    return method


def solver_options(settings) -> dict:
    """Keyword arguments of :func:`solve_condensed` from a case's ``[solver]`` settings."""
    out = {"method": settings.method, "tol": settings.tolerance,
           "maxiter": settings.max_iterations}
    for key, name in (("stress_tolerance", "stress_tol"), ("precision", "precision"),
                      ("direct_limit", "direct_limit")):
        value = getattr(settings, key)
        if value is not None:
            out[name] = value
    return out


def condense(K: sp.csr_matrix, free: np.ndarray) -> sp.csr_matrix:
    """The submatrix K[free][:, free] in one pass (int32 indices, sorted).

    Parameters
    ----------
    K : csr_matrix (n, n)
    free : ndarray of bool (n,)
    """
    K = sp.csr_matrix(K)
    if not K.has_sorted_indices:
        K = K.copy()
        K.sort_indices()
    n = K.shape[0]
    newidx = np.full(n, -1, dtype=np.int64)
    idx = np.flatnonzero(free)
    newidx[idx] = np.arange(idx.size)
    lengths = np.diff(K.indptr)
    keep = np.repeat(free, lengths)
    keep &= free[K.indices]
    starts = K.indptr[:-1][idx]
    counts = np.zeros(idx.size, dtype=np.int64)
    nonempty = lengths[idx] > 0
    counts[nonempty] = np.add.reduceat(keep, starts[nonempty], dtype=np.int64)
    indptr = np.zeros(idx.size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    nnz = int(indptr[-1])
    itype = np.int32 if max(nnz, idx.size) < 2**31 - 1 else np.int64
    indices = newidx[K.indices[keep]].astype(itype)
    data = K.data[keep]
    A = sp.csr_matrix((data, indices, indptr.astype(itype)), shape=(idx.size, idx.size))
    A.has_sorted_indices = True
    return A


def _energy_error(terms: list, xnorm2: float, delay: int = ESTIMATE_DELAY) -> float:
    """Relative energy-norm error of the current iterate from the CG terms.

    ``terms[j] = alpha_j r_j.z_j`` equals ||e_j||_A^2 - ||e_{j+1}||_A^2. The sum
    of the last ``delay`` terms is the error decrease over them; with the
    per-step decay factor r of the terms, the remaining error is that sum
    times r^d / (1 - r^d) (geometric tail), taken no smaller than the last
    term itself.
    """
    if xnorm2 <= 0 or len(terms) < 2:
        return np.inf
    d = min(delay, len(terms))
    last = np.asarray(terms[-d:], dtype=float)
    s = float(last.sum())
    if last[0] > 0 and last[-1] > 0 and d > 1:
        q = (last[-1] / last[0]) ** (1.0 / (d - 1))
    else:
        q = 1.0
    q = min(q, 0.99)
    rd = q ** d
    tail = s * rd / (1.0 - rd)
    return float(np.sqrt(max(tail, last[-1]) / xnorm2))


def pcg(A: sp.csr_matrix, b: np.ndarray, precondition, tol: float, stress_tol: float,
        maxiter: int, progress=None, x0: np.ndarray | None = None
        ) -> tuple[np.ndarray, int, float, float]:
    """Preconditioned conjugate gradients with a residual and an energy-error stop.

    ``x0`` is a starting guess (zero when omitted); the residual is still measured
    relative to ||b||, and the energy-error estimate is that of conjugate gradients
    from any start (the iteration is CG on A e = b - A x0).

    Returns
    -------
    x, iterations, recursive relative residual, energy-error estimate
    """
    n = b.size
    if x0 is None:
        x = np.zeros(n)
        r = b.copy()
    else:
        x = np.array(x0, dtype=float)
        r = b - A @ x
    bnorm = float(np.linalg.norm(b))
    z = precondition(r)
    p = z.copy()
    rz = float(r @ z)
    q = np.empty(n)
    terms: list[float] = []
    rel = 1.0
    err = np.inf
    k = 0
    for k in range(1, maxiter + 1):
        q[:] = A @ p
        pq = float(p @ q)
        if not pq > 0:
            raise SolverError("the stiffness matrix is not positive definite: part of the body "
                              "is not held, or an element is inverted")
        alpha = rz / pq
        x += alpha * p
        r -= alpha * q
        terms.append(alpha * rz)
        rel = float(np.linalg.norm(r)) / bnorm
        if rel <= tol:
            err = _energy_error(terms, float(x @ (b - r)))
            if err <= stress_tol:
                break
        if progress is not None and k % 10 == 0:
            progress(f"  iteration {k}: relative residual {rel:.1e}")
        z = precondition(r)
        rz_new = float(r @ z)
        p *= rz_new / rz
        p += z
        rz = rz_new
    else:
        err = _energy_error(terms, float(x @ (b - r)))
    return x, k, rel, err


def _iteration_traffic(A, H) -> tuple[int, int, float]:
    """(V-cycle bytes, iteration bytes, single-precision share) of one CG iteration.

    The iteration is one double-precision product with the operator (for a
    free part of the full matrix: the full matrix plus the scatter and gather),
    one V-cycle and about ten passes over vectors of the free unknowns.
    """
    M = A.K if isinstance(A, _FreePart) else A
    n = A.shape[0]
    mv = M.data.nbytes + M.indices.nbytes + M.indptr.nbytes + 2 * M.shape[0] * 8
    if isinstance(A, _FreePart):
        mv += 4 * n * 8
    t = H.traffic()
    it = mv + t["bytes"] + 10 * n * 8
    return int(t["bytes"]), int(it), float(t["single_bytes"]) / it


def solve_condensed(K: sp.csr_matrix, f: np.ndarray, fixed: np.ndarray,
                    near_null: np.ndarray | None = None, method: str = "auto",
                    tol: float = 1e-8, maxiter: int = 2000,
                    progress=None, *, stress_tol: float = STRESS_TOL,
                    precision: str = "single", direct_limit: int | None = None,
                    spaces=None, linear=None, follow_up=None) -> tuple[np.ndarray, SolverReport]:
    """Solve K u = f with u = 0 on the fixed dofs.

    Parameters
    ----------
    K : csr_matrix (n, n)
        Symmetric positive semi-definite stiffness (not modified).
    f : ndarray (n,)
    fixed : ndarray of int
        Dofs held at zero.
    near_null : ndarray (n, k), optional
        Near-nullspace candidates for algebraic multigrid (rigid-body modes).
    method : {"auto", "direct", "iterative"}
    tol : float
        Relative residual at which conjugate gradients may stop.
    maxiter : int
    progress : callable(str), optional
        Receives one-line progress messages.
    stress_tol : float
        Relative energy-norm (stress) error at which conjugate gradients may
        stop; both criteria must hold.
    precision : {"single", "double"}
        Precision of the multigrid preconditioner (the iteration itself is
        always double precision).
    direct_limit : int, optional
        Largest number of free unknowns for which "auto" picks the direct
        solver (default :data:`DIRECT_LIMIT`).
    spaces : GridSpaces or callable returning GridSpaces or None, optional
        Geometric coarse spaces of ``K``'s discretisation
        (:meth:`mesastrain.fem.assembly.SymbolicCache.coarse_spaces`; a callable
        is called only when the iterative solver runs). None: algebraic
        multigrid.
    linear : LinearSpace, optional
        The P1 space inside a P2 tetrahedral discretisation
        (:func:`mesastrain.fem.pmultigrid.linear_space`): p-multigrid, smoothed
        aggregation on P1 below a Gauss-Seidel-smoothed P2 level. Used when
        ``spaces`` is None.
    follow_up : callable(u, solve), optional
        Called once the solve has converged, while its factorisation or
        multigrid hierarchy is still alive: ``u`` is the solution (n,) and
        ``solve(rhs, tol=None, stress_tol=None) -> x`` solves K x = rhs (n,),
        x = 0 on the fixed dofs, reusing it (extra right-hand sides, e.g. the
        sensitivities of the material-data scatter; default tolerances those of
        the main solve).

    Returns
    -------
    u : ndarray (n,)
    report : SolverReport

    Raises
    ------
    SolverError
        No convergence, a singular system or non-finite values.
    """
    say = progress or (lambda msg: None)
    if precision not in PRECISIONS:
        raise SolverError(f"unknown preconditioner precision {precision!r}; allowed: "
                          + ", ".join(PRECISIONS))
    n = K.shape[0]
    free = np.ones(n, dtype=bool)
    free[np.asarray(fixed, dtype=np.int64)] = False
    idx = np.flatnonzero(free)
    nf = idx.size
    b = np.asarray(f, dtype=float)[idx]
    resolved = choose_method(method, nf, direct_limit)
    bnorm = float(np.linalg.norm(b))
    u = np.zeros(n)
    if bnorm == 0.0:
        return u, SolverReport("none", nf, 0, 0.0, 0.0, 0.0)
    if resolved not in ("direct", "iterative"):
        raise SolverError(f"unknown solver method {method!r}; allowed: auto, direct, iterative")
    t0 = time.perf_counter()
    iterations, err, levels, complexity, prec = 0, 0.0, 0, 1.0, "double"
    traffic = (0, 0, 0.0)
    if resolved == "direct":
        A = condense(K, free)
        try:
            lu = spla.splu(A.tocsc(), permc_spec="MMD_AT_PLUS_A")
        except RuntimeError as exc:  # "Factor is exactly singular"
            raise SolverError(
                "the stiffness matrix is singular: part of the body is not held "
                "(check the boundary conditions and that every part is connected)") from exc
        t1 = time.perf_counter()
        x = lu.solve(b)
        H = None
        method_name = "direct"
    else:
        if callable(spaces):
            spaces = spaces()
        dtype = PRECISIONS[precision]
        try:
            if spaces is not None:
                # the finest level is split from K directly: no condensed double copy
                A = _FreePart(K, idx)
                H = multigrid.Hierarchy(A.K, multigrid.restrict_spaces(spaces, free),
                                        dtype=dtype, keep=free)
                method_name = "gmg-cg"
            elif linear is not None:
                A = condense(K, free)
                E, free1 = linear.vector_prolongation(free)
                B1 = None
                if near_null is not None:
                    B1 = np.asarray(near_null).reshape(-1, 3, near_null.shape[1])[
                        linear.vertices].reshape(-1, near_null.shape[1])[free1]
                H = multigrid.p_hierarchy(A, E, B1, dtype=dtype)
                method_name = "pmg-cg"
            else:
                A = condense(K, free)
                B = None if near_null is None else np.asarray(near_null)[idx]
                H = multigrid.algebraic_hierarchy(A, B, dtype=dtype)
                method_name = "amg-cg"
        except ValueError as exc:
            raise SolverError(f"the stiffness matrix cannot be preconditioned ({exc}); check "
                              "that every part of the body is held") from exc
        levels, complexity, prec = H.levels, H.operator_complexity, precision
        t1 = time.perf_counter()
        say(f"multigrid ({method_name[:3]}): {H.levels} levels {H.sizes}, operator complexity "
            f"{complexity:.2f}, set up in {t1 - t0:.1f} s")
        x, iterations, _, err = pcg(A, b, H, tol, stress_tol, maxiter, progress)
        lu = None
        traffic = _iteration_traffic(A, H)
    t2 = time.perf_counter()
    if not np.all(np.isfinite(x)):
        raise SolverError("the solution contains NaN or Inf: the system is singular or "
                          "ill-conditioned (check that the body is held and sizes are sane)")
    res = float(np.linalg.norm(b - A @ x) / bnorm)
    limit = max(10 * tol, 1e-10) if resolved == "iterative" else 1e-6
    if res > limit or (resolved == "iterative" and not err <= 10 * stress_tol):
        raise SolverError(
            f"the solver did not converge: relative residual {res:.2e}, estimated stress error "
            f"{err:.1e} after {iterations} iterations (wanted {tol:.0e} and {stress_tol:.0e}); "
            f"raise solver.max_iterations or use solver.method = \"direct\" for a small case")
    u[idx] = x
    report = SolverReport(method_name, nf, iterations, res, t1 - t0, t2 - t1, err, levels,
                          complexity, prec, *traffic)
    log.info("solved: %s", report)
    if follow_up is not None:
        lu_lock = threading.Lock()
        if lu is None:
            # the start of each extra iterative solve: the multiple of the main solution
            # closest to its own in the energy norm, (x.b2 / x.A x) x, never a worse start
            # than zero; the material-scatter right-hand sides are mostly such multiples
            # (a lattice constant scales the misfit), so they start close
            xAx = float(x @ (A @ x))

        def solve_again(rhs: np.ndarray, tol2: float | None = None,
                        stress_tol2: float | None = None) -> np.ndarray:
            """The solution for another right-hand side; callable from several threads
            at once (the multigrid cycle holds no state between calls; the one LU
            factorisation is used in turn)."""
            b2 = np.asarray(rhs, dtype=float)[idx]
            out = np.zeros(n)
            if not np.any(b2):
                return out
            if lu is not None:
                with lu_lock:
                    out[idx] = lu.solve(b2)
                return out
            t_ = tol if tol2 is None else tol2
            s_ = stress_tol if stress_tol2 is None else stress_tol2
            x0 = (float(x @ b2) / xAx) * x if xAx > 0 else None
            x2, it2, rel2, err2 = pcg(A, b2, H, t_, s_, maxiter, None, x0=x0)
            log.debug("extra right-hand side: %d iterations", it2)
            if not (np.all(np.isfinite(x2)) and rel2 <= max(10 * t_, 1e-10) and err2 <= 10 * s_):
                raise SolverError(f"an extra right-hand side did not converge: relative "
                                  f"residual {rel2:.2e} after {it2} iterations")
            out[idx] = x2
            return out
        follow_up(u, solve_again)
    lu = H = None     # free the factorisation / hierarchy before returning
    return u, report


def solve_model(K, f, disc: Discretisation, boundary: Boundary, solver, progress=None,
                spaces=None, follow_up=None):
    """Apply supports and periodic ties, solve, and return the full displacement.

    Parameters
    ----------
    K, f : assembled stiffness and load
    disc : Discretisation
    boundary : Boundary
    solver : SolverSettings
        method, tolerance, max_iterations.
    progress : callable(str), optional
    spaces : GridSpaces or callable, optional
        Geometric coarse spaces of ``disc`` (see :func:`solve_condensed`).
    follow_up : callable(u, solve), optional
        Extra right-hand sides on the same operator (see :func:`solve_condensed`);
        ``u`` and the right-hand sides are full (ndofs,) vectors, periodic ties
        applied inside.

    Returns
    -------
    u : ndarray (ndofs,)
    report : SolverReport
    """
    fixed = support_dofs(disc.doflocs, boundary)
    modes = rigid_body_modes(disc.doflocs)
    if not boundary.periodic:
        return solve_condensed(K, f, fixed, modes, progress=progress, spaces=spaces,
                               linear=linear_space(disc), follow_up=follow_up,
                               **solver_options(solver))
    ties = tie_faces(disc.doflocs, boundary.periodic)
    Kr, fr, P = reduce_system(K, f, ties)
    rows = (ties.independent[:, None] * 3 + np.arange(3)).ravel()
    # the coarse spaces are not passed on: they are built on the untied grid, and the
    # tied system would need coarse grids whose opposite faces are tied as well, which
    # grid_hierarchy does not build; the reduced system uses algebraic multigrid
    tied = None
    if follow_up is not None:
        def tied(ur_, solve_r):
            follow_up(P @ ur_, lambda rhs, *a: P @ solve_r(P.T @ rhs, *a))
    ur, rep = solve_condensed(Kr, fr, reduce_dofs(fixed, ties), modes[rows], progress=progress,
                              follow_up=tied, **solver_options(solver))
    return P @ ur, rep
