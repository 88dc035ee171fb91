"""Tests of mesastrain.physics.raman: strain shift of the Si optical phonon."""

import numpy as np
import pytest

from mesastrain.errors import MaterialError, MesastrainError, OrientationError
from mesastrain.physics.crystal import (
    rotate_tensor2,
    sample_frame,
    stress_to_voigt,
    voigt_to_strain,
)
from mesastrain.physics.materials import get_material
from mesastrain.physics.raman import (
    backscatter_shift,
    biaxial_line,
    observable_shift,
    pdp_sets,
    phonon_shifts,
    raman_modes,
    raman_parameters,
    raman_tensors,
    scattering_matrix,
    sige_parameters,
    stress_factor,
    stress_from_shift,
)
from mesastrain.physics.raman_stress import implied_stress

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


# --------------------------------------------------------------------------
# selection rules (Raman tensors of Loudon, Adv. Phys. 13, 423 (1964))
# --------------------------------------------------------------------------
#: Loudon's tensors written out here, independently of the module: R_x, R_y, R_z.
LOUDON = np.array([[[0, 0, 0], [0, 0, 1], [0, 1, 0]],
                   [[0, 0, 1], [0, 0, 0], [1, 0, 0]],
                   [[0, 1, 0], [1, 0, 0], [0, 0, 0]]], dtype=float)
S2, S3, S6 = np.sqrt(2.0), np.sqrt(3.0), np.sqrt(6.0)
#: Sample frames written out by hand: rows x, y = z cross x, z in cube coordinates.
R_110 = np.array([[1 / S2, -1 / S2, 0.0], [0.0, 0.0, -1.0], [1 / S2, 1 / S2, 0.0]])
R_111 = np.array([[1 / S2, -1 / S2, 0.0], [1 / S6, 1 / S6, -2 / S6], [1 / S3, 1 / S3, 1 / S3]])


def _intensity(v, R, pols=None):
    """|e_s . R_v . e_i|^2 summed over in-plane x, y (or the given pairs), by hand."""
    Rv = np.einsum("k,kij->ij", v, LOUDON)
    pairs = pols if pols is not None else [(R[a], R[b]) for a in (0, 1) for b in (0, 1)]
    return sum(float(es @ Rv @ ei) ** 2 for ei, es in pairs)


def test_raman_tensors_are_loudons():
    assert np.array_equal(raman_tensors(), LOUDON)


def test_frames_written_by_hand_match_sample_frame():
    assert np.allclose(sample_frame([1, 1, 0], [1, -1, 0]).R, R_110, atol=1e-12)
    assert np.allclose(sample_frame([1, 1, 1], [1, -1, 0]).R, R_111, atol=1e-12)


def test_selection_rules_001():
    # Backscattering from (001): only the z-polarised (LO) phonon is seen; z(x,x)-z with x
    # along [100] sees nothing, z(x',x')-z with x' along [110] sees the z mode (Loudon 1964).
    p = raman_parameters("Si")
    W = scattering_matrix(np.eye(3))
    assert np.allclose(W, np.diag([0.0, 0.0, 2.0]))
    rng = np.random.default_rng(7)
    a = rng.normal(scale=1e-3, size=(6, 3, 3))
    eps = 0.5 * (a + np.swapaxes(a, -1, -2))
    eps[:, 0, 2] = eps[:, 2, 0] = eps[:, 1, 2] = eps[:, 2, 1] = 0.0   # keep z an eigenvector
    m = raman_modes(eps, p.p, p.q, p.r, p.omega0, np.eye(3))
    z = np.argmax(np.abs(m.polarisation[:, 2, :]), axis=-1)
    assert np.allclose(np.take_along_axis(m.share, z[:, None], 1), 1.0)
    closed = 0.5 * p.omega0 * (p.p * eps[:, 2, 2] + p.q * (eps[:, 0, 0] + eps[:, 1, 1]))
    assert np.allclose(m.observable, closed, rtol=1e-12)
    e = np.diag([1e-3, -2e-3, 4e-3])
    assert np.isnan(observable_shift(e, p.p, p.q, p.r, p.omega0, np.eye(3), [1, 0], [1, 0]))
    with pytest.raises(MesastrainError, match="Raman-active"):
        stress_factor("uniaxial", p, C_SI, np.eye(3), [1, 0], [1, 0])
    z_mode = 0.5 * p.omega0 * (4e-3 * p.p - 1e-3 * p.q)
    assert observable_shift(e, p.p, p.q, p.r, p.omega0, np.eye(3), [1, 0], [0, 1]) == \
        pytest.approx(z_mode)                                       # z(x,y)-z, x along [100]
    R = sample_frame([0, 0, 1], [1, 1, 0]).R
    assert observable_shift(e, p.p, p.q, p.r, p.omega0, R, [1, 0], [1, 0]) == \
        pytest.approx(z_mode)                                       # z(x',x')-z, x' along [110]
    assert stress_factor("uniaxial", p, C_SI, R, [1, 0], [1, 0]) == pytest.approx(-434.0,
                                                                                 rel=0.01)


