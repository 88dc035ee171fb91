"""``about``: the case's own words, shown before the warnings and atop the report."""

import json

import pytest

from mesastrain.case.parse import parse_case
from mesastrain.cli.main import main
from small_cases import CENTRE_PROBE, sige_on_si

ABOUT = "Thicker than its critical thickness on purpose: a metastable stressor."


def test_about_is_read_echoed_and_optional():
    base = {"substrate": {"material": "Si", "thickness": "50 um", "normal": [0, 0, 1],
                          "x_axis": [1, 1, 0]},
            "layer": [{"material": "SiGe", "composition": 0.2, "thickness": "20 nm"}]}
    case = parse_case({**base, "about": ABOUT})
    assert case.about == ABOUT
    assert parse_case(case.to_dict()) == case
    assert parse_case(base).about == "" and "about" not in parse_case(base).to_dict()


@pytest.mark.slow
def test_about_comes_before_the_warnings_and_in_the_report(tmp_path, capsys):
    # 20 nm of Si0.8Ge0.2 is past its Matthews-Blakeslee thickness: the run warns
    text = sige_on_si("about", 'shape = "rectangle"\nwidth = "200 nm"',
                      "order = 1\nsize = 40\nedge_size = 10", extra=CENTRE_PROBE)
    path = tmp_path / "case.toml"
    path.write_text(f'about = "{ABOUT}"\n' + text)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    err = [ln for ln in capsys.readouterr().err.splitlines()
           if ln.startswith(("about this case:", "warning:"))]
    assert err[0] == f"about this case: {ABOUT}"
    assert any("critical thickness" in ln for ln in err[1:])
    html = (tmp_path / "out" / "report.html").read_text()
    assert ABOUT in html and html.index(ABOUT) < html.index("Warnings")
    assert json.loads((tmp_path / "out" / "summary.json").read_text())["case"]["about"] == ABOUT
