"""Tests of mesastrain.physics.raman: strain shift of the Si optical phonon."""

import numpy as np
import pytest

from mesastrain.physics.crystal import rotate_tensor2, sample_frame, stress_to_voigt, voigt_to_strain
from mesastrain.errors import MaterialError, MesastrainError, OrientationError
from mesastrain.physics.raman import (
    backscatter_shift,
    pdp_sets,
    phonon_shifts,
    raman_parameters,
    stress_factor,
    stress_from_shift,
)

# Si stiffness, GPa: Hopcroft, Nix & Kenny, J. MEMS 19, 229 (2010) (REFERENCES.md section 1a).
C11, C12, C44 = 165.7, 63.9, 79.6
C_SI = np.zeros((6, 6))
C_SI[:3, :3] = C12
C_SI[[0, 1, 2], [0, 1, 2]] = C11
C_SI[[3, 4, 5], [3, 4, 5]] = C44


def _strain_from_stress(sigma_sample, R):
    """Strain in crystal axes for a sample-frame stress (GPa), with the Si compliance."""
    s = rotate_tensor2(sigma_sample, np.asarray(R).T)
    return voigt_to_strain(np.linalg.solve(C_SI, stress_to_voigt(s)))


def _uniaxial(direction):
    R = sample_frame([0, 0, 1], direction).R
    return _strain_from_stress(np.diag([1.0, 0.0, 0.0]), R), R


def test_parameter_sets():
    # PDP sets of REFERENCES.md section 7 [M]; default Anastassakis, Cantarero & Cardona,
    # PRB 41, 7529 (1990); omega0 = 520.7 cm^-1 (common practice).
    assert pdp_sets("Si")[0] == "acc1990"
    assert set(pdp_sets("Si")) == {"acc1990", "apbpc1970", "crc1978"}
    p = raman_parameters("Si")
    assert (p.p, p.q, p.r, p.omega0) == (-1.85, -2.31, -0.71, 520.7)
    ge = raman_parameters("Ge")   # Cerdeira, Buchenauer, Pollak & Cardona, PRB 5, 580 (1972) [M]
    assert (ge.p, ge.q, ge.r, ge.omega0) == (-1.47, -1.93, -1.11, 300.5)


@pytest.mark.parametrize("direction", [[1, 0, 0], [1, 1, 0], [1, 2, 0]])
def test_001_backscatter_uniaxial_1990(direction):
    # REFERENCES.md section 7 [D]: 1990 PDPs, 1 GPa uniaxial in-plane stress (any in-plane
    # direction) shifts the (001) backscattered mode by -2.305 cm^-1; tolerance 1 %.
    p = raman_parameters("Si", "acc1990")
    eps, R = _uniaxial(direction)
    shift = backscatter_shift(eps, R, p.p, p.q, p.r, p.omega0)
    assert shift == pytest.approx(-2.305, rel=0.01)
    # the laboratory frame does not matter: the same strain seen with R = identity
    assert backscatter_shift(eps, np.eye(3), p.p, p.q, p.r, p.omega0) == pytest.approx(shift)


def test_other_modes_100_and_110():
    # REFERENCES.md section 7 [D] (1990 PDPs, 1 GPa): [100] gives -2.305, -2.305, -1.129;
    # [110] gives -2.878, -2.305, -0.556 cm^-1. Tolerance 1 %.
    p = raman_parameters("Si")
    for direction, expected in (([1, 0, 0], [-2.305, -2.305, -1.129]),
                                ([1, 1, 0], [-2.878, -2.305, -0.556])):
        eps, _ = _uniaxial(direction)
        shifts, modes = phonon_shifts(eps, p.p, p.q, p.r, p.omega0)
        assert np.allclose(shifts, expected, rtol=0.01)
        assert np.allclose(modes.T @ modes, np.eye(3), atol=1e-12)


@pytest.mark.parametrize("pdp, uni, bi, uni_factor, bi_factor", [
    # REFERENCES.md section 7 table [D]; the 1990 row equals De Wolf, Semicond. Sci. Technol.
    # 11, 139 (1996) [M]: sigma (MPa) = -434 d omega (uniaxial), -217 per component (biaxial).
    ("acc1990", -2.305, -4.610, -434.0, -217.0),
    ("apbpc1970", -1.933, -3.865, -517.0, -259.0),
    ("crc1978", -2.004, -4.008, -499.0, -250.0),
])
def test_conversion_factors(pdp, uni, bi, uni_factor, bi_factor):
    p = raman_parameters("Si", pdp)
    R = np.eye(3)
    eps_bi = _strain_from_stress(np.diag([1.0, 1.0, 0.0]), R)
    assert backscatter_shift(eps_bi, R, p.p, p.q, p.r, p.omega0) == pytest.approx(bi, rel=0.01)
    eps_uni = _strain_from_stress(np.diag([1.0, 0.0, 0.0]), R)
    assert backscatter_shift(eps_uni, R, p.p, p.q, p.r, p.omega0) == pytest.approx(uni, rel=0.01)
    assert stress_factor("uniaxial", p, C_SI) == pytest.approx(uni_factor, rel=0.01)
    assert stress_factor("biaxial", p, C_SI) == pytest.approx(bi_factor, rel=0.01)


