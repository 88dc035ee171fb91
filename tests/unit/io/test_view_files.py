"""``mesastrain view`` on a fields.vtu that is truncated, empty or from another program."""

import numpy as np
import pytest

from mesastrain.cli.main import main


def _foreign(path):
    import meshio

    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float)
    meshio.write(path, meshio.Mesh(pts, [("tetra", np.array([[0, 1, 2, 3]]))],
                                   point_data={"temperature": np.arange(4.0)}),
                 file_format="vtu")


def _valid(path):
    import meshio

    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float)
    meshio.write(path, meshio.Mesh(pts, [("tetra", np.array([[0, 1, 2, 3]]))],
                                   point_data={"displacement": np.zeros((4, 3))},
                                   cell_data={"layer": [np.array([0], np.int32)],
                                              "stress": [np.zeros((1, 6))],
                                              "strain": [np.zeros((1, 6))]}),
                 file_format="vtu")


@pytest.mark.parametrize("content", ["truncated", "empty", "text", "foreign", "no_cells"])
def test_view_refuses_a_broken_fields_file(tmp_path, capsys, monkeypatch, content):
    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    folder = tmp_path / "r"
    folder.mkdir()
    vtu = folder / "fields.vtu"
    if content == "truncated":
        _valid(vtu)
        data = vtu.read_bytes()
        vtu.write_bytes(data[: len(data) // 2])
    elif content == "empty":
        vtu.write_bytes(b"")
    elif content == "text":
        vtu.write_text("not a mesh\n")
    elif content == "foreign":
        _foreign(vtu)
    else:
        vtu.write_text('<VTKFile type="UnstructuredGrid"><UnstructuredGrid><Piece '
                       'NumberOfPoints="0" NumberOfCells="0"></Piece></UnstructuredGrid>'
                       '</VTKFile>')
    before = sorted(p.name for p in tmp_path.rglob("*"))
    assert main(["view", str(folder), "--pictures"]) == 2
    captured = capsys.readouterr()
    err = captured.err
    assert err.count("\n") == 1 and err.startswith("mesastrain: error: ")
    assert str(vtu) in err and "Traceback" not in err
    assert captured.out == ""
    assert sorted(p.name for p in tmp_path.rglob("*")) == before


def test_check_fields_accepts_the_arrays_mesastrain_writes(tmp_path):
    from mesastrain.cli.view import check_fields

    _valid(tmp_path / "fields.vtu")
    check_fields(tmp_path / "fields.vtu")
