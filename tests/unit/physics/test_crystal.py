"""Crystal frames, Voigt conversion and tensor rotation.

Reference library: matscipy 1.3.1 (PyPI), ``rotate_elastic_constants``, which
computes C'_ijkl = A_ia A_jb A_kc A_ld C_abcd with A's rows the new axes
(REFERENCES.md section 9a, [L]). A 45 degree turn about [001] cannot tell a
rotation from its transpose, so the decisive checks use a 17 degree turn about
[123].
"""

import numpy as np
import pytest

from mesastrain.errors import OrientationError
from mesastrain.physics.crystal import (
    bond_matrix,
    direction_vector,
    format_indices,
    full_to_voigt,
    plane_normal,
    rotate_tensor2,
    rotate_tensor4,
    rotate_voigt_stiffness,
    sample_frame,
    strain_to_voigt,
    stress_to_voigt,
    voigt_to_full,
    voigt_to_strain,
    voigt_to_stress,
)

# Si stiffness, GPa: Hopcroft, Nix & Kenny, J. MEMS 19, 229 (2010) (after Hall 1967)
C11, C12, C44 = 165.7, 63.9, 79.6


def cubic(c11, c12, c44):
    C = np.zeros((6, 6))
    C[:3, :3] = c12
    C[np.arange(3), np.arange(3)] = c11
    C[3, 3] = C[4, 4] = C[5, 5] = c44
    return C


def axis_angle(axis, deg):
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    K = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    t = np.radians(deg)
    return np.eye(3) + np.sin(t) * K + (1 - np.cos(t)) * K @ K


def random_stiffness(rng):
    """A positive-definite 6x6 with no symmetry at all (triclinic)."""
    A = rng.normal(size=(6, 6))
    return A @ A.T + 6 * np.eye(6)


def test_rotation_matches_matscipy_low_symmetry():
    # matscipy 1.3.1 rotate_elastic_constants [L]; to 1e-10 as the acceptance asks
    from matscipy.elasticity import rotate_elastic_constants
    A = axis_angle([1, 2, 3], 17.0)
    C = cubic(C11, C12, C44)
    ours = full_to_voigt(rotate_tensor4(voigt_to_full(C), A))
    ref = rotate_elastic_constants(C, A)
    assert np.max(np.abs(ours - ref)) < 1e-10
    # and the published first row of REFERENCES.md 9a (printed there to 4 decimals)
    np.testing.assert_allclose(ours[0], [174.2652, 58.0294, 61.2054, 1.6798, 7.2568, -11.5237],
                               atol=1e-4)
    # the transpose gives a different answer: the check can tell them apart
    wrong = full_to_voigt(rotate_tensor4(voigt_to_full(C), A.T))
    assert np.max(np.abs(wrong - ref)) > 0.1


def test_rotation_triclinic_matches_matscipy_and_bond():
    # A triclinic tensor exercises every Voigt index pair (matscipy [L]; Bond 1943)
    from matscipy.elasticity import rotate_elastic_constants
    rng = np.random.default_rng(7)
    C = random_stiffness(rng)
    A = axis_angle([0.3, -1.1, 0.7], 41.0)
    ref = rotate_elastic_constants(C, A)
    assert np.max(np.abs(full_to_voigt(rotate_tensor4(voigt_to_full(C), A)) - ref)) < 1e-10
    assert np.max(np.abs(rotate_voigt_stiffness(C, A) - ref)) < 1e-10


def test_voigt_round_trip_and_symmetries():
    rng = np.random.default_rng(1)
    C = random_stiffness(rng)
    full = voigt_to_full(C)
    assert np.allclose(full, full.transpose(1, 0, 2, 3))
    assert np.allclose(full, full.transpose(0, 1, 3, 2))
    assert np.allclose(full, full.transpose(2, 3, 0, 1))
    assert np.array_equal(full_to_voigt(full), C)


def test_engineering_shear_convention():
    # sigma_I = C_IJ eps_J with gamma = 2 eps in the Voigt strain (common practice; Nye 1957)
    rng = np.random.default_rng(2)
    C = random_stiffness(rng)
    e = rng.normal(size=(3, 3))
    e = 0.5 * (e + e.T)
    sig_full = np.einsum("ijkl,kl->ij", voigt_to_full(C), e)
    v = strain_to_voigt(e)
    assert v[3] == pytest.approx(2 * e[1, 2]) and v[5] == pytest.approx(2 * e[0, 1])
    np.testing.assert_allclose(C @ v, stress_to_voigt(sig_full), rtol=1e-12)
    np.testing.assert_allclose(voigt_to_strain(v), e)
    np.testing.assert_allclose(voigt_to_stress(stress_to_voigt(sig_full)), sig_full)


