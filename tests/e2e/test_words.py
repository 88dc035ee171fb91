"""One name per region, named sizes, units as written, no "-0", progress (issue 18 part B).

These read the session's one ``mesastrain run`` of SMALL_MESA (tests/conftest.py) and run
``check`` on small cases; nothing here solves a model of its own.
"""

from __future__ import annotations

import contextlib
import io
import json
import re

import pytest

from mesastrain.cli.main import main
from mesastrain.fem.parallel import usable_cores
from mesastrain.units import fmt
from small_cases import sige_on_si

_NEG_ZERO = re.compile(r"(?<![\w.])-0(?:\.0+)?(?![\d.eE])")


def _summary(run) -> dict:
    return json.loads((run.out / "summary.json").read_text())


def test_summary_names_regions_and_lists_no_layer_by_number(small_mesa_run):
    s = _summary(small_mesa_run)
    assert [lay["name"] for lay in s["layers"]] == ["substrate", "SiGe"]
    assert all(next(iter(lay)) == "name" for lay in s["layers"])     # name first
    assert [lay["region"] for lay in s["layers"]] == [0, 1]
    # every per-layer table is keyed by name, never a list read by position
    for table in (s["layer_figures"], s["readouts"]["layers"], s["device"]["layer_figures"],
                  s["device"]["regions"], s["layer_tilt"]["layers"]):
        assert isinstance(table, dict) and set(table) <= {"substrate", "SiGe"}, table
    assert s["probes"][0]["region"] == "SiGe" and "layer" not in s["probes"][0]

    def no_index(node, path="summary"):
        if isinstance(node, dict):
            assert "index" not in node, path
            for k, v in node.items():
                no_index(v, f"{path}.{k}")
        elif isinstance(node, list):
            for i, v in enumerate(node):
                no_index(v, f"{path}[{i}]")
    no_index(s)
    text = json.dumps(s["warnings"]) + small_mesa_run.stdout
    assert "layer 1" not in text and "region 1" not in text


def test_summary_sizes_are_named_solved_and_exported(small_mesa_run):
    m = _summary(small_mesa_run)["mesh"]
    solved, exported = m["solved"], m["exported"]
    # a quarter model of the square mesa is solved; the whole body is exported
    assert solved["symmetry"] == "quarter" and solved["element_type"] == "8-node hexahedra"
    assert solved["unknowns"] == 3 * solved["nodes"]          # trilinear: 3 per node
    assert 3.0 < exported["nodes"] / solved["nodes"] < 4.5
    assert exported["elements"] == 4 * solved["elements"]
    assert len(m["grid"]) == 3                                  # structured: grid kept


def test_vtu_has_an_integer_region_array_and_the_name_table(small_mesa_run):
    import meshio

    m = meshio.read(small_mesa_run.out / "fields.vtu")
    assert "region" in m.cell_data and "layer" not in m.cell_data
    assert {k: int(v[0]) for k, v in m.field_data.items()} == {"region substrate": 0,
                                                                 "region SiGe": 1}


def test_inputs_echo_as_written(small_mesa_run):
    s = _summary(small_mesa_run)
    assert s["case_as_written"]["substrate.thickness"] == "50 µm"
    assert s["case_as_written"]["pattern.width"] == "200 nm"
    html = (small_mesa_run.out / "report.html").read_text()
    assert "50 µm" in html and "50000 nm" not in html


def test_no_negative_zero_anywhere(small_mesa_run):
    out = small_mesa_run.out
    texts = {"stdout": small_mesa_run.stdout}
    texts.update({p.name: p.read_text() for p in out.glob("*.csv")})
    html = (out / "report.html").read_text()
    texts["report.html"] = re.sub(r"<[^>]*>|data:image/png;base64,[A-Za-z0-9+/=]+", " ", html)
    for name, text in texts.items():
        assert not _NEG_ZERO.search(text), (name, _NEG_ZERO.search(text))
    assert fmt(-0.04, ".1f") == "0.0" and fmt(-0.04, "+.1f") == "+0.0"
    assert fmt(-1e-20, ".3g") == "-1e-20" and fmt(float("-inf"), ".1f") == "-inf"


