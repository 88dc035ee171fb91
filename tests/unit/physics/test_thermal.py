"""Checks of thermal expansion and thermal-mismatch strain in mesastrain.physics.thermal.

Reference values come from /work/shared/REFERENCES.md §3; the flag of each
value is carried beside it.
"""

from dataclasses import dataclass

import numpy as np
import pytest
from scipy.integrate import quad

from mesastrain.errors import MaterialError, MesastrainError
from mesastrain.physics.thermal import (
    expansion_coefficient,
    expansion_fit,
    fitted_materials,
    thermal_mismatch_strain,
    thermal_strain,
    thermal_strain_tensor,
)

ROOM = 293.15  # K


def celsius(t):
    return t + 273.15


def okada_alpha(T):
    """Okada & Tokumaru, J. Appl. Phys. 56, 314 (1984), Si, ppm/K (formula [C] REFERENCES §3),
    written out here independently of the module."""
    return 3.725 * (1 - np.exp(-5.88e-3 * (T - 124))) + 5.548e-4 * T


@dataclass(frozen=True)
class StandInMaterial:
    """Just the two fields of the agreed Material interface that thermal.py reads."""
    name: str
    alpha: tuple


def test_si_fit_room_temperature_values():
    # REFERENCES §3: Si alpha = 2.57e-6/K at 300 K and 2.51e-6/K at 293 K [D from the
    # Okada & Tokumaru 1984 fit, formula C]; quoted to 3 significant figures.
    assert expansion_coefficient("Si", None, 300.0) == pytest.approx(2.57, abs=0.005)
    assert expansion_coefficient("Si", None, 293.0) == pytest.approx(2.51, abs=0.005)
    # the same through a Material-style alpha tuple: the fit wins in "auto"
    assert expansion_coefficient("Si", (2.6,), 300.0) == pytest.approx(2.57, abs=0.005)
    assert expansion_coefficient("Si", (2.6,), 300.0, fit="never") == 2.6
    assert "Si" in fitted_materials()
    assert expansion_fit("Ge") is None


@pytest.mark.parametrize("T1, T2", [(293.15, 1073.15), (1400.0, 300.0), (130.0, 1500.0), (500.0, 500.001)])
def test_si_closed_form_integral_equals_quadrature(T1, T2):
    # closed-form integral of the Okada & Tokumaru (1984) fit against adaptive quadrature
    ref_ppm, _ = quad(okada_alpha, T1, T2, epsabs=0.0, epsrel=1e-13, limit=200)
    assert thermal_strain("Si", None, T1, T2) == pytest.approx(ref_ppm * 1e-6, rel=1e-10)


def test_thermal_strain_vectorised_and_antisymmetric():
    T = np.array([300.0, 600.0, 900.0, 1200.0])
    up = thermal_strain("Si", None, ROOM, T)
    down = thermal_strain("Si", None, T, ROOM)
    assert up.shape == (4,)
    assert np.allclose(up, -down, rtol=1e-12)
    assert np.all(np.diff(up) > 0)
    # the slope of the strain is the expansion coefficient
    h = 1e-3
    slope = (thermal_strain("Si", None, ROOM, T + h) - thermal_strain("Si", None, ROOM, T - h)) / (2 * h)
    assert np.allclose(slope * 1e6, expansion_coefficient("Si", None, T), rtol=1e-6)


def test_constant_alpha_and_hexagonal_axes():
    # GaN alpha_a = 5.59, alpha_c = 3.17 (Maruska & Tietjen 1969, REFERENCES §3 [C]); no fit: constants
    gan = (5.59, 3.17)
    assert thermal_strain("GaN", gan, 1000.0, 300.0, axis="a") == pytest.approx(-5.59e-6 * 700.0, rel=1e-12)
    assert thermal_strain("GaN", gan, 1000.0, 300.0, axis="c") == pytest.approx(-3.17e-6 * 700.0, rel=1e-12)
    t = thermal_strain_tensor("GaN", gan, 1000.0, 300.0, system="hexagonal")
    assert np.allclose(np.diag(t), [-5.59e-6 * 700, -5.59e-6 * 700, -3.17e-6 * 700], rtol=1e-12)
    t_si = thermal_strain_tensor("Si", None, ROOM, 1073.15)
    assert np.allclose(t_si, thermal_strain("Si", None, ROOM, 1073.15) * np.eye(3), rtol=1e-14)


