"""Tests of the materials database (mesastrain.physics.materials, data/materials.toml).

Each physics check names its source; flags as in the project's REFERENCES.md:
[C] confirmed public source, [M] from memory, [D] derived, [L] library.
"""

from __future__ import annotations

import dataclasses
import importlib.resources
import re
import tomllib

import numpy as np
import pytest
from scipy.optimize import brentq

from mesastrain.errors import MaterialError
from mesastrain.physics.crystal import rotate_voigt_stiffness
from mesastrain.physics.materials import (
    Material,
    cubic_stiffness,
    get_material,
    hexagonal_stiffness,
    is_alloy,
    known_materials,
    materials_table,
)

COMPOUNDS = ["Si", "Ge", "GaAs", "AlAs", "InAs", "InP", "GaP", "GaN", "AlN", "InN"]
ALLOYS = {"SiGe": ("Si", "Ge"), "InGaAs": ("GaAs", "InAs"), "AlGaAs": ("GaAs", "AlAs"),
          "AlGaN": ("GaN", "AlN"), "InGaN": ("GaN", "InN")}


def _raw():
    text = importlib.resources.files("mesastrain.physics").joinpath("data/materials.toml").read_text("utf-8")
    return tomllib.loads(text)


def _rot_z(deg):
    t = np.radians(deg)
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])


def _rot_x(deg):
    t = np.radians(deg)
    c, s = np.cos(t), np.sin(t)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, s], [0.0, -s, c]])


def _biaxial(c6):
    """sigma_xx/eps_par for equi-biaxial in-plane strain with sigma_zz = 0 (common practice)."""
    eps_zz = -(c6[2, 0] + c6[2, 1]) / c6[2, 2]
    return c6[0, 0] + c6[0, 1] + c6[0, 2] * eps_zz, eps_zz


# --------------------------------------------------------------------------- data file
def test_every_material_is_present():
    names = known_materials()
    assert names[:len(COMPOUNDS)] == COMPOUNDS
    assert set(names) == set(COMPOUNDS) | set(ALLOYS)


def test_every_quantity_has_a_flagged_source():
    db = _raw()
    flag = re.compile(r"\[(C|M|D)\]")
    for name, m in db["material"].items():
        for q in ("stiffness", "lattice", "alpha"):
            assert flag.search(m["source"][q]), f"{name}.{q} has no [C]/[M]/[D] flag"
    for name, al in db["alloy"].items():
        assert flag.search(al["source"]), name
        assert al["stiffness_law"] == al["alpha_law"] == "linear"
    laws = {name: al["lattice_law"] for name, al in db["alloy"].items()}
    assert laws == {"SiGe": "dismukes1964", "InGaAs": "vegard", "AlGaAs": "vegard",
                    "AlGaN": "vegard", "InGaN": "vegard"}


# --------------------------------------------------------------------------- Si
def test_si_constants_hopcroft():
    # Hopcroft, Nix & Kenny, J. Microelectromech. Syst. 19, 229 (2010): 165.7/63.9/79.6 GPa
    # (rounded 166/64/80 [C], decimals [M]); a = 5.431 A (CODATA, rounded) [C].
    si = get_material("Si")
    assert si.system == "cubic" and si.c is None and si.c_over_a is None
    assert si.constants == pytest.approx({"C11": 165.7, "C12": 63.9, "C44": 79.6}, abs=0.05)
    assert si.a == pytest.approx(5.4310, abs=1e-4)
    S = np.linalg.inv(si.stiffness)
    # Directional Young's moduli E<100> = 130.1, E<110> = 169.1 GPa [D]; memsnet gives 130 and 169 [C].
    assert 1 / S[0, 0] == pytest.approx(130.1, abs=0.1)
    s11, s12, s44 = S[0, 0], S[0, 1], S[3, 3]
    inv_e110 = s11 - 2 * (s11 - s12 - s44 / 2) * 0.25   # l^2 m^2 + ... = 1/4 for <110>
    assert 1 / inv_e110 == pytest.approx(169.1, abs=0.1)


