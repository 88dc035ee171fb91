"""Tests of mesastrain.physics.piezo: piezoresistance of Si in rotated frames."""

import numpy as np
import pytest

from mesastrain.errors import MaterialError, MesastrainError, OrientationError
from mesastrain.physics.crystal import full_to_voigt, rotate_tensor4, sample_frame
from mesastrain.physics.piezo import (
    PI_UNIT_PER_MPA,
    longitudinal_transverse,
    pi_longitudinal,
    pi_transverse,
    piezo_coefficients,
    piezo_tensor,
    resistivity_change,
)

KINDS = ("n-Si", "p-Si")

# REFERENCES.md section 6, derived table [D] from Smith, Phys. Rev. 94, 42 (1954) coefficients
# [M] with the combinations of Smith (1954) and Kanda, IEEE Trans. Electron Devices ED-29, 64
# (1982). Printed to 0.1 (0.01 for <111>), hence the tolerances below. Units 1e-11 / Pa.
TABLE = {
    #          <110> l, <110> t, <100> l, <100> t, <111> l, <111> t (stress in the (111) plane)
    "n-Si": (-31.2, -17.6, -102.2, 53.4, -7.53, 6.07),
    "p-Si": (71.8, -66.3, 6.6, -1.1, 93.53, -44.57),
}


def _tensor(kind):
    c = piezo_coefficients(kind)
    return c, piezo_tensor(c.pi11, c.pi12, c.pi44)


def test_smith_coefficients_loaded():
    # Smith (1954) [M] from memory, as listed in REFERENCES.md section 6.
    n, p = piezo_coefficients("n-Si"), piezo_coefficients("p-Si")
    assert (n.pi11, n.pi12, n.pi44) == (-102.2, 53.4, -13.6)
    assert (p.pi11, p.pi12, p.pi44) == (6.6, -1.1, 138.1)
    assert all("Smith" in s and "[M]" in s for s in n.sources)


def test_tensor_symmetry_and_voigt_factor():
    # pi_2323 = pi44/2 in tensor form (REFERENCES.md section 6), so that in Voigt form
    # (d rho/rho)_23 = pi44 * sigma_23 (Smith 1954 definition of pi44).
    c, t = _tensor("p-Si")
    assert np.allclose(t, t.transpose(1, 0, 2, 3)) and np.allclose(t, t.transpose(2, 3, 0, 1))
    v = full_to_voigt(t)
    assert np.allclose(v[:3, :3], [[6.6, -1.1, -1.1], [-1.1, 6.6, -1.1], [-1.1, -1.1, 6.6]])
    assert np.allclose(np.diag(v)[3:], c.pi44 / 2)
    sigma = np.zeros((3, 3))
    sigma[1, 2] = sigma[2, 1] = 10.0                       # MPa
    drho = resistivity_change(sigma, np.eye(3), c)
    assert drho[1, 2] == pytest.approx(PI_UNIT_PER_MPA * c.pi44 * 10.0, rel=1e-12)


@pytest.mark.parametrize("kind", KINDS)
def test_closed_forms_match_published_combinations(kind):
    # Smith (1954); Kanda (1982); REFERENCES.md section 6 table.
    c = piezo_coefficients(kind)
    l110, t110, l100, t100, l111, t111 = TABLE[kind]
    assert pi_longitudinal([1, 1, 0], c) == pytest.approx((c.pi11 + c.pi12 + c.pi44) / 2, rel=1e-12)
    assert pi_transverse([1, 1, 0], [-1, 1, 0], c) == pytest.approx(
        (c.pi11 + c.pi12 - c.pi44) / 2, rel=1e-12)
    assert pi_longitudinal([1, 1, 0], c) == pytest.approx(l110, abs=0.05)
    assert pi_transverse([1, 1, 0], [-1, 1, 0], c) == pytest.approx(t110, abs=0.05)
    assert pi_longitudinal([1, 0, 0], c) == pytest.approx(l100, abs=1e-12)
    assert pi_transverse([1, 0, 0], [0, 1, 0], c) == pytest.approx(t100, abs=1e-12)
    assert pi_longitudinal([1, 1, 1], c) == pytest.approx(l111, abs=0.005)
    assert pi_transverse([1, 1, 1], [1, -1, 0], c) == pytest.approx(t111, abs=0.005)
    assert pi_transverse([1, 1, 1], [1, 1, -2], c) == pytest.approx(t111, abs=0.005)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("x_axis, col", [([1, 1, 0], 0), ([1, 0, 0], 2)])
def test_rotated_tensor_on_001_wafer(kind, x_axis, col):
    # pi'_1111 = pi_l and pi'_1122 = pi_t after a full rotation of the 4th-rank tensor
    # (REFERENCES.md section 6: "each closed form agrees with a full rotation").
    _, t = _tensor(kind)
    rot = rotate_tensor4(t, sample_frame([0, 0, 1], x_axis).R)
    assert rot[0, 0, 0, 0] == pytest.approx(TABLE[kind][col], abs=0.05)
    assert rot[0, 0, 1, 1] == pytest.approx(TABLE[kind][col + 1], abs=0.05)
    assert rot[1, 1, 0, 0] == pytest.approx(rot[0, 0, 1, 1], abs=1e-12)


