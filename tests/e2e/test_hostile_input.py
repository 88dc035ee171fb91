"""Hostile input at the command line (issue #14 items 5, 7 and 9): one line, exit 2,
nothing written.

Case files that are invalid in themselves are in tests/data/bad/ (run through
test_robustness.py); here are the inputs that are not a plain case file: devices,
FIFOs and oversized files given as the case, options (raman-stress shift,
--max-memory, sweep --scheduler, counts), imported mesh files, and the error
line itself.
"""

import math
import os
import socket
import stat

import meshio
import numpy as np
import pytest

from mesastrain.case.parse import MAX_FILE_BYTES
from mesastrain.cli.common import err
from mesastrain.cli.main import main
from mesastrain.errors import CaseError
from small_cases import SMALL_MESA


def one_line_exit_2(argv, capsys, key, fragment=""):
    assert main(argv) == 2
    cap = capsys.readouterr()
    assert cap.err.startswith("mesastrain: error: ") and cap.err.count("\n") == 1, cap.err
    assert "Traceback" not in cap.err
    assert f"{key}: " in cap.err, cap.err
    assert fragment in cap.err, cap.err
    return cap


def nothing_in(folder):
    return sorted(p.name for p in folder.iterdir())


# ---------------------------------------------------------------- the case file itself
@pytest.mark.parametrize("command", ["run", "check"])
def test_dev_zero_is_not_a_case_file(command, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    one_line_exit_2([command, "/dev/zero"], capsys, "/dev/zero", "not a regular file")
    assert nothing_in(tmp_path) == []


def test_fifo_is_refused_without_blocking(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    fifo = tmp_path / "case.toml"
    os.mkfifo(fifo)
    one_line_exit_2(["check", str(fifo)], capsys, str(fifo), "not a regular file")
    assert stat.S_ISFIFO(fifo.stat().st_mode)


def test_oversized_case_file_is_refused(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    big = tmp_path / "big.toml"
    big.write_text(SMALL_MESA + "# " + "x" * MAX_FILE_BYTES + "\n")
    one_line_exit_2(["run", str(big), "--out", str(tmp_path / "o")], capsys, str(big),
                    "larger than")
    assert nothing_in(tmp_path) == ["big.toml"]


# ---------------------------------------------------------------- options
@pytest.mark.parametrize("shift", ["nan", "inf", "1e308", "150", "1e400"])
def test_raman_stress_refuses_absurd_shifts(shift, capsys):
    one_line_exit_2(["raman-stress", shift, "--kind", "biaxial"], capsys, "shift",
                    "not a usable Raman shift")


def test_usage_errors_are_one_line(capsys):
    """argparse's own errors (here "-inf" read as an option) are one line too."""
    one_line_exit_2(["raman-stress", "-inf", "--kind", "biaxial"], capsys, "raman-stress",
                    "shift")


@pytest.mark.parametrize("option", [["--incident", "1e-320,0"], ["--scattered", "nan,1"],
                                    ["--x", "nan"], ["--normal", "1000,0,1"]])
def test_raman_stress_refuses_absurd_vectors(option, capsys):
    one_line_exit_2(["raman-stress", "-1", "--kind", "uniaxial", "--material", "SiGe"]
                    + option, capsys, option[0])


def test_raman_stress_still_answers(capsys):
    assert main(["raman-stress", "-1.2", "--kind", "biaxial"]) == 0
    assert "MPa" in capsys.readouterr().out


@pytest.mark.parametrize("gb", ["nan", "inf", "-1", "0", "1e300"])
def test_max_memory_must_be_a_finite_positive_limit(gb, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    case = tmp_path / "c.toml"
    case.write_text(SMALL_MESA)
    one_line_exit_2(["run", str(case), "--max-memory", gb, "--out", str(tmp_path / "o")],
                    capsys, "--max-memory")
    assert nothing_in(tmp_path) == ["c.toml"]


def _sweep_files(tmp_path, vary):
    (tmp_path / "small.toml").write_text(SMALL_MESA)
    sw = tmp_path / "s.toml"
    sw.write_text(f'base = "small.toml"\n{vary}\n')
    return sw


@pytest.mark.parametrize("vary, key", [
    ('[[vary]]\nkey = "pattern.width"\nfrom = 100\nto = 200\ncount = 100000000000', "count"),
    ('[[vary]]\nkey = "pattern.width"\nfrom = 100\nto = 200\ncount = 1' + "0" * 400, "count"),
    ('[[vary]]\nkey = "pattern.width"\nfrom = 100\nto = 200\ncount = 200\n'
     '[[vary]]\nkey = "pattern.etch_depth"\nfrom = 10\nto = 30\ncount = 200', "vary"),
])
def test_sweep_counts_are_bounded(vary, key, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    sw = _sweep_files(tmp_path, vary)
    one_line_exit_2(["sweep", str(sw), "--out", str(tmp_path / "o")], capsys, key,
                    "at most")
    assert "o" not in nothing_in(tmp_path)


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:notaport", "tcp://127.0.0.1:99999",
                                     "foo://127.0.0.1:8786", "a b c", "tcp://[::1"])
def test_bad_scheduler_address_creates_nothing(address, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    sw = _sweep_files(tmp_path, '[[vary]]\nkey = "pattern.width"\nvalues = [200]')
    one_line_exit_2(["sweep", str(sw), "--out", str(tmp_path / "o"), "--scheduler", address,
                     "--wait", "1"], capsys, "--scheduler", "not a Dask scheduler address")
    assert "o" not in nothing_in(tmp_path)


def test_unreachable_scheduler_creates_nothing(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with socket.socket() as s:          # a free loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    sw = _sweep_files(tmp_path, '[[vary]]\nkey = "pattern.width"\nvalues = [200]')
    one_line_exit_2(["sweep", str(sw), "--out", str(tmp_path / "o"), "--scheduler",
                     f"127.0.0.1:{port}", "--wait", "1"], capsys, "--scheduler",
                    "cannot reach")
    assert "o" not in nothing_in(tmp_path)


@pytest.mark.parametrize("option", [["--wait", "nan"], ["--workers", "100000"]])
def test_sweep_wait_and_workers_bounded(option, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    sw = _sweep_files(tmp_path, '[[vary]]\nkey = "pattern.width"\nvalues = [200]')
    one_line_exit_2(["sweep", str(sw), "--out", str(tmp_path / "o")] + option, capsys,
                    option[0])
    assert "o" not in nothing_in(tmp_path)


# ---------------------------------------------------------------- check covers the outline
@pytest.mark.slow
def test_check_estimates_polygon_meshing_time(tmp_path, capsys):
    """A 200-vertex outline takes many minutes to mesh: check must not say seconds."""
    a = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    r = 1000 * (1 + 0.05 * np.sin(7 * a))
    verts = ", ".join(f"[{x:.4f}, {y:.4f}]" for x, y in zip(r * np.cos(a), r * np.sin(a)))
    case = tmp_path / "poly.toml"
    case.write_text(SMALL_MESA.split("[pattern]")[0] + f'[pattern]\nshape = "polygon"\n'
                    f'vertices = [{verts}]\netch_depth = 30\n')
    assert main(["check", str(case), "--json"]) in (0, 2)
    import json

    d = json.loads(capsys.readouterr().out)
    assert d["seconds"] > 600


# ---------------------------------------------------------------- imported mesh files
@pytest.mark.parametrize("content", [b"garbage\n", b"$MeshFormat\n2.2 0 8\n"])
@pytest.mark.parametrize("command", ["run", "check"])
def test_unparsable_mesh_file_one_line(content, command, tmp_path, capfd, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "m.msh").write_bytes(content)
    case = tmp_path / "c.toml"
    case.write_text('[substrate]\nmaterial = "Si"\nthickness = "10 um"\nnormal = [0, 0, 1]\n'
                    'x_axis = [1, 1, 0]\n[[layer]]\nmaterial = "Ge"\nthickness = 20\n'
                    '[pattern]\nshape = "mesh"\nfile = "m.msh"\n'
                    'groups = { wafer = 0, film = 1 }\n')
    argv = [command, str(case)] + (["--out", str(tmp_path / "o")] if command == "run" else [])
    assert main(argv) == 2
    out, error = capfd.readouterr()
    assert error.startswith("mesastrain: error: ") and error.count("\n") == 1, error
    assert "pattern.file: cannot read the mesh file" in error
    assert nothing_in(tmp_path) == ["c.toml", "m.msh"]


def test_nan_mesh_through_the_command_line(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, math.nan]], float)
    meshio.write(tmp_path / "m.msh", meshio.Mesh(pts, [("tetra", np.array([[0, 1, 2, 3]]))],
                                                 cell_data={"gmsh:physical": [np.array([1])],
                                                            "gmsh:geometrical":
                                                                [np.array([1])]}),
                 file_format="gmsh22", binary=False)
    case = tmp_path / "c.toml"
    case.write_text('[substrate]\nmaterial = "Si"\nthickness = "10 um"\nnormal = [0, 0, 1]\n'
                    'x_axis = [1, 1, 0]\n[[layer]]\nmaterial = "Ge"\nthickness = 20\n'
                    '[pattern]\nshape = "mesh"\nfile = "m.msh"\ngroups = { 1 = 0 }\n')
    one_line_exit_2(["check", str(case)], capsys, "pattern.file", "NaN or infinite")


# ---------------------------------------------------------------- the error line
def test_control_characters_cannot_forge_a_line(capsys):
    e = CaseError("cut[0].name\nmesastrain: ok", "bad\r\x1b[2Kvalue\u2028x", "a\nb.toml")
    assert "\n" not in str(e) and "\r" not in str(e) and "\x1b" not in str(e)
    assert "\u2028" not in str(e)
    err("line one\nmesastrain: all fine")
    assert capsys.readouterr().err == "mesastrain: error: line one\\nmesastrain: all fine\n"
