"""Real device stacks: materials of one's own, deposited films, thermal history, epitaxy.

Sources beside each check. Closed forms evaluated with the tool's own inputs are
implementation checks (the formula, not the data, is what is tested).
"""

from __future__ import annotations

import numpy as np
import pytest

from mesastrain import api
from mesastrain.case.parse import parse_case
from mesastrain.derived.relaxation import blanket_state
from mesastrain.errors import CaseError
from mesastrain.model.regions import build_layers
from mesastrain.physics.crystal import direction_vector
from mesastrain.physics.materials import get_material, material_from_table
from mesastrain.physics.thinfilm import biaxial_modulus_111

SI111 = {"material": "Si", "thickness": 5e5, "normal": [1, 1, 1], "x_axis": [1, -1, 0]}
SAPPHIRE = {"material": "sapphire", "thickness": 4.3e5, "normal": [0, 0, 0, 1],
            "x_axis": [1, -1, 0, 0]}
GAN_C = {"material": "GaN", "thickness": 1000, "normal": [0, 0, 0, 1], "x_axis": [1, 1, -2, 0]}
COOL = {"growth_temperature": "1050 C", "final_temperature": "20 C"}


def _case(substrate, *layers, **extra):
    return parse_case({"substrate": dict(substrate), "layer": [dict(lay) for lay in layers],
                       **extra})


def _m_c(mat) -> float:
    """Biaxial modulus of a c-plane hexagonal film, C11 + C12 - 2 C13^2/C33, GPa
    (REFERENCES.md 2, wurtzite c-plane)."""
    c = mat.constants
    return c["C11"] + c["C12"] - 2 * c["C13"] ** 2 / c["C33"]


# ---- materials of one's own -------------------------------------------------------------
NITRIDE = {"system": "hexagonal", "C11": 380.0, "C12": 140.0, "C13": 100.0, "C33": 390.0,
           "C44": 100.0, "a": 3.10, "c": 5.00, "alpha": [4.0, 3.5], "source": "demo numbers"}


def test_user_material_is_used_by_layers_and_echoed():
    case = _case(SI111, {**GAN_C, "material": "MyNitride", "relaxed": 0.5},
                 material={"MyNitride": NITRIDE})
    lm = build_layers(case)[1]
    assert lm.material.name == "MyNitride" and lm.material.group == "user"
    assert lm.material.constants["C13"] == 100.0
    # half relaxed from the Si(111) net spacing a_Si/sqrt(2) (hexagonal-on-cubic rule)
    a_ref = get_material("Si").a / np.sqrt(2)
    assert lm.lattice_in_plane[0] == pytest.approx(a_ref + 0.5 * (3.10 - a_ref), rel=1e-12)
    assert parse_case(case.to_dict()) == case


def test_builtin_substrates_and_films_are_accepted():
    case = _case(SAPPHIRE, {"material": "SiO2", "thickness": 50},
                 {"material": "W", "thickness": 20})
    names = [lm.material.name for lm in build_layers(case)]
    assert names == ["sapphire", "SiO2", "W"]


def test_shadowing_needs_the_flag():
    table = dict(NITRIDE)
    with pytest.raises(CaseError, match="replace_builtin") as err:
        _case(SI111, {**GAN_C, "relaxed": 1}, material={"GaN": table})
    assert err.value.key == "material.GaN"
    case = _case(SI111, {**GAN_C, "relaxed": 1},
                 material={"GaN": {**table, "replace_builtin": True}})
    assert build_layers(case)[1].material.constants["C11"] == 380.0


@pytest.mark.parametrize("table, key", [
    ({**NITRIDE, "C44": -5.0}, "material.X.C44"),
    ({"system": "isotropic", "E": 100.0, "nu": 0.7}, "material.X.nu"),
    ({"system": "triclinic", "E": 100.0}, "material.X.system"),
    ({"system": "isotropic", "E": 100.0, "nu": 0.2, "a": 4.0}, "material.X.a"),
    ({"system": "isotropic", "E": 100.0, "nu": 0.2, "colour": 1}, "material.X.colour"),
])
def test_bad_material_tables_name_the_key(table, key):
    with pytest.raises(CaseError) as err:
        _case(SI111, {"material": "X", "thickness": 10, "relaxed": 1}, material={"X": table})
    assert err.value.key == key


def test_api_region_takes_a_material_object():
    mat = material_from_table("Film", {"system": "isotropic", "E": 150.0, "nu": 0.3})
    c_obj, _ = api.Region(mat).resolve()
    np.testing.assert_allclose(c_obj, api.isotropic_stiffness(150.0, 0.3), rtol=1e-12)
    c_name, _ = api.Region("GaN", normal=(0, 0, 0, 1), x_axis=(1, 1, -2, 0)).resolve()
    c_mat, _ = api.Region(get_material("GaN"), normal=(0, 0, 0, 1),
                          x_axis=(1, 1, -2, 0)).resolve()
    np.testing.assert_allclose(c_mat, c_name, rtol=1e-12)


