"""Region names and old key spellings (issue 18: one name per region, one word per quantity)."""

from __future__ import annotations

import copy

import pytest

from mesastrain.case.names import default_name, region_names
from mesastrain.case.parse import parse_case
from mesastrain.errors import CaseError

BASE = {"substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "composition": 0.3, "thickness": 20},
                  {"material": "Si", "thickness": 5},
                  {"material": "SiGe", "composition": 0.2, "thickness": 20},
                  {"material": "Si", "thickness": 5}]}


def test_default_names_material_then_numbered_repeats():
    case = parse_case(copy.deepcopy(BASE))
    assert [lay.name for lay in case.layers] == ["SiGe", "Si", "SiGe 2", "Si 2"]


def test_naming_function_is_general():
    assert default_name("substrate", "Si", 1) == "substrate"
    assert default_name("layer", "SiN", 2) == "SiN 2"
    assert default_name("liner", "SiN", 1) == "SiN liner"
    # a name given by hand that a default would take pushes the default on
    assert region_names("layer", [("Si 2", "Ge"), (None, "Si"), (None, "Si")]) == \
        ["Si 2", "Si", "Si 3"]


@pytest.mark.parametrize("names, key", [(["cap", "CAP"], "layer[1].name"),
                                        (["substrate", None], "layer[0].name"),
                                        (["a.b", None], "layer[0].name")])
def test_bad_names_name_the_key(names, key):
    d = copy.deepcopy(BASE)
    d["layer"] = d["layer"][:2]
    for lay, n in zip(d["layer"], names):
        if n is not None:
            lay["name"] = n
    with pytest.raises(CaseError) as info:
        parse_case(d)
    assert info.value.key == key


def test_old_alloy_key_gives_a_note_and_the_same_case():
    old = copy.deepcopy(BASE)
    for lay in old["layer"]:
        if "composition" in lay:
            lay["x"] = lay.pop("composition")
    new_case, old_case = parse_case(copy.deepcopy(BASE)), parse_case(old)
    assert new_case == old_case and new_case.to_dict() == old_case.to_dict()
    assert new_case.notes == ()
    assert len(old_case.notes) == 1 and "layer[0].x" in old_case.notes[0]
    both = copy.deepcopy(old)
    both["layer"][0]["composition"] = 0.3
    with pytest.raises(CaseError) as info:
        parse_case(both)
    assert info.value.key == "layer[0].x" and "composition" in info.value.message


def test_old_dislocation_table_and_key_give_notes_and_the_same_case():
    d = copy.deepcopy(BASE)
    d["layer"] = d["layer"][:1]
    d["pattern"] = {"shape": "stripe", "width": "400 nm"}
    family = {"interface": 0, "line": [0, 0, 0], "burgers": [1, 0, 1],
              "burgers_fraction": 0.5}
    family["line"] = [1, -1, 0]
    new = {**copy.deepcopy(d), "dislocation": [{**family, "relaxed": 0.3}]}
    old = {**copy.deepcopy(d), "dislocations": [{**family, "relaxation": 0.3}]}
    new["pattern"]["shape"] = old["pattern"]["shape"] = "none"
    del new["pattern"]["width"], old["pattern"]["width"]
    a, b = parse_case(new), parse_case(old)
    assert a == b and a.dislocations[0].relaxation == 0.3
    assert len(b.notes) == 2 and {"[[dislocations]]" in n or "relaxation" in n
                                  for n in b.notes} == {True}


def test_imported_mesh_groups_take_region_names():
    import tomllib
    from pathlib import Path

    from mesastrain.case.parse import load_case

    demo = Path(__file__).parents[3] / "cases" / "embedded_stressor.toml"
    assert load_case(demo).pattern.groups == (("wafer", 0), ("pocket", 1))
    d = tomllib.loads(demo.read_text())
    d["pattern"]["file"] = str(demo.parent / d["pattern"]["file"])
    d["pattern"]["groups"] = {"wafer": "substrate", "pocket": "cap"}
    with pytest.raises(CaseError) as info:
        parse_case(d)
    assert info.value.key == "pattern.groups.pocket" and "SiGe" in info.value.message


def test_quantities_are_kept_as_written():
    d = copy.deepcopy(BASE)
    d["substrate"]["thickness"] = "0.725 mm"
    d["layer"][0]["thickness"] = "200 A"
    d["thermal"] = {"growth_temperature": "700 C", "final_temperature": 25}
    case = parse_case(d)
    assert case.as_written("substrate.thickness") == "0.725 mm"
    assert case.as_written("layer[0].thickness") == "200 Å"
    assert case.as_written("layer[1].thickness") == "5 nm"          # a bare number: nm
    assert case.as_written("thermal.growth_temperature") == "700 °C"
    assert case.as_written("thermal.final_temperature") == "25 °C"
    assert case.as_written("pattern.width") is None                 # not given
