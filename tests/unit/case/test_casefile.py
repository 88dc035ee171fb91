"""Tests of mesastrain.units and mesastrain.case.parse.

Every file in tests/data/bad/ starts with a line ``# expect: KEY | FRAGMENT``:
loading it must raise CaseError whose key is exactly KEY (empty for errors
about the file as a whole) and whose message contains FRAGMENT.
"""

from __future__ import annotations

import copy
import dataclasses
import json
import subprocess
import sys
from pathlib import Path

import pytest

from mesastrain.case.parse import load_case, parse_case
from mesastrain.case.types import Case, Layer, LineCut, Pattern, Probe
from mesastrain.errors import CaseError
from mesastrain.units import parse_length, parse_temperature

DATA = Path(__file__).resolve().parents[2] / "data"
BAD = DATA / "bad"


def _base() -> dict:
    """A small valid case as tomllib would return it: SiGe on Si(001)."""
    return {
        "substrate": {"material": "Si", "thickness": "0.5 mm", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.2, "thickness": 40}],
    }


def _mesa() -> dict:
    d = _base()
    d["pattern"] = {"shape": "rectangle", "width": "1 um", "length": 600, "etch_depth": 100}
    return d


def _raises(data: dict) -> CaseError:
    with pytest.raises(CaseError) as info:
        parse_case(data)
    return info.value


# --------------------------------------------------------------------------
# units
# --------------------------------------------------------------------------
# Unit factors: 1 um = 1e3 nm, 1 mm = 1e6 nm (SI prefixes, BIPM SI Brochure, 9th ed., 2019);
# 1 Angstrom = 0.1 nm (definition of the angstrom, common practice).
@pytest.mark.parametrize("value, nm", [
    (40, 40.0), (12.5, 12.5), (-20, -20.0),
    ("40 nm", 40.0), ("40nm", 40.0), ("  40   nm ", 40.0), ("1e3 nm", 1000.0),
    ("2 um", 2000.0), ("2 \u00b5m", 2000.0), ("2 \u03bcm", 2000.0), (".5 um", 500.0),
    ("0.5 mm", 500000.0), ("1.5 um", 1500.0),
    ("3.2 A", 0.32), ("3.2 \u00c5", 0.32), ("3.2 \u212b", 0.32),
    ("-1.25 um", -1250.0),
])
def test_parse_length_converts_to_nm(value, nm):
    assert parse_length(value, "k") == nm   # exact: decimal arithmetic, one rounding


@pytest.mark.parametrize("value, fragment", [
    ("2 furlongs", "'2 furlongs' is not a length; give a number in nm or a string such as "
                   "\"40 nm\", \"2 um\", \"0.5 mm\""),
    ("1 m", "unit 'm' is not accepted; allowed units: nm, um"),
    ("3 cm", "unit 'cm' is not accepted"),
    ("40", "has no unit"),
    ("nm", "is not a length"),
    ("", "is not a length"),
    ("inf nm", "is not a length"),
    ("1e400 nm", "not a finite length"),
    (float("nan"), "not a finite length"),
    (float("inf"), "not a finite length"),
    (True, "true is not a length"),
    (False, "false is not a length"),
    ([40], "[40] is not a length"),
    ({"nm": 40}, "a table is not a length"),
])
def test_parse_length_rejects(value, fragment):
    with pytest.raises(CaseError) as info:
        parse_length(value, "layer[3].thickness")
    err = info.value
    assert err.key == "layer[3].thickness"
    assert fragment in err.message
    assert str(err).startswith("layer[3].thickness: ")
    assert "\n" not in str(err)


# 0 degC = 273.15 K exactly (SI Brochure, BIPM, 9th ed., 2019, sec. 2.3.1) [M] from memory.
@pytest.mark.parametrize("value, kelvin", [
    (700, 973.15), (20, 293.15), (0, 273.15), (-40.5, 232.65),
    ("700 C", 973.15), ("700 \u00b0C", 973.15), ("700 degC", 973.15), ("700C", 973.15),
    ("973.15 K", 973.15), ("300 K", 300.0), ("-200 C", 73.15),
])
def test_parse_temperature_converts_to_kelvin(value, kelvin):
    assert parse_temperature(value, "k") == kelvin


