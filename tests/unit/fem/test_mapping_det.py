"""The fast isoparametric map agrees with scikit-fem's own (Jacobian and its determinant)."""

import numpy as np
from skfem import MeshHex, MeshQuad

from mesastrain.fem.mapping import IsoMapping


def test_detdf_and_df_match_scikit_fem_on_distorted_elements():
    rng = np.random.default_rng(3)
    for m in (MeshHex().refined(1), MeshQuad().refined(1)):
        m = type(m)(m.p + 0.05 * rng.standard_normal(m.p.shape), m.t)
        ref, fast = m.mapping(), IsoMapping(m.mapping())
        dim = m.p.shape[0]
        X = rng.uniform(0.1, 0.9, size=(dim, 5))
        el = np.arange(m.t.shape[1])
        Xr = np.repeat(X[:, None, :], el.size, axis=1)
        np.testing.assert_allclose(fast.detDF(Xr, tind=el), ref.detDF(Xr, tind=el), rtol=1e-12)
        np.testing.assert_allclose(fast.DF(Xr, tind=el), ref.DF(Xr, tind=el), rtol=1e-12,
                                   atol=1e-14)