def test_si_biaxial_modulus():
    # M(001) = C11 + C12 - 2 C12^2/C11 = 180.3 GPa [D] (REFERENCES 4, from Hopcroft 2010 constants);
    # here from the full 6x6 matrix with sigma_zz = 0, eps_zz/eps_par = -2 C12/C11.
    M, ratio = _biaxial(get_material("Si").stiffness)
    assert M == pytest.approx(180.3, abs=0.05)
    assert ratio == pytest.approx(-2 * 63.9 / 165.7, rel=1e-12)


def test_si_thermal_expansion_okada():
    # Okada & Tokumaru, J. Appl. Phys. 56, 314 (1984): alpha(T) fit [C formula], at 300 K -> 2.57 [D].
    T = 300.0
    alpha = 3.725 * (1 - np.exp(-5.88e-3 * (T - 124))) + 5.548e-4 * T
    assert get_material("Si").alpha == pytest.approx((alpha,), abs=0.01)


def test_cubic_stiffness_matches_matscipy():
    # [L] matscipy.elasticity.cubic_to_Voigt_6x6 (REFERENCES 9a).
    el = pytest.importorskip("matscipy.elasticity")
    np.testing.assert_allclose(cubic_stiffness(165.7, 63.9, 79.6),
                               el.cubic_to_Voigt_6x6(165.7, 63.9, 79.6), atol=1e-12)


# --------------------------------------------------------------------------- nitrides
def test_gan_polian_vurgaftman():
    # Polian, Grimsditch & Grzegory, J. Appl. Phys. 79, 3343 (1996) Brillouin values [C]
    # (authors [M]), adopted by Vurgaftman & Meyer, J. Appl. Phys. 94, 3675 (2003);
    # a = 3.189, c = 5.185 A (Vurgaftman & Meyer 2003) [C].
    gan = get_material("GaN")
    assert gan.system == "hexagonal" and gan.structure == "wurtzite"
    assert gan.constants == pytest.approx(
        {"C11": 390, "C12": 145, "C13": 106, "C33": 398, "C44": 105}, abs=0.5)
    assert (gan.a, gan.c) == pytest.approx((3.189, 5.185), abs=1e-3)
    # Polian 1996 measured C66 = 123 GPa independently [C]; (C11 - C12)/2 = 122.5.
    assert gan.stiffness[5, 5] == pytest.approx(123, abs=1.0)
    assert gan.c_over_a == pytest.approx(1.6259, abs=1e-4)          # [D] REFERENCES 2


@pytest.mark.parametrize("name, M_c, ratio", [
    ("GaN", 478.5, -0.5327), ("AlN", 470.5, -0.5791), ("InN", 262.4, -0.8214)])
def test_nitride_c_plane_biaxial(name, M_c, ratio):
    # M_c = C11 + C12 - 2 C13^2/C33 and eps_zz/eps_par = -2 C13/C33, REFERENCES 2 [D]
    # (GaN also [L] pymatgen), Vurgaftman & Meyer 2003 constants.
    M, r = _biaxial(get_material(name).stiffness)
    assert M == pytest.approx(M_c, abs=0.1)
    assert r == pytest.approx(ratio, abs=1e-4)


@pytest.mark.parametrize("name, x", [("GaN", None), ("AlN", None), ("InN", None), ("AlGaN", 0.3)])
def test_hexagonal_transversely_isotropic(name, x):
    # Wurtzite stiffness is invariant under any rotation about c: REFERENCES 4 wurtzite [L]
    # (pymatgen, 17 degrees about c).
    c6 = get_material(name, x).stiffness
    np.testing.assert_allclose(rotate_voigt_stiffness(c6, _rot_z(17.0)), c6, atol=1e-10)
    # ... but not about an in-plane axis, so the check can fail.
    assert np.abs(rotate_voigt_stiffness(c6, _rot_x(17.0)) - c6).max() > 1.0


# --------------------------------------------------------------------------- alloys
def test_ingaas_lattice_match_to_inp():
    # In(x)Ga(1-x)As on InP: x = 0.5319 for a_InP = 5.8687 A (Ioffe [C]), REFERENCES 1c [D].
    a_inp = get_material("InP").a
    assert a_inp == pytest.approx(5.8687, abs=1e-4)
    x = brentq(lambda x: get_material("InGaAs", x).a - a_inp, 0.0, 1.0, xtol=1e-10)
    assert x == pytest.approx(0.5319, abs=2e-4)


