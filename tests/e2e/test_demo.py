"""The demo case runs, its fields.vtu opens with pyvista, and a picture renders offscreen."""

import json
from pathlib import Path

import numpy as np
import pytest

from mesastrain.cli.main import main

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