def test_old_key_names_still_run_with_a_note(tmp_path, small_mesa_run):
    old = tmp_path / "old.toml"
    old.write_text(small_mesa_run.case.read_text().replace("composition = 0.2", "x = 0.2"))
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        assert main(["check", str(old)]) == 0
    notes = [ln for ln in err.getvalue().splitlines() if ln.startswith("note:")]
    assert len(notes) == 1 and "layer[0].x" in notes[0] and "composition" in notes[0]


@pytest.mark.parametrize("pattern, words", [
    ('shape = "rectangle"\nwidth = "200 nm"', "8-node hexahedra, order 1"),
    ('shape = "stripe"\nwidth = "200 nm"', "9-node quadrilaterals of the x-z cross-section"),
    ('shape = "disk"\ndiameter = "200 nm"', "10-node tetrahedra, order 2"),
])
def test_check_prints_the_element_type_and_cores(tmp_path, pattern, words):
    mesh = "order = 1\nsize = 25\nedge_size = 10" if "rectangle" in pattern else \
        "size = 60\nedge_size = 20"
    case = tmp_path / "c.toml"
    case.write_text(sige_on_si("check", pattern, mesh))
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["check", str(case)]) == 0
    text = out.getvalue()
    assert words in text, text
    assert "hexahedra" not in text or "hexahedra" in words or "one layer of hexahedra" in text
    n = usable_cores()
    assert f"on {n} core{'s' * (n != 1)}" in text
    with contextlib.redirect_stdout(io.StringIO()) as js:
        assert main(["check", str(case), "--json"]) == 0
    d = json.loads(js.getvalue())
    assert d["cores"] == n and words.split(",")[0] in d["solved"]["element_type"]


def test_sweep_progress_gives_cases_failures_and_time_left():
    from mesastrain.cli.sweep.driver import _Progress

    buf = io.StringIO()
    p = _Progress(4, True, buf)
    p.done, p.failed = 1, 1
    p.update("case 2 failed")
    line = buf.getvalue()
    assert "2 of 4 cases done (1 failed)" in line and "left" in line


def test_verify_says_which_group_runs():
    from mesastrain.cli.verify import run_checks

    said = []
    rows = run_checks(["rotation"], progress=said.append)
    assert rows and said == ["group 1 of 1: rotation (0 rows done, 0 failed)"]


def test_vtk_messages_are_silenced():
    pytest.importorskip("vtkmodules")
    from vtkmodules.vtkCommonCore import vtkObject

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()
    assert vtkObject.GetGlobalWarningDisplay() == 0


def test_convergence_says_which_level_runs(monkeypatch, small_mesa_case, small_mesa_result):
    # the study's own messages, with the solves replaced by the session's one result
    import dataclasses

    from mesastrain.run import convergence

    def fake_run(case, progress=None, **kw):
        if progress is not None:
            progress("mesh: ...")
        # a copy: the study appends to the result's lists, the session's result stays as is
        return dataclasses.replace(small_mesa_result, derived=list(small_mesa_result.derived),
                                   warnings=list(small_mesa_result.warnings))
    monkeypatch.setattr(convergence, "run_case", fake_run)
    said = []
    convergence.study(small_mesa_case, levels=2, progress=said.append)
    assert said[0].startswith("convergence: level 1 of 2 running: element sizes / 1")
    assert "unknowns, about" in said[0]
    assert said[1] == "mesh: ..." and said[2].startswith("convergence: level 1 of 2 done in")
    assert said[3].startswith("convergence: level 2 of 2 running: element sizes / 1.5")
    assert said[4] == "  level 2: mesh: ..."