@pytest.mark.parametrize("x", [0.1, 0.2, 0.53])
def test_ingaas_misfit_on_gaas_vegard(x):
    # Vegard's law with a_GaAs = 5.65325, a_InAs = 6.0583 A (Vurgaftman et al. 2001 [C]),
    # misfit f = (a_sub - a_film)/a_film (REFERENCES conventions).
    a_film_ref = (1 - x) * 5.65325 + x * 6.0583
    f_ref = (5.65325 - a_film_ref) / a_film_ref
    a_film = get_material("InGaAs", x).a
    f = (get_material("GaAs").a - a_film) / a_film
    assert f == pytest.approx(f_ref, rel=0.01)
    # Same as the Ioffe form 6.0583 - 0.405 x_Ga [C].
    assert a_film == pytest.approx(6.0583 - 0.405 * (1 - x), abs=1e-4)


# Dismukes, Ekstrom & Paff, J. Phys. Chem. 68, 3021 (1964) fit; (a - a_Si)/a_Si table in
# REFERENCES 1c [D] (coefficients [M]), next to the Vegard column of the same table.
DISMUKES = {0.1: (0.00372, 0.00418), 0.2: (0.00754, 0.00836), 0.3: (0.01146, 0.01253),
            0.5: (0.01960, 0.02089)}


@pytest.mark.parametrize("x", sorted(DISMUKES))
def test_sige_misfit_on_si_dismukes(x):
    a_si = get_material("Si").a
    rel = (get_material("SiGe", x).a - a_si) / a_si
    dismukes, vegard = DISMUKES[x]
    assert rel == pytest.approx(dismukes, rel=0.01)
    assert rel != pytest.approx(vegard, rel=0.01)   # the law matters at this tolerance


def test_sige_dismukes_endpoint():
    # The Dismukes fit gives 5.6575 A at x = 1 vs Ge 5.6579 A (REFERENCES 1c [D]): documented,
    # not forced to the member.
    assert get_material("SiGe", 1.0).a == pytest.approx(5.6575, abs=5e-5)
    assert get_material("SiGe", 1.0).a == pytest.approx(get_material("Ge").a, rel=1e-4)


def test_algaas_against_ioffe_formulas():
    # Ioffe NSM AlGaAs: a = 5.6533 + 0.0078x A, alpha = 5.73 - 0.53x (1e-6/K) [C].
    for x in (0.15, 0.3, 0.7):
        m = get_material("AlGaAs", x)
        assert m.a == pytest.approx(5.6533 + 0.0078 * x, abs=1e-4)
        assert m.alpha[0] == pytest.approx(5.73 - 0.53 * x, abs=1e-3)


@pytest.mark.parametrize("name", sorted(ALLOYS))
def test_alloy_endpoints_equal_members(name):
    first, second = (get_material(n) for n in ALLOYS[name])
    for x, member in ((0.0, first), (1.0, second)):
        m = get_material(name, x)
        assert m.members == ALLOYS[name] and m.system == member.system
        assert m.constants == pytest.approx(member.constants, abs=1e-12)
        np.testing.assert_allclose(m.stiffness, member.stiffness, atol=1e-12)
        assert m.alpha == pytest.approx(member.alpha, abs=1e-12)
        assert m.c == (None if member.c is None else pytest.approx(member.c, abs=1e-12))
        if m.lattice_law == "vegard":
            assert m.a == pytest.approx(member.a, abs=1e-12)
        else:   # dismukes1964: 5.431 at x = 0, 5.6575 vs 5.6579 at x = 1 (see above)
            assert m.a == pytest.approx(member.a, rel=1e-4)


