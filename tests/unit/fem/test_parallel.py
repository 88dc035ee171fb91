"""Work split over threads gives the same numbers as unsplit work.

The test processes run with ``MESASTRAIN_THREADS=1`` under pytest-xdist, so the
threaded paths are asked for explicitly here (``threads=2`` or a patched
:func:`mesastrain.fem.parallel.thread_count`).
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
import scipy.sparse as sp
from test_solve import held_system, spaces_of

from mesastrain.fem import multigrid as mg
from mesastrain.fem import parallel
from mesastrain.fem.solve import solve_condensed


def same_csr(a, b) -> bool:
    a, b = sp.csr_matrix(a).copy(), sp.csr_matrix(b).copy()
    a.sort_indices()
    b.sort_indices()
    return (a.shape == b.shape and np.array_equal(a.indptr, b.indptr)
            and np.array_equal(a.indices, b.indices) and np.array_equal(a.data, b.data))


@pytest.fixture
def two_threads(monkeypatch):
    """Every default thread count is 2, and splitting starts at small matrices."""
    monkeypatch.setattr(parallel, "thread_count", lambda: 2)
    monkeypatch.setattr(parallel, "SPLIT_MIN_NNZ", 0)


def random_csr(n, m, density, seed):
    return sp.random(n, m, density=density, format="csr", random_state=seed,
                     dtype=np.float64)


@pytest.mark.parametrize("threads", [1, 2, 3, 7])
def test_row_split_product_is_the_product_entry_for_entry(monkeypatch, threads):
    monkeypatch.setattr(parallel, "SPLIT_MIN_NNZ", 0)
    A = random_csr(301, 157, 0.05, 1)
    B = random_csr(157, 211, 0.04, 2)
    C = parallel.by_rows(lambda r0, r1: A[r0:r1] @ B, A, threads)
    assert same_csr(C, A @ B)
    # rows with no entries at the ends and in the middle
    A = A.tolil()
    A[:20] = 0
    A[150:180] = 0
    A = A.tocsr()
    assert same_csr(parallel.by_rows(lambda r0, r1: A[r0:r1] @ B, A, threads), A @ B)


def test_row_blocks_cover_the_rows_once_and_balance_entries():
    A = random_csr(1000, 1000, 0.01, 3)
    blocks = parallel.row_blocks(A, 4)
    assert blocks[0][0] == 0 and blocks[-1][1] == 1000
    assert all(b[1] == c[0] for b, c in zip(blocks, blocks[1:]))
    per = [A.indptr[b] - A.indptr[a] for a, b in blocks]
    assert max(per) - min(per) <= 2 * A.getnnz(axis=1).max()
    # more parts than rows: no empty block, every row once
    small = random_csr(3, 5, 0.9, 4)
    blocks = parallel.row_blocks(small, 8)
    assert sum(b - a for a, b in blocks) == 3 and all(b > a for a, b in blocks)


def test_stacked_rows_keep_index_width_and_order():
    A = random_csr(50, 40, 0.1, 5)
    parts = [A[0:10], A[10:11], A[11:50]]
    S = parallel.stack_rows(parts)
    assert same_csr(S, A) and S.indices.dtype == np.int32


def test_map_threads_keeps_order_and_raises_the_first_failure():
    seen = set()

    def f(x):
        seen.add(threading.get_ident())
        if x == 3:
            raise ValueError("three")
        return x * x

    assert parallel.map_threads(f, range(3), 2) == [0, 1, 4]
    with pytest.raises(ValueError, match="three"):
        parallel.map_threads(f, range(6), 2)


def test_thread_count_follows_the_environment(monkeypatch):
    monkeypatch.setenv("MESASTRAIN_THREADS", "1")
    assert parallel.thread_count() == 1
    monkeypatch.setenv("MESASTRAIN_THREADS", "64")
    assert parallel.thread_count() == parallel.usable_cores()
    monkeypatch.setenv("MESASTRAIN_THREADS", "many")
    assert parallel.thread_count() == parallel.usable_cores()


def test_hierarchy_on_two_threads_equals_one_thread(monkeypatch):
    """Triangles, diagonals and every Galerkin level identical, bit for bit."""
    disc, group, K, f, fixed = held_system()
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    Ps = mg.restrict_spaces(spaces_of(disc, group), free)
    monkeypatch.setattr(parallel, "thread_count", lambda: 1)
    H1 = mg.Hierarchy(K, Ps, keep=free)
    monkeypatch.setattr(parallel, "thread_count", lambda: 2)
    monkeypatch.setattr(parallel, "SPLIT_MIN_NNZ", 0)
    H2 = mg.Hierarchy(K, Ps, keep=free)
    assert H1.sizes == H2.sizes and len(H1.LD) >= 2
    for lev in range(len(H1.LD)):
        assert same_csr(H1.LD[lev], H2.LD[lev]) and same_csr(H1.DU[lev], H2.DU[lev])
        np.testing.assert_array_equal(H1.d[lev], H2.d[lev])
    r = np.random.default_rng(0).random(H1.sizes[0])
    np.testing.assert_array_equal(H1(r), H2(r))


def test_split_triangles_in_many_chunks(monkeypatch):
    """Row chunks of a few rows (the chunk size follows the entries per row)."""
    _, _, K, _, fixed = held_system(nx=5, ny=4, nz=5)
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    ref = mg.split_triangles(K, np.float64, free, threads=1)
    monkeypatch.setattr(mg, "CHUNK_ENTRIES", 500)
    got = mg.split_triangles(K, np.float64, free, threads=2)
    assert same_csr(ref[0], got[0]) and same_csr(ref[1], got[1])
    np.testing.assert_array_equal(ref[2], got[2])


@pytest.mark.parametrize("method", ["iterative", "direct"])
def test_extra_right_hand_sides_solved_at_once_equal_one_by_one(method):
    """solve_again from several threads at once (the sensitivities' groups) gives what
    each solve gives alone: the V-cycle holds no state, the LU is used in turn."""
    disc, group, K, f, fixed = held_system()
    rng = np.random.default_rng(7)
    rhs = [rng.standard_normal(K.shape[0]) for _ in range(4)]
    out = {}

    def follow_up(u, solve):
        out["serial"] = [solve(b, 1e-6, 1e-4) for b in rhs]
        out["threads"] = parallel.map_threads(lambda b: solve(b, 1e-6, 1e-4), rhs, 4)

    spaces = spaces_of(disc, group) if method == "iterative" else None
    solve_condensed(K, f, fixed, method=method, spaces=spaces, follow_up=follow_up)
    for a, b in zip(out["serial"], out["threads"]):
        np.testing.assert_array_equal(a, b)
        assert np.any(a)


def test_limited_caps_this_thread_only(monkeypatch):
    monkeypatch.setattr(parallel, "usable_cores", lambda: 4)
    monkeypatch.delenv("MESASTRAIN_THREADS", raising=False)
    assert parallel.thread_count() == 4
    other = []
    with parallel.limited(1):
        assert parallel.thread_count() == 1
        with parallel.limited(3):              # a nested limit never raises the cap
            assert parallel.thread_count() == 1
        t = threading.Thread(target=lambda: other.append(parallel.thread_count()))
        t.start()
        t.join()
    assert other == [4]
    with parallel.limited(2):
        assert parallel.thread_count() == 2
    assert parallel.thread_count() == 4