def test_selection_rules_110_z_mode_forbidden():
    # (110) backscattering: the phonon along the normal [110] has zero intensity for every
    # in-plane incident and scattered polarisation; the in-plane modes [1-10] and [001] are
    # seen (Loudon 1964). By hand, unpolarised: I([1-10]) = 2, I([001]) = 1, I([110]) = 0.
    W = scattering_matrix(R_110)
    ang = np.linspace(0.0, np.pi, 7)
    for ti in ang:
        for ts in ang:
            ei = np.cos(ti) * R_110[0] + np.sin(ti) * R_110[1]
            es = np.cos(ts) * R_110[0] + np.sin(ts) * R_110[1]
            Wp = scattering_matrix(R_110, R_110 @ ei, R_110 @ es)
            assert R_110[2] @ Wp @ R_110[2] == pytest.approx(0.0, abs=1e-14)
            assert _intensity(R_110[2], R_110, [(ei, es)]) == pytest.approx(0.0, abs=1e-14)
    for v, hand in ((R_110[0], 2.0), (R_110[1], 1.0), (R_110[2], 0.0)):
        assert v @ W @ v == pytest.approx(hand, abs=1e-12)
        assert _intensity(v, R_110) == pytest.approx(hand, abs=1e-12)


def test_110_uniaxial_along_1m10_sees_the_in_plane_modes():
    # 1 GPa uniaxial along [1-10] on (110), 1990 PDPs: modes -2.878, -2.305, -0.556 cm^-1
    # (REFERENCES.md section 7 [D]); the -0.556 one is polarised along the normal [110] and
    # forbidden, so the line is (2 (-2.878) + 1 (-2.305))/3 = -2.687 with the hand
    # intensities above, not -0.556 (the old "closest to the normal" pick).
    p = raman_parameters("Si")
    eps = _strain_from_stress(np.diag([1.0, 0.0, 0.0]), R_110)
    m = raman_modes(eps, p.p, p.q, p.r, p.omega0, R_110)
    assert np.allclose(m.shifts, [-2.878, -2.305, -0.556], atol=0.002)
    assert np.allclose(m.share, [2 / 3, 1 / 3, 0.0], atol=1e-9)
    assert abs(m.polarisation[:, 2] @ R_110[2]) == pytest.approx(1.0)   # -0.556: along [110]
    assert float(m.observable) == pytest.approx(-2.687, abs=0.002)
    f = stress_factor("uniaxial", p, C_SI, R_110)
    assert f == pytest.approx(1000.0 / -2.687, rel=0.002)
    assert (1000.0 / -0.556) / f > 4.0            # the old factor was 4-5 times too large


def test_selection_rules_111_all_allowed():
    # (111) backscattering: all three optical phonons are allowed (Loudon 1964). By hand, the
    # unpolarised scattering matrix in cube axes is W = 4/3 I - 2/9 J (J all ones), so any mode
    # has at least (2/3)/(10/3) = 20 % of the intensity.
    W = scattering_matrix(R_111)
    assert np.allclose(W, 4 / 3 * np.eye(3) - 2 / 9 * np.ones((3, 3)), atol=1e-12)
    for v in np.eye(3):
        assert _intensity(v, R_111) == pytest.approx(10 / 9)
    p = raman_parameters("Si")
    rng = np.random.default_rng(11)
    a = rng.normal(scale=1e-3, size=(20, 3, 3))
    m = raman_modes(0.5 * (a + np.swapaxes(a, -1, -2)), p.p, p.q, p.r, p.omega0, R_111)
    assert np.all(m.share >= 0.2 - 1e-12) and np.allclose(m.share.sum(-1), 1.0)