def test_stress_from_shift_round_trip():
    p = raman_parameters("Si")
    R = sample_frame([0, 0, 1], [1, 1, 0]).R
    for kind, sigma in (("uniaxial", np.diag([-0.35, 0, 0])), ("biaxial", np.diag([0.8, 0.8, 0]))):
        shift = backscatter_shift(_strain_from_stress(sigma, R), R, p.p, p.q, p.r, p.omega0)
        stress, factor = stress_from_shift(shift, kind, p, C_SI, R)
        assert stress == pytest.approx(1000.0 * sigma[0, 0], rel=1e-10)     # MPa
        assert factor == pytest.approx(stress_factor(kind, p, C_SI), rel=1e-10)
    # vectorised over shifts
    stress, _ = stress_from_shift(np.array([[1.0, -2.0]]), "uniaxial", p, C_SI)
    assert stress.shape == (1, 2)


def test_stress_factor_on_110_surface_follows_frame():
    # On a (110) surface the stress-to-shift factor depends on the in-plane direction; the
    # factor must equal the direct route stress -> Si compliance -> strain (crystal axes, via
    # Frame.to_crystal) -> backscattered mode. Internal consistency, no literature value.
    p = raman_parameters("Si")
    factors = []
    for x_axis in ([0, 0, 1], [1, -1, 0]):
        frame = sample_frame([1, 1, 0], x_axis)
        sigma_crystal = frame.to_crystal(np.diag([1.0, 0.0, 0.0]))          # 1 GPa along x
        eps = voigt_to_strain(np.linalg.solve(C_SI, stress_to_voigt(sigma_crystal)))
        direct = backscatter_shift(eps, frame.R, p.p, p.q, p.r, p.omega0)
        factors.append(stress_factor("uniaxial", p, C_SI, frame.R))
        assert factors[-1] == pytest.approx(1000.0 / direct, rel=1e-12)
    assert abs(factors[0] - factors[1]) > 10.0                     # MPa per cm^-1


def test_mode_along_normal_is_picked():
    # For a diagonal strain the mode polarised along axis k shifts by
    # (omega0/2)[p e_kk + q(tr - e_kk)] (secular equation, Anastassakis et al. 1990).
    p = raman_parameters("Si")
    eps = np.diag([1e-3, -2e-3, 4e-3])
    for normal, x_axis, k in (([0, 0, 1], [1, 0, 0], 2), ([1, 0, 0], [0, 1, 0], 0),
                              ([0, 1, 0], [0, 0, 1], 1)):
        R = sample_frame(normal, x_axis).R
        expected = 0.5 * p.omega0 * (p.p * eps[k, k] + p.q * (np.trace(eps) - eps[k, k]))
        assert backscatter_shift(eps, R, p.p, p.q, p.r, p.omega0) == pytest.approx(expected)


def test_hydrostatic_and_stack():
    # Hydrostatic strain keeps the three modes degenerate: d omega = (omega0/2)(p + 2q) e
    # (secular equation above; common practice).
    p = raman_parameters("Si")
    e = -1e-3
    shifts, _ = phonon_shifts(e * np.eye(3), p.p, p.q, p.r, p.omega0)
    assert np.allclose(shifts, 0.5 * p.omega0 * (p.p + 2 * p.q) * e, rtol=1e-12)
    rng = np.random.default_rng(3)
    a = rng.normal(scale=1e-3, size=(4, 5, 3, 3))
    eps = 0.5 * (a + np.swapaxes(a, -1, -2))
    out = backscatter_shift(eps, np.eye(3), p.p, p.q, p.r, p.omega0)
    assert out.shape == (4, 5)
    one = backscatter_shift(eps[2, 3], np.eye(3), p.p, p.q, p.r, p.omega0)
    assert out[2, 3] == pytest.approx(float(one))


def test_errors():
    p = raman_parameters("Si")
    with pytest.raises(MaterialError, match="acc1990"):
        raman_parameters("Si", "nope")
    with pytest.raises(MaterialError, match="Si"):
        raman_parameters("GaAs")
    with pytest.raises(MesastrainError, match="uniaxial, biaxial"):
        stress_factor("shear", p, C_SI)
    with pytest.raises(MesastrainError, match="6, 6"):
        stress_factor("uniaxial", p, np.eye(3))
    with pytest.raises(OrientationError, match="orthonormal"):
        backscatter_shift(np.zeros((3, 3)), np.ones((3, 3)), p.p, p.q, p.r, p.omega0)
    with pytest.raises(MesastrainError, match="shape"):
        phonon_shifts(np.zeros(3), p.p, p.q, p.r, p.omega0)
