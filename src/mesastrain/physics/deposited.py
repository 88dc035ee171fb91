"""Eigenstrains of deposited films: built-in stress and thermal history per layer.

A deposited (non-epitaxial) film has no lattice mismatch to its substrate.
Its stress has two parts this module turns into eigenstrains:

* the **built-in (intrinsic) stress**, given the way it is specified and
  measured by wafer curvature: the equi-biaxial in-plane stress sigma the
  film carries as a blanket film on the wafer (MPa, tensile positive);
* the **thermal mismatch** gathered on cooling from the layer's own
  deposition (or growth) temperature to the final temperature.

Conventions
-----------
Frames
    Sample frame as in :mod:`mesastrain.physics.crystal`: z is the wafer
    normal. Stiffnesses and eigenstrains here are in the sample frame unless
    a name says crystal axes.
Eigenstrain
    The stress-free strain eps0 relative to the reference lattice (the
    substrate at the final temperature), entering as sigma = C : (eps - eps0).
    A blanket film is held by a thick substrate: its in-plane total strain
    equals the substrate's (zero in the reference), and its top is free,
    sigma_i3 = 0.
Built-in stress -> eigenstrain
    eps0 has in-plane components only (xx, yy, xy; eps0_i3 = 0), chosen so
    that the blanket film carries exactly sigma_xx = sigma_yy = sigma,
    sigma_xy = 0, sigma_i3 = 0. With the in-plane reduced stiffness Q
    (the 3x3 Schur complement of the out-of-plane block of C, which relates
    (sigma_xx, sigma_yy, sigma_xy) to (e_xx, e_yy, gamma_xy) when
    sigma_i3 = 0) this is (eps0_xx, eps0_yy, 2 eps0_xy) = -Q^-1 (sigma,
    sigma, 0). For an isotropic film, and for any film that is in-plane
    isotropic for biaxial loading (cubic (001) and (111), hexagonal c-plane),
    eps0 = -sigma (1 - nu)/E in both in-plane directions, the familiar
    biaxial-modulus relation. For a low-symmetry plane (e.g. cubic (113))
    eps0_xx != eps0_yy and eps0_xy != 0 in general. A tensile sigma gives
    eps0 < 0: the film "wants to be smaller" than the substrate holds it.
Thermal mismatch
    eps0_th = R_f eps_f R_f^T - R_s eps_s R_s^T, eps = int_{T_dep}^{T_final}
    alpha(T) dT per crystal axis of film (f) and substrate (s), rotated into
    the sample frame. Subtracting the substrate's free thermal strain (a
    uniform, stress-free field) keeps the substrate's eigenstrain zero. An
    isotropic film on an in-plane isotropic substrate cooled by
    dT = T_final - T_dep < 0 then carries
    sigma = E/(1 - nu) (alpha_s - alpha_f) dT (constant alphas).

Units: stiffness GPa; stress MPa; temperatures K; alpha 1e-6/K; strains
dimensionless.
"""

from __future__ import annotations

import numpy as np

from mesastrain.errors import MaterialError, MesastrainError
from mesastrain.physics.thermal import FIT_MODES, expansion_fit, thermal_strain
from mesastrain.physics.thinfilm import biaxial_response

__all__ = [
    "blanket_film_stress",
    "deposited_film_eigenstrain",
    "free_thermal_strain",
    "in_plane_stiffness",
    "thermal_mismatch_eigenstrain",
]

_IN = np.array([0, 1, 5])      # Voigt 11, 22, 12
_OUT = np.array([2, 3, 4])     # Voigt 33, 23, 13


def _stiffness(c) -> np.ndarray:
    try:
        c = np.asarray(c, dtype=float)
    except (TypeError, ValueError):
        raise MesastrainError(f"stiffness_sample must be a 6x6 matrix, got {c!r}") from None
    if c.shape != (6, 6) or not np.all(np.isfinite(c)):
        raise MesastrainError(f"stiffness_sample must be a finite 6x6 Voigt matrix, got shape {c.shape}")
    return c