def test_111_strain_rotated_by_hand():
    # Strain 1e-3 along sample x = [1-10] on (111): in cube axes, by hand, eps = R^T eps_s R =
    # 1e-3 x x^T = 5e-4 [[1, -1, 0], [-1, 1, 0], [0, 0, 0]]. Secular equation (1990 PDPs):
    # mode [110]: (omega0/2)((p + q) 5e-4 - r 1e-3) = -0.35668; mode [1-10]: (p + q) 5e-4 +
    # r 1e-3 -> -0.72638; mode [001]: q 1e-3 -> -0.60141 cm^-1. Hand intensities v.W.v with
    # W = 4/3 I - 2/9 J: 8/9, 4/3, 10/9 (sum 10/3). Line: -1.95379/(10/3) = -0.58614 cm^-1.
    p = raman_parameters("Si")
    eps_s = np.diag([1e-3, 0.0, 0.0])
    eps_c = 5e-4 * np.array([[1.0, -1.0, 0.0], [-1.0, 1.0, 0.0], [0.0, 0.0, 0.0]])
    assert np.allclose(R_111.T @ eps_s @ R_111, eps_c, atol=1e-15)
    m = raman_modes(eps_c, p.p, p.q, p.r, p.omega0, R_111)
    assert np.allclose(m.shifts, [-0.72638, -0.60141, -0.35668], atol=2e-5)
    assert np.allclose(m.share, np.array([4 / 3, 10 / 9, 8 / 9]) * 0.3, atol=1e-9)
    assert float(m.observable) == pytest.approx(-0.58614, abs=2e-5)
    # the same strain rotated the wrong way (R eps_s R^T) gives another line: this test fails
    # on such a bug
    wrong = observable_shift(R_111 @ eps_s @ R_111.T, p.p, p.q, p.r, p.omega0, R_111)
    assert abs(float(wrong) - (-0.58614)) > 0.05


