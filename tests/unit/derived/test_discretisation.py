"""Discretisation error of the headline figures (derived.discretisation): structure and checks.

The effectivity of the bars against refined solves is measured in
test_discretisation_validation.py (slow).
"""

import dataclasses
import tomllib

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import PROVIDERS, device, discretisation, headline, readouts
from mesastrain.derived.headline import headline_figures, merged_summary
from mesastrain.run.pipeline import run_case
from small_cases import sige_on_si

BLANKET = sige_on_si("blanket", 'shape = "none"', "order = 1",
                     extra='[[probe]]\nname = "c"\nat = [0, 0, 10]\n').replace(
                         'etch_depth = "30 nm"\n', "")
MESA = sige_on_si("mesa", 'shape = "rectangle"\nwidth = "200 nm"\nlength = "300 nm"',
                  "order = 1\nsize = 50\nedge_size = 20")


def case_of(text, **mesh):
    case = parse_case(tomllib.loads(text))
    return dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, **mesh))


def test_runs_before_the_headline_and_after_what_it_reads():
    from mesastrain.derived import discretisation

    names = [p.__module__.rsplit(".", 1)[-1] for p in PROVIDERS]
    stage = {p: getattr(p, "stage", 0) for p in PROVIDERS}
    k = PROVIDERS.index(discretisation.derive)
    assert names[-1] == "headline" and stage[PROVIDERS[-1]] > stage[discretisation.derive]
    # the figures it reads come from providers of an earlier stage
    for p in PROVIDERS:
        if p.__module__.rsplit(".", 1)[-1] in ("device", "readouts", "bow"):
            assert stage[p] < stage[discretisation.derive] and PROVIDERS.index(p) < k
    # the energy norm reads only the solved fields: it runs with the first stage
    assert stage[discretisation.energy] == 0


def test_every_nonsingular_headline_figure_gets_a_bar(small_mesa_result):
    res = small_mesa_result
    s = merged_summary(res)
    de = s["discretisation_error"]
    assert "Zienkiewicz" in de["method"] and "Richardson" in de["method"]
    assert 0.0 < de["energy_norm"]["relative"] < 1.0
    assert de["coarse_solve"]["unknowns"] < res.u.size / 4      # ~1/8 of the unknowns
    rows = {r["name"]: r for r in s["headline"]}
    for f in headline_figures(res):
        e = de["figures"][f.name]
        assert rows[f.name]["discretisation_error"] == e         # attached to the headline row
        if f.singular:
            assert e == {"singular": True}
            continue
        assert np.isfinite(e["error"]) and e["error"] >= 0.0
        assert e["relative"] == pytest.approx(e["error"] / abs(f.value))
        assert e["basis"] and e["rate"] in (1, 2)
    # the per-element indicator is in fields.vtu
    d = next(d for d in res.derived if "discretisation_error" in d.summary)
    dens = d.cell_data["error_energy_density"]
    assert dens.shape == (res.mesh.nelems,) and np.all(dens >= 0) and dens.max() > 0


def test_standoff_bar_is_never_below_the_recovery_difference(small_mesa_result):
    res = small_mesa_result
    s = merged_summary(res)
    rec = discretisation._standoff_recovery_errors(res)
    assert rec, "the readouts give a recovery difference for the stand-off values"
    for name, r in rec.items():
        assert s["discretisation_error"]["figures"][name]["error"] >= r


def test_coarse_readouts_agree_with_the_full_provider(small_mesa_result):
    """The light readouts of the coarse solve give the headline figures readouts.derive gives."""
    res = small_mesa_result
    light = dataclasses.replace(res, derived=[discretisation.figure_readouts(res),
                                              device.probe_readouts(res)])
    full = dataclasses.replace(res, derived=[readouts.derive(res), device.derive(res)])
    a = {f.name: f for f in headline_figures(light)}
    b = {f.name: f for f in headline_figures(full)}
    assert set(a) == {n for n, f in b.items()
                      if f.kind in ("centre", "relaxation", "standoff", "probe", "raman", "band")}
    assert {"raman", "band"} <= {f.kind for f in a.values()}
    for n, f in a.items():
        assert f.value == b[n].value and f.at == b[n].at, n


