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
