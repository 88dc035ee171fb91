"""The vectorised isoparametric map against scikit-fem's own mapping."""

import numpy as np
import pytest
from skfem import MeshHex, MeshQuad

from mesastrain.fem.fields import reference_coordinates
from mesastrain.fem.mapping import IsoMapping, fast_mapping


def _distorted(mesh, seed=3):
    rng = np.random.default_rng(seed)
    p = mesh.p + 0.08 * rng.standard_normal(mesh.p.shape) / mesh.p.shape[1] ** (1 / mesh.dim())
    return type(mesh)(p, mesh.t)


@pytest.mark.parametrize("mesh", [_distorted(MeshHex().refined(2)),
                                  _distorted(MeshQuad().refined(3)),
                                  _distorted(MeshHex.init_tensor(np.linspace(0, 1e6, 4),
                                                                 np.linspace(0, 3.0, 3),
                                                                 np.linspace(-5, 40, 5)))])
def test_iso_mapping_matches_scikit_fem(mesh):
    rng = np.random.default_rng(7)
    dim = mesh.dim()
    sk = mesh.mapping()
    fast = fast_mapping(mesh)
    assert isinstance(fast, IsoMapping)
    tind = rng.integers(0, mesh.t.shape[1], 40)
    X = rng.random((dim, 40, 3))
    for name in ("F", "DF", "invDF"):
        a, b = getattr(sk, name)(X, tind=tind), getattr(fast, name)(X, tind=tind)
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * np.abs(a).max())
    # the same reference points in every element (scikit-fem's 2-D X)
    Xq = rng.random((dim, 5))
    np.testing.assert_allclose(fast.F(Xq, tind=tind), sk.F(Xq, tind=tind), rtol=1e-12,
                               atol=1e-12 * np.abs(mesh.p).max())


def test_reference_coordinates_invert_the_map():
    mesh = _distorted(MeshHex().refined(2))
    rng = np.random.default_rng(11)
    tind = rng.integers(0, mesh.t.shape[1], 200)
    X = rng.random((3, 200, 1))
    x = mesh.mapping().F(X, tind=tind)
    Xr = reference_coordinates(mesh.mapping(), x, tind)
    np.testing.assert_allclose(Xr, X, atol=1e-10)


def test_affine_mapping_is_kept():
    from skfem import MeshTet

    m = MeshTet()
    assert fast_mapping(m).__class__ is m.mapping().__class__
