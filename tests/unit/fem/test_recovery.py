"""Superconvergent patch recovery (fem/recovery) and the robust inverse map (fem/fields).

Patch tests: a recovery that is exact for every polynomial of the patch degree reproduces such a
field exactly, also one-sided at a material interface (Zienkiewicz & Zhu, Int. J. Numer. Meth.
Eng. 33, 1331 (1992): the consistency condition of SPR).
"""

import copy
import types

import numpy as np
import pytest
import skfem.refdom as refdom
from skfem import ElementHex1, ElementQuad1, ElementTetP1, MeshHex, MeshQuad, MeshTet
from skfem.quadrature import get_quadrature

from mesastrain.fem.fields import _parallelepipeds, reference_coordinates
from mesastrain.fem.mapping import as_fast
from mesastrain.fem.recovery import recover_at

RNG = np.random.default_rng(3)
A = RNG.normal(size=(3, 10))          # 3 components of a field, 10 quadratic coefficients


def field(x, degree, region):
    """A polynomial field of ``degree`` with different coefficients in each region."""
    x = np.atleast_2d(x)
    cols = [np.ones(len(x))] + [x[:, i] for i in range(x.shape[1])]
    if degree == 2:
        cols += [x[:, i] * x[:, j] for i in range(x.shape[1]) for j in range(i, x.shape[1])]
    P = np.stack(cols, axis=1)
    return P @ A[:, :P.shape[1]].T * (1.0 + region)[:, None]


def _setup(kind, order):
    if kind == "hex":
        m = MeshHex.init_tensor(np.linspace(0, 4, 5), np.linspace(0, 3, 4), np.linspace(-2, 2, 6))
        vref = ElementHex1().doflocs
    elif kind == "tet":
        m = MeshTet.init_tensor(np.linspace(0, 4, 5), np.linspace(0, 3, 4), np.linspace(-2, 2, 6))
        vref = ElementTetP1().doflocs
    else:
        m = MeshQuad.init_tensor(np.linspace(0, 4, 6), np.linspace(-2, 2, 6))
        vref = ElementQuad1().doflocs
    mid = m.p[:, m.t].mean(axis=1)
    region = (mid[-1] > 0).astype(int)            # an interface at the last coordinate = 0
    mapping = m.mapping()

    def sample(el, X):
        x = np.moveaxis(mapping.F(X, tind=el), 0, -1)           # (n, nq, dim)
        n, nq, dim = x.shape
        v = field(x.reshape(-1, dim), order, np.repeat(region[el], nq))
        return x, v.reshape(n, nq, 3)

    return m, vref, region, mapping, sample


@pytest.mark.parametrize("kind", ["hex", "tet", "quad"])
@pytest.mark.parametrize("order", [1, 2])
def test_recovery_reproduces_polynomials_per_region(kind, order):
    m, vref, region, mapping, sample = _setup(kind, order)
    dim = m.p.shape[0]
    # points inside, on element faces, on the interface (last coordinate 0) and on the surface
    pts = RNG.uniform(0.0, 1.0, size=(40, dim)) * (m.p.max(axis=1) - m.p.min(axis=1)) \
        + m.p.min(axis=1)
    pts[:10, -1] = 0.0                                   # on the interface
    pts[10:15, 0] = 2.0                                  # on a grid plane (element faces)
    pts[15:18, 0] = 0.0                                  # on the outer surface
    from mesastrain.mesh.unstructured import SimplexLocator
    for side in (0, 1):
        if kind == "tet":
            loc = SimplexLocator(m.p, m.t)
            cand = loc.all(pts)
        else:   # brute force for the test: every element whose box holds the point
            lo, hi = m.p[:, m.t].min(axis=1), m.p[:, m.t].max(axis=1)
            inside = np.all((pts.T[:, :, None] >= lo[:, None, :] - 1e-12)
                            & (pts.T[:, :, None] <= hi[:, None, :] + 1e-12), axis=0)
            cand = np.where(inside, np.arange(m.t.shape[1])[None, :], -1)
        ok = (cand >= 0) & (region[np.maximum(cand, 0)] == side)
        keep = ok.any(axis=1)
        el = cand[np.arange(len(pts)), np.argmax(ok, axis=1)][keep]
        X = reference_coordinates(mapping, pts[keep].T[:, :, None], el)[:, :, 0]
        got, deg = recover_at(m.p, m.t[:len(vref)], region, el, X, kind, order, vref, sample)
        want = field(pts[keep], order, np.full(keep.sum(), side))
        assert np.all(deg == order)
        np.testing.assert_allclose(got, want, atol=1e-9 * np.abs(want).max())


