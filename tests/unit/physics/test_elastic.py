"""Stiffness of every symmetry system and its positive-definiteness checks
(mesastrain.physics.elastic).

Each physics check names its source; flags as in the project's REFERENCES.md:
[C] confirmed public source, [M] from memory, [D] derived, [L] library.
Symmetry checks use Neumann's principle (the stiffness is invariant under the
point-group operations of the crystal; Nye, Physical Properties of Crystals,
Oxford 1957 [M]).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from mesastrain.errors import MaterialError
from mesastrain.physics.crystal import rotate_voigt_stiffness
from mesastrain.physics.elastic import (
    STIFFNESS_KEYS,
    SYMMETRY_SYSTEMS,
    _matrix,  # the unchecked builder, to compare with
    check_constants,
    isotropic_constants_to_cubic,
    stiffness_from_constants,
    validate_stiffness,
)
from mesastrain.physics.materials import cubic_stiffness, hexagonal_stiffness

el = pytest.importorskip("matscipy.elasticity")

# Sapphire after Gieske & Barsch, Phys. Status Solidi 29, 121 (1968) [M] (REFERENCES Additions).
SAPPHIRE = {"C11": 497.0, "C12": 163.0, "C13": 116.0, "C14": -22.0, "C33": 501.0, "C44": 147.0}
# Rutile-like tetragonal numbers, from memory (the checks do not depend on their accuracy).
TETRA = {"C11": 269.0, "C12": 177.0, "C13": 146.0, "C33": 480.0, "C44": 124.0, "C66": 192.0}
# Orthorhombic test numbers (not a material), all nine distinct.
ORTHO = {"C11": 330.0, "C22": 200.0, "C33": 235.0, "C12": 66.0, "C13": 68.0, "C23": 72.0,
         "C44": 67.0, "C55": 81.0, "C66": 81.5}
SI = {"C11": 165.7, "C12": 63.9, "C44": 79.6}


def _rot_z(deg):
    t = np.radians(deg)
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])


def _rot_axis(axis, deg):
    return Rotation.from_rotvec(np.radians(deg) * np.asarray(axis, float) / np.linalg.norm(axis)).as_matrix()


#: A general (no symmetry) rotation used throughout.
R_LOW = Rotation.from_euler("zxz", [23.0, 41.0, -67.0], degrees=True).as_matrix()


def _invariant(c6, R):
    return np.allclose(rotate_voigt_stiffness(c6, R), c6, atol=1e-9)


# --------------------------------------------------------------------------- isotropic
@pytest.mark.parametrize("E, nu", [(72.0, 0.17), (411.0, 0.28), (78.0, 0.44), (10.0, -0.3)])
def test_isotropic_round_trip_matscipy(E, nu):
    # E and nu back from the matrix with matscipy.elasticity.elastic_moduli [L]; C44 = mu = E/(2(1+nu))
    # and C11 - C12 = 2 mu (isotropic Hooke's law, common practice).
    c = stiffness_from_constants("isotropic", {"E": E, "nu": nu})
    Es, nus = el.elastic_moduli(c)[:2]
    np.testing.assert_allclose(Es, E, rtol=1e-12)
    assert nus[0, 1] == pytest.approx(nu, rel=1e-12)
    assert c[3, 3] == pytest.approx(E / (2 * (1 + nu)), rel=1e-12)
    assert c[0, 0] - c[0, 1] == pytest.approx(2 * c[3, 3], rel=1e-12)
    S = np.linalg.inv(c)
    assert (1 / S[0, 0], -S[0, 1] / S[0, 0]) == pytest.approx((E, nu), rel=1e-12)


def test_isotropic_invariant_under_any_rotation():
    c = stiffness_from_constants("isotropic", {"E": 200.0, "nu": 0.3})
    for R in (R_LOW, _rot_axis((1, 2, 3), 37.0), Rotation.random(5, random_state=7).as_matrix()[3]):
        assert _invariant(c, R)
    # ... which a cubic crystal is not, so the check can fail (Si, Zener ratio 1.56).
    assert not _invariant(cubic_stiffness(**SI), R_LOW)


# --------------------------------------------------------------------------- cubic, hexagonal
def test_cubic_matches_matscipy_and_existing_builder():
    # [L] matscipy.elasticity.cubic_to_Voigt_6x6; same as materials.cubic_stiffness.
    c = stiffness_from_constants("cubic", SI)
    np.testing.assert_allclose(c, el.cubic_to_Voigt_6x6(165.7, 63.9, 79.6), atol=1e-12)
    np.testing.assert_array_equal(c, cubic_stiffness(**SI))
    assert _invariant(c, _rot_axis((0, 0, 1), 90)) and _invariant(c, _rot_axis((1, 1, 1), 120))
    assert not _invariant(c, _rot_axis((0, 0, 1), 45))


def test_rotation_agrees_with_matscipy_for_low_symmetry():
    # Bond-matrix rotation against matscipy.elasticity.rotate_elastic_constants [L], general rotation.
    for system, k in (("trigonal", SAPPHIRE), ("orthorhombic", ORTHO), ("tetragonal", TETRA)):
        c = stiffness_from_constants(system, k)
        np.testing.assert_allclose(rotate_voigt_stiffness(c, R_LOW),
                                   el.rotate_elastic_constants(c, R_LOW), atol=1e-9)


def test_hexagonal_transversely_isotropic():
    # 4H-SiC, Kamitani et al., J. Appl. Phys. 82, 3152 (1997) [M]; any rotation about c leaves a
    # hexagonal stiffness unchanged (REFERENCES 4, wurtzite [L]).
    k = {"C11": 501.0, "C12": 111.0, "C13": 52.0, "C33": 553.0, "C44": 163.0}
    c = stiffness_from_constants("hexagonal", k)
    np.testing.assert_array_equal(c, hexagonal_stiffness(*k.values()))
    for deg in (7.0, 30.0, 45.0, 60.0, 113.7):
        assert _invariant(c, _rot_z(deg))
    assert not _invariant(c, _rot_axis((1, 0, 0), 30))
    # c-plane biaxial modulus C11 + C12 - 2 C13^2/C33 = 602.2 GPa [D, REFERENCES 4 formula]
    eps_zz = -(c[2, 0] + c[2, 1]) / c[2, 2]
    assert c[0, 0] + c[0, 1] + c[0, 2] * eps_zz == pytest.approx(602.2, abs=0.05)


# --------------------------------------------------------------------------- trigonal
def test_trigonal_matrix_is_nye_form():
    # Nye (1957) / IEEE Std 176 matrix for classes 32, 3m, -3m [M]: C24 = -C14, C56 = C14,
    # C66 = (C11 - C12)/2; written out here by hand.
    a = SAPPHIRE
    c66 = (a["C11"] - a["C12"]) / 2
    ref = np.array([
        [a["C11"], a["C12"], a["C13"], a["C14"], 0, 0],
        [a["C12"], a["C11"], a["C13"], -a["C14"], 0, 0],
        [a["C13"], a["C13"], a["C33"], 0, 0, 0],
        [a["C14"], -a["C14"], 0, a["C44"], 0, 0],
        [0, 0, 0, 0, a["C44"], a["C14"]],
        [0, 0, 0, 0, a["C14"], c66]])
    np.testing.assert_array_equal(stiffness_from_constants("trigonal", SAPPHIRE), ref)


def test_trigonal_point_group_symmetry():
    # -3m with x along a two-fold axis (Nye 1957 [M]): three-fold about c and two-fold about x leave
    # C unchanged; a two-fold about y is not an operation of the group and changes it.
    c = stiffness_from_constants("trigonal", SAPPHIRE)
    assert _invariant(c, _rot_z(120.0)) and _invariant(c, _rot_z(240.0))
    assert _invariant(c, _rot_axis((1, 0, 0), 180.0))
    assert not _invariant(c, _rot_axis((0, 1, 0), 180.0))


def test_trigonal_c14_sign_under_60_not_120_degrees():
    # A 60-degree rotation about c turns C14 into -C14 and leaves every other constant; 120 degrees
    # leaves the whole matrix unchanged (symmetry of -3m; Nye 1957 [M]).
    c = stiffness_from_constants("trigonal", SAPPHIRE)
    r60 = rotate_voigt_stiffness(c, _rot_z(60.0))
    r120 = rotate_voigt_stiffness(c, _rot_z(120.0))
    assert r60[0, 3] == pytest.approx(+22.0, abs=1e-9)
    assert r60[4, 5] == pytest.approx(+22.0, abs=1e-9) and r60[1, 3] == pytest.approx(-22.0, abs=1e-9)
    np.testing.assert_allclose(r60, stiffness_from_constants("trigonal", {**SAPPHIRE, "C14": 22.0}),
                               atol=1e-9)
    np.testing.assert_allclose(r120, c, atol=1e-9)
    assert r120[0, 3] == pytest.approx(-22.0, abs=1e-9)


@pytest.mark.parametrize("deg", [17.0, 45.0, 100.0])
def test_trigonal_general_angle_about_c(deg):
    # Under a rotation theta about c, (C14, C15) turns by 3 theta: C14' = C14 cos 3 theta and
    # C14'^2 + C15'^2 = C14^2 [D, tensor transformation law]; the rest is transversely isotropic.
    c = stiffness_from_constants("trigonal", SAPPHIRE)
    r = rotate_voigt_stiffness(c, _rot_z(deg))
    assert r[0, 3] == pytest.approx(-22.0 * np.cos(np.radians(3 * deg)), abs=1e-9)
    assert np.hypot(r[0, 3], r[0, 4]) == pytest.approx(22.0, abs=1e-9)
    for i, j in ((0, 0), (0, 1), (0, 2), (2, 2), (3, 3), (5, 5)):
        assert r[i, j] == pytest.approx(c[i, j], abs=1e-9)


# --------------------------------------------------------------------------- tetragonal, orthorhombic
def test_tetragonal_symmetry_and_cubic_limit():
    c = stiffness_from_constants("tetragonal", TETRA)
    assert _invariant(c, _rot_z(90.0)) and _invariant(c, _rot_axis((1, 0, 0), 180.0))
    assert not _invariant(c, _rot_z(45.0))           # C66 != (C11 - C12)/2
    assert not _invariant(c, _rot_axis((1, 0, 0), 90.0))   # C33 != C11
    cub = stiffness_from_constants("tetragonal", {"C11": 165.7, "C12": 63.9, "C13": 63.9,
                                                  "C33": 165.7, "C44": 79.6, "C66": 79.6})
    np.testing.assert_array_equal(cub, cubic_stiffness(**SI))


def test_orthorhombic_symmetry_and_tetragonal_limit():
    c = stiffness_from_constants("orthorhombic", ORTHO)
    for axis in ((1, 0, 0), (0, 1, 0), (0, 0, 1)):
        assert _invariant(c, _rot_axis(axis, 180.0))
    assert not _invariant(c, _rot_z(90.0))           # C11 != C22
    t = dict(TETRA)
    o = {"C11": t["C11"], "C22": t["C11"], "C33": t["C33"], "C12": t["C12"], "C13": t["C13"],
         "C23": t["C13"], "C44": t["C44"], "C55": t["C44"], "C66": t["C66"]}
    np.testing.assert_array_equal(stiffness_from_constants("orthorhombic", o),
                                  stiffness_from_constants("tetragonal", TETRA))


def test_anisotropic_full_matrix():
    # sapphire rotated into a general frame, given as a full 6x6 in "crystal axes" of its own
    full = rotate_voigt_stiffness(stiffness_from_constants("trigonal", SAPPHIRE), R_LOW)
    c = stiffness_from_constants("anisotropic", {"C": full.tolist()})
    np.testing.assert_allclose(c, full, atol=1e-12)
    back = rotate_voigt_stiffness(c, R_LOW.T)
    np.testing.assert_allclose(back, stiffness_from_constants("trigonal", SAPPHIRE), atol=1e-9)


# --------------------------------------------------------------------------- validation
BAD = [
    ("isotropic", {"E": 70.0, "nu": 0.5}, "need nu < 0.5"),
    ("isotropic", {"E": -70.0, "nu": 0.3}, "need E > 0"),
    ("isotropic", {"E": 70.0, "nu": -1.2}, "need nu > -1"),
    ("cubic", {"C11": 100.0, "C12": 120.0, "C44": 50.0}, "need C11 - C12 > 0"),
    ("cubic", {"C11": 100.0, "C12": -60.0, "C44": 50.0}, "need C11 + 2*C12 > 0"),
    ("cubic", {"C11": 165.7, "C12": 63.9, "C44": 0.0}, "need C44 > 0"),
    ("hexagonal", {"C11": 390.0, "C12": 145.0, "C13": 400.0, "C33": 398.0, "C44": 105.0},
     "need C33*(C11 + C12) - 2*C13^2 > 0"),
    ("trigonal", {**SAPPHIRE, "C14": -200.0}, "need C44*(C11 - C12)/2 - C14^2 > 0"),
    ("tetragonal", {**TETRA, "C66": -1.0}, "need C66 > 0"),
    ("orthorhombic", {**ORTHO, "C23": 400.0}, "need det(C11..C33 block) > 0"),
]


@pytest.mark.parametrize("system, k, need", BAD)
def test_positive_definiteness_error_names_the_condition(system, k, need):
    with pytest.raises(MaterialError) as exc:
        stiffness_from_constants(system, k, who="material.bad")
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith("material.bad: ") and need in msg
    # ... and each named constant appears with its value
    name = need.split()[1].split("*")[0].split("(")[0]
    assert name in msg


def test_anisotropic_errors_name_pair_and_minor():
    c = stiffness_from_constants("trigonal", SAPPHIRE)
    asym = c.copy()
    asym[0, 3] = 30.0
    with pytest.raises(MaterialError, match=r"not symmetric: C14 = 30 but C41 = -22"):
        stiffness_from_constants("anisotropic", {"C": asym})
    bad = c.copy()
    bad[2, 2] = 10.0                                  # C33 too small for C13 = 116
    with pytest.raises(MaterialError, match=r"leading minor of order 3 \(the C11..C33 block\)"):
        stiffness_from_constants("anisotropic", {"C": bad})
    with pytest.raises(MaterialError, match="6 rows of 6"):
        stiffness_from_constants("anisotropic", {"C": [[1, 2], [3, 4]]})


@pytest.mark.parametrize("system", [s for s in SYMMETRY_SYSTEMS if s != "anisotropic"])
def test_conditions_agree_with_eigenvalues(system):
    # The named conditions accept a matrix exactly when all its eigenvalues are positive
    # (Born stability; Mouhat & Coudert, Phys. Rev. B 90, 224104 (2014) [M]), checked on random
    # constants that straddle the boundary.
    rng = np.random.default_rng(15)
    seen = {True: 0, False: 0}
    for _ in range(400):
        if system == "isotropic":
            k = {"E": float(rng.uniform(-50, 300)), "nu": float(rng.uniform(-1.3, 0.7))}
            physical = k["E"] > 0 and -1 < k["nu"] < 0.5
            # for a physical pair the matrix (matscipy's cubic builder [L]) must be positive definite
            stable = physical and np.linalg.eigvalsh(np.array(el.cubic_to_Voigt_6x6(
                *isotropic_constants_to_cubic(k["E"], k["nu"])))).min() > 0
            assert stable == physical
        else:
            # diagonal constants mostly positive, coupling constants of either sign and large
            k = {n: float(rng.uniform(-0.1, 1.0) * 300.0 if n[1] == n[2]
                          else rng.uniform(-0.5, 1.0) * 250.0) for n in STIFFNESS_KEYS[system]}
            stable = np.linalg.eigvalsh(_matrix(system, k)).min() > 1e-9
        try:
            stiffness_from_constants(system, k)
            ok = True
        except MaterialError:
            ok = False
        assert ok == stable, (system, k)
        seen[stable] += 1
    assert seen[True] > 20 and seen[False] > 20


def test_validate_stiffness_general_matrix():
    c = stiffness_from_constants("trigonal", SAPPHIRE)
    validate_stiffness(c, "trigonal", SAPPHIRE)       # passes
    validate_stiffness(c, "anisotropic")               # no constants: general checks only
    with pytest.raises(MaterialError, match=r"leading minor of order 4 \(the C11..C44 block\)"):  # C44 - 200 < 0
        validate_stiffness(c - np.eye(6) * 200.0, "anisotropic")


def test_constant_errors():
    with pytest.raises(MaterialError, match="system must be one of isotropic, cubic"):
        check_constants("monoclinic", {}, "material.m")
    with pytest.raises(MaterialError, match="needs C11, C12, C13, C14, C33, C44; missing C14"):
        stiffness_from_constants("trigonal", {k: v for k, v in SAPPHIRE.items() if k != "C14"})
    with pytest.raises(MaterialError, match=r"material\.C11 must be a number \(GPa\)"):
        stiffness_from_constants("cubic", {**SI, "C11": "165.7"})
    with pytest.raises(MaterialError, match=r"nu must be a number \(dimensionless\)"):
        stiffness_from_constants("isotropic", {"E": 70.0, "nu": True})
