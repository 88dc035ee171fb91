"""Assembly of the anisotropic stiffness matrix and the eigenstrain load.

References: the weak form int eps(v) : C : eps(u) dV = int eps(v) : C : eps0 dV
of linear elasticity with eigenstrain (common practice; e.g. Hughes, "The Finite
Element Method", Dover 2000, ch. 2), assembled independently by scikit-fem's own
``BilinearForm``/``LinearForm`` machinery with an einsum form. The brick kernel
and the generic kernel must agree with it, and with each other, to round-off.
"""

import numpy as np
import pytest
import scipy.sparse as sp

from mesastrain.fem.assembly import (
    SymbolicCache,
    assemble,
    assemble_load,
    assemble_matrix,
    build_pattern,
    rigid_body_modes,
)
from mesastrain.fem.discretisation import Discretisation, brick_maps, discretise
from mesastrain.physics.crystal import voigt_to_full
from small_cases import EIG, STIFF


def graded_mesh(seed=0, restrict=True):
    from skfem import MeshHex

    rng = np.random.default_rng(seed)
    xs = np.concatenate([[0.0], np.cumsum(rng.random(4) + 0.2)])
    ys = np.concatenate([[0.0], np.cumsum(rng.random(3) + 0.2)])
    zs = np.concatenate([[0.0], np.cumsum(rng.random(4) * 3 + 0.1)])
    m = MeshHex.init_tensor(xs, ys, zs)
    if restrict:   # remove a corner block of cells: an etched, non-box body
        mid = m.p[:, m.t].mean(axis=1)
        keep = ~((mid[0] > xs[2]) & (mid[2] > zs[3]))
        m = m.restrict(np.flatnonzero(keep))
    return m


def full_basis_disc(mesh, order):
    """The generic discretisation: a scikit-fem basis with all gradients stored."""
    from skfem import Basis, ElementHex1, ElementHex2

    from mesastrain.fem.discretisation import INTORDER

    b = Basis(mesh, {1: ElementHex1, 2: ElementHex2}[order](), intorder=INTORDER[order])
    return Discretisation(basis=b, order=order, element_dofs=np.ascontiguousarray(b.element_dofs),
                          ndofs=3 * b.N, doflocs=np.asarray(b.doflocs))


def skfem_reference(mesh, elem, intorder, group, cell_eig=None):
    """K and f by scikit-fem's own forms with a per-element rotated tensor C."""
    from skfem import Basis, BilinearForm, ElementVector, LinearForm, asm
    from skfem.helpers import sym_grad

    vb = Basis(mesh, ElementVector(elem), intorder=intorder)
    C = voigt_to_full(STIFF)[group]                                 # (nel,3,3,3,3)
    nq = vb.X.shape[1]
    Cf = np.broadcast_to(np.moveaxis(C, 0, -1)[..., None], C.shape[1:] + (len(group), nq))
    e0 = EIG[group] if cell_eig is None else EIG[group] + cell_eig
    E0 = np.broadcast_to(np.moveaxis(e0, 0, -1)[..., None], (3, 3, len(group), nq))

    @BilinearForm
    def stiffness(u, v, w):
        return np.einsum("ijkl...,kl...,ij...->...", w.Cf, sym_grad(u), sym_grad(v))

    @LinearForm
    def load(v, w):
        return np.einsum("ijkl...,kl...,ij...->...", w.Cf, w.E0, sym_grad(v))

    return asm(stiffness, vb, Cf=Cf), asm(load, vb, Cf=Cf, E0=E0)


@pytest.mark.parametrize("order", [1, 2])
def test_brick_and_generic_kernels_match_scikit_fem(order):
    from skfem import ElementHex1, ElementHex2

    from mesastrain.fem.discretisation import INTORDER

    mesh = graded_mesh()
    nel = mesh.t.shape[1]
    rng = np.random.default_rng(3)
    group = rng.integers(0, 2, nel)
    cell = rng.normal(scale=1e-3, size=(nel, 3, 3))
    cell = 0.5 * (cell + cell.transpose(0, 2, 1))
    Kref, fref = skfem_reference(mesh, {1: ElementHex1, 2: ElementHex2}[order](),
                                 INTORDER[order], group, cell)
    brick = discretise(mesh, order)
    assert brick.bricks is not None
    generic = full_basis_disc(mesh, order)
    for disc in (brick, generic):
        K, f = assemble(disc, group, STIFF, EIG, cell)
        scale = abs(Kref).max()
        assert abs(K - Kref).max() <= 1e-12 * scale
        assert np.max(np.abs(f - fref)) <= 1e-12 * np.max(np.abs(fref))
    np.testing.assert_allclose(brick.doflocs, generic.doflocs, atol=1e-12)