def test_inverse_map_never_raises_on_huge_coordinates_and_flat_elements():
    # a 1e-3 nm thick brick 1 mm from the origin: scikit-fem's invF (absolute tolerance 1e-12
    # nm) raises "Newton iteration didn't converge" here (issue #14)
    x = 1e6 + np.array([0.0, 7.0])
    m = MeshHex.init_tensor(x, np.array([-3.0, 4.0]), np.array([0.0, 1e-3]))
    mapping = m.mapping()
    pts = np.array([[1e6 + 3.5, 0.5, 5e-4], [1e6, -3.0, 0.0], [1e6 + 7.0, 4.0, 1e-3]])
    el = np.zeros(3, dtype=int)
    X = reference_coordinates(mapping, pts.T[:, :, None], el)
    back = mapping.F(X, tind=el)[:, :, 0].T                 # round trip to the points
    np.testing.assert_allclose((back - pts) / [7.0, 7.0, 1e-3], 0.0, atol=1e-7)
    assert np.all((X >= 0) & (X <= 1))
    # a badly distorted hexahedron and a point outside it: clipped, finite, no exception
    p = m.p.copy()
    p[:, 0] += [3.0, 2.0, 0.0]
    X = reference_coordinates(MeshHex(p, m.t).mapping(), np.array([[2e6], [50.0], [1.0]])[:, :, None],
                              np.array([0]))
    assert np.all(np.isfinite(X)) and np.all((X >= 0) & (X <= 1))


@pytest.mark.parametrize("kind", ["hex", "tet"])
@pytest.mark.parametrize("order", [1, 2])
def test_symmetric_tensors_recover_the_same_from_six_components(kind, order):
    """symmetric=True fits the 6 independent components of a symmetric 3x3 field: the same
    recovered tensor as fitting all 9 (the fit is component by component), symmetric, at
    points in equal blocks per element (the energy norm's Gauss points) and scattered."""
    m, vref, region, mapping, sample3 = _setup(kind, order)

    def sample(el, X):
        x, v = sample3(el, X)                                 # 3 components -> a symmetric
        s = np.einsum("...i,...j->...ij", v, v) + v[..., :1, None] * np.eye(3)   # tensor
        return x, s.reshape(*v.shape[:-1], 9)

    nel = m.t.shape[1]
    el = np.repeat(np.arange(nel), 4)
    X = RNG.uniform(0.1, 0.2, size=(3, el.size))              # inside hex and tet alike
    for elems, Xs in ((el, X), (el[::3], X[:, ::3])):
        full, d9 = recover_at(m.p, m.t[:len(vref)], region, elems, Xs, kind, order, vref,
                              sample)
        six, d6 = recover_at(m.p, m.t[:len(vref)], region, elems, Xs, kind, order, vref,
                             sample, symmetric=True)
        np.testing.assert_array_equal(d9, d6)
        np.testing.assert_allclose(six, full, rtol=0, atol=1e-12 * np.abs(full).max())
        t = six.reshape(-1, 3, 3)
        np.testing.assert_array_equal(t, t.transpose(0, 2, 1))


