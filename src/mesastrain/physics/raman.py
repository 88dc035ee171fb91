"""Strain shift and Raman intensity of the zone-centre optical phonons of diamond-type crystals.

Secular equation (Ganesan, Maradudin & Oitmaa 1970; Anastassakis et al. 1970)
for the three optical modes under a strain eps (crystal cube axes)::

    | p e11 + q(e22 + e33) - L   2 r e12                    2 r e13                 |
    | 2 r e12                    p e22 + q(e11 + e33) - L   2 r e23                 | = 0
    | 2 r e13                    2 r e23                    p e33 + q(e11 + e22) - L|

with the phonon deformation potentials (PDPs) p, q, r in units of omega0^2 and
tensor shear strain. The mode frequencies are omega_j^2 = omega0^2 + L_j, so for
small strain the shifts are d omega_j = L_j / (2 omega0) = (omega0 / 2) L~_j
where L~ are the eigenvalues of the matrix above with p, q, r in omega0^2.

Which modes an instrument sees (selection rules)
------------------------------------------------
The Raman tensors of the three optical phonons in cube axes are (Loudon,
Adv. Phys. 13, 423 (1964))::

    R_x = d [[0,0,0],[0,0,1],[0,1,0]]   R_y = d [[0,0,1],[0,0,0],[1,0,0]]
    R_z = d [[0,1,0],[1,0,0],[0,0,0]]

A strained mode j with unit polarisation v_j (crystal axes, an eigenvector of
the secular matrix) has the tensor R_j = sum_k v_jk R_k and the intensity
I_j ~ |e_s . R_j . e_i|^2 for incident and scattered polarisations e_i, e_s.
Without a stated polarisation (an unpolarised measurement) the intensity is
summed over the two orthogonal in-plane directions (sample x and y) for both
e_i and e_s, i.e. backscattering along the sample normal. With the symmetric
3x3 *scattering matrix* W_kl = sum (e_s R_k e_i)(e_s R_l e_i) (crystal axes),
I_j = v_j . W . v_j, and the intensity-weighted mean shift of the modes is::

    d omega_obs = sum_j I_j d omega_j / sum_j I_j = tr(W K) / tr(W)

with K the secular matrix in cm^-1 (its eigenvalues are the shifts). This is
what a single-line fit of an unresolved doublet or triplet measures; it is
linear in the strain and independent of how the eigenvectors of a degenerate
set are chosen. Backscattering from (001): W = diag(0, 0, 2), only the z mode
(the LO phonon of zinc blende) is seen. From (110): the mode along [110] has
zero intensity for every in-plane polarisation; the two in-plane modes are
seen. From (111): all three are allowed.

Other lines
-----------
- Si-Si mode of Si(1-x)Ge(x) (:func:`sige_parameters`): omega0(x) = 520.5 - 62 x
  cm^-1 relaxed and a biaxial (001) strain coefficient b_SiSi (Tsang et al.
  1994; Pezzoli et al. 2008, from memory). The Si PDPs are scaled so that
  (001) biaxial strain gives b_SiSi with the alloy's own C11, C12: the PDP
  *ratios* of Si are an assumption, stated in the sources.
- GaN E2(high) (:class:`BiaxialLine`): a shift per GPa of biaxial basal-plane
  stress (Kisielowski et al. 1996, from memory). Applied to the mean of the two
  basal-plane stresses in crystal axes; no selection rules (the E2 line is
  allowed in backscattering along c).

Units: strain dimensionless, omega in cm^-1, stiffness GPa, stress MPa unless stated.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MesastrainError, OrientationError
from mesastrain.physics.crystal import rotate_tensor2, stress_to_voigt, voigt_to_strain
from mesastrain.physics.raman_data import (
    BiaxialLine,
    RamanParameters,
    biaxial_line,
    pdp_sets,
    raman_parameters,
    sige_parameters,
)

__all__ = [
    "DEGENERATE_TOL",
    "BiaxialLine",
    "RamanModes",
    "RamanParameters",
    "backscatter_shift",
    "biaxial_line",
    "observable_shift",
    "pdp_sets",
    "phonon_shifts",
    "raman_modes",
    "raman_parameters",
    "raman_tensors",
    "scattering_matrix",
    "sige_parameters",
    "stress_factor",
    "stress_from_shift",
]

_KINDS = ("uniaxial", "biaxial")

#: Modes whose shifts differ by less than this (cm^-1) are treated as one degenerate set
#: when shares are reported: far below the resolution of any Raman spectrometer (about
#: 0.1 cm^-1 with a line fit; common practice).
DEGENERATE_TOL = 1e-4

#: Breaks a tie that the scattering geometry leaves within a degenerate set (the in-plane
#: pair of a (001) film seen unpolarised): a small quadratic form in crystal axes, scaled
#: by :data:`TIE_WEIGHT` of the scattering matrix's trace, so that the pair's polarisations
#: are the crystal axes closest to it in this order, not whatever basis LAPACK returns
#: for a degenerate eigenspace (which moves with round-off from one run to the next). The
#: weights are unequal and not in a low-index ratio, so that the form itself has no tie on
#: a low-index plane (diag(1, 2, 3) has one on the planes normal to [101] and [10-1]).
_TIE_FORM = np.diag([1.0, 10.0, 100.0])
TIE_WEIGHT = 1e-9


def _as_strain(strain) -> np.ndarray:
    eps = np.asarray(strain, dtype=float)
    if eps.ndim < 2 or eps.shape[-2:] != (3, 3) or not np.all(np.isfinite(eps)):
        raise MesastrainError(f"strain must be finite with shape (..., 3, 3), got {eps.shape}")
    return 0.5 * (eps + np.swapaxes(eps, -1, -2))


def _secular(eps, p, q, r, omega0) -> np.ndarray:
    """Secular matrix in cm^-1 (its eigenvalues are the shifts)."""
    tr = np.trace(eps, axis1=-2, axis2=-1)
    diag = np.eye(3)
    k = (2.0 * r) * eps * (1.0 - diag)
    k = k + ((p - q) * eps + (q * tr)[..., None, None]) * diag
    return 0.5 * omega0 * k


def phonon_shifts(strain_crystal, p: float, q: float, r: float, omega0: float):
    """Shifts and polarisations of the three optical phonons under strain.

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Strain tensors in crystal cube axes (tensor shear).
    p, q, r : float
        Phonon deformation potentials in units of omega0^2.
    omega0 : float
        Unstrained frequency, cm^-1.

    Returns
    -------
    shifts : array (..., 3)
        d omega_j = lambda_j / (2 omega0), cm^-1, ascending.
    modes : array (..., 3, 3)
        ``modes[..., :, j]`` is the unit polarisation (crystal axes) of mode j.
    """
    return np.linalg.eigh(_secular(_as_strain(strain_crystal), p, q, r, omega0))


def raman_tensors() -> np.ndarray:
    """Raman tensors R_x, R_y, R_z of the diamond/zinc-blende optical phonons (d = 1).

    Loudon, Adv. Phys. 13, 423 (1964): (R_k)_ij = 1 when {i, j, k} = {x, y, z},
    else 0 (cube axes).

    Returns
    -------
    array (3, 3, 3)
        ``[k]`` is R_k.
    """
    return np.abs(np.array([[[float(np.sign((j - i) * (k - i) * (k - j))) for j in range(3)]
                             for i in range(3)] for k in range(3)]))


def _check_R(R) -> np.ndarray:
    R = np.eye(3) if R is None else np.asarray(R, dtype=float)
    if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9):
        raise OrientationError("R must be a 3x3 orthonormal matrix (rows = sample axes in "
                               "crystal coordinates)")
    return R


def _unit(v, what: str) -> np.ndarray:
    v = np.asarray(v, dtype=float).ravel()
    if v.size == 2:
        v = np.append(v, 0.0)
    n = np.linalg.norm(v) if v.size == 3 and np.all(np.isfinite(v)) else 0.0
    if n == 0.0:
        raise MesastrainError(f"{what} polarisation must be a non-zero vector [x, y] or "
                              f"[x, y, z] in the sample frame, got {v.tolist()}")
    return v / n


def scattering_matrix(R=None, incident=None, scattered=None) -> np.ndarray:
    """W_kl = sum over polarisations of (e_s R_k e_i)(e_s R_l e_i), crystal axes.

    Parameters
    ----------
    R : array (3, 3), optional
        Rows = sample axes in crystal coordinates (``Frame.R``); identity when
        omitted ((001) surface, x along [100]).
    incident, scattered : array (3,) or (2,), optional
        Polarisation directions in the sample frame (normalised here). Each
        one omitted is summed over sample x and y (no polariser / no
        analyser), i.e. backscattering along the sample normal.

    Returns
    -------
    array (3, 3)
        Symmetric, positive semi-definite; the intensity of a mode with unit
        polarisation v (crystal axes) is v . W . v (units of d^2).
    """
    R = _check_R(R)
    inc = [R.T @ _unit(incident, "incident")] if incident is not None else [R[0], R[1]]
    sca = [R.T @ _unit(scattered, "scattered")] if scattered is not None else [R[0], R[1]]
    T = raman_tensors()
    a = np.array([[np.einsum("i,kij,j->k", es, T, ei) for ei in inc] for es in sca])
    a = a.reshape(-1, 3)
    return a.T @ a


def observable_shift(strain_crystal, p: float, q: float, r: float, omega0: float, R=None,
                     incident=None, scattered=None) -> np.ndarray:
    """Intensity-weighted mean shift of the optical modes seen in a scattering geometry.

    d omega_obs = tr(W K) / tr(W), W from :func:`scattering_matrix`, K the
    secular matrix in cm^-1; equal to sum_j I_j d omega_j / sum_j I_j
    (Loudon 1964 selection rules). Linear in the strain.

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Strain in crystal axes (tensor shear).
    p, q, r : float
        PDPs in units of omega0^2.
    omega0 : float
        cm^-1.
    R : array (3, 3), optional
        Sample frame rows in crystal coordinates; identity when omitted.
    incident, scattered : array (3,), optional
        Sample-frame polarisations; unpolarised when omitted.

    Returns
    -------
    array (...)
        cm^-1 (negative = softening, as under tension); NaN when no optical
        mode is Raman-active in this geometry.
    """
    W = scattering_matrix(R, incident, scattered)
    tw = np.trace(W)
    K = _secular(_as_strain(strain_crystal), p, q, r, omega0)
    num = np.einsum("kl,...lk->...", W, K)
    if tw < 1e-12:
        return np.full(num.shape, np.nan)
    return num / tw


def backscatter_shift(strain_crystal, R, p: float, q: float, r: float, omega0: float,
                      incident=None, scattered=None) -> np.ndarray:
    """Raman shift seen in backscattering along the sample normal (cm^-1).

    :func:`observable_shift` with the frame given first (the historical
    signature). On (001) it is mode 3 of the secular equation,
    (omega0/2)[p e33 + q(e11 + e22)] when the shear strains vanish; on other
    surfaces it is the intensity-weighted mean of the modes allowed by the
    Raman tensors.

    Returns
    -------
    array (...)
        cm^-1.
    """
    return observable_shift(strain_crystal, p, q, r, omega0, _check_R(R), incident, scattered)


@dataclass(frozen=True)
class RamanModes:
    """Every optical mode in a scattering geometry.

    Attributes
    ----------
    shifts : ndarray (..., 3)
        cm^-1, ascending.
    polarisation : ndarray (..., 3, 3)
        ``[..., :, j]`` the unit polarisation of mode j, crystal axes. Inside a
        degenerate set (shifts within :data:`DEGENERATE_TOL`) the vectors are
        the ones that diagonalise the scattering matrix on that set, so the
        shares do not depend on the eigen-solver's choice.
    intensity : ndarray (..., 3)
        v_j . W . v_j, units of d^2.
    share : ndarray (..., 3)
        intensity / its sum (NaN where nothing is Raman-active).
    observable : ndarray (...)
        tr(W K) / tr(W), the intensity-weighted mean shift, cm^-1.
    """

    shifts: np.ndarray
    polarisation: np.ndarray
    intensity: np.ndarray
    share: np.ndarray
    observable: np.ndarray


def _sign_convention(V: np.ndarray, tol: float = 1e-6) -> np.ndarray:
    """Columns of V (..., 3, 3) with a fixed sign: the first component within ``tol`` of
    the largest magnitude is positive (an eigenvector's sign is arbitrary, and LAPACK's
    choice moves with round-off; this keeps the written polarisations the same from
    one run to the next)."""
    mag = np.abs(V)
    first = np.argmax(mag >= mag.max(axis=-2, keepdims=True) - tol, axis=-2)   # (..., 3)
    lead = np.take_along_axis(V, first[..., None, :], axis=-2)
    return V * np.where(lead < 0, -1.0, 1.0)


def raman_modes(strain_crystal, p: float, q: float, r: float, omega0: float, R=None,
                incident=None, scattered=None, degenerate_tol: float = DEGENERATE_TOL
                ) -> RamanModes:
    """Shift, polarisation and Raman intensity of each optical mode, vectorised.

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Strain in crystal axes.
    p, q, r : float
        PDPs in units of omega0^2.
    omega0 : float
        cm^-1.
    R : array (3, 3), optional
        Sample frame rows in crystal coordinates; identity when omitted.
    incident, scattered : array (3,), optional
        Sample-frame polarisations; unpolarised (in-plane x and y summed)
        when omitted.
    degenerate_tol : float
        cm^-1; modes closer than this form one degenerate set.

    Returns
    -------
    RamanModes
    """
    W = scattering_matrix(R, incident, scattered)
    K = _secular(_as_strain(strain_crystal), p, q, r, omega0)
    w, V = np.linalg.eigh(K)
    # clusters of (near-)degenerate modes: ids 0, 1, 2 ascending with the shift
    split = np.diff(w, axis=-1) > degenerate_tol
    ids = np.concatenate([np.zeros(w.shape[:-1] + (1,)), np.cumsum(split, axis=-1)], axis=-1)
    same = ids[..., :, None] == ids[..., None, :]
    Vt = np.swapaxes(V, -1, -2)
    A = (Vt @ (W + (TIE_WEIGHT * (np.trace(W) + 1.0)) * _TIE_FORM) @ V) * same
    # separate the clusters by offsets far above W's scale so eigh keeps them apart
    A = A + (10.0 * (np.trace(W) + 1.0)) * ids[..., :, None] * np.eye(3)
    _, U = np.linalg.eigh(A)
    V = _sign_convention(V @ U)
    shifts = np.sum(V * (K @ V), axis=-2)                   # diag(V^T K V)
    inten = np.sum(V * (W @ V), axis=-2)
    total = np.trace(W)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = inten / total if total > 1e-12 else np.full(inten.shape, np.nan)
        obs = (np.einsum("kl,...lk->...", W, K) / total if total > 1e-12
               else np.full(w.shape[:-1], np.nan))
    return RamanModes(shifts=shifts, polarisation=V, intensity=inten, share=share,
                      observable=obs)


def stress_factor(kind: str, params: RamanParameters, stiffness, R=None, incident=None,
                  scattered=None) -> float:
    """Stress per unit observable Raman shift, derived from PDPs and compliance.

    A unit stress of the given kind is applied in the sample frame, converted
    to strain in crystal axes with the compliance S = C^-1, and passed through
    :func:`observable_shift` (selection rules of Loudon 1964, backscattering
    along the normal unless polarisations are given); the result is linear, so
    the factor is exact within the model.

    Parameters
    ----------
    kind : {"uniaxial", "biaxial"}
        ``"uniaxial"``: sigma_xx only (along sample x); ``"biaxial"``:
        sigma_xx = sigma_yy (the factor is per component).
    params : RamanParameters
    stiffness : array (6, 6)
        Voigt stiffness in crystal axes, GPa.
    R : array (3, 3), optional
        Sample frame rows in crystal coordinates; identity ((001) surface, x
        along [100]) when omitted.
    incident, scattered : array (3,), optional
        Sample-frame polarisations; unpolarised when omitted.

    Returns
    -------
    float
        MPa per cm^-1 (negative: tensile stress lowers the frequency).

    Raises
    ------
    MesastrainError
        Unknown kind, bad stiffness, or a stress that does not shift the
        observed line (or no mode is Raman-active in the geometry).
    """
    if kind not in _KINDS:
        raise MesastrainError(f"kind must be one of {', '.join(_KINDS)}, got {kind!r}")
    c6 = np.asarray(stiffness, dtype=float)
    if c6.shape != (6, 6) or not np.all(np.isfinite(c6)):
        raise MesastrainError(f"stiffness must be a finite (6, 6) Voigt matrix in GPa, got "
                              f"shape {c6.shape}")
    R = _check_R(R)
    sigma = np.diag([1.0, 1.0 if kind == "biaxial" else 0.0, 0.0])   # GPa, sample frame
    sigma_c = rotate_tensor2(sigma, R.T)
    # S sigma gives Voigt strain with engineering shear; voigt_to_strain halves it.
    eps = voigt_to_strain(np.linalg.solve(c6, stress_to_voigt(sigma_c)))
    per_gpa = float(observable_shift(eps, params.p, params.q, params.r, params.omega0, R,
                                     incident, scattered))
    if not np.isfinite(per_gpa):
        raise MesastrainError("no optical phonon is Raman-active in this scattering geometry")
    if abs(per_gpa) < 1e-12:
        raise MesastrainError(f"a {kind} stress does not shift the observed Raman line here")
    return 1000.0 / per_gpa


def stress_from_shift(delta_omega, kind: str, params: RamanParameters, stiffness, R=None,
                      incident=None, scattered=None):
    """Stress from a measured Raman shift (observable line, see :func:`stress_factor`).

    Parameters
    ----------
    delta_omega : float or array
        Measured shift from the unstrained omega0, cm^-1.
    kind : {"uniaxial", "biaxial"}
        Assumed stress state.
    params : RamanParameters
    stiffness : array (6, 6)
        Voigt stiffness in crystal axes, GPa.
    R : array (3, 3), optional
        Sample frame; (001) with x along [100] when omitted.
    incident, scattered : array (3,), optional
        Sample-frame polarisations; unpolarised when omitted.

    Returns
    -------
    stress : float or array
        MPa (uniaxial: sigma_xx; biaxial: each of sigma_xx = sigma_yy).
    factor : float
        MPa per cm^-1 used for the conversion.
    """
    factor = stress_factor(kind, params, stiffness, R, incident, scattered)
    return factor * np.asarray(delta_omega, dtype=float), factor