def test_degenerate_modes_give_basis_free_shares():
    # Unstrained (110): all three modes degenerate. The shares must not depend on the
    # eigenvectors numpy returns: the set is resolved along W's eigenvectors, i.e. [110]
    # (share 0), [001] (1/3), [1-10] (2/3) from the hand intensities above. A tiny strain
    # along those axes leaves the shares and the line continuous.
    p = raman_parameters("Si")
    m0 = raman_modes(np.zeros((3, 3)), p.p, p.q, p.r, p.omega0, R_110)
    assert np.allclose(m0.share, [0.0, 1 / 3, 2 / 3], atol=1e-12)
    assert abs(m0.polarisation[:, 0] @ R_110[2]) == pytest.approx(1.0)
    eps = R_110.T @ np.diag([3e-10, 2e-10, 1e-10]) @ R_110      # splits x > y > z modes
    m1 = raman_modes(-eps, p.p, p.q, p.r, p.omega0, R_110, degenerate_tol=0.0)
    assert np.allclose(np.sort(m1.share), np.sort(m0.share), atol=1e-6)
    # a crystal symmetry (3-fold about [111]: x -> y -> z) maps the (111) problem onto itself;
    # an equi-biaxial (111) strain has a degenerate in-plane pair
    P = np.array([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    eps = R_111.T @ np.diag([2e-3, 2e-3, -1.5e-3]) @ R_111
    a = raman_modes(eps, p.p, p.q, p.r, p.omega0, R_111)
    b = raman_modes(P @ eps @ P.T, p.p, p.q, p.r, p.omega0, R_111 @ P.T)
    assert np.allclose(a.shifts, b.shifts) and np.allclose(a.share, b.share)
    assert np.allclose(a.share, [0.4, 0.4, 0.2], atol=1e-9)
    # the line is linear in the strain, also across the degeneracy
    d = 1e-9 * np.diag([1.0, -1.0, 0.0])
    lines = [float(observable_shift(eps + t * d, p.p, p.q, p.r, p.omega0, R_111))
             for t in (-1.0, 0.0, 1.0)]
    assert lines[0] + lines[2] == pytest.approx(2 * lines[1], abs=1e-12)


def test_observable_is_share_weighted_mean_vectorised():
    p = raman_parameters("Ge")
    R = sample_frame([1, 1, 3], [1, -1, 0]).R            # a low-symmetry surface
    rng = np.random.default_rng(5)
    a = rng.normal(scale=1e-3, size=(4, 5, 3, 3))
    eps = 0.5 * (a + np.swapaxes(a, -1, -2))
    m = raman_modes(eps, p.p, p.q, p.r, p.omega0, R)
    assert m.observable.shape == (4, 5) and m.share.shape == (4, 5, 3)
    assert np.allclose(m.observable, np.sum(m.share * m.shifts, axis=-1), atol=1e-12)
    one = raman_modes(eps[1, 2], p.p, p.q, p.r, p.omega0, R)
    assert np.allclose(one.shifts, m.shifts[1, 2]) and np.allclose(one.share, m.share[1, 2])
    # the module's intensities equal the hand sum over polarisations
    for j in range(3):
        v = m.polarisation[1, 2][:, j]
        assert m.intensity[1, 2, j] == pytest.approx(_intensity(v, R), abs=1e-12)


# --------------------------------------------------------------------------
# SiGe Si-Si line and GaN E2(high)
# --------------------------------------------------------------------------
@pytest.mark.parametrize("x", [0.0, 0.2, 0.4])
def test_sige_si_si_line(x):
    # omega0(x) = 520.5 - 62 x cm^-1 relaxed (Tsang et al., J. Appl. Phys. 75, 8088 (1994)
    # [from memory]); biaxial (001) strain coefficient b_SiSi = -850 cm^-1, inside the
    # published -800 .. -900 (Tsang et al. 1994; Pezzoli et al., J. Appl. Phys. 103, 093521
    # (2008) [from memory]). The film relaxes along z with eps_zz = -2 C12/C11 eps_par.
    par = sige_parameters(x)
    assert par.omega0 == pytest.approx(520.5 - 62.0 * x)
    c = get_material("SiGe", x).constants
    e = -0.008
    eps = np.diag([e, e, -2.0 * c["C12"] / c["C11"] * e])
    b = float(observable_shift(eps, par.p, par.q, par.r, par.omega0)) / e
    assert -900.0 <= b <= -800.0
    assert b == pytest.approx(-850.0, rel=1e-9)
    assert any("Tsang" in s for s in par.sources) and any("Pezzoli" in s for s in par.sources)
    assert raman_parameters("SiGe", x=x) == par
    with pytest.raises(MaterialError, match="fraction"):
        sige_parameters(1.2)


def test_gan_e2_high_biaxial_coefficient():
    # 4.2 cm^-1 per GPa of biaxial compression (Kisielowski et al., Phys. Rev. B 54, 17745
    # (1996) [from memory]; published values 2.7 .. 4.3).
    line = biaxial_line("GaN")
    assert line.per_gpa == pytest.approx(-4.2) and -4.3 <= line.per_gpa <= -2.7
    sigma = np.diag([-1000.0, -1000.0, 0.0])              # 1 GPa biaxial compression, MPa
    assert line.shift(sigma) == pytest.approx(4.2)
    assert line.shift(np.stack([sigma, -sigma])).shape == (2,)
    d = implied_stress(4.2, "biaxial", "GaN")
    assert d["stress"] == pytest.approx(-1000.0)
    with pytest.raises(Exception, match="--kind"):
        implied_stress(1.0, "uniaxial", "GaN")


def test_implied_stress_on_every_surface():
    # (001) stays De Wolf's -434 / -217 MPa per cm^-1 (Semicond. Sci. Technol. 11, 139 (1996)
    # [from memory]); (110) along [1-10] uses the observable line (hand value above).
    assert implied_stress(-1.0, "uniaxial")["factor"] == pytest.approx(-434.0, rel=0.01)
    assert implied_stress(-1.0, "biaxial")["factor"] == pytest.approx(-217.0, rel=0.01)
    d = implied_stress(-1.0, "uniaxial", normal=(1, 1, 0), along=(1, -1, 0))
    assert d["per_gpa"] == pytest.approx(-2.687, abs=0.003)
    sige = implied_stress(-1.0, "biaxial", "SiGe", x=0.3)
    assert sige["omega0"] == pytest.approx(520.5 - 62 * 0.3) and sige["material"] == "Si0.7Ge0.3"
    with pytest.raises(Exception, match="--x"):
        implied_stress(-1.0, "biaxial", "SiGe")


def test_polarisations_have_a_fixed_sign():
    """An eigenvector's sign is arbitrary; the written polarisations are not: the first
    component of largest magnitude is positive, the same for V and -V, and the modes
    (shifts, intensities) do not depend on it."""
    from mesastrain.physics.raman import _sign_convention

    rng = np.random.default_rng(3)
    V = np.linalg.qr(rng.standard_normal((50, 3, 3)))[0]
    W = _sign_convention(V)
    np.testing.assert_allclose(np.abs(W), np.abs(V))
    np.testing.assert_array_equal(_sign_convention(-V), W)
    lead = np.take_along_axis(W, np.argmax(np.abs(W), axis=-2)[:, None, :], axis=-2)
    assert np.all(lead > 0)
    # a tie in magnitude (a mode along [110]-type directions) takes the first component
    t = np.array([[1.0, -1.0, 0.0], [-1.0, -1.0, 0.0], [0.0, 0.0, -np.sqrt(2)]]).T / np.sqrt(2)
    np.testing.assert_allclose(_sign_convention(t)[:, 1], [1 / np.sqrt(2), 1 / np.sqrt(2), 0])
    eps = np.diag([0.01, -0.004, 0.002]) + 0.003 * (np.ones((3, 3)) - np.eye(3))
    # Si phonon deformation potentials p, q, r (units of omega0^2) and omega0 (cm^-1):
    # Anastassakis, Cantarero & Cardona, Phys. Rev. B 41, 7529 (1990), from memory; only
    # the sign convention is checked here
    m = raman_modes(eps, -1.43, -1.89, -0.59, 520.7)
    lead = np.take_along_axis(m.polarisation, np.argmax(np.abs(m.polarisation), axis=-2)[None],
                              axis=-2)
    assert np.all(lead > 0)


def test_degenerate_pair_has_the_same_polarisations_whatever_the_round_off():
    # A (001) film under equi-biaxial strain, seen unpolarised in backscattering: the two
    # in-plane modes are degenerate and the geometry sees them alike, so any basis of the pair
    # is an answer. The written one is fixed: the crystal axes [100] and [010] (the tie form
    # in crystal axes), whatever round-off the strain carries; the shares and the line do not
    # move. Before, LAPACK's basis moved with 1e-16 changes (a probe's polarisation read
    # [0, -1, 0] in one run and [0, 0.707, 0.707]-like mixtures in another).
    p = raman_parameters("Si")
    base = np.diag([-4e-3, -4e-3, 3e-3])
    rng = np.random.default_rng(11)
    ref = raman_modes(base, p.p, p.q, p.r, p.omega0)
    pair = np.flatnonzero(np.isclose(ref.shifts, ref.shifts[0], atol=1e-9, rtol=0))
    if pair.size < 2:
        pair = np.flatnonzero(np.isclose(ref.shifts, ref.shifts[-1], atol=1e-9, rtol=0))
    assert pair.size == 2
    np.testing.assert_allclose(np.abs(ref.polarisation[:, pair]), np.eye(3)[:, :2], atol=1e-9)
    for _ in range(20):
        n = rng.standard_normal((3, 3)) * 1e-17
        m = raman_modes(base + n + n.T, p.p, p.q, p.r, p.omega0)
        np.testing.assert_allclose(m.polarisation, ref.polarisation, atol=1e-6)
        np.testing.assert_allclose(m.share, ref.share, atol=1e-12)
        assert m.observable == pytest.approx(float(ref.observable), abs=1e-12)
    # a pair the geometry does split (polarised along [100]) keeps the geometry's basis
    pol = raman_modes(base, p.p, p.q, p.r, p.omega0, incident=[1, 0, 0], scattered=[0, 1, 0])
    V = pol.polarisation[:, pair]
    assert np.allclose(np.abs(V.T @ V), np.eye(2), atol=1e-12)