@pytest.mark.parametrize("kind", KINDS)
def test_111_wafer_in_plane_isotropy(kind):
    # On a (111) wafer pi_l = (pi11 + pi12 + pi44)/2 and pi_t = (pi11 + 5 pi12 - pi44)/6 for every
    # in-plane direction: Sze (ed.), Semiconductor Sensors (Wiley 1994), from memory; the
    # in-plane isotropy of (111) is also stated by Kanda (1982).
    c, t = _tensor(kind)
    frame = sample_frame([1, 1, 1], [1, -1, 0])
    for angle in np.radians([0.0, 17.0, 45.0, 71.0]):
        cz, sz = np.cos(angle), np.sin(angle)
        R = np.array([[cz, sz, 0], [-sz, cz, 0], [0, 0, 1]]) @ frame.R
        rot = rotate_tensor4(t, R)
        assert rot[0, 0, 0, 0] == pytest.approx((c.pi11 + c.pi12 + c.pi44) / 2, rel=1e-12)
        assert rot[0, 0, 1, 1] == pytest.approx((c.pi11 + 5 * c.pi12 - c.pi44) / 6, rel=1e-12)
        assert pi_transverse(R[0], R[1], c) == pytest.approx(rot[0, 0, 1, 1], rel=1e-12)


def test_closed_form_equals_tensor_rotation_low_symmetry():
    # Smith's direction-cosine formulas (Smith 1954; Kanda 1982) against the rotated tensor for
    # general, low-symmetry directions (a test blind to nothing the 45-degree case hides).
    rng = np.random.default_rng(7)
    c, t = _tensor("n-Si")
    for _ in range(5):
        q, _r = np.linalg.qr(rng.normal(size=(3, 3)))
        R = q.T if np.linalg.det(q) > 0 else -q.T
        rot = rotate_tensor4(t, R)
        assert rot[0, 0, 0, 0] == pytest.approx(float(pi_longitudinal(R[0], c)), rel=1e-10)
        assert rot[0, 0, 1, 1] == pytest.approx(float(pi_transverse(R[0], R[1], c)), rel=1e-10)
    # vectorised over directions
    ls = rng.normal(size=(4, 2, 3))
    assert pi_longitudinal(ls, c).shape == (4, 2)


@pytest.mark.parametrize("kind", KINDS)
def test_uniaxial_stress_along_110(kind):
    # d rho/rho = pi_l sigma for a resistor along a uniaxial [110] stress, and pi_t sigma for
    # the one across it (Smith 1954; REFERENCES.md section 6 table, <110> columns).
    c = piezo_coefficients(kind)
    pl, pt = (c.pi11 + c.pi12 + c.pi44) / 2, (c.pi11 + c.pi12 - c.pi44) / 2
    sigma = 150.0                                          # MPa
    # frame with x along [110]: the stress is sigma_xx
    R = sample_frame([0, 0, 1], [1, 1, 0]).R
    s_sample = np.diag([sigma, 0.0, 0.0])
    drho = resistivity_change(s_sample, R, c)
    assert drho[0, 0] == pytest.approx(pl * sigma * 1e-5, rel=1e-12)
    dl, dt = longitudinal_transverse([1, 0], s_sample, R, c)
    assert dl == pytest.approx(pl * sigma * 1e-5, rel=1e-12)
    assert dt == pytest.approx(pt * sigma * 1e-5, rel=1e-12)
    # the same physical case seen from a frame with x along [100]: channel along (1, 1)
    R100 = sample_frame([0, 0, 1], [1, 0, 0]).R
    n = np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    s100 = sigma * np.outer(n, n)
    dl2, dt2 = longitudinal_transverse([1, 1], np.stack([s100, 2 * s100]), R100, c)
    assert np.allclose(dl2, [dl, 2 * dl], rtol=1e-12)
    assert np.allclose(dt2, [dt, 2 * dt], rtol=1e-12)


def test_errors():
    c = piezo_coefficients("n-Si")
    with pytest.raises(MaterialError, match="n-Si"):
        piezo_coefficients("n-Ge")
    with pytest.raises(OrientationError, match="perpendicular"):
        pi_transverse([1, 1, 0], [1, 0, 0], c)
    with pytest.raises(OrientationError, match="wafer plane"):
        longitudinal_transverse([1, 0, 1], np.zeros((3, 3)), np.eye(3), c)
    with pytest.raises(OrientationError, match="non-zero"):
        longitudinal_transverse([0, 0], np.zeros((3, 3)), np.eye(3), c)
    with pytest.raises(OrientationError, match="orthonormal"):
        resistivity_change(np.zeros((3, 3)), 2 * np.eye(3), c)
    with pytest.raises(MesastrainError, match="shape"):
        resistivity_change(np.zeros(6), np.eye(3), c)
    with pytest.raises(MesastrainError, match="PiezoCoefficients"):
        resistivity_change(np.zeros((3, 3)), np.eye(3), np.zeros((6, 6)))
