"""The cost model behind ``mesastrain check``: which solver and which stages it counts."""

import dataclasses
from pathlib import Path

import pytest

from mesastrain.case.parse import load_case
from mesastrain.fem import cost
from mesastrain.run.resources import estimate

CASES = Path(__file__).resolve().parents[3] / "cases"


def _without_pictures(case):
    return dataclasses.replace(case, output=dataclasses.replace(case.output, pictures=False))


def test_output_seconds_grow_with_size_and_pictures():
    small, large = cost.output_seconds(1e4), cost.output_seconds(1e6)
    assert large > small > 0
    assert cost.output_seconds(1e6, pictures=False) < large


def test_structured_estimate_counts_derived_and_writing():
    case = load_case(CASES / "sige_stressor_mesa.toml")
    est = estimate(case)
    # the whole (unfolded) body is what the derived quantities and the writing see
    assert est.seconds > cost.output_seconds(est.unknowns, pictures=True)
    quick = estimate(_without_pictures(case))
    assert est.seconds - quick.seconds == pytest.approx(
        cost.output_seconds(est.unknowns) - cost.output_seconds(est.unknowns, pictures=False),
        rel=1e-12)


def test_error_bars_are_counted():
    # issue 17's extra work: the coarser solve and patch recovery of the discretisation
    # error, one extra right-hand side per constant group of the material scatter
    from mesastrain.model.regions import build_layers
    from mesastrain.run.resources import error_bar_seconds
    from mesastrain.run.sensitivity import groups_of

    case = load_case(CASES / "sige_stressor_mesa.toml")
    est = estimate(case)
    no_err = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, error_estimate=False))
    plain = dataclasses.replace(no_err, uncertainty=dataclasses.replace(case.uncertainty,
                                                                        enabled=False))
    groups = groups_of(case, build_layers(case))
    assert len(groups) == 3          # Si C_ij, SiGe C_ij, SiGe lattice law (README)
    assert est.rhs_seconds > 0 and est.solver_seconds > 0
    assert estimate(no_err).seconds - estimate(plain).seconds == pytest.approx(
        3 * est.rhs_seconds, rel=1e-9)
    assert est.seconds - estimate(plain).seconds == pytest.approx(
        error_bar_seconds(case, est), rel=1e-9)
    # an extra right-hand side costs less than the solve it follows
    assert est.rhs_seconds < est.solver_seconds


def test_section_estimate_uses_the_direct_solver_that_auto_runs():
    case = load_case(CASES / "sige_line_grating.toml")
    assert case.solver.method == "auto"
    est = estimate(case)
    assert est.method == "direct"
    # a cross-section factorises far more cheaply than a 3-D body of the same size
    n, nnz = est.unknowns, est.unknowns * 18
    _, secs2 = cost.resources(n, nnz, est.elements, 4, 1, "direct", dimension=2)
    _, secs3 = cost.resources(n, nnz, est.elements, 4, 1, "direct", dimension=3)
    assert secs2 < secs3


def test_quadratic_tetrahedra_are_estimated_with_p_multigrid():
    case = load_case(CASES / "sige_l_pad.toml")
    assert case.mesh.order == 2
    est = estimate(case)
    assert est.method == "iterative"
    n = est.unknowns
    _, p = cost.resources(n, 30 * n, est.elements, 10, 2, "iterative", multigrid="p")
    _, a = cost.resources(n, 30 * n, est.elements, 10, 2, "iterative", multigrid="algebraic")
    assert p < a        # about 24 iterations instead of smoothed aggregation's 40+


def test_v_cycle_traffic_counts_every_pass():
    import numpy as np
    import pyamg
    import scipy.sparse as sp

    from mesastrain.fem.multigrid import algebraic_hierarchy

    A = sp.csr_matrix(pyamg.gallery.poisson((12, 12, 12)))
    single = algebraic_hierarchy(A, None, dtype=np.float32).traffic()
    double = algebraic_hierarchy(A, None, dtype=np.float64).traffic()
    # the finest level alone: four passes over a triangle (forward sweep, residual, the
    # product before the backward sweep, the backward sweep), each at least its values
    # and column indices (4 + 4 bytes per stored entry of a triangle in single precision)
    tri = (A.nnz + A.shape[0]) // 2
    assert single["levels"][0] >= 4 * 8 * tri
    assert single["bytes"] == sum(single["levels"])
    assert 0 < single["single_bytes"] < single["bytes"]
    assert double["single_bytes"] == 0
    # double-precision values move 4 more bytes per entry
    assert double["bytes"] > single["bytes"]
