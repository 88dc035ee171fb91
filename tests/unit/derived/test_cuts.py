"""[[cut]] line cuts: CSV with units, PNG plot, exact values along the line."""

import csv

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.case.schema import DEFAULT_CUT_COMPONENTS
from mesastrain.derived import solve_and_derive
from mesastrain.derived.cuts import components
from mesastrain.errors import CaseError
from mesastrain.io.folder import write_result
from mesastrain.physics.thinfilm import biaxial_modulus_001
from mesastrain.units import safe_name

CASE = {
    "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                  "x_axis": [1, 0, 0]},
    "layer": [{"material": "SiGe", "x": 0.2, "thickness": 20}],
    "cut": [{"name": "through the stack", "from": [0, 0, 20], "to": [0, 0, -20], "points": 41,
             "components": ["stress_xx", "strain_zz", "displacement_z", "von_mises"]},
            {"name": "plain", "from": [0, 0, 10], "to": [0, 0, -10]}],
    "output": {"report": False, "vtu": False},
    "readouts": {"bow": False},
}


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    res = solve_and_derive(parse_case(CASE))
    out = tmp_path_factory.mktemp("cuts") / "r"
    write_result(res, out)
    return res, out


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_cut_files_and_header(result):
    res, out = result
    name = safe_name("through the stack")
    rows = _rows(out / f"cut_{name}.csv")
    assert len(rows) == 41
    head = rows[0].keys()
    for col in ("distance_nm", "x_nm", "z_nm", "region", "material", "stress_xx_MPa",
                "strain_zz", "displacement_z_nm", "von_mises_MPa", "principal_min_MPa"):
        assert col in head
    png = out / f"cut_{name}.png"
    assert png.stat().st_size > 10_000 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (out / "cut_plain.png").is_file()


def test_cut_values_are_the_exact_fields(result):
    res, out = result
    rows = _rows(out / f"cut_{safe_name('through the stack')}.csv")
    pts = np.array([[float(r["x_nm"]), float(r["y_nm"]), float(r["z_nm"])] for r in rows])
    strain, stress, disp, region = res.sample(pts)
    comps = components(strain, stress, disp)
    for name in ("stress_xx", "strain_zz", "displacement_z", "von_mises"):
        col = name + {"stress_xx": "_MPa", "strain_zz": "", "displacement_z": "_nm",
                      "von_mises": "_MPa"}[name]
        got = np.array([float(r[col]) for r in rows])
        assert np.allclose(got, comps[name], rtol=1e-8, atol=1e-9)
    names = [lm.name for lm in res.layers]
    assert [r["region"] for r in rows] == [names[k] for k in region]


def test_blanket_cut_matches_the_closed_form(result):
    # Pseudomorphic (001) film: sigma_xx = M(001) eps_par with M = C11 + C12 - 2 C12^2/C11
    # (Brantley, J. Appl. Phys. 44, 534, 1973); the held substrate below is unstressed.
    res, out = result
    rows = _rows(out / f"cut_{safe_name('through the stack')}.csv")
    lm = res.layers[1]
    c = lm.material.constants
    want = 1000 * float(biaxial_modulus_001(c["C11"], c["C12"])) * lm.misfit
    film = [float(r["stress_xx_MPa"]) for r in rows if r["region"] == "SiGe"]
    sub = [float(r["stress_xx_MPa"]) for r in rows if r["region"] == "substrate"]
    assert len(film) > 10 and len(sub) > 10
    assert np.allclose(film, want, rtol=1e-6)
    assert np.allclose(sub, 0.0, atol=1e-6 * abs(want))


def test_cut_summary(result):
    res, _ = result
    items = next(d.summary["cuts"] for d in res.derived if "cuts" in d.summary)
    assert items[1]["components"] == list(DEFAULT_CUT_COMPONENTS)
    assert items[0]["range"]["stress_xx"]["unit"] == "MPa"
    assert items[0]["range"]["strain_zz"]["unit"] == "1"


def test_bad_cut_component_names_the_key():
    data = dict(CASE, cut=[{"from": [0, 0, 10], "to": [0, 0, 0],
                            "components": ["stress_xx", "sxx"]}])
    with pytest.raises(CaseError) as err:
        parse_case(data)
    assert err.value.key == "cut[0].components[1]"
    data = dict(CASE, cut=[{"from": [0, 0, 10], "to": [0, 0, 0], "components": []}])
    with pytest.raises(CaseError) as err:
        parse_case(data)
    assert err.value.key == "cut[0].components"
