"""Closed-form thin-film mechanics reported beside the finite-element results.

Everything here is a pure function of numbers or numpy arrays; nothing reads a
case file or a mesh.

Conventions
-----------
Frames and Voigt order
    As in :mod:`mesastrain.physics.crystal`: sample z is the wafer normal, Voigt order
    11, 22, 33, 23, 13, 12, engineering shear in Voigt strain vectors, tensor
    shear in 3x3 strain tensors.
Misfit
    The in-plane strain of a coherent film is eps_par = (a_sub - a_film)/a_film
    (see :func:`in_plane_misfit`): negative (compressive) for a film with the
    larger lattice constant, e.g. SiGe on Si.
Units
    Stiffness and biaxial moduli in GPa. :func:`biaxial_response` returns stress
    in the unit of the stiffness it is given (GPa for GPa). Film stress in the
    wafer-curvature functions in MPa. Lengths in nm (film and substrate
    thickness, Burgers vector, lattice constant, critical thickness, bow
    height); curvature in 1/m; radius of curvature in m. Angles in degrees.
    Energies per unit area in J/m^2.
Signs
    Stress is positive in tension. Curvature is positive when the film side
    of the wafer is concave, which is what a tensile film produces.
"""

from __future__ import annotations

import numpy as np

from mesastrain.errors import MesastrainError

__all__ = [
    "biaxial_response",
    "in_plane_misfit",
    "biaxial_modulus_001",
    "biaxial_modulus_111",
    "biaxial_stress_ratios_110",
    "biaxial_modulus_c_plane",
    "poisson_ratio_perp_001",
    "poisson_ratio_perp_111",
    "poisson_ratio_perp_110",
    "poisson_ratio_perp_c_plane",
    "stoney_curvature",
    "stoney_stress",
    "radius_of_curvature",
    "bow_height",
    "timoshenko_curvature",
    "strain_energy_density",
    "biaxial_energy_per_area",
]

# Voigt rows held fixed (in-plane strain: 11, 22, 12) and rows solved for
# (out-of-plane strain: 33, 23, 13) in the laterally constrained film.
_IN_PLANE = np.array([0, 1, 5])
_OUT_OF_PLANE = np.array([2, 3, 4])
_VOIGT_INDEX = np.array([[0, 5, 4], [5, 1, 3], [4, 3, 2]])

#: GPa * nm = 1e9 Pa * 1e-9 m = 1 J/m^2.
_GPA_NM_IN_J_PER_M2 = 1.0


def _array(name: str, value) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise MesastrainError(f"{name} must be a number or an array of numbers, got {value!r}") from None
    if not np.all(np.isfinite(arr)):
        raise MesastrainError(f"{name} must be finite, got {value!r}")
    return arr


def _positive(name: str, value) -> np.ndarray:
    arr = _array(name, value)
    if np.any(arr <= 0):
        raise MesastrainError(f"{name} must be > 0, got {value!r}")
    return arr


def _poisson(name: str, value) -> np.ndarray:
    arr = _array(name, value)
    if np.any((arr <= -1.0) | (arr >= 0.5)):
        raise MesastrainError(f"{name} must lie in (-1, 0.5), got {value!r}")
    return arr