def test_bond_matrix_transforms_stress_vectors():
    rng = np.random.default_rng(3)
    s = rng.normal(size=(3, 3))
    s = s + s.T
    R = axis_angle([2, -1, 5], 63.0)
    np.testing.assert_allclose(bond_matrix(R) @ stress_to_voigt(s),
                               stress_to_voigt(rotate_tensor2(s, R)), atol=1e-12)


def test_45_degree_si_matrix():
    # C' for x' = [110]: (C11+C12+2C44)/2 = 194.4, (C11+C12-2C44)/2 = 35.2, C66' = 50.9
    # (REFERENCES.md 9a [L]; memsnet post 324 gives 194/35/64 [C])
    f = sample_frame([0, 0, 1], [1, 1, 0])
    Cr = f.stiffness_to_sample(cubic(C11, C12, C44))
    assert Cr[0, 0] == pytest.approx((C11 + C12 + 2 * C44) / 2)
    assert Cr[0, 1] == pytest.approx((C11 + C12 - 2 * C44) / 2)
    assert Cr[5, 5] == pytest.approx((C11 - C12) / 2)


def test_111_frame_constants():
    # (111) frame: C33' = (C11+2C12+4C44)/3, C13' = (C11+2C12-2C44)/3,
    # C11' = (C11+C12+2C44)/2 for x' along <110> (REFERENCES.md section 4, [D] and [L])
    f = sample_frame([1, 1, 1], [1, -1, 0])
    Cr = f.stiffness_to_sample(cubic(C11, C12, C44))
    assert Cr[2, 2] == pytest.approx((C11 + 2 * C12 + 4 * C44) / 3)
    assert Cr[0, 2] == pytest.approx((C11 + 2 * C12 - 2 * C44) / 3)
    assert Cr[0, 0] == pytest.approx((C11 + C12 + 2 * C44) / 2)


def test_frame_is_right_handed_and_maps_axes():
    f = sample_frame([1, 1, 0], [0, 0, 1])
    assert np.allclose(f.R @ f.R.T, np.eye(3))
    assert np.linalg.det(f.R) == pytest.approx(1.0)
    assert np.allclose(f.R @ (np.array([1, 1, 0]) / np.sqrt(2)), [0, 0, 1])
    assert np.allclose(f.R @ np.array([0, 0, 1.0]), [1, 0, 0])
    t = np.diag([1.0, 2.0, 3.0])
    assert np.allclose(f.to_crystal(f.to_sample(t)), t)


def test_hexagonal_miller_bravais():
    # [2-1-10] is a1 and [0001] is c; (11-20) normal is along a1 + a2 ([11-20] direction)
    ca = 5.185 / 3.189  # GaN, Vurgaftman & Meyer 2003
    assert np.allclose(direction_vector([2, -1, -1, 0], "hexagonal", ca), [3, 0, 0])
    assert np.allclose(direction_vector([0, 0, 0, 1], "hexagonal", ca), [0, 0, ca])
    n = plane_normal([1, 1, -2, 0], "hexagonal", ca)
    d = direction_vector([1, 1, -2, 0], "hexagonal", ca)
    assert np.allclose(np.cross(n, d), 0)
    # m-plane (1-100) normal is perpendicular to c and to a3... and to [11-20]
    m = plane_normal([1, -1, 0, 0], "hexagonal", ca)
    assert abs(m @ direction_vector([1, 1, -2, 0], "hexagonal", ca)) < 1e-12
    # 3-index and 4-index forms agree: [2-1-10] == [100] (three-index, basis a1, a2, c)
    assert np.allclose(direction_vector([1, 0, 0], "hexagonal", ca),
                       direction_vector([2, -1, -1, 0], "hexagonal", ca) / 3)
    f = sample_frame([0, 0, 0, 1], [1, -1, 0, 0], "hexagonal", ca)
    assert np.allclose(f.R[2], [0, 0, 1])


@pytest.mark.parametrize("normal, x_axis, system, match", [
    ([0, 0, 0], [1, 0, 0], "cubic", "all zero"),
    ([0, 0, 1], [1, 0, 1], "cubic", "not in the surface"),
    ([0, 0, 1], [0.5, 0, 0], "cubic", "integers"),
    ([0, 0, 1], [1, 0, 0, 0], "cubic", "3 indices"),
    ([0, 0, 0, 1], [1, 1, 0, 0], "hexagonal", "third index"),
    ([1, 1, 1, 1], [1, -1, 0, 0], "hexagonal", "third index"),
])
def test_bad_orientations(normal, x_axis, system, match):
    with pytest.raises(OrientationError, match=match):
        sample_frame(normal, x_axis, system, 1.6 if system == "hexagonal" else None)


def test_format_indices():
    assert format_indices([1, -1, 0]) == "[1-10]"
    assert format_indices([0, 0, 1], "()") == "(001)"