@pytest.mark.parametrize("value, fragment", [
    (True, "true is not a temperature"),
    ("700 F", "unit 'F' is not accepted; allowed units: C"),
    ("700", "has no unit"),
    ("hot", "is not a temperature"),
    (-273.15, "at or below absolute zero"),
    ("-300 C", "at or below absolute zero"),
    ("0 K", "at or below absolute zero"),
    (float("nan"), "not a finite temperature"),
    ([700], "is not a temperature"),
])
def test_parse_temperature_rejects(value, fragment):
    with pytest.raises(CaseError) as info:
        parse_temperature(value, "thermal.growth_temperature")
    assert info.value.key == "thermal.growth_temperature"
    assert fragment in info.value.message


# --------------------------------------------------------------------------
# good files
# --------------------------------------------------------------------------
def test_good_mesa_values():
    path = DATA / "good_mesa.toml"
    case = load_case(path)
    assert case.source == str(path)
    assert case.title == "SiGe mesa on Si(001)"
    s = case.substrate
    assert (s.material, s.x, s.thickness, s.normal, s.x_axis) == \
        ("Si", None, 500000.0, (0, 0, 1), (1, 1, 0))
    assert case.layers == (
        Layer("SiGe", 0.25, 40.0, 0.0, (0, 0, 1), (1, 1, 0), name="SiGe"),   # inherited
        Layer("Si", None, 100.0, 0.0, (0, 0, 1), (1, 1, 0), name="Si"),           # orientation
    )
    assert case.pattern == Pattern("rectangle", 2000.0, 1500.0, 200.0, 1000.0)
    assert case.thermal.growth_temperature == 973.15   # "700 C"
    assert case.thermal.final_temperature == 293.15    # 20 (a number is degrees Celsius)
    m = case.mesh
    assert (m.size, m.edge_size, m.order, m.growth, m.substrate_depth) == (50.0, 10.0, 2, 1.5,
                                                                           5000.0)
    assert (case.solver.method, case.solver.tolerance, case.solver.max_iterations) == \
        ("iterative", 1e-9, 500)
    assert case.probes == (Probe("centre_film", (0.0, 0.0, 20.0)),
                           Probe("probe2", (1000.0, 0.0, 140.0)),
                           Probe("probe3", (1400.0, 0.0, -60.0)))
    assert case.cuts == (LineCut("across", (-1000.0, 0.0, 20.0), (1000.0, 0.0, 20.0), 201),
                         LineCut("cut2", (0.0, 0.0, 140.0), (0.0, 0.0, -2000.0), 101))
    assert (case.output.vtu, case.output.crystal_frame) == (False, True)
    assert case.stack_thickness == 140.0
    assert case.top == 140.0
    assert case.interfaces == (0.0, 40.0, 140.0)
    assert case.pattern.patterned


def test_good_blanket_defaults():
    case = load_case(DATA / "good_blanket.toml")
    assert case.title == "good_blanket"            # file stem when no title is given
    assert case.substrate.normal == (0, 0, 0, 1)
    assert case.layers == (Layer("AlGaN", 0.3, 25.0, 0.1, (0, 0, 0, 1), (2, -1, -1, 0),
                                 name="AlGaN"),)
    # good_blanket.toml keeps the old spelling x of the alloy composition: read, with a note
    assert any("layer[0].x" in n and "composition" in n for n in case.notes)
    assert case.pattern == Pattern("none", None, None, None, None)
    assert not case.pattern.patterned
    assert case.thermal is None
    # default order 1 on structured hexahedra (casefile.default_order: chosen by
    # benchmarks/time_to_accuracy.py)
    assert (case.mesh.size, case.mesh.edge_size, case.mesh.order, case.mesh.growth,
            case.mesh.substrate_depth) == (None, None, 1, 1.3, None)
    assert (case.solver.method, case.solver.tolerance, case.solver.max_iterations) == \
        ("auto", 1e-8, 2000)
    assert case.probes == () and case.cuts == ()
    assert (case.output.vtu, case.output.crystal_frame) == (True, True)
    assert case.interfaces == (0.0, 25.0)


@pytest.mark.parametrize("name", ["good_mesa.toml", "good_blanket.toml"])
def test_to_dict_is_json_and_round_trips(name):
    case = load_case(DATA / name)
    echoed = json.loads(json.dumps(case.to_dict()))
    again = parse_case(echoed)
    assert again == dataclasses.replace(case, source=None)


def test_case_is_frozen_and_uses_tuples():
    case = parse_case(_mesa())
    with pytest.raises(dataclasses.FrozenInstanceError):
        case.title = "x"
    with pytest.raises(dataclasses.FrozenInstanceError):
        case.layers[0].thickness = 1.0
    assert isinstance(case.layers, tuple)
    assert isinstance(case.substrate.normal, tuple)
    assert isinstance(case, Case)


