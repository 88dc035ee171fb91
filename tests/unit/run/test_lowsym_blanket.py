"""Blanket films on low-symmetry and vicinal wafers: the film shears, sigma_i3 = 0.

A coherent blanket film has its in-plane total strain locked to the substrate
and a traction-free top, so sigma_xz = sigma_yz = sigma_zz = 0 through it; on
planes without mirrors normal to x and y this needs eps_xz, eps_yz != 0
(REFERENCES.md, "Film shear on low-symmetry wafers" [D]; e.g. Hornstra &
Bartels, J. Cryst. Growth 44, 513 (1978), from memory, for strained layers on
(hkl) substrates). The closed form is
:func:`mesastrain.physics.thinfilm.biaxial_response` (cross-checked against a
direct 6x6 solve in tests/unit/physics/test_tilt.py). The substrate of a
blanket stack carries no stress (it is held flat; the periodic column leaves
it unstrained).
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.derived.tilt import layer_tilts
from mesastrain.model.regions import build_layers
from mesastrain.physics.tilt import ARCSEC_PER_RAD, blanket_gradient, lattice_rotation

CUBIC = [("Si", None, "SiGe", 0.2), ("GaAs", None, "InGaAs", 0.1)]
ORIENTATIONS = {
    "(311)": ([3, 1, 1], [0, 1, -1], None),
    "(211)": ([2, 1, 1], [0, 1, -1], None),
    "(113)": ([1, 1, 3], [1, -1, 0], None),
    "(110) x [001]": ([1, 1, 0], [0, 0, 1], None),
    "(001) 4 deg off toward [110]": ([0, 0, 1], [1, -1, 0], (4.0, [1, 1, 0])),
    "(111) 2 deg off toward [11-2]": ([1, 1, 1], [1, -1, 0], (2.0, [1, 1, -2])),
    "(123)": ([1, 2, 3], [1, 1, -1], None),
}
HEXAGONAL = {
    "a-plane (11-20)": ([1, 1, -2, 0], [0, 0, 0, 1], None),
    "m-plane (1-100)": ([1, -1, 0, 0], [0, 0, 0, 1], None),
    "semipolar (11-22)": ([1, 1, -2, 2], [1, -1, 0, 0], None),
}


def _case(sub, sub_x, film, film_x, normal, x_axis, miscut, order):
    s = {"material": sub, "thickness": "10 um", "normal": normal, "x_axis": x_axis}
    if sub_x is not None:
        s["x"] = sub_x
    if miscut is not None:
        s["miscut"] = {"angle": f"{miscut[0]} deg", "toward": miscut[1]}
    lay = {"material": film, "thickness": 20}
    if film_x is not None:
        lay["x"] = film_x
    return parse_case({"substrate": s, "layer": [lay], "mesh": {"order": order},
                       "probe": [{"name": "film", "at": [0, 0, 10]},
                                 {"name": "substrate", "at": [0, 0, -15]}]})


def _check(case):
    res = solve_and_derive(case)
    lm = build_layers(case)[1]
    e0 = lm.eigenstrain_sample
    H, s_cf = blanket_gradient(lm.stiffness_sample, e0)
    s_cf = s_cf * 1000.0                                    # MPa
    film, sub = res.probes
    scale = np.abs(s_cf).max()
    # stress against the closed form (every component, 0.5 % of the largest), sigma_i3 = 0
    assert np.abs(film["stress"] - s_cf).max() < 5e-3 * scale
    assert np.abs(film["stress"][:, 2]).max() < 1e-3 * scale
    # in-plane total strain locked to the substrate; the out-of-plane column as closed form
    total = film["strain"] + e0
    assert np.abs(total[:2, :2]).max() < 5e-3 * np.abs(e0).max()
    assert total[:, 2] == pytest.approx([H[0, 2] / 2, H[1, 2] / 2, H[2, 2]],
                                        rel=5e-3, abs=5e-3 * np.abs(H).max())
    # the substrate stays stress-free below the interface
    assert np.abs(sub["stress"]).max() < 0.1
    # the reported tilt of the FE layer equals the closed form (arcsec)
    t = layer_tilts(res)[0]
    rot_cf = np.linalg.norm(lattice_rotation(H, e0)) * ARCSEC_PER_RAD
    assert t["closed_form"]["lattice_rotation"] == pytest.approx(rot_cf, abs=1e-3)
    assert t["finite_element"]["lattice_rotation"] == pytest.approx(
        rot_cf, rel=5e-3, abs=0.5)
    return res, H, t


@pytest.mark.slow
@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.parametrize("name", list(ORIENTATIONS))
@pytest.mark.parametrize("pair", CUBIC, ids=["SiGe-Si", "InGaAs-GaAs"])
def test_cubic_film_on_low_symmetry_wafer(pair, name, order):
    normal, x_axis, miscut = ORIENTATIONS[name]
    _, H, t = _check(_case(*pair, normal, x_axis, miscut, order))
    if miscut is not None:
        # Nagai (1974) [from memory] neglects the shear, whose effect on the nominal planes'
        # tilt is of second order in the miscut: the two agree to a few percent
        assert t["closed_form"]["plane_tilt"] == pytest.approx(
            t["nagai_tilt"], rel=0.03)


@pytest.mark.slow
@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.parametrize("name", list(HEXAGONAL))
def test_algan_on_gan_nonpolar_and_semipolar(name, order):
    normal, x_axis, miscut = HEXAGONAL[name]
    _check(_case("GaN", None, "AlGaN", 0.2, normal, x_axis, miscut, order))


@pytest.mark.slow
def test_311_shears_and_a_roller_column_would_not():
    # the shear is real on (311) (a roller column forbids it: the issue measured 35 MPa of
    # sigma_yz and a 3.6 % stress error there) and the layer's lattice turns by ~ e_yz
    case = _case("GaAs", None, "InGaAs", 0.1, [3, 1, 1], [0, 1, -1], None, 1)
    res, H, t = _check(case)
    assert abs(H[1, 2]) > 0.3 * abs(H[2, 2])
    assert t["closed_form"]["lattice_rotation"] > 300.0
    assert t["closed_form"]["plane_tilt"] < 1e-6
    assert {a for a, _, _ in res.mesh.boundary().periodic} == {0, 1}


@pytest.mark.slow
@pytest.mark.parametrize("order", [1, 2])
def test_partially_etched_feature_on_311_has_no_spurious_shear_at_the_sides(order):
    # a 200 nm mesa etched 10 nm into a 20 nm InGaAs film on GaAs(311): the film left on the
    # etch floor reaches the model's side faces. There the far field is the blanket film
    # (sigma_i3 = 0). With rollers on the y faces sigma_yz reached 133 MPa at 1 nm from the
    # face (trilinear, measured before the change); the tied faces leave < 2 MPa.
    pts = [[0, 199, 5], [0, 190, 5], [199, 0, 5], [190, 0, 5]]
    d = {"substrate": {"material": "GaAs", "thickness": "10 um", "normal": [3, 1, 1],
                       "x_axis": [0, 1, -1]},
         "layer": [{"material": "InGaAs", "x": 0.1, "thickness": 20}], "mesh": {"order": order},
         "pattern": {"shape": "rectangle", "width": "200 nm", "etch_depth": "10 nm"},
         "probe": [{"name": f"p{i}", "at": p} for i, p in enumerate(pts)]}
    res = solve_and_derive(parse_case(d))
    assert {a for a, _, _ in res.mesh.boundary().periodic} == {1}   # x = 0 is a true mirror
    for p in res.probes:
        assert np.abs(p["stress"][:, 2]).max() < 2.0, p["stress"]
