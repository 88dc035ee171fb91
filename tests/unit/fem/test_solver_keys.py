"""The [solver] keys of a case reach the solver through the pipeline."""

import tomllib

import pytest

from mesastrain.case.parse import parse_case
from mesastrain.run.pipeline import run_case
from small_cases import SMALL_MESA


def test_solver_keys_take_effect():
    d = tomllib.loads(SMALL_MESA)
    d["solver"] = {"direct_limit": 10**7}
    direct = run_case(parse_case(d))
    d["solver"] = {"method": "iterative", "precision": "double"}
    iterative = run_case(parse_case(d))
    assert direct.solver.method == "direct" and direct.solver.iterations == 0
    assert iterative.solver.method != "direct" and iterative.solver.iterations > 0
    # both solve the same system: the probe stress agrees to the iteration tolerance
    assert iterative.probes[0]["stress"][0, 0] == pytest.approx(
        direct.probes[0]["stress"][0, 0], rel=1e-6)