def test_richardson_bar_from_the_coarse_solve(small_mesa_result):
    """The bar of a centre stress is |f_h - f_2h| / (2^p - 1), f_2h from the coarsened case."""
    res = small_mesa_result
    coarse = run_case(discretisation.coarse_case(res.case),
                      providers=discretisation.COARSE_PROVIDERS)
    assert coarse.case.mesh.refine == pytest.approx(0.5)
    f2h = {f.name: f.value for f in headline_figures(coarse)}
    de = merged_summary(res)["discretisation_error"]["figures"]
    checked = 0
    for f in headline_figures(res):
        if f.kind in ("centre", "probe", "raman", "band"):
            p = discretisation.nominal_rate(f.kind, res.order)
            assert p == 1
            pt = np.array([f.at])
            # the effective ratio: element sizes (cube root of the volume) at the point
            r = (discretisation._local_size(coarse, pt, 3)
                 / discretisation._local_size(res, pt, 3))[0]
            assert 1.5 < r < 3.0
            own = abs(f.value - f2h[f.name]) / (r ** p - 1)
            if f.kind in ("raman", "band"):
                assert de[f.name]["error"] == pytest.approx(own)
            else:       # stress components at a point share the largest bar
                assert de[f.name]["error"] >= own * (1 - 1e-12)
                same = [g for g in headline_figures(res) if g.at == f.at and g.kind == f.kind]
                assert len({de[g.name]["error"] for g in same}) == 1
            checked += 1
    assert checked >= 6


def test_uniform_blanket_field_has_no_error():
    """A blanket film's field is uniform in each layer: the recovery reproduces it exactly,
    and the coarse solve gives the same figures (an estimate that cannot tell would fail)."""
    res = run_case(case_of(BLANKET), providers=PROVIDERS)
    de = merged_summary(res)["discretisation_error"]
    assert de["energy_norm"]["relative"] < 1e-6
    figs = {f.name: f for f in headline_figures(res)}
    scale = max(abs(f.value) for f in figs.values() if f.unit == "MPa")
    checked = 0
    for name, e in de["figures"].items():
        if figs[name].unit == "MPa":
            assert e["error"] < 1e-6 * scale, name
            checked += 1
    assert checked >= 4


def test_closed_form_brick_path_matches_the_generic_one(monkeypatch):
    res = run_case(case_of(MESA))
    a = discretisation.energy_norm(res)
    monkeypatch.setattr(discretisation, "CHUNK", 700)        # several batches
    b = discretisation.energy_norm(res, closed_form=False)
    assert res.mesh.nelems > 3 * 700
    assert a["relative"] == pytest.approx(b["relative"], rel=1e-10)
    np.testing.assert_allclose(a["elements"], b["elements"], rtol=1e-8,
                               atol=1e-12 * a["elements"].max())


@pytest.mark.slow
def test_energy_norm_error_shrinks_under_refinement():
    """Relative energy-norm error: smaller on a mesh refined 2x. With re-entrant edges the
    rate is below the element order (Strang & Fix 1973, from memory), but it must drop."""
    e1 = discretisation.energy_norm(run_case(case_of(MESA)))["relative"]
    e2 = discretisation.energy_norm(run_case(case_of(MESA, refine=2.0)))["relative"]
    assert e2 < 0.85 * e1


def test_switch_off_leaves_no_entry():
    res = run_case(case_of(BLANKET, error_estimate=False), providers=PROVIDERS)
    s = merged_summary(res)
    assert "discretisation_error" not in s
    assert all("discretisation_error" not in r for r in s["headline"])
    assert headline.derive(res).summary["headline"]