def test_parse_case_does_not_modify_input():
    data = _mesa()
    data["probe"] = [{"at": [0, 0, 10]}]
    before = copy.deepcopy(data)
    parse_case(data)
    assert data == before


def test_defaults_of_pattern_and_title():
    case = parse_case(_mesa())
    assert case.title == "untitled"
    assert case.pattern == Pattern("rectangle", 1000.0, 600.0, 100.0, None)
    d = _mesa()
    del d["pattern"]["length"], d["pattern"]["etch_depth"]
    p = parse_case(d).pattern
    assert (p.length, p.etch_depth) == (1000.0, 40.0)   # length = width, etch through the layers
    assert parse_case(_base(), source="runs/my_case.toml").title == "my_case"


def test_alloy_formula_spelling_is_canonicalised():
    d = _base()
    d["layer"][0]["material"] = "Si1-xGex"
    assert parse_case(d).layers[0].material == "SiGe"


@pytest.mark.parametrize("x", [0, 1, 0.0, 1.0])
def test_alloy_fraction_limits_accepted(x):
    d = _base()
    d["layer"][0]["x"] = x
    assert parse_case(d).layers[0].x == float(x)


def test_hexagonal_layer_on_cubic_substrate_with_own_orientation():
    # GaN(0001) on Si(111) with GaN [2-1-10] parallel to Si [1-10] (common practice).
    data = {
        "substrate": {"material": "Si", "thickness": "1 mm", "normal": [1, 1, 1],
                      "x_axis": [1, -1, 0]},
        "layer": [{"material": "AlN", "thickness": 100, "normal": [0, 0, 0, 1],
                   "x_axis": [2, -1, -1, 0]},
                  {"material": "GaN", "thickness": "1 um", "normal": [0, 0, 0, 1],
                   "x_axis": [2, -1, -1, 0]},
                  {"material": "AlGaN", "x": 0.25, "thickness": 20, "normal": [0, 0, 0, 1],
                   "x_axis": [2, -1, -1, 0]}],
    }
    case = parse_case(data)
    assert [la.normal for la in case.layers] == [(0, 0, 0, 1)] * 3
    assert case.interfaces == (0.0, 100.0, 1100.0, 1120.0)
    # without its own orientation the first hexagonal layer is an error, named as such
    del data["layer"][0]["normal"], data["layer"][0]["x_axis"]
    err = _raises(data)
    assert err.key == "layer[0].normal"
    assert "AlN is hexagonal but the substrate Si is cubic" in err.message


def test_semipolar_hexagonal_orientation_accepted():
    # (10-11) plane contains [1-210]: h*u + k*v + l*w = 0 in three-index form (common practice).
    data = {"substrate": {"material": "GaN", "thickness": "300 um", "normal": [1, 0, -1, 1],
                          "x_axis": [1, -2, 1, 0]},
            "layer": [{"material": "InGaN", "x": 0.15, "thickness": 3}]}
    case = parse_case(data)
    assert case.layers[0].x_axis == (1, -2, 1, 0)


# --------------------------------------------------------------------------
# bad files: one per error class
# --------------------------------------------------------------------------
def _expectation(path: Path):
    first = path.read_bytes().split(b"\n", 1)[0].decode("ascii")
    assert first.startswith("# expect:"), f"{path.name} lacks its '# expect:' line"
    key, fragment = (part.strip() for part in first[len("# expect:"):].split("|", 1))
    return key, fragment


BAD_FILES = sorted(BAD.glob("*.toml"))


def test_bad_folder_is_populated():
    assert len(BAD_FILES) >= 40


@pytest.mark.parametrize("path", BAD_FILES, ids=[p.stem for p in BAD_FILES])
def test_bad_file(path):
    key, fragment = _expectation(path)
    with pytest.raises(CaseError) as info:
        load_case(path)
    err = info.value
    assert err.key == key
    assert fragment in err.message
    assert err.source == str(path)
    line = str(err)
    assert line.startswith(f"{path}: {key}: " if key else f"{path}: ")
    assert "\n" not in line


# --------------------------------------------------------------------------
# file-level errors
# --------------------------------------------------------------------------
def test_missing_file(tmp_path):
    with pytest.raises(CaseError) as info:
        load_case(tmp_path / "nope.toml")
    assert info.value.key == ""
    assert str(info.value) == f"{tmp_path / 'nope.toml'}: no such file"


