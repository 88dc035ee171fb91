"""Numbering the mirror images of the solved part's points (mesh.unfold._merge)."""

import numpy as np
import pytest

from mesastrain.mesh.unfold import _merge, images


def _by_sorting(points, signs, span):
    """The reference: every image rounded to a grid of span * 1e-9, equal keys merged,
    numbered by first occurrence (what the unfolding did before, with numpy.unique)."""
    allp = np.concatenate([points * s[:, None] for s in signs], axis=1).T
    keys = np.round(allp / (span * 1e-9)).astype(np.int64)
    _, first, inverse = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    rank = np.empty(len(first), dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(first))
    ids = rank[inverse.ravel()]
    n = points.shape[1]
    return len(first), [ids[k * n:(k + 1) * n] for k in range(len(signs))]


@pytest.mark.parametrize("mirrors, dim", [((0,), 3), ((1,), 3), ((0, 1), 3), ((0,), 2)])
def test_merge_numbers_images_as_merging_rounded_keys(mirrors, dim):
    # points off the planes, on one plane, on both, within the merge tolerance of a plane
    # (3e-10 of the span: merged) and just outside it (7e-10: kept apart), in random order
    rng = np.random.default_rng(len(mirrors) + dim)
    span = 400.0
    n = 3000
    p = rng.uniform(0.0, span, size=(dim, n))
    planes = [a if dim == 3 else 0 for a in mirrors]
    for a in planes:
        p[a, rng.random(n) < 0.3] = 0.0
        p[a, rng.random(n) < 0.05] = 3e-10 * span
        p[a, rng.random(n) < 0.05] = 7e-10 * span
    signs = images(mirrors)
    if dim == 2:
        signs = signs[:, [0, 2]]
    count, maps = _merge(p, signs, span)
    want_count, want = _by_sorting(p, signs, span)
    assert count == want_count
    for got, ref in zip(maps, want):
        np.testing.assert_array_equal(got, ref)
    np.testing.assert_array_equal(maps[0], np.arange(n))      # the solved part keeps its own
