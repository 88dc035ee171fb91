"""Critical thickness of a strained layer: Matthews-Blakeslee and People-Bean.

Closed forms only (no mesh): the force balance of Matthews & Blakeslee,
J. Cryst. Growth 27, 118 (1974), in its single-layer (8 pi) and multilayer
(2 pi) forms, and the energy balance of People & Bean, Appl. Phys. Lett. 47,
322 (1985). Lengths in nm, misfit dimensionless.
"""

from __future__ import annotations

import numpy as np
from scipy.special import lambertw

from mesastrain.errors import MesastrainError
from mesastrain.physics.thinfilm import _array, _poisson, _positive

__all__ = ["matthews_blakeslee_thickness", "people_bean_thickness"]


_MB_DENOMINATOR = {"single": 8.0 * np.pi, "multilayer": 2.0 * np.pi}


def matthews_blakeslee_thickness(misfit, b, nu, alpha_deg=60.0, lambda_deg=60.0,
                                 form="single"):
    """Matthews-Blakeslee critical thickness from the force balance on a misfit dislocation.

    Solves h = A [ln(h/b) + 1] with

        A = b (1 - nu cos^2 alpha) / (k pi |f| (1 + nu) cos lambda),

    k = 8 for a single strained layer on a thick substrate and k = 2 for the
    multilayer form written by Matthews & Blakeslee, J. Cryst. Growth 27, 118
    (1974), where f is the full A/B mismatch and each layer carries f/2. The
    root above b is exact: with k_b = A/b,
    h_c = -A W_{-1}(-1 / (e k_b)), W_{-1} the lower branch of Lambert's W.

    Parameters
    ----------
    misfit : float or array
        Lattice misfit f (dimensionless); the sign is ignored.
    b : float
        Burgers vector length, nm (a/sqrt(2) = 0.384 nm for 60 deg
        dislocations in Si).
    nu : float
        Poisson ratio, in (-1, 0.5).
    alpha_deg : float, default: 60
        Angle between the Burgers vector and the dislocation line, degrees.
    lambda_deg : float, default: 60
        Angle between the Burgers vector and the in-plane direction normal to
        the line, degrees (must be below 90).
    form : {"single", "multilayer"}, default: "single"
        Which force balance: the 8 pi single layer on a thick substrate or
        the 2 pi multilayer form of the 1974 paper. Using "multilayer" for a
        single layer overestimates h_c about fivefold.

    Returns
    -------
    float or array
        h_c in nm. ``inf`` for zero misfit; ``nan`` where A < b, i.e. the
        misfit is so large that the model gives no coherent thickness above
        one Burgers vector.

    Raises
    ------
    MesastrainError
        Unknown form, b <= 0, nu outside (-1, 0.5), lambda_deg not in [0, 90).
    """
    if form not in _MB_DENOMINATOR:
        raise MesastrainError(f"form must be one of {tuple(_MB_DENOMINATOR)}, got {form!r}")
    b = _positive("b", b)
    nu = _poisson("nu", nu)
    alpha = np.radians(_array("alpha_deg", alpha_deg))
    lam = _array("lambda_deg", lambda_deg)
    if np.any((lam < 0) | (lam >= 90)):
        raise MesastrainError(f"lambda_deg must be in [0, 90) degrees, got {lambda_deg!r}")
    f = np.abs(_array("misfit", misfit))
    with np.errstate(divide="ignore"):
        A = b * (1.0 - nu * np.cos(alpha) ** 2) / (
            _MB_DENOMINATOR[form] * f * (1.0 + nu) * np.cos(np.radians(lam)))
    return _root_h_equals_A_log_plus_one(A, b)


def _root_h_equals_A_log_plus_one(A, b):
    """Largest root of h = A (ln(h/b) + 1): h = -A W_{-1}(-b/(e A)); nan if A < b."""
    A, b = np.broadcast_arrays(np.asarray(A, float), np.asarray(b, float))
    out = np.full(A.shape, np.nan)
    inf = np.isinf(A)
    ok = ~inf & (A >= b)
    out[inf] = np.inf
    arg = -b[ok] / (np.e * A[ok])
    out[ok] = -A[ok] * lambertw(np.maximum(arg, -1.0 / np.e), -1).real
    return out[()] if out.ndim == 0 else out


def people_bean_thickness(misfit, b, a, nu):
    """People-Bean critical thickness from their energy balance.

    Solves h = C ln(h/b) with

        C = [(1 - nu)/(1 + nu)] [1/(16 pi sqrt 2)] (b^2/a) / f^2

    (People & Bean, Appl. Phys. Lett. 47, 322, 1985), exactly:
    h_c = -C W_{-1}(-b/C). An empirically calibrated, metastable curve for
    low-temperature MBE of SiGe; not an equilibrium result. People & Bean
    took b = 0.4 nm and a = a_Si = 0.5431 nm.

    Parameters
    ----------
    misfit : float or array
        Lattice misfit f (dimensionless); the sign is ignored.
    b : float
        Burgers vector length, nm.
    a : float
        Lattice constant in the energy density, nm.
    nu : float
        Poisson ratio, in (-1, 0.5).

    Returns
    -------
    float or array
        h_c in nm; ``inf`` for zero misfit; ``nan`` where C < e b (no root).

    Raises
    ------
    MesastrainError
        b or a <= 0, nu outside (-1, 0.5).
    """
    b = _positive("b", b)
    a = _positive("a", a)
    nu = _poisson("nu", nu)
    f = np.abs(_array("misfit", misfit))
    with np.errstate(divide="ignore"):
        C = (1.0 - nu) / (1.0 + nu) / (16.0 * np.pi * np.sqrt(2.0)) * b**2 / a / f**2
    C, b = np.broadcast_arrays(np.asarray(C, float), np.asarray(b, float))
    out = np.full(C.shape, np.nan)
    inf = np.isinf(C)
    ok = ~inf & (C >= np.e * b)
    out[inf] = np.inf
    arg = np.maximum(-b[ok] / C[ok], -1.0 / np.e)
    out[ok] = -C[ok] * lambertw(arg, -1).real
    return out[()] if out.ndim == 0 else out
