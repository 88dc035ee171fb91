"""[[liner]]: reading, defaults, echo, probes in the liner, and the liner's eigenstrain."""

from __future__ import annotations

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.errors import CaseError
from mesastrain.model.regions import build_layers, liner_eigenstrain
from mesastrain.physics.deposited import blanket_film_stress


def _data(liners, pattern=None, **extra) -> dict:
    return {
        "substrate": {"material": "Si", "thickness": "0.5 mm", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "Si", "thickness": 40}],
        "liner": liners,
        "pattern": pattern or {"shape": "rectangle", "width": 200, "etch_depth": 60},
        **extra,
    }


def test_defaults_names_and_echo():
    case = parse_case(_data([{"material": "SiO2", "thickness": "5 nm"},
                             {"material": "SiN-PECVD", "thickness": 10, "name": "stressor",
                              "sidewall_thickness": 8, "stress": "-1 GPa"}]))
    a, b = case.liners
    assert (a.name, a.side, a.floor, a.stress) == ("SiO2 liner", 5.0, 5.0, None)
    assert (b.name, b.side, b.floor, b.stress) == ("stressor", 8.0, 10.0, -1000.0)
    again = parse_case(case.to_dict())
    assert again.liners == case.liners


def test_probe_in_the_liner_is_inside_and_beyond_it_is_not():
    liner = [{"material": "SiN-PECVD", "thickness": 10}]
    ok = parse_case(_data(liner, probe=[{"at": [0, 0, 45]}, {"at": [105, 0, 20]},
                                         {"at": [300, 0, -15]}]))
    assert len(ok.probes) == 3
    with pytest.raises(CaseError) as info:
        parse_case(_data(liner, probe=[{"at": [0, 0, 51]}]))
    assert info.value.key == "probe[0].at"
    with pytest.raises(CaseError):
        parse_case(_data(liner, probe=[{"at": [111, 0, 20]}]))


def test_square_pitch_gap_checked_along_y():
    # a 200 x 100 nm rectangle on a 240 nm square pitch: 40 nm gap along x, 140 along y
    pattern = {"shape": "rectangle", "width": 200, "length": 100, "etch_depth": 60,
               "pitch": 240}
    parse_case(_data([{"material": "SiO2", "thickness": 19}], pattern))
    with pytest.raises(CaseError) as info:
        parse_case(_data([{"material": "SiO2", "thickness": 20}], pattern))
    assert info.value.key == "liner[0].thickness" and "along x" in str(info.value)


def test_isotropic_liner_eigenstrain_is_a_dilatation_giving_the_blanket_stress():
    case = parse_case(_data([{"material": "SiN-PECVD", "thickness": 10,
                              "stress": "1.2 GPa"}]))
    lm = build_layers(case)[-1]
    E, nu = 200.0, 0.25          # SiN-PECVD in the materials table
    e = -1200.0e-3 * (1 - nu) / E
    assert np.allclose(lm.eigenstrain_sample, e * np.eye(3), rtol=1e-12, atol=0)
    # the blanket film carries exactly the given stress (deposited-film convention)
    s = blanket_film_stress(lm.stiffness_sample, lm.eigenstrain_sample)
    assert np.allclose(np.diag(s), [1200.0, 1200.0, 0.0], atol=1e-9)
    assert np.allclose(liner_eigenstrain(lm.stiffness_sample, 1200.0), lm.eigenstrain_sample)


def test_liner_thermal_mismatch_from_its_own_deposition_temperature():
    # An isotropic film cooled by dT on a substrate: sigma = E/(1 - nu) (alpha_s - alpha_f) dT
    # (Freund & Suresh, Thin Film Materials, Cambridge 2003 [M]); constant alphas, since only
    # Si has an alpha(T) fit
    case = parse_case(_data([{"material": "SiO2", "thickness": 10,
                              "deposition_temperature": "400 C"}],
                            thermal={"growth_temperature": "650 C",
                                     "final_temperature": "20 C"}))
    layers = build_layers(case)
    lm, sub = layers[-1], layers[0]
    assert lm.deposition_temperature == pytest.approx(673.15)
    E, nu = lm.material.constants["E"], lm.material.constants["nu"]
    a_f, a_s = lm.material.alpha[0], sub.material.alpha[0]
    want = E / (1 - nu) * (a_s - a_f) * 1e-6 * (20.0 - 400.0) * 1e3
    s = blanket_film_stress(lm.stiffness_sample, lm.eigenstrain_sample)
    assert s[0, 0] == pytest.approx(want, rel=1e-9) and want < 0   # SiO2 on Si: compressive