def test_directory(tmp_path):
    with pytest.raises(CaseError, match="is a directory"):
        load_case(tmp_path)


@pytest.mark.parametrize("text", ["", "  \n\t\n"])
def test_empty_file(tmp_path, text):
    f = tmp_path / "empty.toml"
    f.write_text(text)
    with pytest.raises(CaseError, match="the file is empty"):
        load_case(f)


def test_byte_order_mark_is_accepted(tmp_path):
    f = tmp_path / "bom.toml"
    f.write_bytes(b"\xef\xbb\xbf" + (DATA / "good_blanket.toml").read_bytes())
    assert load_case(f).layers[0].material == "AlGaN"


def test_syntax_error_gives_line_and_column(tmp_path):
    f = tmp_path / "broken.toml"
    f.write_text('[substrate]\nmaterial = "Si"\nthickness = \n')
    with pytest.raises(CaseError) as info:
        load_case(f)
    assert info.value.key == ""
    assert "TOML syntax error" in info.value.message
    assert "line 3" in info.value.message


def test_errors_name_source_only_when_given():
    d = _base()
    d["layer"][0]["thickness"] = -1
    assert str(_raises(d)).startswith("layer[0].thickness: must be > 0")
    with pytest.raises(CaseError) as info:
        parse_case(d, source="a.toml")
    assert str(info.value).startswith("a.toml: layer[0].thickness: must be > 0")


def test_top_level_must_be_a_table():
    assert _raises([1, 2]).key == ""