# ---- deposited films --------------------------------------------------------------------
@pytest.mark.parametrize("stress", ["1.5 GPa", "-2 GPa", "-800 MPa"])
def test_deposited_film_blanket_stress_is_the_given_one_on_a_low_symmetry_wafer(stress):
    # Si(113): not in-plane isotropic, so the eigenstrain is not equi-biaxial; the blanket
    # stress must still be exactly the given equi-biaxial value (definition of the key)
    sub = {"material": "Si", "thickness": 5e5, "normal": [1, 1, 3], "x_axis": [1, -1, 0]}
    lm = build_layers(_case(sub, {"material": "SiN-PECVD", "thickness": 80,
                                  "stress": stress}))[1]
    assert not lm.epitaxial and lm.misfit == 0.0
    want = float(stress.split()[0]) * (1000.0 if "GPa" in stress else 1.0)
    s, _ = blanket_state(lm)
    np.testing.assert_allclose(s, np.diag([want, want, 0.0]), atol=1e-9 * abs(want))


def test_epitaxial_layer_stress_adds_to_mismatch():
    base = {"material": "SiGe", "x": 0.2, "thickness": 20}
    sub = {"material": "Si", "thickness": 5e5, "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
    s0, _ = blanket_state(build_layers(_case(sub, base))[1])
    s1, _ = blanket_state(build_layers(_case(sub, {**base, "stress": "-300 MPa"}))[1])
    np.testing.assert_allclose(s1 - s0, np.diag([-300.0, -300.0, 0.0]), atol=1e-9)


@pytest.mark.parametrize("layers, key", [
    ([{"material": "SiO2", "thickness": 10, "epitaxial": True}], "layer[0].epitaxial"),
    ([{"material": "SiO2", "thickness": 10}, {"material": "Si", "thickness": 10}],
     "layer[1].epitaxial"),
    ([{"material": "SiO2", "thickness": 10, "stress": "1 bar"}], "layer[0].stress"),
])
def test_bad_deposited_layers(layers, key):
    sub = {"material": "Si", "thickness": 5e5, "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
    with pytest.raises(CaseError) as err:
        _case(sub, *layers)
    assert err.value.key == key


def test_growth_temperature_needed_only_without_deposition_temperatures():
    sub = {"material": "Si", "thickness": 5e5, "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
    lay = {"material": "SiO2", "thickness": 10}
    with pytest.raises(CaseError) as err:
        _case(sub, lay, thermal={"final_temperature": "20 C"})
    assert err.value.key == "thermal.growth_temperature"
    case = _case(sub, {**lay, "deposition_temperature": "1000 C"},
                 thermal={"final_temperature": "20 C"})
    assert build_layers(case)[1].deposition_temperature == pytest.approx(1273.15)


# ---- thermal history ---------------------------------------------------------------------
def test_isotropic_film_cooled_gives_the_biaxial_thermal_stress():
    # sigma = E/(1 - nu) (alpha_s - alpha_f) dT (Freund & Suresh, Thin Film Materials, 2003 [M])
    film = {"system": "isotropic", "E": 200.0, "nu": 0.25, "alpha": 3.0}
    wafer = {"system": "isotropic", "E": 70.0, "nu": 0.2, "alpha": 8.0}
    sub = {"material": "Wafer", "thickness": 5e5, "normal": [0, 0, 1], "x_axis": [1, 0, 0]}
    case = _case(sub, {"material": "Film", "thickness": 100, "deposition_temperature": "400 C"},
                 material={"Film": film, "Wafer": wafer},
                 thermal={"final_temperature": "20 C"})
    s, _ = blanket_state(build_layers(case)[1])
    want = 200.0 / 0.75 * (8.0 - 3.0) * 1e-6 * (-380.0) * 1e3
    np.testing.assert_allclose(np.diag(s), [want, want, 0.0], rtol=1e-12, atol=1e-9)


def test_each_layer_cools_from_its_own_temperature():
    # two deposited films of one material: stress differs by M (alpha_s - alpha_f) (T1 - T2)
    sub = {"material": "Si", "thickness": 5e5, "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
    case = _case(sub, {"material": "Cu", "thickness": 50, "deposition_temperature": "400 C"},
                 {"material": "Cu", "thickness": 50, "deposition_temperature": "100 C"},
                 thermal={"final_temperature": "20 C"})
    l1, l2 = build_layers(case)[1:]
    cu, si = get_material("Cu"), get_material("Si")
    m = cu.constants["E"] / (1 - cu.constants["nu"])
    diff = blanket_state(l1)[0][0, 0] - blanket_state(l2)[0][0, 0]
    # "auto" fit rule: Cu has no alpha(T) fit, so Si's constant alpha is used too
    assert diff == pytest.approx(m * (si.alpha[0] - cu.alpha[0]) * 1e-6 * -300.0 * 1e3,
                                 rel=1e-9)
    assert diff > 0           # the hotter deposit ends more tensile (Cu contracts more)


def test_relaxed_gan_on_si111_stress_from_cooling_only_and_cracking_threshold():
    case = _case(SI111, {**GAN_C, "relaxed": 1}, thermal=COOL)
    lm = build_layers(case)[1]
    si, gan = get_material("Si"), get_material("GaN")
    want = _m_c(gan) * (si.alpha[0] - gan.alpha[0]) * 1e-6 * (-1030.0) * 1e3
    s, _ = blanket_state(lm)
    np.testing.assert_allclose(np.diag(s), [want, want, 0.0], rtol=1e-9, atol=1e-6)
    assert s[0, 0] > 1000.0     # GaN on Si ends in tension, beyond the 1 GPa rule of thumb
    from mesastrain.derived.energy import crack_warning
    assert "cracking" in crack_warning(lm, s)


def test_pseudomorphic_gan_on_si111_misfit_is_the_net_spacing_mismatch():
    lm = build_layers(_case(SI111, GAN_C))[1]
    a_ref = get_material("Si").a / np.sqrt(2)      # (111) surface net, a/sqrt(2)
    a = get_material("GaN").a
    assert lm.misfit == pytest.approx((a_ref - a) / a, rel=1e-12)
    # the c-plane film is in-plane isotropic on Si(111): equal in-plane stresses
    s, _ = blanket_state(lm)
    assert s[0, 0] == pytest.approx(s[1, 1], rel=1e-12) and abs(s[0, 1]) < 1e-9


def test_gan_on_c_sapphire_30_degree_rotation():
    # GaN [11-20] || sapphire [1-100]: the nitride's a matches a_sapphire/sqrt(3)
    lm = build_layers(_case(SAPPHIRE, GAN_C))[1]
    sap, gan = get_material("sapphire"), get_material("GaN")
    assert lm.misfit == pytest.approx((sap.a / np.sqrt(3) - gan.a) / gan.a, rel=1e-12)
    # the a axes of film and substrate differ by 30 degrees about c (modulo 60)
    sub = build_layers(_case(SAPPHIRE, GAN_C))[0]
    a_sub = sub.frame.R @ direction_vector([1, 1, -2, 0], "trigonal", sap.c_over_a)
    a_gan = lm.frame.R @ direction_vector([1, 1, -2, 0], "hexagonal", gan.c_over_a)
    ang = np.degrees(np.arctan2(a_sub[1], a_sub[0]) - np.arctan2(a_gan[1], a_gan[0]))
    assert ang % 60.0 == pytest.approx(30.0)
    assert abs(a_sub[2]) < 1e-12 and abs(a_gan[2]) < 1e-12
    # relaxed and cooled: compressive, M_c (alpha_s,a - alpha_GaN,a) dT
    lm = build_layers(_case(SAPPHIRE, {**GAN_C, "relaxed": 1}, thermal=COOL))[1]
    want = _m_c(gan) * (sap.alpha[0] - gan.alpha[0]) * 1e-6 * (-1030.0) * 1e3
    assert blanket_state(lm)[0][0, 0] == pytest.approx(want, rel=1e-9)
    assert want < 0


def test_trigonal_substrate_c14_follows_its_symmetry_through_the_model():
    # -3m: C14 flips under 60 (= 180) degrees about c and not under 120 (Nye 1957 [M])
    c = {}
    for deg, x in ((0, [2, -1, -1, 0]), (60, [1, 1, -2, 0]), (120, [-1, 2, -1, 0])):
        case = _case({**SAPPHIRE, "x_axis": x}, {**GAN_C, "relaxed": 1})
        c[deg] = build_layers(case)[0].stiffness_sample
    assert c[0][0, 3] == pytest.approx(get_material("sapphire").constants["C14"])
    np.testing.assert_allclose(c[120], c[0], atol=1e-9)
    assert c[60][0, 3] == pytest.approx(-c[0][0, 3], rel=1e-12)
    flip = np.diag([1, 1, 1, -1, -1, 1.0])   # 180 deg about z: Voigt 4, 5 change sign
    np.testing.assert_allclose(c[60], flip @ c[0] @ flip, atol=1e-9)


def test_si111_wafer_is_in_plane_isotropic_for_the_bow():
    # Stoney needs one biaxial modulus: Si(111) gives M(111) (Brantley 1973)
    from mesastrain.derived.bow import biaxial_modulus
    sub = build_layers(_case(SI111, {**GAN_C, "relaxed": 1}))[0]
    c = get_material("Si").constants
    assert biaxial_modulus(sub.stiffness_sample) == pytest.approx(
        float(biaxial_modulus_111(c["C11"], c["C12"], c["C44"])), rel=1e-9)
