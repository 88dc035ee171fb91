"""Work split over threads gives the same numbers as unsplit work.

The test processes run with ``MESASTRAIN_THREADS=1`` under pytest-xdist, so the
threaded paths are asked for explicitly here.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
from test_solve import held_system, spaces_of

from mesastrain.fem import parallel
from mesastrain.fem.solve import solve_condensed


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


def test_extra_solves_start_from_the_closest_multiple_of_the_main_solution(caplog):
    """A right-hand side that is a multiple of the load starts at the answer (the Galerkin
    multiple of the main solution) and stops within two iterations; any other one still
    converges."""
    import logging

    disc, group, K, f, fixed = held_system()
    out = {}

    def follow_up(u, solve):
        out["u"] = u
        out["scaled"] = solve(-2.5 * f, 1e-6, 1e-4)
        out["other"] = solve(np.random.default_rng(3).standard_normal(K.shape[0]), 1e-8, 1e-6)

    with caplog.at_level(logging.DEBUG, logger="mesastrain.fem.solve"):
        solve_condensed(K, f, fixed, method="iterative", spaces=spaces_of(disc, group),
                        follow_up=follow_up)
    counts = [int(r.getMessage().split(": ")[1].split()[0]) for r in caplog.records
              if "extra right-hand side" in r.getMessage()]
    assert counts[0] <= 2 and counts[1] > 3         # (from zero: as many as the other)
    np.testing.assert_allclose(out["scaled"], -2.5 * out["u"], rtol=0, atol=1e-7 *
                               np.abs(out["u"]).max())
    free = np.ones(K.shape[0], bool)
    free[fixed] = False
    rhs = np.random.default_rng(3).standard_normal(K.shape[0])
    A = K[free][:, free]
    res = np.linalg.norm(rhs[free] - A @ out["other"][free]) / np.linalg.norm(rhs[free])
    assert res < 1e-7


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("threads", ["1", "2", "3"])
def test_row_split_product_is_bitwise_the_plain_one(dtype, threads, monkeypatch):
    # rows of very different lengths and empty rows at both ends and inside: each block's
    # rows are summed exactly as by M @ x, so the split product equals it bit for bit; the
    # blocks are views of the matrix (no copy of its entries)
    import scipy.sparse as sp

    monkeypatch.setenv("MESASTRAIN_THREADS", threads)
    monkeypatch.setattr(parallel, "SPLIT_NNZ", 10)
    rng = np.random.default_rng(4)
    n = 5000
    lengths = rng.integers(0, 60, n)
    lengths[:7] = lengths[-5:] = lengths[2000:2100] = 0
    lengths[3000] = 4000
    rows = np.repeat(np.arange(n), lengths)
    cols = rng.integers(0, n, rows.size)
    M = sp.csr_matrix((rng.normal(size=rows.size).astype(dtype), (rows, cols)), shape=(n, n))
    M.sum_duplicates()
    x = rng.normal(size=n).astype(dtype)
    split = parallel.RowSplit(M)
    got = split @ x
    assert got.dtype == (M @ x).dtype
    np.testing.assert_array_equal(got, M @ x)
    parts = split.blocks(int(threads))
    assert parts[0][0] == 0 and parts[-1][1] == n
    assert all(a[1] == b[0] for a, b in zip(parts[:-1], parts[1:]))
    for _, _, view in parts:
        assert np.shares_memory(view.data, M.data) and np.shares_memory(view.indices, M.indices)


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="no fork on this platform")
@pytest.mark.timeout(60)                                  # without the fix the child hangs
def test_row_split_works_in_a_forked_child(monkeypatch):
    # the process-wide pool of the split products is made again in a forked child (its
    # parent's threads do not exist there): a product in the child neither hangs nor errs
    import os

    import scipy.sparse as sp

    monkeypatch.setenv("MESASTRAIN_THREADS", "2")
    monkeypatch.setattr(parallel, "SPLIT_NNZ", 10)
    M = sp.random(400, 400, density=0.05, format="csr", random_state=1)
    x = np.arange(400.0)
    want = M @ x
    np.testing.assert_array_equal(parallel.RowSplit(M) @ x, want)   # the pool exists now
    pid = os.fork()
    if pid == 0:                                                     # the child
        ok = np.array_equal(parallel.RowSplit(M) @ x, want)
        os._exit(0 if ok else 1)
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0
