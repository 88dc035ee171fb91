"""Piezoresistance of cubic crystals (Smith 1954; Kanda 1982).

The relative resistivity change of a cubic crystal under stress is

    d rho_ij / rho = pi_ijkl sigma_kl,

with the fourth-rank piezoresistance tensor in cube axes built from the three
Voigt coefficients pi11, pi12, pi44 of Smith (1954):

    pi_1111 = pi11,   pi_1122 = pi12,   pi_2323 = pi_2332 = ... = pi44 / 2.

The half on the shear terms is the Voigt bookkeeping: in Voigt form
(d rho / rho)_4 = pi44 sigma_4 with sigma_4 = sigma_23, while the tensor sum
over k, l picks up both sigma_23 and sigma_32.

Units
-----
Coefficients are in the tabulated unit 1e-11 / Pa (= 1e-12 cm^2/dyn), stress in
MPa (as everywhere in mesastrain outputs); d rho / rho is dimensionless, so
d rho / rho = 1e-5 * pi[1e-11/Pa] * sigma[MPa].

Frames
------
``R`` has the sample axes as rows in crystal coordinates (``Frame.R`` of
``mesastrain.physics.crystal.sample_frame``); the tensor is rotated into the sample
frame as pi'_ijkl = R_ia R_jb R_kc R_ld pi_abcd.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError, MesastrainError, OrientationError
from mesastrain.physics.bands import device_parameters, parameter_entry
from mesastrain.physics.crystal import rotate_tensor4

__all__ = [
    "LINEAR_LIMIT_PERCENT",
    "LINEAR_LIMIT_REASON",
    "PI_UNIT_PER_MPA",
    "PiezoCoefficients",
    "longitudinal_transverse",
    "pi_longitudinal",
    "pi_transverse",
    "piezo_coefficients",
    "piezo_tensor",
    "resistivity_change",
]

#: d rho/rho per (coefficient in 1e-11/Pa) per (stress in MPa): 1e-11 * 1e6.
PI_UNIT_PER_MPA = 1e-5

#: |100 Δρ/ρ| (%) up to which the linear model is used as valid. The coefficients are
#: small-stress slopes (Smith, Phys. Rev. 94, 42, 1954, measured at tens of MPa); Kanda
#: (IEEE Trans. Electron Devices 29, 64, 1982) treats them as such; the response of Si becomes
#: visibly non-linear at a few hundred MPa. The 20 % bound itself is common practice.
LINEAR_LIMIT_PERCENT = 20.0
#: Why a larger change is not shown as a result (tables, summary.json).
LINEAR_LIMIT_REASON = ("beyond the small-stress range of the linear piezoresistance model "
                       "(|Δρ/ρ| up to about 20 %, common practice; Smith 1954 coefficients are "
                       "small-stress slopes): the real change is not given by this model")


@dataclass(frozen=True)
class PiezoCoefficients:
    """Smith's piezoresistance coefficients of one doping type.

    Attributes
    ----------
    kind : str
        Key in ``device_parameters.toml``, e.g. ``"n-Si"``.
    pi11, pi12, pi44 : float
        Coefficients, 1e-11 / Pa.
    description : str
        Doping and resistivity of the measured samples.
    sources : tuple of str
        Citation lines with confidence flags.
    """

    kind: str
    pi11: float
    pi12: float
    pi44: float
    description: str = ""
    sources: tuple = ()


def piezo_coefficients(kind: str) -> PiezoCoefficients:
    """Tabulated coefficients for ``"n-Si"`` or ``"p-Si"`` (Smith 1954).

    Parameters
    ----------
    kind : str
        Key of a ``[piezo.<kind>]`` table.

    Returns
    -------
    PiezoCoefficients
        In units of 1e-11 / Pa.

    Raises
    ------
    MaterialError
        Unknown kind.
    """
    table = device_parameters()["piezo"]
    if kind not in table:
        raise MaterialError(f"no piezoresistance data for {kind!r}; known: {', '.join(table)}")
    vals, cites = {}, []
    for key in ("pi11", "pi12", "pi44"):
        vals[key], line = parameter_entry(table[kind][key], f"piezo.{kind}.{key}")
        cites.append(line)
    return PiezoCoefficients(kind=kind, description=table[kind].get("description", ""),
                             sources=tuple(cites), **vals)


def piezo_tensor(pi11: float, pi12: float, pi44: float) -> np.ndarray:
    """Full piezoresistance tensor of a cubic crystal in cube axes.

    Parameters
    ----------
    pi11, pi12, pi44 : float
        Voigt coefficients (any unit; mesastrain uses 1e-11 / Pa).

    Returns
    -------
    array (3, 3, 3, 3)
        pi_iiii = pi11, pi_iijj = pi12 (i != j), pi_ijij = pi_ijji = pi44 / 2
        (i != j), all others zero; same unit as the input.
    """
    d = np.eye(3)
    iiii = np.einsum("ij,ik,il->ijkl", d, d, d)
    iijj = np.einsum("ij,kl->ijkl", d, d) - iiii
    shear = 0.5 * (np.einsum("ik,jl->ijkl", d, d) + np.einsum("il,jk->ijkl", d, d)) - iiii
    return pi11 * iiii + pi12 * iijj + pi44 * shear


def _tensor(pi) -> np.ndarray:
    if isinstance(pi, PiezoCoefficients):
        return piezo_tensor(pi.pi11, pi.pi12, pi.pi44)
    t = np.asarray(pi, dtype=float)
    if t.shape != (3, 3, 3, 3):
        raise MesastrainError(f"pi must be PiezoCoefficients or a (3, 3, 3, 3) tensor, got shape "
                              f"{t.shape}")
    return t


def _coefficients(pi) -> tuple[float, float, float]:
    if isinstance(pi, PiezoCoefficients):
        return pi.pi11, pi.pi12, pi.pi44
    try:
        pi11, pi12, pi44 = (float(v) for v in pi)
    except (TypeError, ValueError):
        raise MesastrainError("pi must be PiezoCoefficients or (pi11, pi12, pi44)") from None
    return pi11, pi12, pi44


def _rotation(R) -> np.ndarray:
    R = np.asarray(R, dtype=float)
    if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9):
        raise OrientationError("R must be a 3x3 orthonormal matrix (rows = sample axes in "
                               "crystal coordinates)")
    return R


def _stress(stress) -> np.ndarray:
    s = np.asarray(stress, dtype=float)
    if s.ndim < 2 or s.shape[-2:] != (3, 3):
        raise MesastrainError(f"stress must have shape (..., 3, 3), got {s.shape}")
    return s


def resistivity_change(stress_sample, R, pi) -> np.ndarray:
    """Relative resistivity change tensor in the sample frame.

    Parameters
    ----------
    stress_sample : array (..., 3, 3)
        Stress tensors in the sample frame, MPa (tension positive).
    R : array (3, 3)
        Rows = sample x, y, z in crystal coordinates.
    pi : PiezoCoefficients or array (3, 3, 3, 3)
        Coefficients or the crystal-axes tensor, in 1e-11 / Pa.

    Returns
    -------
    array (..., 3, 3)
        d rho_ij / rho (dimensionless) in the sample frame:
        1e-5 * pi'_ijkl sigma_kl with pi' rotated into the sample frame.
    """
    pi_s = rotate_tensor4(_tensor(pi), _rotation(R))
    return PI_UNIT_PER_MPA * np.einsum("ijkl,...kl->...ij", pi_s, _stress(stress_sample))


def longitudinal_transverse(direction_sample_xy, stress_sample, R, pi):
    """Resistivity change of in-plane channels along and across a direction.

    Parameters
    ----------
    direction_sample_xy : array (2,) or (3,)
        In-plane channel direction in sample coordinates (z component, if
        given, must be zero); need not be normalised.
    stress_sample : array (..., 3, 3)
        Stress in the sample frame, MPa.
    R : array (3, 3)
        Rows = sample axes in crystal coordinates.
    pi : PiezoCoefficients or array (3, 3, 3, 3)
        In 1e-11 / Pa.

    Returns
    -------
    dl : array (...)
        l.(d rho/rho).l: current and field along the channel direction l.
    dt : array (...)
        t.(d rho/rho).t for the in-plane perpendicular t = z x l (a channel
        rotated by +90 degrees about the wafer normal).
    """
    v = np.asarray(direction_sample_xy, dtype=float).ravel()
    if v.size == 2:
        v = np.append(v, 0.0)
    if v.size != 3 or not np.all(np.isfinite(v)) or np.hypot(v[0], v[1]) == 0.0:
        raise OrientationError("direction_sample_xy must be a non-zero in-plane vector (x, y) "
                               "or (x, y, 0) in sample coordinates")
    if abs(v[2]) > 1e-9 * np.linalg.norm(v):
        raise OrientationError("direction_sample_xy must lie in the wafer plane (z component 0)")
    l = v / np.linalg.norm(v)
    t = np.cross([0.0, 0.0, 1.0], l)
    drho = resistivity_change(stress_sample, R, pi)
    return (drho @ l) @ l, (drho @ t) @ t


def _unit(v, what: str) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    if v.shape[-1:] != (3,):
        raise OrientationError(f"{what} must have shape (..., 3), got {v.shape}")
    n = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(n == 0) or not np.all(np.isfinite(v)):
        raise OrientationError(f"{what} must be finite and non-zero")
    return v / n


def pi_longitudinal(l, pi) -> np.ndarray:
    """Longitudinal coefficient for current and stress along ``l`` (Smith 1954).

    pi_l = pi11 - 2 (pi11 - pi12 - pi44)(l1^2 m1^2 + m1^2 n1^2 + n1^2 l1^2),
    with (l1, m1, n1) the direction cosines of ``l`` in cube axes.

    Parameters
    ----------
    l : array (..., 3)
        Direction in crystal axes (need not be normalised).
    pi : PiezoCoefficients or (pi11, pi12, pi44)

    Returns
    -------
    array (...)
        pi_l in the unit of ``pi`` (1e-11 / Pa).
    """
    pi11, pi12, pi44 = _coefficients(pi)
    u = _unit(l, "l")
    s = (u[..., 0] * u[..., 1]) ** 2 + (u[..., 1] * u[..., 2]) ** 2 + (u[..., 2] * u[..., 0]) ** 2
    return pi11 - 2.0 * (pi11 - pi12 - pi44) * s


def pi_transverse(l, t, pi) -> np.ndarray:
    """Transverse coefficient: current along ``l``, stress along ``t`` (Smith 1954).

    pi_t = pi12 + (pi11 - pi12 - pi44)(l1^2 l2^2 + m1^2 m2^2 + n1^2 n2^2).

    Parameters
    ----------
    l, t : array (..., 3)
        Perpendicular directions in crystal axes (need not be normalised).
    pi : PiezoCoefficients or (pi11, pi12, pi44)

    Returns
    -------
    array (...)
        pi_t in the unit of ``pi`` (1e-11 / Pa).

    Raises
    ------
    OrientationError
        ``l`` and ``t`` are not perpendicular.
    """
    pi11, pi12, pi44 = _coefficients(pi)
    a, b = _unit(l, "l"), _unit(t, "t")
    if np.any(np.abs(np.sum(a * b, axis=-1)) > 1e-9):
        raise OrientationError("l and t must be perpendicular for the transverse coefficient")
    return pi12 + (pi11 - pi12 - pi44) * np.sum((a * b) ** 2, axis=-1)
