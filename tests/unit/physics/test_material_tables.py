"""Substrates, dielectrics and metals of the database, and materials built from a table
(mesastrain.physics.materials.material_from_table).

Each physics check names its source; flags as in the project's REFERENCES.md:
[C] confirmed public source, [M] from memory, [D] derived, [L] library.
"""

from __future__ import annotations

import importlib.resources
import re
import tomllib

import numpy as np
import pytest

from mesastrain.errors import MaterialError
from mesastrain.physics.materials import (
    builtin_materials,
    get_material,
    known_materials,
    material_from_table,
    materials_table,
)

NEW = {"substrate": ["sapphire", "4H-SiC", "6H-SiC", "diamond"],
       "dielectric": ["SiO2", "Si3N4-LPCVD", "SiN-PECVD", "Al2O3-ALD", "HfO2"],
       "metal": ["Al", "Cu", "W", "TiN", "Au", "Ni"]}
FLAG = re.compile(r"\[(C|M|D)\]")


def _raw():
    text = importlib.resources.files("mesastrain.physics").joinpath("data/materials.toml").read_text("utf-8")
    return tomllib.loads(text)


# --------------------------------------------------------------------------- database
def test_groups_and_names():
    for group, names in NEW.items():
        assert builtin_materials(group) == names
    assert builtin_materials()[:len(known_materials())] == known_materials()
    assert set(builtin_materials()) == set(known_materials()) | {n for v in NEW.values() for n in v}
    with pytest.raises(MaterialError, match="group must be one of"):
        builtin_materials("polymer")


def test_every_new_quantity_has_a_flagged_source():
    db = _raw()
    for group, names in NEW.items():
        for name in names:
            t = db[group][name]
            need = ("stiffness", "alpha") + (("lattice",) if "a" in t else ())
            for q in need:
                assert FLAG.search(t["source"][q]), f"{group}.{name}.{q} has no [C]/[M]/[D] flag"
            m = get_material(name)
            assert m.group == group and len(m.sources) == len(t["source"])


def test_sapphire_trigonal():
    # Gieske & Barsch, Phys. Status Solidi 29, 121 (1968) [M]; a = 4.758, c = 12.991 A [M]
    # (REFERENCES Additions, substrates).
    s = get_material("sapphire")
    assert s.system == "trigonal" and s.structure == "corundum"
    assert s.constants == {"C11": 497.0, "C12": 163.0, "C13": 116.0, "C14": -22.0, "C33": 501.0,
                           "C44": 147.0}
    assert (s.a, s.c) == (4.758, 12.991) and s.c_over_a == pytest.approx(2.7304, abs=1e-4)
    assert s.stiffness[4, 5] == -22.0 and s.stiffness[5, 5] == 167.0
    assert np.linalg.eigvalsh(s.stiffness).min() > 0
    # c-plane biaxial modulus C11 + C12 - 2 C13^2/C33 = 606.3 GPa [D, REFERENCES 4 formula]
    c = s.stiffness
    assert c[0, 0] + c[0, 1] - 2 * c[0, 2] ** 2 / c[2, 2] == pytest.approx(606.3, abs=0.05)
    assert s.alpha == (7.5, 8.5)


def test_sic_and_diamond():
    # 4H-SiC: Kamitani et al., J. Appl. Phys. 82, 3152 (1997) [M]; a = 3.073, c = 10.053 A [M].
    sic = get_material("4H-SiC")
    assert sic.system == "hexagonal"
    assert sic.constants == {"C11": 501.0, "C12": 111.0, "C13": 52.0, "C33": 553.0, "C44": 163.0}
    assert (sic.a, sic.c) == (3.073, 10.053)
    assert sic.stiffness[5, 5] == pytest.approx(195.0)                  # (C11 - C12)/2
    # 4H has four Si-C bilayers, 6H six: c/a close to 4 and 6 times the ideal 0.8165 [D]
    assert sic.c_over_a / 4 == pytest.approx(np.sqrt(2 / 3), rel=0.01)
    assert get_material("6H-SiC").c_over_a / 6 == pytest.approx(np.sqrt(2 / 3), rel=0.01)
    # diamond: C11 1079, C12 124, C44 578 GPa, a = 3.567 A (REFERENCES Additions [M]);
    # E<100> = 1/S11 = 1050 GPa [D] (the often quoted 1050 GPa, from memory).
    d = get_material("diamond")
    assert d.system == "cubic" and d.a == 3.567
    assert 1 / np.linalg.inv(d.stiffness)[0, 0] == pytest.approx(1050.0, rel=0.005)


