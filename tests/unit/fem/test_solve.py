"""The condensed solve: direct, geometric and algebraic multigrid, stopping rules.

Checks against independent facts: the direct factorisation (SuperLU) as the
reference solution; nestedness of the geometric coarse spaces (a coarse
trilinear function is trilinear on the fine bricks, so P^T K_h P equals the
matrix assembled on the coarse grid and P reproduces linear fields exactly:
common practice in multigrid, e.g. Trottenberg, Oosterlee and Schueller,
"Multigrid", 2001); the conjugate-gradient energy-error identity
||x - x_k||_A^2 = sum_{j>=k} alpha_j r_j.z_j (Strakos and Tichy, ETNA 13, 2002).
"""

import numpy as np
import pytest
import scipy.sparse as sp

from mesastrain.errors import CaseError, SolverError
from mesastrain.fem import coarsening as cg
from mesastrain.fem import multigrid as mg
from mesastrain.fem.assembly import SymbolicCache, assemble, rigid_body_modes
from mesastrain.fem.discretisation import discretise
from mesastrain.fem.solve import (
    DIRECT_LIMIT,
    choose_method,
    condense,
    pcg,
    solve_condensed,
    solver_options,
)
from small_cases import EIG, STIFF


def block_mesh(nx=14, ny=10, nz=12, seed=1):
    """A graded brick grid with a layer on top of a substrate and an etched corner."""
    from skfem import MeshHex

    rng = np.random.default_rng(seed)
    xs = np.concatenate([[0.0], np.cumsum(0.3 + rng.random(nx))])
    ys = np.concatenate([[0.0], np.cumsum(0.3 + rng.random(ny))])
    zs = np.concatenate([[0.0], np.cumsum(np.geomspace(4.0, 0.3, nz))])
    m = MeshHex.init_tensor(xs, ys, zs)
    mid = m.p[:, m.t].mean(axis=1)
    film = zs[nz - 3]
    keep = ~((mid[0] > xs[nx // 2]) & (mid[2] > film))
    m = m.restrict(np.flatnonzero(keep))
    mid = m.p[:, m.t].mean(axis=1)
    group = (mid[2] > film).astype(int)
    return m, group


def held_system(order=1, **kw):
    mesh, group = block_mesh(**kw)
    disc = discretise(mesh, order)
    K, f = assemble(disc, group, STIFF, EIG)
    x = disc.doflocs
    lo, hi = x.min(axis=1), x.max(axis=1)
    fixed = np.unique(np.concatenate([
        np.flatnonzero(np.isclose(x[2], lo[2])) * 3 + 2,
        np.flatnonzero(np.isclose(x[0], lo[0]) | np.isclose(x[0], hi[0])) * 3,
        np.flatnonzero(np.isclose(x[1], lo[1]) | np.isclose(x[1], hi[1])) * 3 + 1]))
    return disc, group, K, f, fixed


def spaces_of(disc, group):
    """The geometric coarse spaces the solver is given for a brick discretisation."""
    return SymbolicCache(disc).coarse_spaces(group)


@pytest.fixture(scope="module")
def system():
    return held_system()


@pytest.fixture(scope="module")
def reference(system):
    disc, group, K, f, fixed = system
    u, rep = solve_condensed(K, f, fixed, method="direct")
    assert rep.method == "direct" and rep.residual < 1e-12
    return u


def energy_error(K, u, ref, fixed):
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    A = condense(K, free)
    e = (u - ref)[free]
    return np.sqrt(e @ (A @ e) / (ref[free] @ (A @ ref[free])))


def test_geometric_multigrid_matches_direct(system, reference):
    disc, group, K, f, fixed = system
    u, rep = solve_condensed(K, f, fixed, rigid_body_modes(disc.doflocs), method="iterative",
                             spaces=spaces_of(disc, group))
    assert rep.method == "gmg-cg" and rep.levels >= 2
    assert rep.residual <= 1e-8
    assert energy_error(K, u, reference, fixed) < 1e-6
    assert rep.iterations < 40


def test_algebraic_multigrid_matches_direct(system, reference):
    disc, group, K, f, fixed = system
    K2 = sp.csr_matrix(K)            # a copy without the geometric coarse spaces
    assert getattr(K2, "coarse_spaces", None) is None
    u, rep = solve_condensed(K2, f, fixed, rigid_body_modes(disc.doflocs), method="iterative")
    assert rep.method == "amg-cg"
    assert energy_error(K, u, reference, fixed) < 1e-6


@pytest.mark.parametrize("precision", ["single", "double"])
def test_precision_of_the_preconditioner_does_not_limit_accuracy(system, reference, precision):
    disc, group, K, f, fixed = system
    u, rep = solve_condensed(K, f, fixed, method="iterative", tol=1e-11, stress_tol=1e-9,
                             precision=precision, spaces=spaces_of(disc, group))
    assert rep.precision == precision
    assert rep.residual <= 1e-10
    assert energy_error(K, u, reference, fixed) < 1e-8


def test_energy_error_estimate_bounds_the_true_error(system, reference):
    # stop early on purpose: the estimate must not be smaller than the true error by much
    disc, group, K, f, fixed = system
    for tol in (1e-3, 1e-5):
        u, rep = solve_condensed(K, f, fixed, method="iterative", tol=tol, stress_tol=1.0,
                                 spaces=spaces_of(disc, group))
        true = energy_error(K, u, reference, fixed)
        assert true <= 2.0 * rep.energy_error
        assert rep.energy_error <= 1e3 * max(true, 1e-12)


def test_stress_criterion_keeps_iterating_after_the_residual(system, reference):
    disc, group, K, f, fixed = system
    spaces = spaces_of(disc, group)
    loose = solve_condensed(K, f, fixed, method="iterative", tol=1e-2, stress_tol=1.0,
                            spaces=spaces)[1]
    strict = solve_condensed(K, f, fixed, method="iterative", tol=1e-2, stress_tol=1e-7,
                             spaces=spaces)[1]
    assert strict.iterations > loose.iterations
    assert strict.energy_error <= 1e-7


def test_more_smoothing_sweeps_give_the_same_solution(system, reference):
    disc, group, K, f, fixed = system
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    H = mg.Hierarchy(K, mg.restrict_spaces(spaces_of(disc, group), free), np.float32, keep=free,
                     sweeps=(3, 2))
    from mesastrain.fem.solve import _FreePart

    idx = np.flatnonzero(free)
    x, it, rel, err = pcg(_FreePart(K, idx), f[idx], H, 1e-10, 1e-8, 200)
    u = np.zeros(K.shape[0])
    u[idx] = x
    assert energy_error(K, u, reference, fixed) < 1e-7
    one = solve_condensed(K, f, fixed, method="iterative", tol=1e-10, stress_tol=1e-8,
                          spaces=spaces_of(disc, group))[1]
    assert it <= one.iterations


def test_quadratic_elements_use_a_trilinear_coarse_level():
    disc, group, K, f, fixed = held_system(order=2, nx=6, ny=5, nz=6)
    u_d, _ = solve_condensed(K, f, fixed, method="direct")
    u, rep = solve_condensed(K, f, fixed, method="iterative", spaces=spaces_of(disc, group))
    assert rep.method == "gmg-cg"
    assert energy_error(K, u, u_d, fixed) < 1e-6


def test_coarse_spaces_are_nested_and_galerkin_equals_rediscretisation():
    from skfem import MeshHex

    mesh, group = block_mesh()
    disc = discretise(mesh, 1)
    grid, verts = cg.grid_of(disc, group)
    keep_lines = cg.choose_coarse_lines(grid)
    coarse, P, inj = cg.coarsen(grid, keep_lines)
    assert P.shape == (grid.nnodes, coarse.nnodes)
    # feature lines (material interface, etch boundaries) survive
    for a in range(3):
        assert np.all(keep_lines[a][grid.feature[a]])
    # coarse mesh assembled directly
    cm = MeshHex.init_tensor(*coarse.lines)
    mid = cm.p[:, cm.t].mean(axis=1)
    idx = [np.searchsorted(coarse.lines[a], mid[a]) - 1 for a in range(3)]
    kept = coarse.keep[idx[0], idx[1], idx[2]]
    cm = cm.restrict(np.flatnonzero(kept))
    cmid = cm.p[:, cm.t].mean(axis=1)
    cgroup = (cmid[2] > mesh.p[2][mesh.t[:, group == 1]].min()).astype(int)
    cdisc = discretise(cm, 1)
    Kc, _ = assemble(cdisc, cgroup, STIFF, EIG)
    K, _ = assemble(disc, group, STIFF, EIG)
    # coarse grid node -> vertex of the coarse mesh, by coordinates
    pts = np.stack([coarse.lines[a][np.nonzero(coarse.node >= 0)[a]] for a in range(3)])
    order = np.argsort(coarse.node[coarse.node >= 0])
    pts = pts[:, order]
    key = lambda x: np.round(x.T / 1e-9).astype(np.int64)  # noqa: E731
    lookup = {tuple(k): i for i, k in enumerate(key(cm.p))}
    perm = np.array([lookup[tuple(k)] for k in key(pts)])
    Pv = cg._vector(P)
    G = (Pv.T @ K @ Pv).tocsr()
    pv = (3 * perm[:, None] + np.arange(3)).ravel()
    Kc_perm = Kc[pv][:, pv]
    assert abs(G - Kc_perm).max() <= 1e-11 * abs(Kc).max()
    # linear fields (rigid motions included) are reproduced exactly
    B = np.array([[0.3, -1.0, 0.2], [0.5, 0.1, -0.7], [1.1, 0.4, 0.9]])
    uc = (B @ pts).T.ravel()
    uf = (B @ disc.doflocs).T.ravel()
    np.testing.assert_allclose(Pv @ uc, uf, atol=1e-12 * np.abs(uf).max())
    fine_of_coarse = disc.doflocs[:, inj]
    np.testing.assert_allclose(fine_of_coarse, pts, atol=1e-12)


def test_quadratic_to_linear_prolongation_reproduces_trilinear_fields():
    mesh, group = block_mesh(6, 5, 6)
    d2 = discretise(mesh, 2)
    spaces = cg.grid_hierarchy(d2, group, coarsest=0, max_levels=1)
    P = spaces.prolongations[0]
    verts = spaces.injections[0]
    x = d2.doflocs
    # a trilinear function on each brick: products of coordinates up to xyz
    f = lambda x: 1.0 + x[0] - 2 * x[1] + 0.5 * x[0] * x[1] * x[2] + 0.3 * x[1] * x[2]  # noqa
    uc = np.repeat(f(x[:, verts]), 3)
    np.testing.assert_allclose(P @ uc, np.repeat(f(x), 3), rtol=0, atol=1e-10)


def test_condense_and_split_triangles():
    _, _, K, _, fixed = held_system(nx=5, ny=4, nz=5)
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    A = condense(K, free)
    idx = np.flatnonzero(free)
    assert abs(A - K[idx][:, idx]).max() == 0
    assert A.indices.dtype == np.int32
    LD, DU, d = mg.split_triangles(K, np.float64, free)
    assert abs(LD - sp.tril(A)).max() == 0 and abs(DU - sp.tril(A).T).max() == 0
    assert abs(DU - sp.triu(A)).max() <= 1e-14 * abs(A).max()     # K is symmetric
    np.testing.assert_array_equal(d, A.diagonal())


def test_choice_of_method_and_options():
    assert choose_method("auto", DIRECT_LIMIT) == "direct"
    assert choose_method("auto", DIRECT_LIMIT + 1) == "iterative"
    assert choose_method("auto", 5000, direct_limit=10000) == "direct"
    assert choose_method("direct", 10**7) == "direct"
    from mesastrain.case.types import SolverSettings

    opts = solver_options(SolverSettings("iterative", 1e-9, 50, 1e-5, "double", 100))
    assert opts == {"method": "iterative", "tol": 1e-9, "maxiter": 50, "stress_tol": 1e-5,
                    "precision": "double", "direct_limit": 100}


def test_dof_without_stiffness_is_reported(system):
    # a dof that belongs to no element (an orphan node) makes the system singular
    disc, group, K, f, fixed = system
    Kp = sp.block_diag([K, sp.csr_matrix((3, 3))], format="csr")
    fp = np.concatenate([f, [1.0, 0.0, 0.0]])
    for method in ("direct", "iterative"):
        with pytest.raises(SolverError):
            solve_condensed(Kp, fp, fixed, method=method, maxiter=60)


def test_no_convergence_is_an_error(system):
    disc, group, K, f, fixed = system
    with pytest.raises(SolverError, match="did not converge"):
        solve_condensed(K, f, fixed, method="iterative", maxiter=2,
                        spaces=spaces_of(disc, group))


def test_pcg_with_identity_preconditioner_solves_spd_system():
    rng = np.random.default_rng(0)
    M = rng.normal(size=(40, 40))
    A = sp.csr_matrix(M @ M.T + 40 * np.eye(40))
    b = rng.normal(size=40)
    x, it, rel, err = pcg(A, b, lambda r: r.copy(), 1e-12, 1e-10, 200)
    np.testing.assert_allclose(A @ x, b, rtol=0, atol=1e-9 * np.linalg.norm(b))


@pytest.mark.parametrize("key, value, message", [
    ("precision", "half", "precision"),
    ("stress_tolerance", 0.5, "stress_tolerance"),
    ("direct_limit", -1, "direct_limit"),
])
def test_solver_keys_are_validated(key, value, message):
    from mesastrain.case.parse import parse_case

    d = {"substrate": {"material": "Si", "thickness": 1000, "normal": [0, 0, 1],
                       "x_axis": [1, 0, 0]},
         "layer": [{"material": "SiGe", "x": 0.2, "thickness": 20}],
         "solver": {key: value}}
    with pytest.raises(CaseError, match=message):
        parse_case(d)
    ok = {"stress_tolerance": 1e-6, "precision": "double", "direct_limit": 0}
    d["solver"] = ok
    s = parse_case(d).solver
    assert (s.stress_tolerance, s.precision, s.direct_limit) == (1e-6, "double", 0)
