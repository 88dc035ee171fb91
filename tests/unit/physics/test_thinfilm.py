"""Checks of the closed-form thin-film mechanics in mesastrain.physics.thinfilm.

Reference values come from /work/shared/REFERENCES.md; the flag of each value
([C] confirmed, [M] from memory, [D] derived from published formulas and
constants) is carried beside it.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from mesastrain.errors import MesastrainError
from mesastrain.physics.critical_thickness import (
    matthews_blakeslee_thickness,
    people_bean_thickness,
)
from mesastrain.physics.crystal import sample_frame
from mesastrain.physics.thinfilm import (
    biaxial_energy_per_area,
    biaxial_modulus_001,
    biaxial_modulus_111,
    biaxial_modulus_c_plane,
    biaxial_response,
    biaxial_stress_ratios_110,
    bow_height,
    in_plane_misfit,
    poisson_ratio_perp_001,
    poisson_ratio_perp_110,
    poisson_ratio_perp_111,
    poisson_ratio_perp_c_plane,
    radius_of_curvature,
    stoney_curvature,
    stoney_stress,
    strain_energy_density,
    timoshenko_curvature,
)

# Si: Hopcroft, Nix & Kenny, J. MEMS 19, 229 (2010) after Hall, Phys. Rev. 161, 756 (1967) [C, M]
SI = dict(C11=165.7, C12=63.9, C44=79.6)
# GaN: Polian, Grimsditch & Grzegory, J. Appl. Phys. 79, 3343 (1996) via Vurgaftman & Meyer,
# J. Appl. Phys. 94, 3675 (2003) [C]; a = 3.189, c = 5.185 Angstrom [C]
GAN = dict(C11=390.0, C12=145.0, C13=106.0, C33=398.0, C44=105.0)
GAN_C_OVER_A = 5.185 / 3.189


def cubic_stiffness(C11, C12, C44):
    c = np.zeros((6, 6))
    c[:3, :3] = C12
    c[[0, 1, 2], [0, 1, 2]] = C11
    c[[3, 4, 5], [3, 4, 5]] = C44
    return c


def hexagonal_stiffness(C11, C12, C13, C33, C44):
    c = np.zeros((6, 6))
    c[0, 0] = c[1, 1] = C11
    c[0, 1] = c[1, 0] = C12
    c[0, 2] = c[2, 0] = c[1, 2] = c[2, 1] = C13
    c[2, 2] = C33
    c[3, 3] = c[4, 4] = C44
    c[5, 5] = (C11 - C12) / 2.0
    return c


def isotropic_stiffness(E, nu):
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    return cubic_stiffness(lam + 2 * mu, lam, mu)


C_SI = cubic_stiffness(**SI)
EPS = -0.0075  # a compressive equi-biaxial strain of the size of Si0.8Ge0.2 on Si


def si_in(normal, x_axis):
    return sample_frame(normal, x_axis).stiffness_to_sample(C_SI)


# --------------------------------------------------------------------------
# blanket film: general solve against the closed forms
# --------------------------------------------------------------------------
@pytest.mark.parametrize("x_axis", [[1, 0, 0], [1, 1, 0], [1, 2, 0], [3, -1, 0]])
def test_si_001_biaxial_modulus_any_in_plane_direction(x_axis):
    # REFERENCES §4 [D]: M(001) = 180.3 GPa, eps_perp/eps_par = -2 C12/C11 for Si;
    # Brantley, J. Appl. Phys. 44, 534 (1973) [C]: E/(1 - nu) is invariant within {100} planes.
    stress, strain = biaxial_response(si_in([0, 0, 1], x_axis), EPS, EPS)
    assert stress[0, 0] / EPS == pytest.approx(180.3, abs=0.05)
    assert stress[1, 1] / EPS == pytest.approx(180.3, abs=0.05)
    assert stress[0, 0] / EPS == pytest.approx(biaxial_modulus_001(**SI), rel=1e-12)
    assert abs(stress[0, 1]) < 1e-12
    assert strain[2, 2] / EPS == pytest.approx(poisson_ratio_perp_001(**SI), rel=1e-12)
    assert np.allclose(stress[2, :], 0.0, atol=1e-13)


@pytest.mark.parametrize("x_axis", [[1, -1, 0], [1, 1, -2]])
def test_si_111_biaxial_modulus(x_axis):
    # REFERENCES §4 [D]: M(111) = 6 C44 (C11 + 2 C12)/(C11 + 2 C12 + 4 C44) = 229.1 GPa for Si;
    # Brantley 1973 [C]: in-plane isotropic within {111}.
    stress, strain = biaxial_response(si_in([1, 1, 1], x_axis), EPS, EPS)
    assert stress[0, 0] / EPS == pytest.approx(229.1, abs=0.05)
    assert stress[1, 1] / EPS == pytest.approx(biaxial_modulus_111(**SI), rel=1e-12)
    assert strain[2, 2] / EPS == pytest.approx(poisson_ratio_perp_111(**SI), rel=1e-12)
    assert abs(stress[0, 1]) < 1e-12
    assert np.allclose(strain[2, :2], 0.0, atol=1e-15)


def test_si_110_unequal_in_plane_stresses():
    # REFERENCES §4 (110) closed forms [D]; frame x' = [1-10], y' = [001], z' = [110].
    stress, strain = biaxial_response(si_in([1, 1, 0], [1, -1, 0]), EPS, EPS)
    m_1m10, m_001 = biaxial_stress_ratios_110(**SI)
    assert stress[0, 0] / EPS == pytest.approx(m_1m10, rel=1e-12)
    assert stress[1, 1] / EPS == pytest.approx(m_001, rel=1e-12)
    assert strain[2, 2] / EPS == pytest.approx(poisson_ratio_perp_110(**SI), rel=1e-12)
    assert m_1m10 > m_001  # stiffer along [1-10] for Si (Zener ratio > 1)


def test_gan_c_plane():
    # REFERENCES §2 [D]: GaN eps_zz/eps_par = -2 C13/C33 = -0.5327, M_c = 478.5 GPa.
    c_hex = hexagonal_stiffness(**GAN)
    frame = sample_frame([0, 0, 0, 1], [2, -1, -1, 0], system="hexagonal", c_over_a=GAN_C_OVER_A)
    stress, strain = biaxial_response(frame.stiffness_to_sample(c_hex), EPS, EPS)
    assert strain[2, 2] / EPS == pytest.approx(-0.5327, abs=5e-5)
    assert stress[0, 0] / EPS == pytest.approx(478.5, abs=0.05)
    assert poisson_ratio_perp_c_plane(GAN["C13"], GAN["C33"]) == pytest.approx(-0.5327, abs=5e-5)
    assert biaxial_modulus_c_plane(GAN["C11"], GAN["C12"], GAN["C13"], GAN["C33"]) == pytest.approx(
        stress[1, 1] / EPS, rel=1e-12)


def test_isotropic_plane_stress():
    # Plane stress of an isotropic plate (Timoshenko & Goodier, Theory of Elasticity, 1951, from memory):
    # sigma_xx = E/(1 - nu^2)(e_xx + nu e_yy), sigma_xy = E/(1 + nu) e_xy, e_zz = -nu/(1 - nu)(e_xx + e_yy).
    E, nu = 130.0, 0.28
    exx, eyy, exy = 0.004, -0.001, 0.0015
    stress, strain = biaxial_response(isotropic_stiffness(E, nu), exx, eyy, exy)
    assert stress[0, 0] == pytest.approx(E / (1 - nu**2) * (exx + nu * eyy), rel=1e-12)
    assert stress[1, 1] == pytest.approx(E / (1 - nu**2) * (eyy + nu * exx), rel=1e-12)
    assert stress[0, 1] == pytest.approx(E / (1 + nu) * exy, rel=1e-12)
    assert strain[2, 2] == pytest.approx(-nu / (1 - nu) * (exx + eyy), rel=1e-12)
    assert strain[0, 1] == exy


def test_low_symmetry_orientation_matches_reduced_compliance():
    # Independent route (common practice): with sigma_zz = sigma_yz = sigma_xz = 0 the in-plane
    # stresses follow from the reduced compliance, eps_K = S_KK sigma_K, S = C^-1 (Voigt,
    # engineering shear). A (123) wafer couples in-plane strain to out-of-plane shear.
    c = si_in([1, 2, 3], [2, -1, 0])
    exx, eyy, exy = 0.003, -0.002, 0.001
    stress, strain = biaxial_response(c, exx, eyy, exy)
    K = [0, 1, 5]
    s_kk = np.linalg.inv(c)[np.ix_(K, K)]
    sig_k = np.linalg.solve(s_kk, [exx, eyy, 2 * exy])
    assert np.allclose([stress[0, 0], stress[1, 1], stress[0, 1]], sig_k, rtol=1e-10, atol=1e-14)
    assert np.allclose(stress[:, 2], 0.0, atol=1e-13)
    assert abs(strain[0, 2]) > 1e-5 and abs(strain[1, 2]) > 1e-5  # shear coupling present
    # energy density: tensor contraction equals the Voigt one with engineering shear
    w = strain_energy_density(stress, strain)
    gamma = np.array([strain[0, 0], strain[1, 1], strain[2, 2], 2 * strain[1, 2], 2 * strain[0, 2],
                      2 * strain[0, 1]])
    assert w == pytest.approx(0.5 * gamma @ c @ gamma, rel=1e-12)


def test_biaxial_response_is_vectorised():
    frames = [si_in([0, 0, 1], [1, 0, 0]), si_in([1, 1, 1], [1, -1, 0]), si_in([1, 1, 0], [0, 0, 1])]
    c = np.stack(frames)                      # (3, 6, 6)
    exx = np.linspace(-0.01, 0.01, 4)[:, None]  # (4, 1)
    eyy = np.array([0.002, -0.003, 0.0])      # (3,)
    stress, strain = biaxial_response(c, exx, eyy, 0.0005)
    assert stress.shape == strain.shape == (4, 3, 3, 3)
    for i in range(4):
        for j in range(3):
            s1, e1 = biaxial_response(frames[j], exx[i, 0], eyy[j], 0.0005)
            assert np.allclose(stress[i, j], s1, rtol=1e-13, atol=1e-15)
            assert np.allclose(strain[i, j], e1, rtol=1e-13, atol=1e-16)


def test_biaxial_response_bad_input():
    with pytest.raises(MesastrainError, match="6x6"):
        biaxial_response(np.eye(3), 0.01, 0.01)
    with pytest.raises(MesastrainError, match="singular"):
        biaxial_response(np.zeros((6, 6)), 0.01, 0.01)
    with pytest.raises(MesastrainError, match="broadcast"):
        biaxial_response(np.stack([C_SI, C_SI]), np.zeros(3), 0.0)


def test_misfit_convention():
    # REFERENCES conventions: eps_par = (a_sub - a_film)/a_film; SiGe on Si is compressive.
    assert in_plane_misfit(5.4310, 5.4719) == pytest.approx((5.4310 - 5.4719) / 5.4719)
    assert in_plane_misfit(5.4310, 5.4719) < 0


# --------------------------------------------------------------------------
# critical thickness: REFERENCES §5d, Si(1-x)Ge(x) on Si(001)
# --------------------------------------------------------------------------
A_SI = 5.4310  # Angstrom
NU_SET_A = SI["C12"] / (SI["C11"] + SI["C12"])  # 0.2783


def set_a(x):
    """Set A [D]: Dismukes, Ekstrom & Paff, J. Phys. Chem. 68, 3021 (1964) a(x) [M coefficients],
    |f| = (a_film - a_Si)/a_film, b = a_film/sqrt(2), nu = C12/(C11 + C12). Returns (f, b nm, nu)."""
    a = 5.431 + 0.1992 * x + 0.02733 * x**2
    return (a - A_SI) / a, a / np.sqrt(2) / 10.0, NU_SET_A


def set_b(x):
    """Set B [D]: Vegard f = 0.0418 x, b = 0.384 nm, nu = 0.28."""
    return 0.0418 * x, 0.384, 0.28


@pytest.mark.parametrize("params, x, mb8, mb2, pb", [
    # REFERENCES §5d table [D]: MB single layer (8 pi), MB74 multilayer (2 pi), People-Bean
    ("set A", 0.2, 13.7, 75.1, 273.0),
    ("set A", 0.3, 8.0, 45.9, 101.0),
    ("set B", 0.2, 11.7, None, 209.0),
    ("set B", 0.3, 6.9, None, 78.0),
])
def test_sige_critical_thickness_table(params, x, mb8, mb2, pb):
    f, b, nu = (set_a if params == "set A" else set_b)(x)
    # Matthews & Blakeslee, J. Cryst. Growth 27, 118 (1974) [C], single-layer 8 pi form (REFERENCES §5b),
    # 60 degree dislocations on (001): alpha = lambda = 60 deg.
    assert matthews_blakeslee_thickness(f, b, nu, 60.0, 60.0, form="single") == pytest.approx(mb8, rel=0.02)
    if mb2 is not None:
        # the 1974 multilayer 2 pi form
        assert matthews_blakeslee_thickness(f, b, nu, form="multilayer") == pytest.approx(mb2, rel=0.02)
    # People & Bean, Appl. Phys. Lett. 47, 322 (1985) [C]; their b = 4 Angstrom, a = a_Si [M]
    assert people_bean_thickness(f, 0.4, A_SI / 10.0, nu) == pytest.approx(pb, rel=0.02)


def test_critical_thickness_closed_form_matches_brentq():
    # The Lambert-W roots against a bracketed numerical root of the same equations.
    f = np.array([0.002, 0.0075, 0.02, 0.04])
    b, nu = 0.384, 0.28
    h_mb = matthews_blakeslee_thickness(f, b, nu)
    h_pb = people_bean_thickness(f, 0.4, 0.5431, nu)
    for fi, hm, hp in zip(f, h_mb, h_pb):
        A = b * (1 - nu * 0.25) / (8 * np.pi * fi * (1 + nu) * 0.5)
        ref = brentq(lambda h, A=A: h - A * (np.log(h / b) + 1), max(A, b), 1e7, xtol=1e-14, rtol=1e-14)
        assert hm == pytest.approx(ref, rel=1e-10)
        C = (1 - nu) / (1 + nu) / (16 * np.pi * np.sqrt(2)) * 0.4**2 / 0.5431 / fi**2
        ref = brentq(lambda h, C=C: h - C * np.log(h / 0.4), C, 1e9, xtol=1e-14, rtol=1e-14)
        assert hp == pytest.approx(ref, rel=1e-10)


def test_critical_thickness_limits_and_errors():
    # sign of the misfit does not matter; zero misfit never relaxes; a huge misfit has no root
    assert matthews_blakeslee_thickness(-0.01, 0.384, 0.28) == matthews_blakeslee_thickness(0.01, 0.384, 0.28)
    assert np.isinf(matthews_blakeslee_thickness(0.0, 0.384, 0.28))
    assert np.isnan(matthews_blakeslee_thickness(0.3, 0.384, 0.28))
    assert np.isinf(people_bean_thickness(0.0, 0.4, 0.5431, 0.28))
    # REFERENCES §5b: the 2 pi form for a single layer overestimates h_c about fivefold
    ratio = (matthews_blakeslee_thickness(0.0075, 0.384, 0.28, form="multilayer")
             / matthews_blakeslee_thickness(0.0075, 0.384, 0.28))
    assert 4.5 < ratio < 6.5
    with pytest.raises(MesastrainError, match="form"):
        matthews_blakeslee_thickness(0.01, 0.384, 0.28, form="double")
    with pytest.raises(MesastrainError, match="nu"):
        matthews_blakeslee_thickness(0.01, 0.384, 0.6)
    with pytest.raises(MesastrainError, match="b must be > 0"):
        people_bean_thickness(0.01, 0.0, 0.5431, 0.28)
    with pytest.raises(MesastrainError, match="lambda_deg"):
        matthews_blakeslee_thickness(0.01, 0.384, 0.28, lambda_deg=90.0)


# --------------------------------------------------------------------------
# wafer curvature
# --------------------------------------------------------------------------
def test_stoney_sample_value():
    # REFERENCES §4 [D]: 725 um Si(001), 100 nm film at 1 GPa -> kappa = 6.33e-3 1/m, R = 158 m;
    # Stoney, Proc. R. Soc. Lond. A 82, 172 (1909), form as in Feng, Huang & Rosakis, J. Appl. Mech. (2007) [C].
    M_s = biaxial_modulus_001(**SI)
    kappa = stoney_curvature(1000.0, 100.0, 725e3, M_s)
    assert kappa == pytest.approx(6.33e-3, rel=1e-3)
    assert radius_of_curvature(kappa) == pytest.approx(158.0, rel=1e-3)
    assert stoney_stress(kappa, 100.0, 725e3, M_s) == pytest.approx(1000.0, rel=1e-12)
    assert stoney_curvature(-1000.0, 100.0, 725e3, M_s) == pytest.approx(-kappa)
    assert np.isinf(radius_of_curvature(0.0))


def test_bow_height_is_the_small_slope_sagitta():
    # Geometry of a spherical cap (common practice): exact sagitta R - sqrt(R^2 - r^2).
    kappa, diameter_nm = 6.33e-3, 200e6
    R, r = 1.0 / kappa, diameter_nm * 1e-9 / 2
    exact_nm = (R - np.sqrt(R**2 - r**2)) * 1e9
    assert bow_height(kappa, diameter_nm) == pytest.approx(exact_nm, rel=1e-6)


@pytest.mark.parametrize("ratio, expected", [
    # REFERENCES §4 [D]: Timoshenko/Stoney curvature ratio, M_f = 200, M_s = 180.3 GPa
    (1e-4, 0.99966), (1e-3, 0.99657), (1e-2, 0.96647), (0.1, 0.72618), (1.0, 0.1126),
])
def test_timoshenko_tends_to_stoney(ratio, expected):
    # Timoshenko, J. Opt. Soc. Am. 11, 233 (1925) [C]
    M_f, M_s, eps, h_s = 200.0, 180.3, 2e-3, 1e5
    k_t = timoshenko_curvature(eps, ratio * h_s, h_s, M_f, M_s)
    k_s = stoney_curvature(M_f * eps * 1e3, ratio * h_s, h_s, M_s)  # film stress M_f eps in MPa
    assert k_t / k_s == pytest.approx(expected, abs=1e-4)  # table printed to 4-5 decimals
    assert k_t > 0  # a tensile film bends the film side concave


def test_timoshenko_equal_layers():
    # Timoshenko 1925 [C] with m = n = 1: kappa = 3 d_alpha dT / (2 h) (REFERENCES §4 [D]).
    d_alpha, dT, h_each = 10e-6, 100.0, 500.0  # 1/K, K, nm
    kappa = timoshenko_curvature(d_alpha * dT, h_each, h_each, 150.0, 150.0)
    assert kappa == pytest.approx(3 * d_alpha * dT / (2 * 2 * h_each * 1e-9), rel=1e-12)


# --------------------------------------------------------------------------
# elastic energy
# --------------------------------------------------------------------------
def test_blanket_energy_per_area():
    # w = M eps^2 for equi-biaxial strain; GPa * nm = J/m^2 (unit bookkeeping, common practice).
    stress, strain = biaxial_response(si_in([0, 0, 1], [1, 1, 0]), EPS, EPS)
    w = strain_energy_density(stress, strain)  # GPa = 1e9 J/m^3
    M = biaxial_modulus_001(**SI)
    assert w == pytest.approx(M * EPS**2, rel=1e-12)
    h_nm = 20.0
    assert biaxial_energy_per_area(M, EPS, h_nm) == pytest.approx(w * 1e9 * h_nm * 1e-9, rel=1e-12)
    stack = np.stack([stress, 2 * stress]), np.stack([strain, 2 * strain])
    assert np.allclose(strain_energy_density(*stack), [w, 4 * w], rtol=1e-12)