def test_ge_on_si_tensile_after_cooling():
    # Common practice: Ge grown or annealed relaxed on Si (about 700-850 C) ends at room temperature
    # with about +0.2 to +0.3 % in-plane tensile strain from the thermal mismatch
    # ([M] from memory: Ishikawa et al., Appl. Phys. Lett. 82, 2044 (2003), about 0.2-0.25 %).
    # Constants (REFERENCES §3): Ge 5.9e-6/K [C]; Si 2.6e-6/K, the commonly rounded value [C].
    T_anneal = celsius(800.0)
    eps0 = thermal_mismatch_strain(("Ge", 5.9), ("Si", 2.6), T_anneal, ROOM)
    elastic_in_plane = -eps0  # layer held coherent in-plane: elastic strain = -stress-free strain
    assert 0.002 <= elastic_in_plane <= 0.003
    # closed form (alpha_Ge - alpha_Si)(T_final - T_growth), to 1 %
    assert eps0 == pytest.approx((5.9e-6 - 2.6e-6) * (ROOM - T_anneal), rel=0.01)
    # the same with Material-style objects; "auto" pairs the constants because Ge has no fit
    ge, si = StandInMaterial("Ge", (5.9,)), StandInMaterial("Si", (2.6,))
    assert thermal_mismatch_strain(ge, si, T_anneal, ROOM) == pytest.approx(eps0, rel=1e-14)
    assert thermal_mismatch_strain(5.9, 2.6, T_anneal, ROOM) == pytest.approx(eps0, rel=1e-14)


def test_ge_on_si_with_the_si_fit_against_quadrature():
    # fit="always": Okada & Tokumaru Si fit against a constant Ge alpha; checked by quadrature.
    T_anneal = celsius(800.0)
    eps0 = thermal_mismatch_strain(("Ge", 5.9), ("Si", 2.6), T_anneal, ROOM, fit="always")
    ref_ppm, _ = quad(lambda T: 5.9 - okada_alpha(T), T_anneal, ROOM, epsabs=0.0, epsrel=1e-13)
    assert eps0 == pytest.approx(ref_ppm * 1e-6, rel=1e-10)
    # the Si fit rises above 2.6e-6/K over this range, so the mismatch is smaller than with constants
    assert -eps0 < (5.9e-6 - 2.6e-6) * (T_anneal - ROOM)


def test_sign_convention_for_nitrides():
    # Common practice: GaN on Si(111) is in tension after cooling (it cracks), GaN on sapphire is in
    # compression. alpha_a: GaN 5.59 (REFERENCES §3 [C]), Si 2.6 [C], sapphire about 7.5, the value
    # commonly used for GaN-on-sapphire thermal stress (REFERENCES §3 [M]).
    T_growth = celsius(1050.0)
    gan = ("GaN", (5.59, 3.17))
    on_si = thermal_mismatch_strain(gan, ("Si", 2.6), T_growth, ROOM, axis="a")
    on_sapphire = thermal_mismatch_strain(gan, ("sapphire", (7.5, 8.5)), T_growth, ROOM, axis="a")
    assert -on_si > 0         # elastic in-plane strain tensile
    assert -on_sapphire < 0   # elastic in-plane strain compressive


def test_bad_input():
    with pytest.raises(MaterialError, match="120-1500 K"):
        thermal_strain("Si", None, 77.0, 300.0)
    with pytest.raises(MaterialError, match="no constant alpha"):
        thermal_strain("Ge", None, 300.0, 600.0)
    with pytest.raises(MaterialError, match="no constant alpha"):
        thermal_strain("Si", None, 300.0, 600.0, fit="never")
    with pytest.raises(MaterialError, match="alpha must be"):
        thermal_strain("X", (1.0, 2.0, 3.0), 300.0, 600.0)
    with pytest.raises(MesastrainError, match="axis"):
        thermal_strain("GaN", (5.59, 3.17), 300.0, 600.0, axis="b")
    with pytest.raises(MesastrainError, match="fit must be"):
        thermal_strain("Si", None, 300.0, 600.0, fit="sometimes")
    with pytest.raises(MesastrainError, match="> 0 K"):
        thermal_strain("Ge", 5.9, -10.0, 300.0)
    with pytest.raises(MesastrainError, match="Material"):
        thermal_mismatch_strain("Ge", 2.6, 1000.0, 300.0)
