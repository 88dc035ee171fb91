"""Mesh convergence study: observed order, verdicts, the CLI option, a square mesa.

The observed order p = ln(|d1|/|d2|)/ln(r) and the Richardson error estimate
|d2|/(r^p - 1) are exact for a sequence f(h) = f* + C h^p (Richardson 1911;
Roache, Verification and Validation in Computational Science and
Engineering, 1998, from memory).
"""

import csv
import json

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.cli.main import main
from mesastrain.run.convergence import assess, study
from small_cases import CENTRE_PROBE, sige_on_si


@pytest.mark.parametrize("p", [1.0, 2.0, 3.0])
def test_observed_order_of_a_power_law(p):
    r, fstar, C = 1.5, -1000.0, 40.0
    values = [fstar + C * (1.0 / r ** k) ** p for k in range(3)]
    out = assess(values, r, scale=1000.0)
    assert out["verdict"] == "converging"
    assert out["observed_order"] == pytest.approx(p, rel=1e-9)
    assert out["error_estimate"] == pytest.approx(abs(values[2] - fstar), rel=1e-9)


def test_singular_value_is_not_converging():
    # a corner stress grows like h^-lambda as the mesh is refined (Williams, J. Appl. Mech.
    # 19, 526, 1952, from memory): each refinement raises it more
    r = 1.5
    values = [300.0 * (1.0 / r ** k) ** -0.3 for k in range(3)]
    assert assess(values, r, scale=300.0)["verdict"] == "not converging"


def test_small_changes_are_converged():
    assert assess([100.0, 100.1, 100.12], 1.5, scale=100.0)["verdict"] == "converged"


SMALL = sige_on_si("tiny mesa", 'shape = "rectangle"\nwidth = "100 nm"',
                   "order = 1\nsize = 40\nedge_size = 20\ngrowth = 2.0\nsubstrate_depth = 100",
                   extra=CENTRE_PROBE)


@pytest.mark.slow
def test_cli_convergence_writes_the_study(tmp_path, capsys):
    p = tmp_path / "tiny.toml"
    p.write_text(SMALL)
    out = tmp_path / "res"
    assert main(["run", str(p), "--out", str(out), "--convergence"]) == 0
    text = capsys.readouterr().out
    assert "mesh convergence: 3 meshes" in text
    summary = json.loads((out / "summary.json").read_text())
    conv = summary["convergence"]
    assert [lv["level"] for lv in conv["levels"]] == [0, 1, 2]
    assert conv["levels"][0]["unknowns"] < conv["levels"][1]["unknowns"] \
        < conv["levels"][2]["unknowns"]
    # the written result is the case's own mesh (level 0)
    assert summary["mesh"]["solved"]["unknowns"] == conv["levels"][0]["unknowns"]
    rows = list(csv.DictReader(open(out / "convergence.csv")))
    names = {r["figure"] for r in rows}
    assert "probe centre sxx" in names and "SiGe peak von_mises" in names
    assert {r["verdict"] for r in rows} <= {"converged", "converging", "not converging",
                                            "oscillating"}


@pytest.mark.slow
def test_square_mesa_centre_stress_is_converged_on_the_default_mesh():
    # the square mesa of tests/test_mesa.py (width/thickness = 10) at half the size (the
    # problem is scale-free), default mesh (order 2), one refinement (sizes / 1.5)
    H, W = 20.0, 200.0
    case = parse_case({
        "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.3, "thickness": H}],
        "pattern": {"shape": "rectangle", "width": W, "etch_depth": 2 * H},
        "probe": [{"name": "centre", "at": [0, 0, H / 2]}]})
    _, rep = study(case, levels=2)
    fig = {f["name"]: f for f in rep["figures"]}
    for c in ("sxx", "syy"):
        f = fig[f"probe centre {c}"]
        assert abs(f["relative_changes"][0]) < 5e-3
        assert f["values"][0] < -1000.0           # a strongly compressed film (MPa)
    assert np.isfinite(fig["SiGe peak von_mises"]["values"]).all()