@pytest.mark.parametrize("kind", ["hex", "tet", "quad"])
@pytest.mark.parametrize("order", [1, 2])
def test_gauss_point_blocks_equal_the_same_points_one_by_one(kind, order):
    # Every Gauss point of every element, in element blocks (the energy-norm estimate's query,
    # which shares the shape values and gathers each element's patches once), against the same
    # points in reversed order, which takes the general path. The field is not a polynomial,
    # so the patches of boundary vertices do not fit it exactly and every blend weight counts.
    m, vref, region, mapping, _ = _setup(kind, order)
    dim = m.p.shape[0]

    def sample(el, X):
        x = np.moveaxis(mapping.F(X, tind=el), 0, -1)
        return x, np.sin(x @ np.arange(1.0, 1.0 + 3 * dim).reshape(dim, 3)) * (1 + region[el])[
            :, None, None]

    ref = {"hex": refdom.RefHex, "tet": refdom.RefTet, "quad": refdom.RefQuad}[kind]
    Xg, _ = get_quadrature(ref, 2 * order)
    nel, nq = m.t.shape[1], Xg.shape[1]
    el = np.repeat(np.arange(nel), nq)
    X = np.tile(Xg, (1, nel))
    got, deg = recover_at(m.p, m.t[:len(vref)], region, el, X, kind, order, vref, sample)
    back, deg_b = recover_at(m.p, m.t[:len(vref)], region, el[::-1], X[:, ::-1], kind, order,
                             vref, sample)
    np.testing.assert_allclose(got, back[::-1], rtol=0, atol=1e-12 * np.abs(got).max())
    np.testing.assert_array_equal(deg, deg_b[::-1])


def test_boxes_are_inverted_in_closed_form_and_other_elements_by_newton():
    # A graded tensor mesh far from the origin, one element sheared (not a box): every point
    # maps back onto itself, the boxes' answers equal Newton's to round-off, and the sheared
    # element's points still go through Newton (the closed form would be wrong there).
    xs = 1e6 + np.cumsum([0.0, 1.0, 2.5, 0.01, 7.0])
    m = MeshHex.init_tensor(xs, np.array([-3.0, 0.5, 4.0]), np.array([0.0, 1e-3, 2.0]))
    p = m.p.copy()
    # the outermost corner node belongs to one element only: move it sideways
    corner = int(np.argmax(p.sum(axis=0)))
    sheared = int(np.flatnonzero(np.any(m.t == corner, axis=0))[0])
    p[0, corner] += 0.3 * (p[0, m.t[:, sheared]].max() - p[0, m.t[:, sheared]].min())
    m = MeshHex(p, m.t)
    mapping = m.mapping()
    el = np.repeat(np.arange(m.t.shape[1]), 6)
    X0 = RNG.uniform(0.0, 1.0, size=(3, el.size, 1))
    X0[:, ::6] = 0.0                          # on a vertex
    X0[0, 1::6] = 1.0                         # on a face
    x = as_fast(mapping).F(X0, tind=el)
    X = reference_coordinates(mapping, x, el)
    # (coordinates near 1e6 nm carry 1.2e-10 nm of round-off: 1e-8 of a 0.01 nm element)
    np.testing.assert_allclose(X[:, el != sheared], X0[:, el != sheared], atol=1e-7)
    np.testing.assert_allclose(as_fast(mapping).F(X, tind=el), x, rtol=0, atol=1e-8)
    Xbox = np.full_like(X0, 0.5)
    rest = _parallelepipeds(as_fast(mapping), x, el, Xbox)
    assert set(el[rest]) == {sheared}
    boxed = np.setdiff1d(np.arange(el.size), rest)
    np.testing.assert_allclose(Xbox[:, boxed], X0[:, boxed], atol=1e-7)
    # the same answers as Newton's method alone (the element hidden behind a stand-in that
    # gives its shape functions but not its reference nodes, so the closed form is skipped)
    newton_only = copy.copy(as_fast(mapping))
    newton_only.elem = types.SimpleNamespace(lbasis=newton_only.elem.lbasis)
    Xn = reference_coordinates(newton_only, x, el)
    np.testing.assert_allclose(Xbox[:, boxed], Xn[:, boxed], rtol=0, atol=1e-7)
    # and on a mesh near the origin, to round-off
    xo = x - 1e6 * np.array([1.0, 0.0, 0.0])[:, None, None]
    mo = MeshHex(m.p - 1e6 * np.array([1.0, 0.0, 0.0])[:, None], m.t)
    Xo = reference_coordinates(mo.mapping(), xo, el)
    newton_only.mesh, newton_only._p = mo, np.asarray(mo.doflocs, dtype=float)
    Xno = reference_coordinates(newton_only, xo, el)
    np.testing.assert_allclose(Xo[:, boxed], Xno[:, boxed], rtol=0, atol=1e-12)
