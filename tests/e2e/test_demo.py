"""The demo case runs, its fields.vtu opens with pyvista, and a picture renders offscreen."""

import json
from pathlib import Path

import numpy as np
import pytest

from mesastrain.cli.main import main
from mesastrain.derived.headline import figure_words

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "cases" / "sige_stressor_mesa.toml"


@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "result"
    assert main(["run", str(DEMO), "--out", str(out), "-q"]) == 0
    return out


def test_demo_physics_is_sensible(demo_result):
    # A compressively strained Si0.7Ge0.3 island: the centre keeps most of the blanket
    # compression; 20 nm from the sidewall the normal component has relaxed a lot; the Si
    # cap is in tension (common practice for SiGe stressors under a Si cap).
    s = json.loads((demo_result / "summary.json").read_text())
    p = {q["name"]: q for q in s["probes"]}
    centre = np.array(p["centre_sige"]["stress"])
    edge = np.array(p["near_edge"]["stress"])
    assert centre[0, 0] < -1000 and centre[0, 0] == pytest.approx(centre[1, 1], rel=1e-6)
    assert abs(edge[0, 0]) < 0.6 * abs(centre[0, 0])
    assert np.array(p["cap_centre"]["stress"])[0, 0] > 0
    assert s["timings"]["solve"] < 60


def test_demo_vtu_opens_and_renders(demo_result, tmp_path):
    pv = pytest.importorskip("pyvista")
    mesh = pv.read(str(demo_result / "fields.vtu"))
    assert mesh.n_cells > 0 and "stress" in mesh.cell_data and "region" in mesh.cell_data
    assert mesh.cell_data["stress"].shape[1] == 6
    from mesastrain.io.render import render_section
    png = render_section(demo_result / "fields.vtu", tmp_path / "sxx.png")
    assert png.stat().st_size > 10_000
    img = pv.read(str(png))
    rgb = np.asarray(img.point_data[img.point_data.keys()[0]])[:, :3].astype(int)
    # a diverging colour map on a strained film gives both strong reds and strong blues
    assert np.any((rgb[:, 0] > 150) & (rgb[:, 2] < 100))
    assert np.any((rgb[:, 2] > 120) & (rgb[:, 0] < 80))


def test_demo_report_shows_every_headline_figure_with_its_error_bars(demo_result):
    # issue 17: each headline figure with its error contributions; singular ones marked
    s = json.loads((demo_result / "summary.json").read_text())
    html = (demo_result / "report.html").read_text()
    assert "Headline figures and error bars" in html
    assert "discretisation error" in html and "material scatter" in html
    for row in s["headline"]:
        assert figure_words(row["name"]) in html
        if row["singular"]:
            assert row["material_scatter"]["singular"]
        else:
            assert row["material_scatter"]["error"] > 0
    centre = next(r for r in s["headline"] if r["name"] == "SiGe centre sxx")
    assert centre["material_scatter"]["dominant"] == "SiGe lattice law"
    assert 0.05 < centre["material_scatter"]["error"] / abs(centre["value"]) < 0.15


LINER_DEMO = ROOT / "cases" / "sin_liner_fin.toml"


def test_liner_fin_demo(tmp_path):
    # A tensile SiN liner over a narrow Si fin (our own scenario). Statics: a horizontal cut
    # through the fin and its sidewall liners carries no net vertical force, so the tensile
    # sidewall liners (their in-plane stress acts along z on the sidewall) push the fin into
    # vertical compression; along the fin (y) the liner keeps most of its 1.2 GPa.
    out = tmp_path / "fin"
    assert main(["run", str(LINER_DEMO), "--out", str(out), "-q"]) == 0
    s = json.loads((out / "summary.json").read_text())
    p = {q["name"]: np.array(q["stress"]) for q in s["probes"]}
    assert p["fin_mid"][2, 2] < -100
    assert p["liner_side"][2, 2] > 200
    assert 0.6 * 1200 < p["liner_top"][1, 1] < 1200
    assert [lay["name"] for lay in s["layers"]] == ["substrate", "Si fin", "SiN liner"]
    assert s["layers"][2]["liner"] == 1
    assert s["timings"]["solve"] < 60
