"""Strain shift of the zone-centre optical phonon (Raman) of diamond-type crystals.

Secular equation (Ganesan, Maradudin & Oitmaa 1970; Anastassakis et al. 1970)
for the three optical modes under a strain eps (crystal cube axes)::

    | p e11 + q(e22 + e33) - L   2 r e12                    2 r e13                 |
    | 2 r e12                    p e22 + q(e11 + e33) - L   2 r e23                 | = 0
    | 2 r e13                    2 r e23                    p e33 + q(e11 + e22) - L|

with the phonon deformation potentials (PDPs) p, q, r in units of omega0^2 and
tensor shear strain. The mode frequencies are omega_j^2 = omega0^2 + L_j, so for
small strain the shifts are d omega_j = L_j / (2 omega0) = (omega0 / 2) L~_j
where L~ are the eigenvalues of the matrix above with p, q, r in omega0^2.

The mode eigenvectors are the atomic displacement directions. In backscattering
from a surface with normal n, the mode seen with the usual polarisation is the
one polarised (nearly) along n; for (001) it is mode 3 with
d omega_3 = (omega0/2)[p e33 + q(e11 + e22)].

Units: strain dimensionless, omega in cm^-1, stiffness GPa, stress MPa.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.physics.bands import device_parameters, parameter_entry
from mesastrain.physics.crystal import rotate_tensor2, stress_to_voigt, voigt_to_strain
from mesastrain.errors import MaterialError, MesastrainError, OrientationError

__all__ = [
    "RamanParameters",
    "backscatter_shift",
    "pdp_sets",
    "phonon_shifts",
    "raman_parameters",
    "stress_factor",
    "stress_from_shift",
]

_KINDS = ("uniaxial", "biaxial")


@dataclass(frozen=True)
class RamanParameters:
    """Optical-phonon frequency and phonon deformation potentials.

    Attributes
    ----------
    material : str
    pdp_set : str
        Key of the PDP set in ``device_parameters.toml``.
    p, q, r : float
        PDPs in units of omega0^2.
    omega0 : float
        Unstrained phonon frequency, cm^-1.
    sources : tuple of str
        Citation lines with confidence flags.
    """

    material: str
    pdp_set: str
    p: float
    q: float
    r: float
    omega0: float
    sources: tuple = ()


def pdp_sets(material: str = "Si") -> list[str]:
    """Names of the tabulated PDP sets of a material, the default first.

    Parameters
    ----------
    material : str
        ``"Si"`` or ``"Ge"``.

    Returns
    -------
    list of str

    Raises
    ------
    MaterialError
        No Raman data for the material.
    """
    table = device_parameters()["raman"]
    if material not in table:
        raise MaterialError(f"no Raman data for {material!r}; known: {', '.join(table)}")
    default = table[material]["default"]
    return [default] + [k for k in table[material]["pdp"] if k != default]


def raman_parameters(material: str = "Si", pdp_set: str | None = None) -> RamanParameters:
    """Tabulated omega0 and PDPs of a material.

    Parameters
    ----------
    material : str
        ``"Si"`` or ``"Ge"``.
    pdp_set : str, optional
        One of :func:`pdp_sets`; the default set (Si: Anastassakis, Cantarero
        & Cardona 1990; Ge: Cerdeira et al. 1972) when omitted.

    Returns
    -------
    RamanParameters

    Raises
    ------
    MaterialError
        Unknown material or PDP set.
    """
    names = pdp_sets(material)
    table = device_parameters()["raman"][material]
    key = names[0] if pdp_set is None else pdp_set
    if key not in names:
        raise MaterialError(f"no PDP set {pdp_set!r} for {material}; known: {', '.join(names)}")
    omega0, cite0 = parameter_entry(table["omega0"], f"raman.{material}.omega0")
    vals, cites = {}, [cite0]
    for k in ("p", "q", "r"):
        vals[k], line = parameter_entry(table["pdp"][key][k], f"raman.{material}.pdp.{key}.{k}")
        cites.append(line)
    return RamanParameters(material=material, pdp_set=key, omega0=omega0,
                           sources=tuple(cites), **vals)


def _as_strain(strain) -> np.ndarray:
    eps = np.asarray(strain, dtype=float)
    if eps.ndim < 2 or eps.shape[-2:] != (3, 3) or not np.all(np.isfinite(eps)):
        raise MesastrainError(f"strain must be finite with shape (..., 3, 3), got {eps.shape}")
    return 0.5 * (eps + np.swapaxes(eps, -1, -2))


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
    eps = _as_strain(strain_crystal)
    tr = np.trace(eps, axis1=-2, axis2=-1)
    diag = np.eye(3)
    k = (2.0 * r) * eps * (1.0 - diag)
    k = k + ((p - q) * eps + (q * tr)[..., None, None]) * diag
    lam, vec = np.linalg.eigh(k)
    return 0.5 * omega0 * lam, vec


def backscatter_shift(strain_crystal, R, p: float, q: float, r: float,
                      omega0: float) -> np.ndarray:
    """Raman shift seen in backscattering from the wafer surface (cm^-1).

    The mode whose polarisation is closest to the sample normal (row 3 of
    ``R``) is taken; for a (001) surface this is mode 3 of the secular
    equation, d omega_3 = (omega0/2)[p e33 + q(e11 + e22)] when the shear
    strains vanish.

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Strain in crystal axes.
    R : array (3, 3)
        Rows = sample axes in crystal coordinates (``Frame.R``).
    p, q, r : float
        PDPs in units of omega0^2.
    omega0 : float
        cm^-1.

    Returns
    -------
    array (...)
        Shift in cm^-1 (negative = softening, as under tension).
    """
    R = np.asarray(R, dtype=float)
    if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9):
        raise OrientationError("R must be a 3x3 orthonormal matrix (rows = sample axes in "
                               "crystal coordinates)")
    shifts, modes = phonon_shifts(strain_crystal, p, q, r, omega0)
    overlap = np.abs(np.einsum("i,...ij->...j", R[2], modes))
    pick = np.argmax(overlap, axis=-1)
    return np.take_along_axis(shifts, pick[..., None], axis=-1)[..., 0]


def stress_factor(kind: str, params: RamanParameters, stiffness, R=None) -> float:
    """Stress per unit Raman shift in backscattering, derived from PDPs and compliance.

    A unit stress of the given kind is applied in the sample frame, converted
    to strain in crystal axes with the compliance S = C^-1, and passed through
    :func:`backscatter_shift`; the result is linear, so the factor is exact.

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

    Returns
    -------
    float
        MPa per cm^-1 (negative: tensile stress lowers the frequency).

    Raises
    ------
    MesastrainError
        Unknown kind, bad stiffness, or a stress that does not shift the
        backscattered mode.
    """
    if kind not in _KINDS:
        raise MesastrainError(f"kind must be one of {', '.join(_KINDS)}, got {kind!r}")
    c6 = np.asarray(stiffness, dtype=float)
    if c6.shape != (6, 6) or not np.all(np.isfinite(c6)):
        raise MesastrainError(f"stiffness must be a finite (6, 6) Voigt matrix in GPa, got "
                              f"shape {c6.shape}")
    R = np.eye(3) if R is None else np.asarray(R, dtype=float)
    sigma = np.diag([1.0, 1.0 if kind == "biaxial" else 0.0, 0.0])   # GPa, sample frame
    sigma_c = rotate_tensor2(sigma, R.T)
    # S sigma gives Voigt strain with engineering shear; voigt_to_strain halves it.
    eps = voigt_to_strain(np.linalg.solve(c6, stress_to_voigt(sigma_c)))
    per_gpa = float(backscatter_shift(eps, R, params.p, params.q, params.r, params.omega0))
    if abs(per_gpa) < 1e-12:
        raise MesastrainError(f"a {kind} stress does not shift the backscattered mode here")
    return 1000.0 / per_gpa


def stress_from_shift(delta_omega, kind: str, params: RamanParameters, stiffness, R=None):
    """Stress from a measured backscattering Raman shift.

    Parameters
    ----------
    delta_omega : float or array
        Measured shift from the unstrained omega0, cm^-1.
    kind : {"uniaxial", "biaxial"}
        Assumed stress state (see :func:`stress_factor`).
    params : RamanParameters
    stiffness : array (6, 6)
        Voigt stiffness in crystal axes, GPa.
    R : array (3, 3), optional
        Sample frame; (001) with x along [100] when omitted.

    Returns
    -------
    stress : float or array
        MPa (uniaxial: sigma_xx; biaxial: each of sigma_xx = sigma_yy).
    factor : float
        MPa per cm^-1 used for the conversion.
    """
    factor = stress_factor(kind, params, stiffness, R)
    return factor * np.asarray(delta_omega, dtype=float), factor