# --------------------------------------------------------------------------
# blanket film: exact solution for any anisotropic stiffness
# --------------------------------------------------------------------------
def biaxial_response(stiffness_sample, eps_par_xx, eps_par_yy, eps_par_xy=0.0):
    """Stress and strain of a laterally constrained blanket film.

    The in-plane strain components are imposed (the film is coherent with a
    thick substrate and laterally infinite); the top surface is traction
    free, so sigma_zz = sigma_yz = sigma_xz = 0. The three out-of-plane strain
    components follow from those three conditions:
    C_UU e_U = -C_UK e_K with K = (11, 22, 12) and U = (33, 23, 13).
    This is the blanket value a patterned (mesa) result is compared with.

    Parameters
    ----------
    stiffness_sample : array (..., 6, 6)
        Voigt stiffness already rotated into the sample frame (z = wafer
        normal), e.g. ``Frame.stiffness_to_sample(material.stiffness)``.
        Any unit; GPa in mesastrain.
    eps_par_xx, eps_par_yy : float or array (...)
        Imposed in-plane normal strains (dimensionless), broadcast with the
        stack shape of ``stiffness_sample``.
    eps_par_xy : float or array (...), default: 0
        Imposed in-plane **tensor** shear strain eps_xy (not gamma_xy).

    Returns
    -------
    stress : array (..., 3, 3)
        Cauchy stress in the sample frame, in the unit of the stiffness (GPa).
        The xz, yz and zz components vanish to round-off.
    strain : array (..., 3, 3)
        Total strain tensor (tensor shear) in the sample frame.

    Raises
    ------
    MesastrainError
        A stiffness that is not (..., 6, 6), non-finite input, or a stiffness
        whose out-of-plane block is singular (not positive definite).

    Examples
    --------
    >>> import numpy as np
    >>> c = np.zeros((6, 6)); c[:3, :3] = 63.9; c[[0, 1, 2], [0, 1, 2]] = 165.7
    >>> c[[3, 4, 5], [3, 4, 5]] = 79.6
    >>> s, e = biaxial_response(c, 0.01, 0.01)
    >>> print(f"{s[0, 0] / 0.01:.1f} {e[2, 2] / 0.01:.4f}")
    180.3 -0.7713
    """
    c = _array("stiffness_sample", stiffness_sample)
    if c.ndim < 2 or c.shape[-2:] != (6, 6):
        raise MesastrainError(
            f"stiffness_sample must be a 6x6 Voigt matrix or a stack (..., 6, 6), got shape {c.shape}")
    exx = _array("eps_par_xx", eps_par_xx)
    eyy = _array("eps_par_yy", eps_par_yy)
    exy = _array("eps_par_xy", eps_par_xy)
    try:
        shape = np.broadcast_shapes(c.shape[:-2], exx.shape, eyy.shape, exy.shape)
    except ValueError:
        raise MesastrainError(
            f"stiffness stack {c.shape[:-2]} and strain shapes {exx.shape}, {eyy.shape}, "
            f"{exy.shape} do not broadcast") from None
    c = np.broadcast_to(c, shape + (6, 6))
    e_known = np.stack(np.broadcast_arrays(exx, eyy, 2.0 * exy), axis=-1)
    e_known = np.broadcast_to(e_known, shape + (3,))

    c_uu = c[..., _OUT_OF_PLANE[:, None], _OUT_OF_PLANE[None, :]]
    c_uk = c[..., _OUT_OF_PLANE[:, None], _IN_PLANE[None, :]]
    rhs = -np.einsum("...ij,...j->...i", c_uk, e_known)
    try:
        e_unknown = np.linalg.solve(c_uu, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        raise MesastrainError(
            "stiffness_sample has a singular out-of-plane block (C33, C44, C55); "
            "a physical stiffness must be positive definite") from None

    voigt = np.empty(shape + (6,))
    voigt[..., _IN_PLANE] = e_known
    voigt[..., _OUT_OF_PLANE] = e_unknown
    sig_v = np.einsum("...ij,...j->...i", c, voigt)
    half_shear = np.array([1.0, 1.0, 1.0, 0.5, 0.5, 0.5])
    strain = (voigt * half_shear)[..., _VOIGT_INDEX]
    stress = sig_v[..., _VOIGT_INDEX]
    return stress, strain


def in_plane_misfit(a_substrate, a_film):
    """In-plane strain of a film held coherent to a substrate.

    Parameters
    ----------
    a_substrate, a_film : float or array
        Lattice constants (Angstrom, or any common unit); > 0.

    Returns
    -------
    float or array
        eps_par = (a_substrate - a_film) / a_film, dimensionless. Negative
        (compressive) when the film lattice is the larger one.
    """
    a_s = _positive("a_substrate", a_substrate)
    a_f = _positive("a_film", a_film)
    return (a_s - a_f) / a_f


# --------------------------------------------------------------------------
# closed forms for high-symmetry orientations (equi-biaxial strain)
# --------------------------------------------------------------------------
def biaxial_modulus_001(C11, C12, C44=None):
    """Biaxial modulus of a cubic crystal on a (001) surface.

    M(001) = sigma_par / eps_par = C11 + C12 - 2 C12^2 / C11, the same for
    every in-plane direction of a {100} plane (Brantley, J. Appl. Phys. 44,
    534, 1973).

    Parameters
    ----------
    C11, C12 : float or array
        Cubic elastic constants in crystal axes, GPa.
    C44 : float or array, optional
        Not used (accepted so that all cubic forms share one signature).

    Returns
    -------
    float or array
        M(001) in GPa.
    """
    C11 = _positive("C11", C11)
    C12 = _array("C12", C12)
    return C11 + C12 - 2.0 * C12**2 / C11


def poisson_ratio_perp_001(C11, C12, C44=None):
    """Out-of-plane to in-plane strain ratio of a cubic film on (001).

    Parameters
    ----------
    C11, C12 : float or array
        Cubic elastic constants, GPa.
    C44 : float or array, optional
        Not used.

    Returns
    -------
    float or array
        eps_perp / eps_par = -2 C12 / C11 (negative; dimensionless).
    """
    C11 = _positive("C11", C11)
    return -2.0 * _array("C12", C12) / C11


def biaxial_modulus_111(C11, C12, C44):
    """Biaxial modulus of a cubic crystal on a (111) surface.

    Parameters
    ----------
    C11, C12, C44 : float or array
        Cubic elastic constants, GPa.

    Returns
    -------
    float or array
        M(111) = 6 C44 (C11 + 2 C12) / (C11 + 2 C12 + 4 C44), GPa; isotropic
        in the (111) plane.
    """
    C11, C12, C44 = _array("C11", C11), _array("C12", C12), _positive("C44", C44)
    bulk3 = C11 + 2.0 * C12
    return 6.0 * C44 * bulk3 / (bulk3 + 4.0 * C44)


def poisson_ratio_perp_111(C11, C12, C44):
    """Out-of-plane to in-plane strain ratio of a cubic film on (111).

    Parameters
    ----------
    C11, C12, C44 : float or array
        Cubic elastic constants, GPa.

    Returns
    -------
    float or array
        eps_perp / eps_par = -2 (C11 + 2 C12 - 2 C44) / (C11 + 2 C12 + 4 C44).
    """
    C11, C12, C44 = _array("C11", C11), _array("C12", C12), _positive("C44", C44)
    return -2.0 * (C11 + 2.0 * C12 - 2.0 * C44) / (C11 + 2.0 * C12 + 4.0 * C44)


def poisson_ratio_perp_110(C11, C12, C44):
    """Out-of-plane to in-plane strain ratio of a cubic film on (110).

    Parameters
    ----------
    C11, C12, C44 : float or array
        Cubic elastic constants, GPa.

    Returns
    -------
    float or array
        eps_perp / eps_par = -(C11 + 3 C12 - 2 C44) / (C11 + C12 + 2 C44) for
        equi-biaxial in-plane strain.
    """
    C11, C12, C44 = _array("C11", C11), _array("C12", C12), _positive("C44", C44)
    return -(C11 + 3.0 * C12 - 2.0 * C44) / (C11 + C12 + 2.0 * C44)


def biaxial_stress_ratios_110(C11, C12, C44):
    """In-plane stresses of an equi-biaxially strained cubic film on (110).

    A (110) film has no single biaxial modulus: equal in-plane strains give
    unequal stresses along [1-10] and [001].

    Parameters
    ----------
    C11, C12, C44 : float or array
        Cubic elastic constants, GPa.

    Returns
    -------
    m_1m10, m_001 : float or array
        sigma[1-10] / eps_par and sigma[001] / eps_par, GPa.
    """
    C11, C12, C44 = _array("C11", C11), _array("C12", C12), _positive("C44", C44)
    r = poisson_ratio_perp_110(C11, C12, C44)
    m_1m10 = (C11 + C12 + 2.0 * C44) / 2.0 + C12 + (C11 + C12 - 2.0 * C44) / 2.0 * r
    m_001 = C11 + C12 + C12 * r
    return m_1m10, m_001


def poisson_ratio_perp_c_plane(C13, C33):
    """Out-of-plane to in-plane strain ratio of a wurtzite c-plane film.

    Parameters
    ----------
    C13, C33 : float or array
        Hexagonal elastic constants, GPa.

    Returns
    -------
    float or array
        eps_zz / eps_par = -2 C13 / C33.
    """
    return -2.0 * _array("C13", C13) / _positive("C33", C33)


def biaxial_modulus_c_plane(C11, C12, C13, C33):
    """Biaxial modulus of a hexagonal (wurtzite) film on the c-plane.

    Parameters
    ----------
    C11, C12, C13, C33 : float or array
        Hexagonal elastic constants, GPa.

    Returns
    -------
    float or array
        M_c = C11 + C12 - 2 C13^2 / C33, GPa; isotropic in the basal plane.
    """
    C13 = _array("C13", C13)
    return _array("C11", C11) + _array("C12", C12) - 2.0 * C13**2 / _positive("C33", C33)


# --------------------------------------------------------------------------
# wafer curvature
# --------------------------------------------------------------------------
def stoney_curvature(film_stress, h_f, h_s, M_s):
    """Wafer curvature from the film stress, Stoney's equation.

    kappa = 6 sigma_f h_f / (M_s h_s^2) (Stoney, Proc. R. Soc. Lond. A 82,
    172, 1909), with M_s = E_s/(1 - nu_s) the substrate biaxial modulus
    (use :func:`biaxial_modulus_001` for Si(001), :func:`biaxial_modulus_111`
    for Si(111)). Valid for h_f << h_s, deflection << h_s, uniform stress.

    Parameters
    ----------
    film_stress : float or array
        Equi-biaxial film stress, MPa (tension positive).
    h_f, h_s : float or array
        Film and substrate thickness, nm.
    M_s : float or array
        Substrate biaxial modulus, GPa.

    Returns
    -------
    float or array
        Curvature in 1/m, positive (film side concave) for a tensile film.
    """
    sigma = _array("film_stress", film_stress)
    h_f, h_s, M_s = _positive("h_f", h_f), _positive("h_s", h_s), _positive("M_s", M_s)
    # MPa/GPa = 1e-3; nm/nm^2 = 1/nm = 1e9 /m
    return 6.0 * sigma * 1e-3 / M_s * h_f / h_s**2 * 1e9


def stoney_stress(curvature, h_f, h_s, M_s):
    """Film stress from a measured wafer curvature (inverse of Stoney's equation).

    Parameters
    ----------
    curvature : float or array
        Curvature change caused by the film, 1/m.
    h_f, h_s : float or array
        Film and substrate thickness, nm.
    M_s : float or array
        Substrate biaxial modulus, GPa.

    Returns
    -------
    float or array
        sigma_f = M_s h_s^2 kappa / (6 h_f), MPa.
    """
    kappa = _array("curvature", curvature)
    h_f, h_s, M_s = _positive("h_f", h_f), _positive("h_s", h_s), _positive("M_s", M_s)
    return M_s * 1e3 * h_s**2 * kappa * 1e-9 / (6.0 * h_f)


def radius_of_curvature(curvature):
    """Radius of curvature, m, from a curvature in 1/m (``inf`` for zero).

    Parameters
    ----------
    curvature : float or array
        1/m; the sign is kept (negative radius for a convex film side).

    Returns
    -------
    float or array
        1/kappa in m.
    """
    kappa = _array("curvature", curvature)
    with np.errstate(divide="ignore"):
        return np.where(kappa == 0, np.inf, 1.0 / np.where(kappa == 0, 1.0, kappa))[()]


def bow_height(curvature, diameter):
    """Centre-to-edge height (sagitta) of a uniformly curved wafer.

    delta = kappa D^2 / 8, the small-slope form of R - sqrt(R^2 - (D/2)^2)
    (common practice for wafer bow).

    Parameters
    ----------
    curvature : float or array
        1/m.
    diameter : float or array
        Wafer diameter, nm (300 mm = 3e8 nm).

    Returns
    -------
    float or array
        Bow height in nm, with the sign of the curvature.
    """
    kappa = _array("curvature", curvature)
    d = _positive("diameter", diameter)
    return kappa * 1e-9 * d**2 / 8.0


def timoshenko_curvature(eps_mismatch, h_f, h_s, M_f, M_s):
    """Curvature of a film/substrate bilayer of any thickness ratio (Timoshenko).

    kappa = 6 eps (1 + m)^2 / (h [3 (1 + m)^2 + (1 + m n)(m^2 + 1/(m n))])

    with m = h_f/h_s, n = M_f/M_s, h = h_f + h_s (Timoshenko, J. Opt. Soc. Am.
    11, 233, 1925, written there for thermostat strips with (alpha2 - alpha1)
    dT; for plates the Young's moduli are replaced by the biaxial moduli
    E/(1 - nu)). Tends to Stoney's equation as h_f/h_s -> 0.

    Parameters
    ----------
    eps_mismatch : float or array
        In-plane strain the film would carry if held flat by a rigid
        substrate: the misfit eps_par of :func:`in_plane_misfit`, or for a
        thermal mismatch (alpha_s - alpha_f)(T_final - T_growth). Positive
        means a tensile film.
    h_f, h_s : float or array
        Film and substrate thickness, nm.
    M_f, M_s : float or array
        Film and substrate biaxial moduli, GPa.

    Returns
    -------
    float or array
        Curvature in 1/m, positive (film side concave) for a tensile film.
    """
    eps = _array("eps_mismatch", eps_mismatch)
    h_f, h_s = _positive("h_f", h_f), _positive("h_s", h_s)
    M_f, M_s = _positive("M_f", M_f), _positive("M_s", M_s)
    m = h_f / h_s
    n = M_f / M_s
    h = (h_f + h_s) * 1e-9  # m
    return 6.0 * eps * (1.0 + m) ** 2 / (
        h * (3.0 * (1.0 + m) ** 2 + (1.0 + m * n) * (m**2 + 1.0 / (m * n))))


# --------------------------------------------------------------------------
# elastic energy
# --------------------------------------------------------------------------
def strain_energy_density(stress, strain):
    """Linear-elastic strain energy density w = (1/2) sigma_ij eps_ij.

    Parameters
    ----------
    stress : array (..., 3, 3)
        Stress tensors. The result has the same unit: GPa = 1e9 J/m^3,
        MPa = 1e6 J/m^3.
    strain : array (..., 3, 3)
        Strain tensors (tensor shear), dimensionless.

    Returns
    -------
    float or array (...)
        Energy per unit volume, in the unit of ``stress``.
    """
    sig = _array("stress", stress)
    eps = _array("strain", strain)
    if sig.shape[-2:] != (3, 3) or eps.shape[-2:] != (3, 3):
        raise MesastrainError(
            f"stress and strain must be 3x3 tensors or stacks (..., 3, 3), got {sig.shape} and {eps.shape}")
    return 0.5 * np.einsum("...ij,...ij->...", sig, eps)


def biaxial_energy_per_area(M, eps_par, h):
    """Elastic energy per unit area of an equi-biaxially strained blanket film.

    E/A = M eps_par^2 h, from w = (1/2)(sigma_xx eps_xx + sigma_yy eps_yy)
    with sigma = M eps_par in both in-plane directions.

    Parameters
    ----------
    M : float or array
        Biaxial modulus of the film for its orientation, GPa.
    eps_par : float or array
        In-plane strain, dimensionless.
    h : float or array
        Film thickness, nm.

    Returns
    -------
    float or array
        J/m^2 (GPa * nm = 1 J/m^2).
    """
    M = _positive("M", M)
    eps = _array("eps_par", eps_par)
    h = _array("h", h)
    if np.any(h < 0):
        raise MesastrainError(f"h must be >= 0, got {h!r}")
    return M * eps**2 * h * _GPA_NM_IN_J_PER_M2