# REFERENCES Additions "real-stack materials" ranges [M] (E GPa, nu, alpha 1e-6/K); the picked value
# must lie inside.
RANGES = {"SiO2": ((72, 75), (0.16, 0.17), (0.5, 0.5)),
          "Si3N4-LPCVD": ((250, 300), (0.23, 0.27), (2.8, 3.3)),
          "SiN-PECVD": ((150, 250), None, None),
          "Cu": ((110, 130), (0.34, 0.34), (16.5, 17.0)),
          "W": ((411, 411), (0.28, 0.28), (4.5, 4.5)),
          "Al": ((70, 70), (0.35, 0.35), (23.0, 23.1)),
          "Au": ((78, 78), (0.44, 0.44), (14.2, 14.2)),
          "Ni": ((200, 200), (0.31, 0.31), (13.4, 13.4)),
          "TiN": ((250, 600), (0.25, 0.25), (9.4, 9.4))}


@pytest.mark.parametrize("name", sorted(RANGES))
def test_film_values_within_published_ranges(name):
    m = get_material(name)
    for value, rng in zip((m.constants["E"], m.constants["nu"], m.alpha[0]), RANGES[name]):
        if rng is not None:
            assert rng[0] <= value <= rng[1]


@pytest.mark.parametrize("name", NEW["dielectric"] + NEW["metal"])
def test_films_are_isotropic_without_lattice(name):
    m = get_material(name)
    assert m.system == "isotropic" and not m.has_lattice
    assert m.a is None and m.c is None and m.c_over_a is None and len(m.alpha) == 1
    S = np.linalg.inv(m.stiffness)
    assert (1 / S[0, 0], -S[0, 1] / S[0, 0]) == pytest.approx((m.constants["E"], m.constants["nu"]),
                                                              rel=1e-12)
    assert "no lattice" in repr(m)


def test_lookup_errors():
    with pytest.raises(MaterialError, match="SiO2 is not an alloy"):
        get_material("SiO2", 0.2)
    with pytest.raises(MaterialError) as exc:
        get_material("SiO3")
    assert all(n in str(exc.value) for v in NEW.values() for n in v)


def test_table_lists_new_groups_with_sources():
    table = materials_table()
    assert max(len(line) for line in table.splitlines()) <= 120
    for title in ("Substrates", "Dielectrics (deposited films)", "Metals (polycrystalline films)"):
        assert title in table.splitlines()
    starts = {line.split()[0] for line in table.splitlines() if line and not line.startswith(" ")}
    assert {n for v in NEW.values() for n in v} <= starts
    flat = " ".join(table.split())
    db = _raw()
    for group, names in NEW.items():
        for name in names:
            for text in db[group][name]["source"].values():
                assert " ".join(text.split()) in flat, name
    row = next(line for line in table.splitlines() if line.startswith("sapphire"))
    assert row.split()[1:9] == ["trigonal/corundum", "497", "163", "116", "-22", "501", "147", "167"]


