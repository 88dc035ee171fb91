"""Built-in stress and thermal-mismatch eigenstrains of deposited films
(mesastrain.physics.deposited).

Each physics check names its source; flags as in the project's REFERENCES.md:
[C] confirmed public source, [M] from memory, [D] derived, [L] library.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad

from mesastrain.errors import MaterialError, MesastrainError
from mesastrain.physics.crystal import sample_frame
from mesastrain.physics.deposited import (
    blanket_film_stress,
    deposited_film_eigenstrain,
    free_thermal_strain,
    in_plane_stiffness,
    thermal_mismatch_eigenstrain,
)
from mesastrain.physics.elastic import stiffness_from_constants
from mesastrain.physics.materials import get_material, material_from_table
from mesastrain.physics.thinfilm import biaxial_response


def _okada(T):
    """Si alpha(T), Okada & Tokumaru, J. Appl. Phys. 56, 314 (1984) (formula [C], REFERENCES 3), ppm/K."""
    return 3.725 * (1 - np.exp(-5.88e-3 * (T - 124))) + 5.548e-4 * T


def _film_stress_check(c_sample, sigma):
    eps0 = deposited_film_eigenstrain(c_sample, sigma)
    assert np.all(eps0[2, :] == 0) and np.all(eps0[:, 2] == 0)
    # independent path: thinfilm.biaxial_response with the in-plane elastic strain -eps0
    s, _ = biaxial_response(c_sample, -eps0[0, 0], -eps0[1, 1], -eps0[0, 1])
    np.testing.assert_allclose(s * 1e3, np.diag([sigma, sigma, 0.0]), atol=1e-9 * abs(sigma))
    np.testing.assert_allclose(blanket_film_stress(c_sample, eps0), np.diag([sigma, sigma, 0.0]),
                               atol=1e-9 * abs(sigma))
    return eps0


# --------------------------------------------------------------------------- built-in stress
@pytest.mark.parametrize("sigma", [1500.0, -2000.0])
def test_isotropic_film_stress_exact(sigma):
    # Biaxial modulus E/(1 - nu) of an isotropic film (Freund & Suresh, Thin Film Materials,
    # Cambridge 2003, ch. 2, from memory): eps0 = -sigma (1 - nu)/E in-plane.
    sin = get_material("Si3N4-LPCVD")
    E, nu = sin.constants["E"], sin.constants["nu"]
    eps0 = _film_stress_check(sin.stiffness, sigma)
    np.testing.assert_allclose(eps0, np.diag([1, 1, 0]) * (-sigma * 1e-3 * (1 - nu) / E), atol=1e-15)
    q = in_plane_stiffness(sin.stiffness)
    assert q[0, 0] + q[0, 1] == pytest.approx(E / (1 - nu), rel=1e-12)


@pytest.mark.parametrize("normal, x_axis, M", [((0, 0, 1), (1, 0, 0), 180.3), ((0, 0, 1), (1, 1, 0), 180.3),
                                                ((1, 1, 1), (1, -1, 0), 229.1)])
def test_cubic_film_on_001_and_111(normal, x_axis, M):
    # Si biaxial moduli M(001) = 180.3 and M(111) = 229.1 GPa [D] (REFERENCES 4, Hopcroft 2010
    # constants); both planes are in-plane isotropic for equi-biaxial loading (Brantley 1973 [C]).
    si = get_material("Si")
    c = sample_frame(normal, x_axis).stiffness_to_sample(si.stiffness)
    eps0 = _film_stress_check(c, 1000.0)
    assert eps0[0, 0] == pytest.approx(-1.0 / M, rel=2e-4)
    assert eps0[1, 1] == pytest.approx(eps0[0, 0], rel=1e-10) and abs(eps0[0, 1]) < 1e-15


@pytest.mark.parametrize("normal, x_axis", [((1, 1, 3), (1, -1, 0)), ((1, 1, 3), (3, 3, -2)),
                                            ((1, 2, 3), (1, 1, -1))])
def test_cubic_film_on_low_symmetry_planes(normal, x_axis):
    # On (113) and (123) a cubic film is not in-plane isotropic [D]: an equi-biaxial eigenstrain
    # would not give equi-biaxial stress, so the anisotropic solve matters (the check can fail).
    si = get_material("Si")
    c = sample_frame(normal, x_axis).stiffness_to_sample(si.stiffness)
    eps0 = _film_stress_check(c, -1200.0)
    assert abs(eps0[0, 0] - eps0[1, 1]) > 1e-3 * abs(eps0[0, 0])
    iso = np.mean([eps0[0, 0], eps0[1, 1]])
    s_iso, _ = biaxial_response(c, -iso, -iso, 0.0)
    assert abs(s_iso[0, 0] - s_iso[1, 1]) * 1e3 > 1.0          # > 1 MPa off
    if normal == (1, 2, 3):                                    # no mirror in the surface frame
        assert abs(eps0[0, 1]) > 1e-3 * abs(eps0[0, 0])


def test_general_stress_tensor_and_uniaxial_plane():
    c = sample_frame((1, 2, 3), (1, 1, -1)).stiffness_to_sample(get_material("Si").stiffness)
    eps0 = deposited_film_eigenstrain(c, (300.0, -100.0, 50.0))
    np.testing.assert_allclose(blanket_film_stress(c, eps0)[:2, :2], [[300.0, 50.0], [50.0, -100.0]],
                               atol=1e-9)
    # hexagonal and trigonal c-planes are in-plane isotropic for biaxial loading (three-fold axis;
    # Nye 1957 [M]); GaN M_c = 478.5 GPa [D] (REFERENCES 2).
    gan = get_material("GaN").stiffness
    assert deposited_film_eigenstrain(gan, 1000.0)[0, 0] == pytest.approx(-1 / 478.5, rel=2e-4)
    sap = deposited_film_eigenstrain(get_material("sapphire").stiffness, 1000.0)
    assert sap[1, 1] == pytest.approx(sap[0, 0], rel=1e-12) and abs(sap[0, 1]) < 1e-16
    # the same stress in a frame rotated by 30 degrees about c (x along [10-10]); a trigonal frame
    # reads Miller-Bravais indices on the hexagonal basis, like a hexagonal one
    sap_m = get_material("sapphire")
    fr = sample_frame((0, 0, 0, 1), (1, 0, -1, 0), sap_m.system, sap_m.c_over_a)
    np.testing.assert_allclose(fr.R, sample_frame((0, 0, 0, 1), (1, 0, -1, 0), "hexagonal",
                                                  sap_m.c_over_a).R, atol=1e-15)
    _film_stress_check(fr.stiffness_to_sample(sap_m.stiffness), 1000.0)
    # an isotropic film's frame reads indices as Cartesian directions, like a cubic one
    iso = sample_frame((1, 1, 3), (1, -1, 0), "isotropic")
    np.testing.assert_allclose(iso.R, sample_frame((1, 1, 3), (1, -1, 0)).R, atol=1e-15)


def test_stress_input_errors():
    c = get_material("SiO2").stiffness
    for bad in ("1 GPa", [1.0, 2.0], float("nan")):
        with pytest.raises(MesastrainError, match="stress must be"):
            deposited_film_eigenstrain(c, bad)
    with pytest.raises(MesastrainError, match="6x6"):
        deposited_film_eigenstrain(np.eye(3), 100.0)


# --------------------------------------------------------------------------- thermal mismatch
def test_isotropic_film_cooled_constant_alpha():
    # sigma = E/(1 - nu) (alpha_s - alpha_f) dT, dT = T_final - T_dep (Freund & Suresh, Thin Film
    # Materials, Cambridge 2003, ch. 2, from memory; also Ohring, Materials Science of Thin Films,
    # 2002, from memory). SiO2 (72 GPa, 0.17, 0.5e-6/K) on Si with Si's constant 2.57e-6/K.
    ox, si = get_material("SiO2"), get_material("Si")
    T_dep, T_fin = 1273.15, 293.15
    eps0 = thermal_mismatch_eigenstrain(ox, si, T_dep, T_fin, fit="never")
    s = blanket_film_stress(ox.stiffness, eps0)
    expected = 72e3 / (1 - 0.17) * (2.57 - 0.5) * 1e-6 * (T_fin - T_dep)   # MPa
    assert s[0, 0] == pytest.approx(expected, rel=1e-12) and s[1, 1] == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(-176.0, abs=0.5)               # compressive oxide [D]
    assert abs(s[2, 2]) < 1e-9


def test_isotropic_film_cooled_with_si_fit():
    # Same with Si's alpha(T) (Okada & Tokumaru 1984), integrated here by quadrature; SiO2 constant.
    # Thermal oxide on Si is typically about -300 MPa at room temperature (common practice, [M]).
    ox, si = get_material("SiO2"), get_material("Si")
    T_dep, T_fin = 1273.15, 293.15
    s = blanket_film_stress(ox.stiffness, thermal_mismatch_eigenstrain(ox, si, T_dep, T_fin))
    int_si = quad(_okada, T_dep, T_fin)[0] * 1e-6
    expected = 72e3 / (1 - 0.17) * (int_si - 0.5e-6 * (T_fin - T_dep))
    assert s[0, 0] == pytest.approx(expected, rel=1e-9)
    assert -350.0 < expected < -200.0
    # "auto" pairs fits only when both have one: SiO2 has none, so constants as "never"
    auto = thermal_mismatch_eigenstrain(ox, si, T_dep, T_fin, fit="auto")
    np.testing.assert_allclose(auto, thermal_mismatch_eigenstrain(ox, si, T_dep, T_fin, fit="never"))


@pytest.mark.parametrize("substrate, normal, x_axis, sign", [
    ("sapphire", (0, 0, 0, 1), (1, 0, -1, 0), -1),     # GaN on c-sapphire, 30-degree in-plane twist
    ("4H-SiC", (0, 0, 0, 1), (2, -1, -1, 0), +1),
    ("Si", (1, 1, 1), (1, -1, 0), +1),
])
def test_gan_thermal_stress_sign(substrate, normal, x_axis, sign):
    # GaN is compressive on sapphire and tensile on SiC and Si(111) after cooling from growth
    # (common practice, e.g. the GaN-on-Si cracking problem [M]). c-plane GaN: sigma = M_c (alpha_s,a -
    # alpha_GaN,a) dT with M_c = 478.5 GPa [D, REFERENCES 2] for in-plane isotropic substrates.
    gan, sub = get_material("GaN"), get_material(substrate)
    fg = sample_frame((0, 0, 0, 1), (2, -1, -1, 0), "hexagonal", gan.c_over_a)
    fs = sample_frame(normal, x_axis, sub.system, sub.c_over_a)
    T_dep, T_fin = 1323.15, 293.15
    eps0 = thermal_mismatch_eigenstrain(gan, sub, T_dep, T_fin, fg, fs, fit="never")
    s = blanket_film_stress(fg.stiffness_to_sample(gan.stiffness), eps0)
    expected = 478.5e3 * (sub.alpha[0] - 5.59) * 1e-6 * (T_fin - T_dep)
    assert s[0, 0] == pytest.approx(expected, rel=2e-4) and s[1, 1] == pytest.approx(expected, rel=2e-4)
    assert abs(s[0, 1]) < 1e-9 and np.sign(expected) == sign


def test_free_thermal_strain_axes_and_rotation():
    gan = get_material("GaN")
    e = free_thermal_strain(gan, 1000.0, 300.0, fit="never")
    np.testing.assert_allclose(np.diag(e), np.array([5.59, 5.59, 3.17]) * -700e-6, rtol=1e-12)
    ortho = material_from_table("o", {"system": "orthorhombic", "C11": 330, "C22": 200, "C33": 235,
                                      "C12": 66, "C13": 68, "C23": 72, "C44": 67, "C55": 81,
                                      "C66": 81.5, "alpha": [1.0, 2.0, 3.0]})
    np.testing.assert_allclose(np.diag(free_thermal_strain(ortho, 400.0, 300.0)), [-1e-4, -2e-4, -3e-4])
    # a rotated film: the eigenstrain is the rotated tensor (trace invariant), GaN on an a-plane frame
    fr = sample_frame((1, 1, -2, 0), (0, 0, 0, 1), "hexagonal", gan.c_over_a)
    eps = thermal_mismatch_eigenstrain(gan, get_material("Si"), 1000.0, 300.0, fr, None, fit="never")
    assert eps[0, 0] == pytest.approx((3.17 - 2.57) * -700e-6, rel=1e-12)       # c along sample x
    assert np.trace(eps) == pytest.approx((2 * 5.59 + 3.17 - 3 * 2.57) * -700e-6, rel=1e-12)


def test_thermal_errors():
    no_alpha = material_from_table("film", {"system": "isotropic", "E": 100.0, "nu": 0.3})
    with pytest.raises(MaterialError, match="film has no thermal expansion coefficient"):
        thermal_mismatch_eigenstrain(no_alpha, get_material("Si"), 600.0, 300.0)
    with pytest.raises(MaterialError, match="120-1500 K"):                   # outside the Si fit
        thermal_mismatch_eigenstrain(get_material("SiO2"), get_material("Si"), 1600.0, 300.0)
    with pytest.raises(MesastrainError, match="fit must be"):
        thermal_mismatch_eigenstrain(get_material("SiO2"), get_material("Si"), 600.0, 300.0, fit="x")
    with pytest.raises(MesastrainError, match="rotation"):
        thermal_mismatch_eigenstrain(get_material("SiO2"), get_material("Si"), 600.0, 300.0,
                                     film_frame=np.ones((3, 3)))


def test_stiffness_from_elastic_module_matches_database():
    # the isotropic builder and the database agree (W: 411 GPa, 0.28, REFERENCES Additions [M])
    np.testing.assert_array_equal(stiffness_from_constants("isotropic", {"E": 411.0, "nu": 0.28}),
                                  get_material("W").stiffness)
