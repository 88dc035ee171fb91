"""The HTML report: self-contained, with inputs, figures with units, warnings, pictures, caution."""

import base64
import re

import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.io import report
from mesastrain.io.folder import write_result
from mesastrain.io.wording import CAUTION

CASE = {
    "title": "report check: SiGe island",
    "substrate": {"material": "Si", "thickness": "725 um", "normal": [0, 0, 1],
                  "x_axis": [1, 1, 0]},
    "layer": [{"material": "SiGe", "x": 0.3, "thickness": 12}],
    "pattern": {"shape": "rectangle", "width": 48, "length": 48, "etch_depth": 18, "margin": 24},
    "mesh": {"order": 1, "edge_size": 2.0, "size": 8, "substrate_depth": 80},
    "cut": [{"name": "across", "from": [-24, 0, 6], "to": [24, 0, 6], "points": 49}],
}


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    res = solve_and_derive(parse_case(CASE))
    out = tmp_path_factory.mktemp("report") / "r"
    write_result(res, out)
    return out


@pytest.mark.slow
def test_report_is_self_contained(folder):
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert html.startswith("<!DOCTYPE html>")
    srcs = re.findall(r'src="([^"]*)"', html)
    assert srcs and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert "href=" not in html and "<script" not in html
    # stack drawing, two maps x (section + plan) + sidewall close-up, relaxation, tractions, cut
    assert len(srcs) >= 9
    for s in srcs:
        png = base64.b64decode(s.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 5_000


@pytest.mark.slow
def test_report_has_what_an_engineer_reads(folder):
    html = (folder / "report.html").read_text(encoding="utf-8")
    for text in ("Inputs", "Headline figures", "relaxation length", "Corners and edges",
                 "Interface tractions", "Wafer bow", "Pictures", "Si0.7Ge0.3", "(MPa)", "nm",
                 "J/m&sup2;", "singular", "Matthews", "People", "Stoney", "Timoshenko"):
        assert text in html, text
    assert report.esc(CAUTION) in html
    # the layer is thicker than its Matthews-Blakeslee critical thickness: warned, in the box
    warn = html[html.index('class="warn"'):html.index("<h2>Inputs")]
    assert "Matthews-Blakeslee" in warn and "pseudomorphic assumption" in warn
    # the caution closes the report
    assert html.rindex("Caution.") > html.rindex("<h2>")


@pytest.mark.slow
def test_sections_registry(folder):
    def extra(summary, path):
        return f"<h2>Extra section</h2><p>{report.esc(summary['title'])}</p>"

    def broken(summary, path):
        raise RuntimeError("boom")

    out = report.write_report(folder, pictures=False,
                              sections=report.SECTIONS + (extra, broken))
    html = out.read_text(encoding="utf-8")
    assert "<h2>Extra section</h2><p>report check: SiGe island</p>" in html
    assert "could not be written: boom" in html and report.esc(CAUTION) in html


def test_no_report_when_switched_off(tmp_path):
    data = dict(CASE, output={"report": False, "vtu": False}, readouts={"bow": False})
    data.pop("cut")
    res = solve_and_derive(parse_case(data))
    write_result(res, tmp_path / "r")
    assert not (tmp_path / "r" / "report.html").exists()
    assert not list((tmp_path / "r").glob("map_*.png"))


@pytest.mark.slow
def test_report_without_fields_says_why(tmp_path):
    data = dict(CASE, output={"vtu": False}, readouts={"bow": False})
    data.pop("cut")
    res = solve_and_derive(parse_case(data))
    write_result(res, tmp_path / "r")
    html = (tmp_path / "r" / "report.html").read_text(encoding="utf-8")
    assert "No maps: fields.vtu was not written" in html
