"""Effectivity of the discretisation-error bars: estimate / error against a refined solve (slow).

For a mesa (hexahedra, order 1), a stripe section (order 2) and a disk (tetrahedra, order 2)
the run's bars (derived.discretisation.estimate) are compared with the actual error
|f_h - f_ref|, f_ref from a solve with every element size divided by 3 (the disk: 2); the
reference keeps an error of its own, about 1/3 (order 1) or 1/9 (order 2) of f_h's (1/4 for
the disk). Single-level Richardson extrapolation is a rough tool for individual figures on
coarse meshes (measured per figure: 0.15 to 48, benchmarks/discretisation_validation.py and
README.md); what is checked is the bulk: the median effectivity per case lies in [0.3, 5]
(measured 1.3 to 1.9; the band allows for the factor ~3 by which single figures scatter
around it), and at most one figure in four has a bar below a fifth of its error (the
dangerous side; measured 1 of 22, 0 of 15, 2 of 16). The bars also shrink when the mesh is
refined. The bow (its own plate model) is measured by the benchmark script.
"""

import dataclasses
import tomllib

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import device, readouts
from mesastrain.derived.discretisation import estimate
from mesastrain.derived.headline import headline_figures
from mesastrain.run.pipeline import run_case
from small_cases import SHAPE_CASES

pytestmark = pytest.mark.slow

CASES = SHAPE_CASES
#: Element sizes of the reference solve divided by this (the disk: 2, for memory and time).
REFERENCE = {"mesa hex1": 3.0, "stripe quad2": 3.0, "disk tet2": 2.0}
PROVIDERS = (device.derive, readouts.derive)


def solve(text, refine, providers=PROVIDERS):
    case = parse_case(tomllib.loads(text))
    case = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, refine=refine,
                                                              error_estimate=False))
    return run_case(case, providers=providers, max_memory_gb=float("inf"))


@pytest.mark.parametrize("name", list(CASES))
def test_effectivity_against_a_solve_refined_three_times(name):
    res = solve(CASES[name], 1.0)
    est = estimate(res)["figures"]
    ref = {f.name: f.value for f in headline_figures(solve(CASES[name], REFERENCE[name]))}
    eff = []
    for f in headline_figures(res):
        if f.singular or f.kind == "bow" or f.name not in ref:
            continue
        true = abs(f.value - ref[f.name])
        if true < 1e-9 * max(abs(f.value), 1.0):
            continue
        eff.append(est[f.name]["error"] / true)
    eff = np.array(eff)
    assert eff.size >= 10
    assert 0.3 <= np.median(eff) <= 5.0, eff
    assert np.mean(eff < 0.2) <= 0.25, eff


def test_bars_shrink_under_refinement():
    """Stripe section, order 2, element sizes / 2 (refine 2 -> 4): the bars of the stress and
    length figures fall by about 2^2 (measured 0.20-0.21 for the centre, probe and relaxation
    length), those of the stand-off values more slowly (0.2-0.6: the nearby singular edge
    lowers the rate). On the coarsest meshes (refine 1 -> 2) they did not yet fall
    reliably (median 0.76): the single-level extrapolation wants the asymptotic range."""
    text = CASES["stripe quad2"]
    e1 = estimate(solve(text, 2.0))["figures"]
    e2 = estimate(solve(text, 4.0))["figures"]
    kinds = {f.name: f.kind for f in headline_figures(solve(text, 2.0))}
    ratios = {n: e2[n]["error"] / e1[n]["error"] for n in e1
              if "error" in e1[n] and n in e2
              and kinds.get(n) in ("centre", "probe", "relaxation", "standoff")}
    assert len(ratios) >= 10
    assert max(ratios.values()) < 0.7, ratios
    smooth = [r for n, r in ratios.items() if kinds[n] != "standoff"]
    assert max(smooth) < 0.35, ratios