def in_plane_stiffness(stiffness_sample) -> np.ndarray:
    """Reduced in-plane stiffness Q of a film with a free top (sigma_i3 = 0).

    Parameters
    ----------
    stiffness_sample : array_like (6, 6)
        Voigt stiffness in the sample frame (z = film normal), GPa.

    Returns
    -------
    ndarray (3, 3)
        Q = C_KK - C_KU C_UU^-1 C_UK with K = (11, 22, 12), U = (33, 23, 13):
        (sigma_xx, sigma_yy, sigma_xy) = Q (e_xx, e_yy, gamma_xy), GPa.
        For an isotropic film Q[0, 0] + Q[0, 1] = E/(1 - nu).

    Raises
    ------
    MesastrainError
        Not a finite 6x6 matrix, or a singular out-of-plane block.
    """
    c = _stiffness(stiffness_sample)
    c_uu = c[np.ix_(_OUT, _OUT)]
    try:
        x = np.linalg.solve(c_uu, c[np.ix_(_OUT, _IN)])
    except np.linalg.LinAlgError:
        raise MesastrainError("stiffness_sample has a singular out-of-plane block; "
                              "a physical stiffness is positive definite") from None
    return c[np.ix_(_IN, _IN)] - c[np.ix_(_IN, _OUT)] @ x


def deposited_film_eigenstrain(stiffness_sample, stress) -> np.ndarray:
    """In-plane eigenstrain that gives a blanket film its built-in stress.

    Parameters
    ----------
    stiffness_sample : array_like (6, 6)
        The film's Voigt stiffness in the sample frame, GPa (for a crystal,
        ``Frame.stiffness_to_sample(material.stiffness)``; an isotropic
        film's stiffness is the same in every frame).
    stress : float or sequence of 3 floats
        Built-in film stress, MPa, tensile positive: one number for the
        equi-biaxial stress measured by wafer curvature, or
        (sigma_xx, sigma_yy, sigma_xy) in the sample frame.

    Returns
    -------
    ndarray (3, 3)
        eps0 in the sample frame (tensor shear), dimensionless; the xz, yz and
        zz components are zero (see the module notes for the convention).

    Raises
    ------
    MesastrainError
        A stress that is not one or three finite numbers, or a bad stiffness.

    Examples
    --------
    >>> from mesastrain.physics.elastic import stiffness_from_constants
    >>> c = stiffness_from_constants("isotropic", {"E": 200.0, "nu": 0.25})
    >>> print(f"{deposited_film_eigenstrain(c, 1500.0)[0, 0]:.6f}")   # -1.5 GPa*(1-nu)/E
    -0.005625
    """
    try:
        s = np.atleast_1d(np.asarray(stress, dtype=float))
    except (TypeError, ValueError):
        raise MesastrainError(f"stress must be a number in MPa or (sxx, syy, sxy), got {stress!r}") from None
    if s.shape not in ((1,), (3,)) or not np.all(np.isfinite(s)):
        raise MesastrainError(f"stress must be one finite number in MPa (equi-biaxial) or three "
                              f"(sigma_xx, sigma_yy, sigma_xy), got {stress!r}")
    target = np.array([s[0], s[0], 0.0]) if s.size == 1 else s
    q = in_plane_stiffness(stiffness_sample)
    e = -np.linalg.solve(q, target * 1e-3)          # MPa -> GPa; (exx, eyy, gamma_xy)
    eps0 = np.zeros((3, 3))
    eps0[0, 0], eps0[1, 1] = e[0], e[1]
    eps0[0, 1] = eps0[1, 0] = 0.5 * e[2]
    return eps0


def blanket_film_stress(stiffness_sample, eigenstrain_sample, in_plane_strain=None) -> np.ndarray:
    """Stress of a blanket film with an eigenstrain, held in-plane by the substrate.

    Parameters
    ----------
    stiffness_sample : array_like (6, 6)
        Film stiffness in the sample frame, GPa.
    eigenstrain_sample : array_like (3, 3)
        eps0 in the sample frame (tensor shear); its out-of-plane components
        relax freely and do not stress the film.
    in_plane_strain : array_like (3,), optional
        Total in-plane strain (eps_xx, eps_yy, eps_xy) imposed by the
        substrate relative to the reference; zero by default.

    Returns
    -------
    ndarray (3, 3)
        Cauchy stress in the sample frame, MPa; sigma_i3 = 0.
    """
    e0 = np.asarray(eigenstrain_sample, dtype=float)
    if e0.shape != (3, 3) or not np.all(np.isfinite(e0)):
        raise MesastrainError(f"eigenstrain_sample must be a finite 3x3 tensor, got shape {e0.shape}")
    tot = np.zeros(3) if in_plane_strain is None else np.asarray(in_plane_strain, dtype=float)
    stress, _ = biaxial_response(_stiffness(stiffness_sample), tot[0] - e0[0, 0],
                                 tot[1] - e0[1, 1], tot[2] - e0[0, 1])
    return stress * 1e3


