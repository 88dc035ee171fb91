"""``mesastrain view`` without a display, and the postprocess scripts on a result folder."""

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.cli.main import main
from mesastrain.derived import solve_and_derive
from mesastrain.io.folder import write_result

ROOT = Path(__file__).resolve().parents[3]

CASE = {
    "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                  "x_axis": [1, 1, 0]},
    "layer": [{"material": "SiGe", "x": 0.3, "thickness": 8}, {"material": "Si", "thickness": 4}],
    "pattern": {"shape": "rectangle", "width": 40, "length": 40, "etch_depth": 16, "margin": 20},
    "mesh": {"order": 1, "edge_size": 2.0, "size": 8, "substrate_depth": 60},
    "output": {"report": False},
    "readouts": {"bow": False},
    "device": {"maps": False},
}


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    out = tmp_path_factory.mktemp("view") / "r"
    write_result(solve_and_derive(parse_case(CASE)), out)
    return out


def _rgb(png: Path) -> np.ndarray:
    from PIL import Image

    return np.asarray(Image.open(png).convert("RGB")).reshape(-1, 3).astype(int)


@pytest.mark.slow
def test_view_without_display_writes_pictures(folder, tmp_path, monkeypatch, capsys):
    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    assert main(["view", str(folder), "--out", str(tmp_path), "--component", "stress_xx"]) == 0
    printed = capsys.readouterr().out.split()
    names = {Path(p).name for p in printed}
    assert {"map_section_stress_xx.png", "map_plan_stress_xx.png",
            "map_edge_stress_xx.png"} <= names
    # signed stress on a zero-centred diverging scale: a compressed film (blue) next to a
    # stretched cap and substrate (red)
    rgb = _rgb(tmp_path / "map_section_stress_xx.png")
    assert np.any((rgb[:, 0] > 150) & (rgb[:, 2] < 100))
    assert np.any((rgb[:, 2] > 120) & (rgb[:, 0] < 80))


def test_view_errors(tmp_path):
    assert main(["view", str(tmp_path / "missing")]) == 2
    assert main(["view", str(tmp_path)]) == 2          # a folder without fields.vtu


def _script(name: str):
    spec = importlib.util.spec_from_file_location(name, ROOT / "postprocess" / f"{name}.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.slow
def test_postprocess_scripts_work_on_a_result_folder(folder, tmp_path):
    assert _script("slice").main([str(folder), "--normal", "z", "--component", "von_mises",
                                  "--out", str(tmp_path / "plan.png")]) == 0
    assert _script("slice").main([str(folder), "--normal", "x", "--at", "5",
                                  "--out", str(tmp_path / "xsec.png")]) == 0
    assert _script("warp").main([str(folder), "--out", str(tmp_path / "warp.png")]) == 0
    assert _script("threshold_layer").main([str(folder), "1", "--out-dir", str(tmp_path)]) == 0
    assert _script("threshold_layer").main([str(folder), "7", "--out-dir", str(tmp_path)]) == 2
    assert _script("line_cut").main([str(folder), "--from", "-20", "0", "4", "--to", "20", "0",
                                     "4", "--points", "41", "--out-dir", str(tmp_path)]) == 0
    for f in ("plan.png", "xsec.png", "warp.png", "layer_1.vtu", "layer_1_stress_xx.png",
              "cut_line.csv", "cut_line.png"):
        assert (tmp_path / f).stat().st_size > 1000, f
    import pyvista as pv

    part = pv.read(str(tmp_path / "layer_1.vtu"))
    assert set(np.unique(part.cell_data["region"])) == {1}
    lines = (tmp_path / "cut_line.csv").read_text().splitlines()
    assert len(lines) == 42 and lines[0].startswith("distance_nm,")
    # inside the compressed SiGe layer the interpolated stress is compressive
    sxx = [float(r.split(",")[6]) for r in lines[1:] if r.split(",")[4] == "SiGe"]
    assert sxx and max(sxx) < 0