# --------------------------------------------------------------------------- material_from_table
def test_from_table_every_system():
    tables = {
        "iso": {"system": "isotropic", "E": 150.0, "nu": 0.2, "alpha": 3.0, "source": "my lab"},
        "cub": {"system": "cubic", "C11": 165.7, "C12": 63.9, "C44": 79.6, "a": 5.431},
        "hex": {"system": "hexagonal", "C11": 390, "C12": 145, "C13": 106, "C33": 398, "C44": 105,
                "a": 3.189, "c": 5.185, "alpha": [5.59, 3.17]},
        "tri": {"system": "trigonal", "C11": 497, "C12": 163, "C13": 116, "C14": -22, "C33": 501,
                "C44": 147, "a": 4.758, "c": 12.991, "alpha": 7.5},
        "tet": {"system": "tetragonal", "C11": 269, "C12": 177, "C13": 146, "C33": 480, "C44": 124,
                "C66": 192, "a": 4.594, "c": 2.959},
        "ort": {"system": "orthorhombic", "C11": 330, "C22": 200, "C33": 235, "C12": 66, "C13": 68,
                "C23": 72, "C44": 67, "C55": 81, "C66": 81.5, "a": 4.75, "b": 10.2, "c": 5.98,
                "alpha": [1, 2, 3], "source": {"stiffness": "test numbers"}},
        "ani": {"system": "anisotropic", "C": (np.eye(6) * 100 + 10).tolist(), "alpha": [1, 2, 3]},
    }
    out = {name: material_from_table(name, t) for name, t in tables.items()}
    assert out["iso"].sources == ("iso: my lab",) and out["iso"].alpha == (3.0,)
    assert out["ort"].sources == ("ort stiffness: test numbers",)
    assert out["tri"].alpha == (7.5, 7.5) and out["hex"].alpha == (5.59, 3.17)
    assert (out["ort"].a, out["ort"].b, out["ort"].c) == (4.75, 10.2, 5.98)
    assert out["ani"].a is None and out["ani"].constants["C"][0, 0] == 110.0
    np.testing.assert_array_equal(out["tri"].stiffness, get_material("sapphire").stiffness)
    np.testing.assert_array_equal(out["cub"].stiffness, get_material("Si").stiffness)
    for m in out.values():
        assert m.group == "user" and not m.stiffness.flags.writeable


@pytest.mark.parametrize("name, table, match", [
    ("Si", {"system": "cubic", "C11": 1, "C12": 0, "C44": 1}, "material.Si shadows the built-in"),
    ("SiO2", {"system": "isotropic", "E": 70, "nu": 0.2}, "shadows the built-in"),
    ("x", {"E": 70, "nu": 0.2}, r"material\.x\.system is missing"),
    ("x", {"system": "monoclinic"}, r"material\.x\.system must be one of"),
    ("x", {"system": "isotropic", "E": 70, "nu": 0.2, "C11": 3}, r"material\.x\.C11 is not a key"),
    ("x", {"system": "isotropic", "E": 70, "nu": 0.2, "a": 5.4},
     r"material\.x\.a is not allowed: an isotropic"),
    ("x", {"system": "hexagonal", "C11": 390, "C12": 145, "C13": 106, "C33": 398, "C44": 105,
           "a": 3.189}, r"material\.x: a hexagonal lattice needs a, c together; missing c"),
    ("x", {"system": "cubic", "C11": 165.7, "C12": 63.9, "C44": 79.6, "a": -5.4},
     r"material\.x\.a must be a finite number > 0 \(Angstrom\)"),
    ("x", {"system": "cubic", "C11": 165.7, "C12": 63.9, "C44": 79.6, "alpha": [1, 2]},
     r"material\.x\.alpha of a cubic material takes one value"),
    ("x", {"system": "cubic", "C11": 100, "C12": 120, "C44": 50},
     r"material\.x: cubic stiffness is not positive definite: need C11 - C12 > 0"),
    ("x", {"system": "isotropic", "E": 70, "nu": 0.2, "source": 3}, r"material\.x\.source must be"),
])
def test_from_table_errors_name_the_key(name, table, match):
    with pytest.raises(MaterialError, match=match) as exc:
        material_from_table(name, table)
    assert "\n" not in str(exc.value)


def test_replace_builtin_when_meant():
    m = material_from_table("SiO2", {"system": "isotropic", "E": 66.0, "nu": 0.16},
                            replace_builtin=True)
    assert m.constants == {"E": 66.0, "nu": 0.16} and m.alpha == ()
    assert get_material("SiO2").constants["E"] == 72.0          # the database is unchanged