def test_generic_kernel_on_tetrahedra_matches_scikit_fem():
    # the geometry helper passes tetrahedral discretisations to assemble()
    from skfem import Basis, ElementTetP2, MeshTet

    mesh = MeshTet.init_tensor(np.linspace(0, 2, 3), np.linspace(0, 1, 3), np.linspace(0, 1.5, 4))
    p = mesh.p.copy()
    p[0] += 0.1 * np.sin(3 * p[1]) * p[2]     # distorted (not brick-aligned) but valid
    mesh = MeshTet(p, mesh.t)
    b = Basis(mesh, ElementTetP2(), intorder=2)
    disc = Discretisation(basis=b, order=2, element_dofs=b.element_dofs, ndofs=3 * b.N,
                          doflocs=b.doflocs)
    group = np.arange(mesh.t.shape[1]) % 2
    K, f = assemble(disc, group, STIFF, EIG)
    Kref, fref = skfem_reference(mesh, ElementTetP2(), 2, group)
    assert abs(K - Kref).max() <= 1e-12 * abs(Kref).max()
    assert np.max(np.abs(f - fref)) <= 1e-12 * np.max(np.abs(fref))


def test_matrix_structure_is_canonical_int32_csr():
    disc = discretise(graded_mesh(), 1)
    K = assemble_matrix(disc, np.zeros(disc.nelems, int), STIFF[:1])
    assert K.format == "csr"
    assert K.indices.dtype == np.int32 and K.indptr.dtype == np.int32
    # sorted, no duplicates: the canonical form scipy would produce
    ref = sp.csr_matrix(K.toarray())
    ref.sum_duplicates()
    K2 = K.copy()
    K2.has_canonical_format = False
    K2.sum_duplicates()
    assert K2.nnz == K.nnz
    for r in range(0, K.shape[0], 7):
        cols = K.indices[K.indptr[r]:K.indptr[r + 1]]
        assert np.all(np.diff(cols) > 0)
    assert abs(K - K.T).max() <= 1e-12 * abs(K).max()


def test_pattern_is_the_element_connectivity():
    # entries of the pattern = pairs of dofs that share an element (no more, no less)
    mesh = graded_mesh()
    disc = discretise(mesh, 2)
    pat = build_pattern(disc.element_dofs, disc.ndofs // 3)
    ed = disc.element_dofs
    rows = np.repeat(ed, ed.shape[0], axis=0).ravel()
    cols = np.tile(ed, (ed.shape[0], 1)).ravel()
    S = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(ed.max() + 1,) * 2)
    S.sum_duplicates()
    V = sp.csr_matrix((np.ones(pat.nnz), pat.indices, pat.indptr))
    expected = sp.kron(S, np.ones((3, 3))).tocsr()
    assert V.nnz == expected.nnz
    assert abs((V != 0).astype(int) - (expected != 0).astype(int)).nnz == 0


def test_symbolic_structure_is_reused():
    disc = discretise(graded_mesh(), 1)
    group = np.zeros(disc.nelems, int)
    cache = SymbolicCache(disc)
    p1 = cache.pattern
    K1 = assemble_matrix(disc, group, STIFF[:1], cache)
    K2 = assemble_matrix(disc, group, 2.0 * STIFF[:1], cache)
    assert cache.pattern is p1
    assert np.shares_memory(K1.indices, K2.indices)   # the same symbolic arrays, new values
    assert abs(K2 - 2.0 * K1).max() <= 1e-12 * abs(K1).max()


def test_rigid_body_modes_are_in_the_kernel():
    # an unconstrained body stores no energy under rigid translation or rotation
    disc = discretise(graded_mesh(), 2)
    K = assemble_matrix(disc, np.arange(disc.nelems) % 2, STIFF)
    B = rigid_body_modes(disc.doflocs)
    assert np.max(np.abs(K @ B)) <= 1e-10 * abs(K).max()


def test_uniform_eigenstrain_in_a_free_body_gives_no_stress():
    # a free body with a uniform eigenstrain deforms by exactly that strain (common practice):
    # K u = f is solved by the linear field u = eps0 x, so K (eps0 x) = f
    disc = discretise(graded_mesh(restrict=False), 1)
    group = np.ones(disc.nelems, int)
    K, f = assemble(disc, group, STIFF, EIG)
    u = (EIG[1] @ disc.doflocs).T.ravel()
    assert np.max(np.abs(K @ u - f)) <= 1e-10 * np.max(np.abs(f))