# --------------------------------------------------------------------------
# order of checks: the first error in file order wins
# --------------------------------------------------------------------------
def test_first_error_in_file_order_wins_within_a_table():
    d = _base()
    d["substrate"] = {"thickness": -1, "material": "Unobtainium", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]}
    assert _raises(d).key == "substrate.thickness"
    d["substrate"] = {"material": "Unobtainium", "thickness": -1, "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]}
    assert _raises(d).key == "substrate.material"


def test_first_error_in_file_order_wins_across_tables():
    bad_sub = {"material": "Si", "thickness": 0, "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
    bad_layer = [{"material": "Si", "thickness": "2 furlongs"}]
    assert _raises({"substrate": bad_sub, "layer": bad_layer}).key == "substrate.thickness"
    assert _raises({"layer": bad_layer, "substrate": bad_sub}).key == "layer[0].thickness"


def test_cross_table_checks_follow_file_order():
    mesa = {"shape": "rectangle", "width": 100, "etch_depth": "1 mm"}   # too deep
    probe = [{"at": [0, 0, 1000]}]                                        # above the top
    d = _base()
    d.update(pattern=mesa, probe=probe)
    assert _raises(d).key == "pattern.etch_depth"
    d = _base()
    d.update(probe=probe, pattern=mesa)
    assert _raises(d).key == "probe[0].at"


def test_same_input_same_error():
    d = _base()
    d["layer"].append({"material": "Ge", "thickenss": 3})
    d["mesh"] = {"order": 5}
    first = str(_raises(d))
    assert all(str(_raises(copy.deepcopy(d))) == first for _ in range(3))
    assert first.startswith('layer[1].thickenss: unknown key; did you mean "thickness"?')


# --------------------------------------------------------------------------
# types and ranges not covered by a bad file
# --------------------------------------------------------------------------
@pytest.mark.parametrize("table, key, value", [
    ("mesh", "order", True),
    ("mesh", "order", 2.0),
    ("mesh", "growth", 3.5),
    ("mesh", "growth", True),
    ("mesh", "edge_size", -1),
    ("solver", "tolerance", 0),
    ("solver", "max_iterations", 0),
    ("solver", "max_iterations", True),
    ("output", "crystal_frame", 1),
])
def test_settings_reject(table, key, value):
    d = _base()
    d[table] = {key: value}
    assert _raises(d).key == f"{table}.{key}"


@pytest.mark.parametrize("growth", [1.0001, 2, 3])
def test_growth_range_accepted(growth):
    d = _base()
    d["mesh"] = {"growth": growth}
    assert parse_case(d).mesh.growth == float(growth)


def test_layer_x_bool_rejected():
    d = _base()
    d["layer"][0]["x"] = True
    assert _raises(d).key == "layer[0].composition"


def test_probe_and_cut_names_default_in_order():
    d = _base()
    d["probe"] = [{"at": [0, 0, 1]}, {"name": "mid", "at": [0, 0, 20]}, {"at": [0, 0, 39]}]
    d["cut"] = [{"from": [0, 0, 0], "to": [0, 0, 40], "points": 2}]
    case = parse_case(d)
    assert [p.name for p in case.probes] == ["probe1", "mid", "probe3"]
    assert case.cuts == (LineCut("cut1", (0.0, 0.0, 0.0), (0.0, 0.0, 40.0), 2),)


def test_default_name_clash_is_an_error():
    d = _base()
    d["probe"] = [{"name": "probe2", "at": [0, 0, 1]}, {"at": [0, 0, 2]}]
    err = _raises(d)
    assert err.key == "probe[1].name" and "already used by probe[0]" in err.message


# --------------------------------------------------------------------------
# inside-the-body checks
# --------------------------------------------------------------------------
# mesa: 1000 x 600 nm rectangle, stack 0..40 nm, etch 100 nm -> floor at z = -60 nm
@pytest.mark.parametrize("at", [
    [500, 300, 40],          # top corner of the mesa
    [-500, -300, -60],       # bottom corner of the sidewall, on the floor
    [0, 0, -500000],         # wafer bottom
    [5000, 0, -60],          # etched floor far away (no margin given)
    [5000, 0, -61],
    [500 * (1 + 1e-12), 0, 20],   # within the 1e-9 relative tolerance
])
def test_probe_inside(at):
    d = _mesa()
    d["probe"] = [{"at": at}]
    assert parse_case(d).probes[0].at == tuple(float(v) for v in at)


@pytest.mark.parametrize("at", [
    [500 * (1 + 1e-6), 0, 20],    # beyond the sidewall
    [0, 301, 0],                  # beyond the sidewall in y
    [0, 0, 40.001],               # above the top
    [0, 0, -500001],              # below the wafer
    [600, 0, -59],                # in the etched-away gap just above the floor
])
def test_probe_outside(at):
    d = _mesa()
    d["probe"] = [{"at": [0, 0, 0]}, {"at": at}]
    err = _raises(d)
    assert err.key == "probe[1].at"


def test_substrate_depth_limits_probe_depth():
    d = _base()
    d["mesh"] = {"substrate_depth": "2 um"}
    d["probe"] = [{"at": [0, 0, -2000]}]
    parse_case(d)
    d["probe"] = [{"at": [0, 0, -2001]}]
    assert "below the modelled substrate bottom at z = -2000" in _raises(d).message


def test_blanket_has_no_lateral_limit():
    d = _base()
    d["probe"] = [{"at": ["1 mm", "-1 mm", 10]}]
    assert parse_case(d).probes[0].at == (1e6, -1e6, 10.0)


@pytest.mark.parametrize("start, end", [
    ([400, 0, 40], [450, 0, -1000]),    # down through the mesa into the substrate below it
    ([0, 0, 40], [0, 400, -100]),       # crosses the floor plane at y = 286 < 300, under the mesa
    ([-2000, 0, -60], [2000, 0, -60]),  # along the etched floor, under the mesa
])
def test_cut_inside(start, end):
    d = _mesa()
    d["cut"] = [{"from": start, "to": end}]
    assert parse_case(d).cuts[0].points == 101


@pytest.mark.parametrize("end", [[2000, 0, -60], [501, 0, -60], [0, 400, -61]])
def test_cut_through_the_etched_gap_is_an_error(end):
    # both ends are inside, but the straight line between them leaves the body
    d = _mesa()
    d["cut"] = [{"from": [0, 0, 40], "to": end}]
    err = _raises(d)
    assert err.key == "cut[0]" and "leaves the body" in err.message


def test_top_tolerance_is_relative_to_the_top():
    d = _mesa()
    d["probe"] = [{"at": [0, 0, 40 * (1 + 1e-12)]}]
    parse_case(d)
    d["probe"] = [{"at": [0, 0, 40 * (1 + 1e-7)]}]
    assert _raises(d).key == "probe[0].at"


def test_cut_ends_checked_separately():
    d = _mesa()
    d["cut"] = [{"from": [0, 0, 50], "to": [0, 0, 0]}]
    assert _raises(d).key == "cut[0].from"


# --------------------------------------------------------------------------
# layering of the package
# --------------------------------------------------------------------------
def test_casefile_does_not_import_scikit_fem():
    code = "import sys, mesastrain.case.parse; print('skfem' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"
