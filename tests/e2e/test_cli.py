"""Command line: run, check, materials, and one bad-input test per error class."""

import json
import os
from pathlib import Path

import numpy as np
import pytest

from mesastrain.cli.main import main
from small_cases import SMALL_MESA

ROOT = Path(__file__).resolve().parents[2]
SMALL = SMALL_MESA


@pytest.fixture
def small_case(tmp_path):
    p = tmp_path / "small.toml"
    p.write_text(SMALL)
    return p


def test_run_writes_summary_and_vtu(small_mesa_run):
    # the session's one `mesastrain run` of SMALL_MESA (tests/conftest.py): exit 0, stdout, folder
    out, tmp_path = small_mesa_run.out, small_mesa_run.root
    text = small_mesa_run.stdout
    assert "centre" in text and "MPa" in text
    s = json.loads((out / "summary.json").read_text())
    assert s["units"] == {**s["units"], "length": "nm", "stress": "MPa"}
    assert [l["material"] for l in s["layers"]] == ["Si", "SiGe"]
    sige = s["layers"][1]
    assert set(sige["constants"]) == {"C11", "C12", "C44"}
    assert sige["lattice"]["a"] > 5.43 and len(sige["source"]) >= 1
    assert np.array(sige["eigenstrain"]).shape == (3, 3)
    p = s["probes"][0]
    for k in ("stress", "strain", "stress_crystal", "strain_crystal"):
        assert np.array(p[k]).shape == (3, 3)
    assert p["region"] == "SiGe" and p["at"] == [0, 0, 10]
    solved, exported = s["mesh"]["solved"], s["mesh"]["exported"]
    assert solved["unknowns"] > 0 and solved["nodes"] > 0 and solved["elements"] > 0
    assert exported["nodes"] >= solved["nodes"] and exported["elements"] >= solved["elements"]
    assert "solve" in s["timings"]
    # the VTU opens and carries the contract's arrays
    import meshio
    m = meshio.read(out / "fields.vtu")
    for k in ("displacement", "strain", "stress"):
        assert k in m.point_data
    assert m.point_data["stress"].shape[1] == 6
    assert m.cell_data["stress"][0].shape[1] == 6
    assert set(np.unique(m.cell_data["region"][0])) == {0, 1}
    # no temporary folders left behind
    assert [x.name for x in tmp_path.iterdir() if x.name.startswith(".")] == []


def test_run_refuses_existing_output(small_case, tmp_path, capsys):
    out = tmp_path / "res"
    out.mkdir()
    (out / "keep.txt").write_text("old")
    assert main(["run", str(small_case), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "--overwrite" in err and err.count("\n") == 1
    assert (out / "keep.txt").read_text() == "old"


@pytest.mark.slow
def test_overwrite_replaces_whole_folder(small_case, tmp_path):
    out = tmp_path / "res"
    assert main(["run", str(small_case), "--out", str(out), "-q"]) == 0   # a previous result
    (out / "stale.txt").write_text("old")
    assert main(["run", str(small_case), "--out", str(out), "--overwrite", "-q"]) == 0
    assert not (out / "stale.txt").exists() and (out / "summary.json").exists()


def test_check_json(small_case, capsys):
    assert main(["check", str(small_case), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["solved"]["unknowns"] > 0 and d["memory_gb"] > 0 and d["seconds"] > 0
    assert d["exported"]["nodes"] >= d["solved"]["nodes"]


def test_check_text(small_case, capsys):
    assert main(["check", str(small_case)]) == 0
    out = capsys.readouterr().out
    assert "unknowns" in out and "GB" in out
    assert "liners" not in out


def test_check_lists_the_stack_with_its_liners(capsys):
    assert main(["check", str(ROOT / "cases" / "sin_liner_fin.toml")]) == 0
    stack = next(ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("stack"))
    assert "layers Si fin 50 nm" in stack and stack.endswith("liners SiN liner 10 nm")


@pytest.mark.slow
def test_check_counts_match_the_mesh(small_case, tmp_path):
    # the estimate counts unknowns without meshing; it must agree with the real mesh
    from mesastrain.case.parse import load_case
    from mesastrain.derived import solve_and_derive
    from mesastrain.run.resources import estimate
    for order in (1, 2):
        text = SMALL.replace("order = 1", f"order = {order}").replace("size = 25", "size = 50")
        p = tmp_path / f"o{order}.toml"
        p.write_text(text)
        case = load_case(p)
        res = solve_and_derive(case)
        est = estimate(case)
        assert est.unknowns == res.u.size
        assert est.elements == res.mesh.nelems


def test_materials_lists_sources(capsys):
    assert main(["materials"]) == 0
    out = capsys.readouterr().out
    for name in ("Si", "Ge", "GaAs", "GaN", "SiGe", "InGaAs"):
        assert name in out


def test_run_refuses_too_big(small_case, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(small_case), "--out", str(out), "--max-memory", "0.001"]) == 2
    err = capsys.readouterr().err
    assert "GB" in err and err.startswith("mesastrain: error: mesh")
    assert not out.exists()


BAD = [
    # (what to change, expected key in the message)
    (lambda s: s.replace('thickness = "20 nm"', 'thickness = "-20 nm"'), "layer[0].thickness"),
    (lambda s: s.replace('material = "SiGe"', 'material = "SiGex"'), "layer[0].material"),
    (lambda s: s.replace("composition = 0.2", "composition = 1.5"), "layer[0].composition"),
    (lambda s: s.replace("composition = 0.2", "x = 1.5"), "layer[0].composition"),  # old name
    (lambda s: s.replace('thickness = "20 nm"', 'thickness = "20 furlongs"'), "layer[0].thickness"),
    (lambda s: s.replace("x_axis = [1, 1, 0]", "x_axis = [1, 1, 1]"), "substrate.x_axis"),
    (lambda s: s.replace("normal = [0, 0, 1]", "normal = [0, 0, 0]"), "substrate.normal"),
    (lambda s: s.replace('etch_depth = "30 nm"', 'etch_depth = "1 mm"'), "pattern.etch_depth"),
    (lambda s: s.replace("at = [0, 0, 10]", "at = [0, 0, 100]"), "probe[0].at"),
    (lambda s: s.replace("[mesh]", "[mesh]\nsise = 3"), "mesh.sise"),
    (lambda s: s.replace('[[layer]]\nmaterial = "SiGe"\n', '[[layer]]\n'), "layer[0].material"),
    (lambda s: s + "\n[broken", ""),
]


@pytest.mark.parametrize("edit, key", BAD)
def test_bad_input_one_line_exit_2_nothing_written(edit, key, tmp_path, capsys):
    p = tmp_path / "bad.toml"
    p.write_text(edit(SMALL))
    out = tmp_path / "res"
    assert main(["run", str(p), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("mesastrain: error: ") and err.count("\n") == 1
    assert "Traceback" not in err
    assert str(p) in err
    if key:
        assert f" {key}: " in err
    assert not out.exists()
    assert main(["check", str(p)]) == 2


def test_missing_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert "nope.toml" in capsys.readouterr().err


@pytest.mark.slow
def test_console_script_installed():
    import shutil
    import subprocess
    exe = shutil.which("mesastrain", path=os.path.dirname(os.sys.executable) + os.pathsep
                       + os.environ.get("PATH", ""))
    assert exe, "the mesastrain console script is not installed"
    r = subprocess.run([exe, "--version"], capture_output=True, text=True)
    assert r.returncode == 0 and "mesastrain" in r.stdout