def _rotation(frame) -> np.ndarray:
    if frame is None:
        return np.eye(3)
    R = np.asarray(getattr(frame, "R", frame), dtype=float)
    if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9):
        raise MesastrainError("frame must be a Frame or a 3x3 rotation matrix (rows = sample axes)")
    return R


def _axis_alphas(material) -> list[float]:
    """alpha per crystal axis x, y, z (1e-6/K) from ``Material.alpha``."""
    alpha = tuple(material.alpha)
    if len(alpha) == 1:
        return [alpha[0]] * 3
    if len(alpha) == 2:
        return [alpha[0], alpha[0], alpha[1]]
    if len(alpha) == 3:
        return list(alpha)
    raise MaterialError(f"{material.name}: alpha must have 1, 2 (a, c) or 3 (x, y, z) values, "
                        f"got {alpha!r}")


def free_thermal_strain(material, T_from, T_to, fit: str = "always") -> np.ndarray:
    """Free thermal strain tensor of a material in its crystal axes.

    Parameters
    ----------
    material : Material
        Any symmetry system; ``alpha`` gives one value, (a, c) with c along
        crystal z, or three values along crystal x, y, z.
    T_from, T_to : float
        Temperatures, K.
    fit : {"always", "never"}, default: "always"
        "always": the material's published alpha(T) fit where
        :mod:`mesastrain.physics.thermal` has one (Si, Okada & Tokumaru 1984),
        else the constant alpha; "never": constants only.

    Returns
    -------
    ndarray (3, 3)
        diag(eps_x, eps_y, eps_z), eps = int alpha dT, dimensionless.

    Raises
    ------
    MaterialError
        No alpha and no fit, or a temperature outside the fit's range.
    """
    if fit not in ("always", "never"):
        raise MesastrainError(f"fit must be 'always' or 'never', got {fit!r}")
    has_fit = fit == "always" and expansion_fit(material.name) is not None
    if not material.alpha and not has_fit:
        raise MaterialError(f"{material.name} has no thermal expansion coefficient; give alpha "
                            f"(1e-6/K) in its material table")
    if has_fit:
        e = float(thermal_strain(material.name, None, T_from, T_to, fit="always"))
        return e * np.eye(3)
    return np.diag([float(thermal_strain(material.name, a, T_from, T_to, fit="never"))
                    for a in _axis_alphas(material)])


def thermal_mismatch_eigenstrain(film, substrate, T_deposition, T_final, film_frame=None,
                                 substrate_frame=None, fit: str = "always") -> np.ndarray:
    """Thermal eigenstrain of a layer from its own deposition temperature to the final one.

    Parameters
    ----------
    film, substrate : Material
        The layer and the substrate (the reference lattice).
    T_deposition : float
        The layer's deposition (growth) temperature, K: there it is taken as
        free of thermal mismatch.
    T_final : float
        Final temperature, K.
    film_frame, substrate_frame : Frame or array (3, 3), optional
        Sample frames (rows = sample axes in crystal axes); identity if None
        (enough for isotropic materials and cube-on-cube stacks).
    fit : {"always", "auto", "never"}, default: "always"
        "always": published alpha(T) fits wherever they exist (Si), constants
        otherwise; "auto": fits only if both materials have one (the rule of
        :func:`mesastrain.physics.thermal.thermal_mismatch_strain`);
        "never": constants only.

    Returns
    -------
    ndarray (3, 3)
        eps0 = R_f eps_f R_f^T - R_s eps_s R_s^T in the sample frame,
        dimensionless (see the module notes). On cooling, a film that
        contracts more than the substrate gets eps0 < 0 in-plane and ends in
        tension.

    Raises
    ------
    MaterialError
        A material without alpha (and no fit), or a temperature outside a
        fit's range.
    """
    if fit not in FIT_MODES:
        raise MesastrainError(f"fit must be one of {FIT_MODES}, got {fit!r}")
    if fit == "auto":
        both = expansion_fit(film.name) is not None and expansion_fit(substrate.name) is not None
        fit = "always" if both else "never"
    Rf, Rs = _rotation(film_frame), _rotation(substrate_frame)
    ef = Rf @ free_thermal_strain(film, T_deposition, T_final, fit) @ Rf.T
    es = Rs @ free_thermal_strain(substrate, T_deposition, T_final, fit) @ Rs.T
    return ef - es
