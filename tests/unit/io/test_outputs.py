"""The output side: sections cut in memory, 2-D maps, the compressed VTU, quick runs, no GL."""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from skfem import MeshHex, MeshTet

from mesastrain.io.export import write_vtu
from mesastrain.io.maps import FieldSource, draw_map, nice_limit
from mesastrain.io.slices import cut

ROOT = Path(__file__).resolve().parents[3]


def _box(kind, n=4):
    x = np.linspace(-1.0, 1.0, n + 1)
    z = np.linspace(-1.0, 0.5, n + 1)
    m = MeshHex.init_tensor(x, x, z)
    return m if kind == "hex" else m.to_meshtet()


@pytest.mark.parametrize("kind", ["hex", "tet"])
@pytest.mark.parametrize("axis, position", [(1, 0.0), (1, 0.3), (2, -0.2), (0, 0.5)])
def test_section_covers_the_plane_and_interpolates_linear_fields_exactly(kind, axis, position):
    m = _box(kind)
    region = (m.p[2, m.t].mean(axis=0) > 0).astype(int)
    sec = cut(m.p, m.t, region, axis, position)
    xy = sec.xy[sec.triangles]
    e1, e2 = xy[:, 1] - xy[:, 0], xy[:, 2] - xy[:, 0]
    area = 0.5 * np.abs(e1[:, 0] * e2[:, 1] - e1[:, 1] * e2[:, 0]).sum()
    full = {0: 2.0 * 1.5, 1: 2.0 * 1.5, 2: 4.0}[axis]
    assert area == pytest.approx(full, rel=1e-9)
    f = 3 * m.p[0] - 2 * m.p[1] + m.p[2]            # linear: exact on the section
    pts = np.insert(sec.xy, axis, position, axis=1)
    assert np.allclose(sec.point_values(f), pts @ [3, -2, 1], atol=1e-12)
    # a constant per region stays that constant (smoothing stays inside the region)
    vals = sec.cell_values(np.where(region == 1, 5.0, -1.0), m.t, region, np.ones(m.nelements))
    assert np.allclose(vals, np.where(sec.region == 1, 5.0, -1.0))


def test_section_missing_the_body_is_empty():
    m = _box("hex")
    assert len(cut(m.p, m.t, np.zeros(m.nelements, int), 2, 3.0).triangles) == 0


def test_nice_limits():
    assert [nice_limit(v) for v in (1650, 0.0123, 7.9, 1000)] == [2000, 0.015, 8, 1000]


def test_map_has_round_symmetric_colour_limits(tmp_path):
    from PIL import Image

    m = _box("tet", 6)
    region = (m.p[2, m.t].mean(axis=0) > 0).astype(int)
    sig = np.zeros((m.nelements, 3, 3))
    sig[:, 0, 0] = np.where(region == 1, -1234.0, 300.0)
    src = FieldSource(m.p, m.t, region, np.ones(m.nelements), {"displacement": m.p.T * 0},
                      {"stress": sig, "strain": sig * 1e-5})
    png = draw_map(src, tmp_path / "s.png", "stress_xx", "section")
    rgb = np.asarray(Image.open(png).convert("RGB")).reshape(-1, 3).astype(int)
    assert np.any((rgb[:, 2] > 120) & (rgb[:, 0] < 80))        # compressed: blue
    vals, label, signed = src.values(src.section(1, 0.0), "stress_xx")
    assert signed and label == "stress σxx (MPa)" and vals.min() == pytest.approx(-1234.0)


