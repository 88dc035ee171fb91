"""The derived-quantity providers run side by side by stage, with output independent of it."""

import json
import threading
import time

import numpy as np
import pytest

from mesastrain.derived import PROVIDERS
from mesastrain.io.export import jsonable
from mesastrain.io.folder import summary_of
from mesastrain.run.pipeline import run_case, run_providers
from mesastrain.run.result import Derived


def _untimed(x):
    """x without the entries that measure time (the only part that may differ)."""
    if isinstance(x, dict):
        return {k: _untimed(v) for k, v in x.items()
                if not any(w in k for w in ("seconds", "time", "timings"))}
    if isinstance(x, list):
        return [_untimed(v) for v in x]
    return x


def _plain(res):
    return _untimed(json.loads(json.dumps(jsonable(summary_of(res)))))


@pytest.mark.slow
def test_two_threads_give_the_same_result_as_one(small_mesa_case):
    res = run_case(small_mesa_case)
    one = run_case(small_mesa_case)
    run_providers(res, PROVIDERS, workers=2)
    run_providers(one, PROVIDERS, workers=1)
    assert res.warnings == one.warnings
    assert _plain(res) == _plain(one)
    for a, b in zip(res.derived, one.derived):
        assert a.cell_data.keys() == b.cell_data.keys()
        for k in a.cell_data:
            np.testing.assert_array_equal(a.cell_data[k], b.cell_data[k])


def _provider(name, stage, log, delay=0.0, reads=()):
    def derive(res):
        seen = {k for d in res.derived for k in d.summary}
        log.append((name, "start", threading.current_thread().name, frozenset(seen)))
        time.sleep(delay)
        missing = set(reads) - seen
        assert not missing, f"{name} ran before {missing}"
        return Derived(summary={name: stage}, warnings=[f"from {name}"])
    derive.stage = stage
    derive.__module__ = f"fake.{name}"
    return derive


class _Res:
    def __init__(self):
        self.derived, self.warnings = [], []


def test_stages_run_in_order_and_a_stage_side_by_side():
    log = []
    # the slow first provider finishes last: the parts still come out in list order
    ps = [_provider("a", 0, log, delay=0.2), _provider("b", 0, log), _provider("c", 0, log),
          _provider("d", 1, log, reads=("a", "b", "c")), _provider("e", 2, log, reads="abcd")]
    res = _Res()
    run_providers(res, ps, workers=2)
    assert [next(iter(d.summary)) for d in res.derived] == list("abcde")
    assert res.warnings == [f"from {k}" for k in "abcde"]
    threads = {t for _, _, t, _ in log[:3]}
    assert len(threads) == 2                       # stage 0 used both threads
    assert log[1][3] == frozenset()                # b started while a was still running


def test_one_worker_runs_them_in_the_calling_thread():
    log = []
    ps = [_provider("a", 0, log), _provider("b", 1, log, reads="a")]
    run_providers(_Res(), ps, workers=1)
    assert {t for _, _, t, _ in log} == {threading.current_thread().name}


def test_stages_out_of_order_are_refused():
    ps = [_provider("a", 1, []), _provider("b", 0, [])]
    with pytest.raises(ValueError, match="order of their stages"):
        run_providers(_Res(), ps, workers=2)


def test_a_failing_provider_raises_after_its_stage():
    log = []

    def bad(res):
        raise RuntimeError("boom")
    ps = [bad, _provider("b", 0, log, delay=0.1), _provider("c", 1, log)]
    with pytest.raises(RuntimeError, match="boom"):
        run_providers(_Res(), ps, workers=2)
    assert [name for name, *_ in log] == ["b"]     # its stage finished, the next did not start


def test_providers_side_by_side_do_not_split_their_own_work(monkeypatch):
    """A provider on a pool thread beside others sees one thread for its own array work
    (mesastrain.fem.parallel.limited); a stage of one provider keeps them all."""
    from mesastrain.fem import parallel

    monkeypatch.setattr(parallel, "usable_cores", lambda: 4)
    monkeypatch.delenv("MESASTRAIN_THREADS", raising=False)
    seen = {}

    def counting(name, stage):
        def derive(res):
            seen[name] = parallel.thread_count()
            return Derived(summary={name: stage})
        derive.stage = stage
        derive.__module__ = f"fake.{name}"
        return derive

    provs = [counting("a", 0), counting("b", 0), counting("alone", 1)]
    run_providers(_Res(), provs, workers=2)
    assert seen == {"a": 1, "b": 1, "alone": 4}
    assert parallel.thread_count() == 4
