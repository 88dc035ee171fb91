"""Blanket (unpatterned) stacks against closed-form thin-film results.

A laterally infinite pseudomorphic film has equi-biaxial in-plane strain equal
to the misfit, zero normal traction, and an out-of-plane strain fixed by the
rotated stiffness. The finite-element model of a blanket stack (a periodic
column, side faces tied) must reproduce these to 0.5 %.
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.physics.materials import get_material


def blanket(substrate, layer, normal, x_axis, order=1, relaxed=0.0, sub_x=None, layer_x=None,
            extra_layers=()):
    d = {
        "title": "blanket",
        "substrate": {"material": substrate, "thickness": "10 um", "normal": normal,
                      "x_axis": x_axis},
        "layer": [{"material": layer, "thickness": 20, "relaxed": relaxed}, *extra_layers],
        "mesh": {"order": order},
        "probe": [{"name": "film", "at": [0, 0, 10]}],
    }
    if sub_x is not None:
        d["substrate"]["x"] = sub_x
    if layer_x is not None:
        d["layer"][0]["x"] = layer_x
    return parse_case(d)


@pytest.mark.parametrize("order", [1, 2])
def test_sige_on_si_001(order):
    # M(001) = C11 + C12 - 2 C12^2/C11 and eps_perp/eps_par = -2 C12/C11 for a (001) film
    # (REFERENCES.md section 4; e.g. Freund & Suresh, Thin Film Materials, 2003, from memory)
    case = blanket("Si", "SiGe", [0, 0, 1], [1, 1, 0], order=order, layer_x=0.25)
    res = solve_and_derive(case)
    film = get_material("SiGe", 0.25)
    si = get_material("Si")
    c = film.constants
    f = (si.a - film.a) / film.a
    M = c["C11"] + c["C12"] - 2 * c["C12"] ** 2 / c["C11"]
    p = res.probes[0]
    sig, eps = p["stress"], p["strain"]
    assert sig[0, 0] == pytest.approx(M * f * 1000, rel=5e-3)   # MPa
    assert sig[1, 1] == pytest.approx(M * f * 1000, rel=5e-3)
    assert abs(sig[2, 2]) < 1e-3 * abs(sig[0, 0])
    assert eps[0, 0] == pytest.approx(f, rel=5e-3)
    assert eps[2, 2] / eps[0, 0] == pytest.approx(-2 * c["C12"] / c["C11"], rel=5e-3)
    # crystal frame: the tetragonal distortion is along [001] with no shear
    ec = p["strain_crystal"]
    assert ec[0, 0] == pytest.approx(ec[1, 1]) and abs(ec[0, 1]) < 1e-9


def test_gan_c_plane_wurtzite():
    # eps_zz/eps_par = -2 C13/C33 for a c-plane wurtzite film (REFERENCES.md sections 2 and 4;
    # GaN/AlN constants Vurgaftman & Meyer, J. Appl. Phys. 94, 3675, 2003)
    case = blanket("GaN", "AlGaN", [0, 0, 0, 1], [2, -1, -1, 0], layer_x=0.25)
    res = solve_and_derive(case)
    film = get_material("AlGaN", 0.25)
    c = film.constants
    p = res.probes[0]
    eps = p["strain"]
    f = (get_material("GaN").a - film.a) / film.a
    assert eps[0, 0] == pytest.approx(f, rel=5e-3)
    assert eps[2, 2] / eps[0, 0] == pytest.approx(-2 * c["C13"] / c["C33"], rel=5e-3)
    Mc = c["C11"] + c["C12"] - 2 * c["C13"] ** 2 / c["C33"]
    assert p["stress"][0, 0] == pytest.approx(Mc * f * 1000, rel=5e-3)


def test_si_on_ge_111():
    # M(111) = 6 C44 (C11 + 2 C12)/(C11 + 2 C12 + 4 C44) and
    # eps_perp/eps_par = -2 (C11 + 2 C12 - 2 C44)/(C11 + 2 C12 + 4 C44) (REFERENCES.md section 4)
    case = blanket("Ge", "Si", [1, 1, 1], [1, -1, 0])
    res = solve_and_derive(case)
    si, ge = get_material("Si"), get_material("Ge")
    C11, C12, C44 = (si.constants[k] for k in ("C11", "C12", "C44"))
    f = (ge.a - si.a) / si.a
    p = res.probes[0]
    M = 6 * C44 * (C11 + 2 * C12) / (C11 + 2 * C12 + 4 * C44)
    assert p["stress"][0, 0] == pytest.approx(M * f * 1000, rel=5e-3)
    assert p["stress"][1, 1] == pytest.approx(M * f * 1000, rel=5e-3)
    ratio = -2 * (C11 + 2 * C12 - 2 * C44) / (C11 + 2 * C12 + 4 * C44)
    assert p["strain"][2, 2] / p["strain"][0, 0] == pytest.approx(ratio, rel=5e-3)


def test_110_unequal_in_plane_stress():
    # (110) film, x' = [1-10], y' = [001]: unequal in-plane stresses (REFERENCES.md section 4)
    case = blanket("Si", "SiGe", [1, 1, 0], [1, -1, 0], layer_x=0.3)
    res = solve_and_derive(case)
    film = get_material("SiGe", 0.3)
    C11, C12, C44 = (film.constants[k] for k in ("C11", "C12", "C44"))
    f = (get_material("Si").a - film.a) / film.a
    r = -(C11 + 3 * C12 - 2 * C44) / (C11 + C12 + 2 * C44)
    sx = (C11 + C12 + 2 * C44) / 2 + C12 + (C11 + C12 - 2 * C44) / 2 * r
    sy = C11 + C12 + C12 * r
    p = res.probes[0]
    assert p["stress"][0, 0] == pytest.approx(sx * f * 1000, rel=5e-3)
    assert p["stress"][1, 1] == pytest.approx(sy * f * 1000, rel=5e-3)


@pytest.mark.slow
def test_partial_relaxation_and_reference_chain():
    # A fully relaxed SiGe buffer (relaxed = 1) carries no stress; a Si layer on it is
    # strained to the SiGe lattice: in-plane strain (a_SiGe - a_Si)/a_Si (the usual
    # strained-Si-on-relaxed-buffer scheme, common practice).
    cap = {"material": "Si", "thickness": 10}
    case = blanket("Si", "SiGe", [0, 0, 1], [1, 0, 0], layer_x=0.2, relaxed=1.0,
                   extra_layers=[cap])
    case = parse_case({**case.to_dict(), "probe": [{"name": "buffer", "at": [0, 0, 10]},
                                                  {"name": "cap", "at": [0, 0, 25]}]})
    res = solve_and_derive(case)
    buf, cap_p = res.probes
    assert np.max(np.abs(buf["stress"])) < 1e-6
    sige, si = get_material("SiGe", 0.2), get_material("Si")
    assert cap_p["strain"][0, 0] == pytest.approx((sige.a - si.a) / si.a, rel=5e-3)
    assert res.layers[2].misfit == pytest.approx((sige.a - si.a) / si.a, rel=1e-12)
    # half relaxed: the lattice sits halfway between the substrate's and its own
    half = solve_and_derive(blanket("Si", "SiGe", [0, 0, 1], [1, 0, 0], layer_x=0.2, relaxed=0.5))
    a_eff = half.layers[1].lattice_in_plane[0]
    assert a_eff == pytest.approx(0.5 * (si.a + sige.a))
