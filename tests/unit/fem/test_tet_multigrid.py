"""Algebraic and p-multigrid on tetrahedra: linear tetrahedra solve, quadratic ones converge fast.

Independent facts checked: the direct factorisation (SuperLU) as the reference
solution; the Galerkin identity of nested spaces (P1 functions are P2 functions,
so E^T K_P2 E equals the stiffness matrix assembled with P1 elements on the same
tetrahedra; common practice in multigrid, e.g. Trottenberg, Oosterlee and
Schueller, "Multigrid", 2001; Ronquist and Patera, Int. J. Numer. Meth. Eng.
24, 1987, for the p-hierarchy).
"""

import tomllib

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.fem.assembly import assemble, rigid_body_modes
from mesastrain.fem.constraints import support_dofs
from mesastrain.fem.discretisation import discretise_tet
from mesastrain.fem.pmultigrid import linear_space
from mesastrain.fem.solve import solve_condensed
from small_cases import EIG, STIFF, sige_on_si

SHAPES = {
    "disk": 'shape = "disk"\ndiameter = "200 nm"',
    "square": 'shape = "polygon"\nvertices = [[-100, -100], [100, -100], [100, 100], [-100, 100]]',
    "rounded": 'shape = "rectangle"\nwidth = "200 nm"\nlength = "150 nm"\ncorner_radius = "30 nm"',
}


def shape_system(shape, order, size):
    from mesastrain.run.pipeline import build_layers, build_model_mesh, decide_symmetry

    case = parse_case(tomllib.loads(sige_on_si("tet solver", SHAPES[shape], f"order = {order}\nsize = {size}")))
    layers = build_layers(case)
    sm = build_model_mesh(case, layers, decide_symmetry(case, layers))
    disc = sm.discretise(order)
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    K, f = assemble(disc, sm.region, stiff, eig)
    fixed = support_dofs(disc.doflocs, sm.boundary())
    return sm, disc, K, f, fixed


@pytest.mark.slow
@pytest.mark.parametrize("shape", sorted(SHAPES))
@pytest.mark.parametrize("size", [20, 10])
def test_linear_tetrahedra_algebraic_multigrid_solves(shape, size):
    """Issue 14: P1 + smoothed aggregation hit 'Factor is exactly singular' on these shapes."""
    _, disc, K, f, fixed = shape_system(shape, 1, size)
    modes = rigid_body_modes(disc.doflocs)
    u, rep = solve_condensed(K, f, fixed, modes, method="iterative", tol=1e-10,
                             stress_tol=1e-7)
    assert rep.method == "amg-cg"
    ud, _ = solve_condensed(K, f, fixed, modes, method="direct")
    assert np.linalg.norm(u - ud) <= 1e-6 * np.linalg.norm(ud)


def test_rank_deficient_aggregates_do_not_make_the_coarse_level_singular():
    """Two-node aggregates cannot carry six rigid-body modes: their empty columns are removed."""
    from skfem import MeshTet

    from mesastrain.fem.multigrid import algebraic_hierarchy
    from mesastrain.fem.solve import condense

    m = MeshTet.init_tensor(np.linspace(0, 3, 7), np.linspace(0, 2, 5), np.linspace(0, 1, 4))
    disc = discretise_tet(m, 1)
    group = (m.p[2, m.t].mean(axis=0) > 0.6).astype(int)
    K, f = assemble(disc, group, STIFF, EIG)
    x = disc.doflocs
    fixed = np.flatnonzero(np.isclose(x[2], 0.0)) * 3 + 2
    fixed = np.concatenate([fixed, np.flatnonzero(np.isclose(x[0], 0.0)) * 3,
                            np.flatnonzero(np.isclose(x[1], 0.0)) * 3 + 1])
    free = np.ones(K.shape[0], dtype=bool)
    free[fixed] = False
    A = condense(K, free)
    H = algebraic_hierarchy(A, rigid_body_modes(x)[free])
    r = np.random.default_rng(0).standard_normal(A.shape[0])
    z = H(r)
    assert np.all(np.isfinite(z)) and float(r @ z) > 0


def test_p1_embedding_gives_the_p1_stiffness_matrix():
    """E^T K(P2) E equals K(P1) assembled on the same tetrahedra (nested spaces)."""
    from skfem import MeshTet

    m = MeshTet.init_tensor(np.linspace(0, 2, 4), np.linspace(0, 1, 3), np.linspace(0, 1, 3))
    group = (m.p[2, m.t].mean(axis=0) > 0.5).astype(int)
    d2, d1 = discretise_tet(m, 2), discretise_tet(m, 1)
    K2, f2 = assemble(d2, group, STIFF, EIG)
    K1, f1 = assemble(d1, group, STIFF, EIG)
    lin = linear_space(d2)
    E, free1 = lin.vector_prolongation(np.ones(d2.ndofs, dtype=bool))
    assert free1.all()
    assert abs(E.T @ K2 @ E - K1).max() <= 1e-12 * abs(K1).max()
    assert np.allclose(E.T @ f2, f1, rtol=0, atol=1e-12 * abs(f1).max())
    assert linear_space(d1) is None


@pytest.mark.slow
def test_quadratic_tetrahedra_use_p_multigrid():
    _, disc, K, f, fixed = shape_system("rounded", 2, 20)
    modes = rigid_body_modes(disc.doflocs)
    u, rep = solve_condensed(K, f, fixed, modes, method="iterative", tol=1e-10,
                             stress_tol=1e-7, linear=linear_space(disc))
    assert rep.method == "pmg-cg" and rep.iterations < 40
    ud, _ = solve_condensed(K, f, fixed, modes, method="direct")
    assert np.linalg.norm(u - ud) <= 1e-6 * np.linalg.norm(ud)