@pytest.mark.parametrize("name", sorted(ALLOYS))
def test_alloy_stiffness_linear_and_stable(name):
    # Linear interpolation of C_ij (common practice); every composition stays positive definite.
    first, second = (get_material(n) for n in ALLOYS[name])
    for x in (0.25, 0.5, 0.9):
        m = get_material(name, x)
        np.testing.assert_allclose(m.stiffness, (1 - x) * first.stiffness + x * second.stiffness,
                                   atol=1e-10)
        assert np.linalg.eigvalsh(m.stiffness).min() > 0


def test_labels_and_aliases():
    assert get_material("SiGe", 0.2).label == "Si0.8Ge0.2"
    assert get_material("InGaAs", 0.53).label == "In0.53Ga0.47As"
    assert get_material("AlGaN", 0.25).label == "Al0.25Ga0.75N"
    assert get_material("GaN").label == "GaN"
    assert get_material("Si1-xGex", 0.2).name == "SiGe"
    assert get_material("In(x)Ga(1-x)As", 0.3).name == "InGaAs"
    assert is_alloy("SiGe") and is_alloy("AlxGa1-xN")
    assert not is_alloy("Si") and not is_alloy("Unobtainium")


def test_material_is_immutable():
    m = get_material("Si")
    assert isinstance(m, Material)
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.a = 5.0
    with pytest.raises(ValueError):
        m.stiffness[0, 0] = 0.0


# --------------------------------------------------------------------------- stiffness builders
def test_stiffness_builders_vectorised():
    c11 = np.array([165.7, 128.5])
    stack = cubic_stiffness(c11, np.array([63.9, 48.3]), 79.6)
    assert stack.shape == (2, 6, 6)
    np.testing.assert_array_equal(stack[1], cubic_stiffness(128.5, 48.3, 79.6))
    h = hexagonal_stiffness(390, 145, 106, 398, 105)
    np.testing.assert_array_equal(h, h.T)
    assert h[5, 5] == (390 - 145) / 2 and h[0, 2] == h[1, 2] == 106


def test_unstable_constants_rejected():
    with pytest.raises(MaterialError, match="positive definite"):
        cubic_stiffness(100.0, 120.0, 50.0)       # C11 < C12
    with pytest.raises(MaterialError, match="positive definite"):
        hexagonal_stiffness(390, 145, 400, 398, 105)   # C13 too large


# --------------------------------------------------------------------------- errors
def _one_line(exc):
    assert "\n" not in str(exc.value)
    return str(exc.value)


def test_unknown_material_lists_known_names():
    with pytest.raises(MaterialError) as exc:
        get_material("Sii")
    msg = _one_line(exc)
    assert msg.startswith("unknown material 'Sii'")
    assert all(n in msg for n in COMPOUNDS + list(ALLOYS))
    with pytest.raises(MaterialError):
        get_material("si")                           # names are case-sensitive


def test_alloy_without_x():
    with pytest.raises(MaterialError) as exc:
        get_material("SiGe")
    assert _one_line(exc) == "SiGe is an alloy: give x (fraction of Ge) between 0 and 1"
    with pytest.raises(MaterialError, match=r"fraction of In"):
        get_material("InGaAs")


@pytest.mark.parametrize("x", [-0.01, 1.01, float("nan"), True, "abc"])
def test_x_out_of_range(x):
    with pytest.raises(MaterialError) as exc:
        get_material("SiGe", x)
    assert "fraction of Ge" in _one_line(exc)


def test_x_for_compound():
    with pytest.raises(MaterialError) as exc:
        get_material("GaAs", 0.2)
    assert _one_line(exc).startswith("GaAs is not an alloy")


# --------------------------------------------------------------------------- table
def test_materials_table_lists_everything_with_sources():
    table = materials_table()
    lines = table.splitlines()
    assert max(len(line) for line in lines) <= 120
    starts = {line.split()[0] for line in lines if line and not line.startswith(" ")}
    assert set(COMPOUNDS) | set(ALLOYS) <= starts
    flat = " ".join(table.split())
    db = _raw()
    for name, m in db["material"].items():
        for text in m["source"].values():
            assert " ".join(text.split()) in flat, name
    for name, al in db["alloy"].items():
        assert " ".join(al["source"].split()) in flat, name
    assert "dismukes1964" in table and "5.431 + 0.1992 x + 0.02733 x^2" in table