def test_brick_detection():
    from skfem import MeshHex

    mesh = graded_mesh()
    perm = np.random.default_rng(0).permutation(mesh.t.shape[1])
    shuffled = MeshHex(mesh.p, mesh.t[:, perm])
    corner, h, axis = brick_maps(shuffled)
    vol = np.abs(np.prod(h, axis=1))
    from skfem import Basis, ElementHex1

    ref = Basis(shuffled, ElementHex1(), intorder=3).dx.sum(axis=1)
    np.testing.assert_allclose(vol, ref, rtol=1e-12)
    p = mesh.p.copy()
    p[0] += 0.05 * p[2]                                  # sheared: not bricks
    assert brick_maps(MeshHex(p, mesh.t)) is None
    assert discretise(MeshHex(p, mesh.t), 1).bricks is None


def test_load_alone_matches_assemble():
    disc = discretise(graded_mesh(), 1)
    group = np.arange(disc.nelems) % 2
    _, f = assemble(disc, group, STIFF, EIG)
    np.testing.assert_array_equal(assemble_load(disc, group, STIFF, EIG), f)


def test_load_skips_unloaded_regions_exactly():
    # group 0 without eigenstrain: its elements are not visited; the same load given as
    # a per-cell eigenstrain (every element visited) is the reference
    disc = discretise(graded_mesh(), 1)
    group = np.arange(disc.nelems) % 2
    eig = np.asarray(EIG, dtype=float).copy()
    eig[0] = 0.0
    f = assemble_load(disc, group, STIFF, np.zeros_like(eig), eig[group])
    got = assemble_load(disc, group, STIFF, eig)
    assert np.any(f != 0)
    np.testing.assert_allclose(got, f, rtol=0, atol=1e-12 * np.abs(f).max())


@pytest.mark.parametrize("order, refine", [(1, 0.6), (1, 1.0), (2, 0.4)])
def test_estimate_counts_unknowns_and_nonzeros_exactly(order, refine):
    # `mesastrain check` promises exact unknowns: count them without meshing, then mesh
    import dataclasses
    from pathlib import Path

    from mesastrain.case.parse import load_case
    from mesastrain.fem.cost import pattern_nonzeros
    from mesastrain.model.regions import build_layers
    from mesastrain.run.pipeline import build_model_mesh, decide_symmetry
    from mesastrain.run.resources import estimate

    case = load_case(Path(__file__).resolve().parents[3] / "cases" / "sige_stressor_mesa.toml")
    case = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, order=order,
                                                               refine=refine))
    est = estimate(case)
    layers = build_layers(case)
    sm = build_model_mesh(case, layers, decide_symmetry(case, layers))
    disc = sm.discretise(order)
    assert est.solved_unknowns == disc.ndofs
    K = assemble_matrix(disc, sm.layer, np.array([lm.stiffness_sample for lm in layers]))
    from mesastrain.mesh.grid import axis_coordinates, keep_mask
    from mesastrain.mesh.planning import layout_of

    geom, spacing = layout_of(case)
    xs, ys, zs = axis_coordinates(geom, spacing)
    xs, ys = xs[xs >= 0], ys[ys >= 0]                 # the quarter that is solved
    nnz = pattern_nonzeros(keep_mask(geom, xs, ys, zs), order)
    if order == 1:
        assert nnz == K.nnz
    else:                                             # interior-stencil approximation
        assert abs(nnz - K.nnz) <= 0.12 * K.nnz
    assert est.memory_gb > 0 and est.seconds > 0


@pytest.mark.parametrize("order", [1, 2])
def test_tensor_grid_is_assembled_without_unbuffered_adds(order, monkeypatch):
    # On a tensor-product grid every local dof is a different global dof in each element,
    # so the matrix is summed pair by pair with plain gathers and scatters: np.add.at is
    # not called, and the matrix still equals scikit-fem's
    from skfem import ElementHex1, ElementHex2

    from mesastrain.fem.discretisation import INTORDER

    mesh = graded_mesh()
    group = np.random.default_rng(5).integers(0, 2, mesh.t.shape[1])
    Kref, _ = skfem_reference(mesh, {1: ElementHex1, 2: ElementHex2}[order](),
                              INTORDER[order], group)
    disc = discretise(mesh, order)

    def refuse(*a, **k):
        raise AssertionError("np.add.at on a tensor grid")

    with monkeypatch.context() as m:
        m.setattr(np.add, "at", refuse)
        K = assemble_matrix(disc, group, STIFF)
    assert abs(K - Kref).max() <= 1e-12 * abs(Kref).max()