def test_mirrored_model_integrates_the_solved_part_only():
    """A quarter model (the demo mesa): the energy norm from the solved part, copied to the
    images, equals the one integrated over the whole unfolded body."""
    from pathlib import Path

    from mesastrain.case.parse import load_case

    case = load_case(Path(__file__).resolve().parents[3] / "cases" / "sige_stressor_mesa.toml")
    case = dataclasses.replace(case, mesh=dataclasses.replace(case.mesh, refine=0.3), probes=())
    res = run_case(case)
    assert getattr(res.disc, "elem_map", None) is not None       # it was mirrored
    a = discretisation.energy_norm(res)
    b = discretisation.energy_norm(res, use_mirrors=False)
    assert a["relative"] == pytest.approx(b["relative"], rel=1e-10)
    np.testing.assert_allclose(a["elements"], b["elements"], rtol=1e-8,
                               atol=1e-12 * b["elements"].max())


def test_a_failed_coarse_solve_leaves_the_run_standing(small_mesa_result, monkeypatch):
    from mesastrain.errors import ResourceError

    def refuse(*args, **kwargs):
        raise ResourceError("no memory for the coarse solve")

    monkeypatch.setattr(discretisation, "_coarse_values", refuse)
    d = discretisation.derive(small_mesa_result)
    de = d.summary["discretisation_error"]
    assert de["figures"] == {} and 0 < de["energy_norm"]["relative"] < 1
    assert len(d.warnings) == 1 and "coarser solve failed" in d.warnings[0]


def test_energy_norm_blocks_side_by_side_give_the_same_elements(small_mesa_result, monkeypatch):
    # the blocks of elements are independent: two threads over small blocks give exactly the
    # element errors of one thread over one block
    monkeypatch.setenv("MESASTRAIN_THREADS", "1")
    one = discretisation.energy_norm(small_mesa_result)
    monkeypatch.setattr(discretisation, "CHUNK", 64)
    monkeypatch.setattr(discretisation, "thread_count", lambda: 2)
    two = discretisation.energy_norm(small_mesa_result)
    assert small_mesa_result.mesh.nelems > 4 * 64
    np.testing.assert_allclose(two["elements"], one["elements"], rtol=1e-12, atol=0)
    assert two["relative"] == pytest.approx(one["relative"], rel=1e-12)


def test_the_early_coarse_solve_is_handed_over_once(small_mesa_result, monkeypatch):
    """coarse_solve (stage 0) hands its result to derive (stage 1): the same bars as a
    coarse solve run by derive itself, no second solve, and the result not held after."""
    own = discretisation.derive(small_mesa_result).summary["discretisation_error"]
    part = discretisation.coarse_solve(small_mesa_result)
    assert discretisation.HANDOFF in part.handoff
    res = dataclasses.replace(small_mesa_result, derived=[*small_mesa_result.derived, part])

    def again(*args, **kwargs):
        raise AssertionError("a second coarse solve")

    monkeypatch.setattr(discretisation, "_solve_coarse", again)
    got = discretisation.derive(res).summary["discretisation_error"]
    assert got["figures"] == own["figures"] and got["figures"]
    assert got["coarse_solve"]["unknowns"] == own["coarse_solve"]["unknowns"]
    assert part.handoff == {}


def test_a_failed_early_coarse_solve_is_reported_by_derive(small_mesa_result, monkeypatch):
    from mesastrain.errors import ResourceError

    def refuse(*args, **kwargs):
        raise ResourceError("no memory for the coarse solve")

    monkeypatch.setattr(discretisation, "_solve_coarse", refuse)
    part = discretisation.coarse_solve(small_mesa_result)
    res = dataclasses.replace(small_mesa_result, derived=[*small_mesa_result.derived, part])
    d = discretisation.derive(res)
    assert d.summary["discretisation_error"]["figures"] == {}
    assert len(d.warnings) == 1 and "no memory for the coarse solve" in d.warnings[0]