def test_vtu_round_trip_and_vtk_order(tmp_path):
    meshio = pytest.importorskip("meshio")
    m = _box("hex")
    pd = {"stress": np.random.default_rng(0).random((m.nvertices, 6)).astype(np.float32)}
    cd = {"region": np.arange(m.nelements, dtype=np.int32) % 2}
    write_vtu(tmp_path / "f.vtu", m, pd, cd)
    r = meshio.read(tmp_path / "f.vtu")
    assert np.array_equal(r.point_data["stress"], pd["stress"])
    assert r.cell_data["region"][0].shape == (m.nelements,)
    # VTK hexahedron order: the first four vertices are one face, counter-clockwise seen
    # from the last four, which lie opposite (vertex i + 4 above vertex i)
    c = r.points[r.cells[0].data[0]]
    flat = [k for k in range(3) if np.allclose(c[:4, k], c[0, k])]
    assert len(flat) == 1 and np.all(c[4:, flat[0]] != c[0, flat[0]])
    assert np.allclose(np.delete(c[4:] - c[:4], flat[0], axis=1), 0)
    assert np.cross(c[1] - c[0], c[3] - c[0]) @ (c[4] - c[0]) > 0
    t = MeshTet.init_tensor(*(np.linspace(0, 1, 3),) * 3)
    write_vtu(tmp_path / "t.vtu", t, {}, {"layer": np.zeros(t.nelements, np.int32)})
    assert meshio.read(tmp_path / "t.vtu").cells[0].type == "tetra"


@pytest.mark.slow
def test_default_vtu_is_lean_and_quick_writes_no_pictures(small_mesa_toml, tmp_path):
    import meshio

    from mesastrain.cli.main import main

    out = tmp_path / "r"
    assert main(["run", str(small_mesa_toml), "--out", str(out), "--quick", "-q"]) == 0
    names = {p.name for p in out.iterdir()}
    assert {"summary.json", "fields.vtu"} <= names
    assert not [n for n in names if n.endswith((".png", ".html"))]
    s = json.loads((out / "summary.json").read_text())
    assert "write_fields" in s["timings"] and "write_pictures" not in s["timings"]
    m = meshio.read(out / "fields.vtu")
    assert set(m.point_data) == {"displacement", "stress", "strain", "von_mises"}
    assert set(m.cell_data) == {"region", "stress"}
    assert m.point_data["stress"].dtype == np.float32
    assert (out / "fields.vtu").stat().st_size / len(m.points) < 100


_NO_VTK = """
import sys
from mesastrain.cli.main import main
rc = main(["run", sys.argv[1], "--out", sys.argv[2], "-q"])
loaded = sorted(m for m in sys.modules if m.startswith(("vtk", "pyvista")))
print("VTK:", loaded)
raise SystemExit(rc)
"""


@pytest.mark.slow
def test_a_run_never_loads_vtk_and_writes_every_output_without_gl(small_mesa_toml, tmp_path):
    """The solving process must not touch VTK (it segfaults without EGL): hide GL and check
    that every output is still written and that no VTK module was loaded."""
    out = tmp_path / "r"
    env = dict(os.environ, PYTHONPATH=str(ROOT / "src"), MESASTRAIN_NO_GL="1",
               LD_LIBRARY_PATH=str(tmp_path), DISPLAY="", WAYLAND_DISPLAY="")
    p = subprocess.run([sys.executable, "-c", _NO_VTK, str(small_mesa_toml), str(out)],
                       env=env, capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr[-2000:]
    assert "VTK: []" in p.stdout
    names = {q.name for q in out.iterdir()}
    assert {"summary.json", "fields.vtu", "report.html", "map_section_stress_xx.png",
            "map_plan_von_mises.png", "map_edge_stress_xx.png"} <= names


def test_gl_probe_can_be_forced_off(monkeypatch):
    from mesastrain.io import gl

    monkeypatch.setenv("MESASTRAIN_NO_GL", "1")
    assert gl.gl_library() is None
    note = gl.no_gl_note("the 3-D window")
    assert "\n" not in note and "libegl1" in note and "libgl1-mesa-dri" in note


@pytest.mark.slow
def test_view_without_gl_draws_2d_pictures(small_mesa_run, tmp_path, monkeypatch, capsys):
    from mesastrain.cli.main import main

    monkeypatch.setenv("MESASTRAIN_NO_GL", "1")
    assert main(["view", str(small_mesa_run.out), "--window", "--out", str(tmp_path)]) == 0
    io = capsys.readouterr()
    assert io.err.count("\n") == 1 and "libegl1" in io.err
    assert (tmp_path / "map_section_stress_xx.png").stat().st_size > 5000
