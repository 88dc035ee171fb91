"""Linear solve of the condensed elasticity system.

One small interface, :func:`solve_condensed`, takes the assembled matrix, the
load, the fixed dofs and the rigid-body modes and returns the displacement
with solver statistics. A distributed solver would replace only this module.

Fixed dofs are condensed out (never penalised: a penalty makes conjugate
gradients stop early on a wrong answer). Small systems use a sparse direct
factorisation, larger ones conjugate gradients preconditioned by smoothed-
aggregation algebraic multigrid (pyamg) with the rigid-body modes as
near-nullspace. The true residual is always checked.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .errors import SolverError

log = logging.getLogger(__name__)

#: Below this many free unknowns "auto" uses the direct solver.
DIRECT_LIMIT = 12000


@dataclass(frozen=True)
class SolverReport:
    """What the solve did.

    Attributes
    ----------
    method : str
        ``"direct"`` or ``"amg-cg"``.
    unknowns : int
        Free unknowns after condensation.
    iterations : int
        Conjugate-gradient iterations (0 for direct).
    residual : float
        True relative residual ||f - K u|| / ||f||.
    setup_seconds, solve_seconds : float
    """

    method: str
    unknowns: int
    iterations: int
    residual: float
    setup_seconds: float
    solve_seconds: float

    def to_dict(self) -> dict:
        return {"method": self.method, "unknowns": self.unknowns,
                "iterations": self.iterations, "relative_residual": self.residual,
                "setup_seconds": round(self.setup_seconds, 3),
                "solve_seconds": round(self.solve_seconds, 3)}


def choose_method(method: str, n_free: int) -> str:
    """Resolve ``"auto"`` to ``"direct"`` or ``"iterative"`` by problem size."""
    if method == "auto":
        return "direct" if n_free <= DIRECT_LIMIT else "iterative"
    return method


def solve_condensed(K: sp.csr_matrix, f: np.ndarray, fixed: np.ndarray,
                    near_null: np.ndarray | None = None, method: str = "auto",
                    tol: float = 1e-8, maxiter: int = 2000,
                    progress=None) -> tuple[np.ndarray, SolverReport]:
    """Solve K u = f with u = 0 on the fixed dofs.

    Parameters
    ----------
    K : csr_matrix (n, n)
        Symmetric positive semi-definite stiffness.
    f : ndarray (n,)
    fixed : ndarray of int
        Dofs held at zero.
    near_null : ndarray (n, k), optional
        Near-nullspace candidates for multigrid (rigid-body modes).
    method : {"auto", "direct", "iterative"}
    tol : float
        Relative residual at which conjugate gradients stop.
    maxiter : int
    progress : callable(str), optional
        Receives one-line progress messages.

    Returns
    -------
    u : ndarray (n,)
    report : SolverReport

    Raises
    ------
    SolverError
        No convergence, a singular system or non-finite values.
    """
    n = K.shape[0]
    free = np.ones(n, dtype=bool)
    free[fixed] = False
    idx = np.flatnonzero(free)
    A = K[idx][:, idx].tocsr()
    A.indices = A.indices.astype(np.int32)
    A.indptr = A.indptr.astype(np.int32)
    b = f[idx]
    nf = len(idx)
    resolved = choose_method(method, nf)
    bnorm = np.linalg.norm(b)
    u = np.zeros(n)
    if bnorm == 0.0:
        return u, SolverReport("none", nf, 0, 0.0, 0.0, 0.0)
    t0 = time.perf_counter()
    iterations = 0
    if resolved == "direct":
        try:
            lu = spla.splu(A.tocsc(), permc_spec="MMD_AT_PLUS_A")
        except RuntimeError as exc:  # "Factor is exactly singular"
            raise SolverError(
                "the stiffness matrix is singular: part of the body is not held "
                "(check the boundary conditions and that every part is connected)") from exc
        t1 = time.perf_counter()
        x = lu.solve(b)
        method_name = "direct"
    elif resolved == "iterative":
        import pyamg

        B = near_null[idx] if near_null is not None else None
        # pyamg estimates spectral radii from random start vectors: seed them so that the
        # same case gives bit-identical results (pyamg.aggregation.smooth docstring), and
        # leave the caller's global random state as it was.
        state = np.random.get_state()
        np.random.seed(20261202)
        try:
            ml = pyamg.smoothed_aggregation_solver(
                A, B=B, symmetry="hermitian", strength="symmetric",
                smooth=("jacobi", {"omega": 4.0 / 3.0, "degree": 1}),
                presmoother=("gauss_seidel", {"sweep": "symmetric", "iterations": 1}),
                postsmoother=("gauss_seidel", {"sweep": "symmetric", "iterations": 1}),
                improve_candidates=None, max_coarse=500)
        finally:
            np.random.set_state(state)
        t1 = time.perf_counter()
        if progress:
            progress(f"multigrid: {len(ml.levels)} levels, operator complexity "
                     f"{ml.operator_complexity():.2f}")
        residuals: list[float] = []
        x = ml.solve(b, tol=tol, accel="cg", maxiter=maxiter, residuals=residuals)
        iterations = max(len(residuals) - 1, 0)
        method_name = "amg-cg"
    else:
        raise SolverError(f"unknown solver method {method!r}; allowed: auto, direct, iterative")
    t2 = time.perf_counter()
    if not np.all(np.isfinite(x)):
        raise SolverError("the solution contains NaN or Inf: the system is singular or "
                          "ill-conditioned (check that the body is held and sizes are sane)")
    res = float(np.linalg.norm(b - A @ x) / bnorm)
    limit = max(10 * tol, 1e-10) if resolved == "iterative" else 1e-6
    if res > limit:
        raise SolverError(
            f"the solver did not converge: relative residual {res:.2e} after {iterations} "
            f"iterations (wanted {tol:.0e}); raise solver.max_iterations or use "
            f"solver.method = \"direct\" for a small case")
    u[idx] = x
    report = SolverReport(method_name, nf, iterations, res, t1 - t0, t2 - t1)
    log.info("solved: %s", report)
    return u, report
