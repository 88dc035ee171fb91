"""Thermal expansion and thermal-mismatch eigenstrain.

A material's linear expansion coefficient alpha(T) is either the constant the
materials table gives (``Material.alpha``) or, where a published fit exists, the
temperature-dependent fit. The free thermal strain between two temperatures is
the integral of alpha dT; for a fit it is done in closed form.

Units
-----
alpha in 1e-6/K (ppm/K), the unit of ``Material.alpha``; temperatures in K;
strains dimensionless.

Fits available
--------------
``"Si"``: Okada & Tokumaru, J. Appl. Phys. 56, 314 (1984),
alpha(T) = 3.725 [1 - exp(-5.88e-3 (T - 124))] + 5.548e-4 T (ppm/K), 120-1500 K.

Choice of fit or constant (``fit=``)
------------------------------------
``"auto"`` (default)
    One material: use its fit if it has one. A layer/reference pair: use fits
    only when *both* have one, otherwise the room-temperature constants of both.
    Nearly every semiconductor's alpha rises above room temperature, so the
    difference of two room-temperature constants is a more even-handed estimate
    than a fitted alpha(T) minus a room-temperature constant. For Ge on Si
    cooled from 800 C the mixed choice gives about 0.16 % tensile strain,
    the paired constants about 0.26 %.
``"always"``
    Use every fit available, constants for the rest.
``"never"``
    Constants only.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError, MesastrainError

__all__ = [
    "ExpansionFit",
    "MELTING_POINT_K",
    "melting_point",
    "expansion_fit",
    "fitted_materials",
    "expansion_coefficient",
    "thermal_strain",
    "thermal_strain_tensor",
    "thermal_mismatch_strain",
]

log = logging.getLogger(__name__)

FIT_MODES = ("auto", "always", "never")
AXES = ("a", "c")


@dataclass(frozen=True)
class ExpansionFit:
    """A published temperature-dependent expansion coefficient.

    Attributes
    ----------
    material : str
        Material name as in the materials table.
    t_min, t_max : float
        Validity range of the fit, K.
    source : str
        Citation.
    alpha : callable
        T (K, array) -> alpha (ppm/K).
    integral : callable
        (T_from, T_to) (K, arrays) -> integral of alpha dT, dimensionless.
    """

    material: str
    t_min: float
    t_max: float
    source: str
    alpha: Callable[[np.ndarray], np.ndarray]
    integral: Callable[[np.ndarray, np.ndarray], np.ndarray]


# Okada & Tokumaru (1984) for Si, in ppm/K
_OT_A, _OT_K, _OT_T0, _OT_B = 3.725, 5.88e-3, 124.0, 5.548e-4


def _okada_alpha(T):
    T = np.asarray(T, dtype=float)
    return _OT_A * (1.0 - np.exp(-_OT_K * (T - _OT_T0))) + _OT_B * T


def _okada_integral(T1, T2):
    """Closed-form integral of the Okada-Tokumaru alpha from T1 to T2 (dimensionless).

    int alpha dT = A [dT + (exp(-k(T2 - T0)) - exp(-k(T1 - T0)))/k] + B (T2^2 - T1^2)/2,
    written with expm1 so that it stays accurate for small dT.
    """
    T1 = np.asarray(T1, dtype=float)
    T2 = np.asarray(T2, dtype=float)
    dT = T2 - T1
    exp_part = np.exp(-_OT_K * (T1 - _OT_T0)) * np.expm1(-_OT_K * dT) / _OT_K
    ppm_kelvin = _OT_A * (dT + exp_part) + _OT_B * dT * (T1 + T2) / 2.0
    return ppm_kelvin * 1e-6


_FITS = {
    "Si": ExpansionFit(
        material="Si", t_min=120.0, t_max=1500.0,
        source="Okada & Tokumaru, J. Appl. Phys. 56, 314 (1984)",
        alpha=_okada_alpha, integral=_okada_integral),
}


#: Melting points at atmospheric pressure, K, of the built-in compounds, used only as a sanity
#: bound on the case's temperatures (a crystal above its melting point has no elastic
#: constants). Recalled from memory of the CRC Handbook of Chemistry and Physics and
#: Madelung, Semiconductors: Data Handbook (2004); the nitrides, which decompose before they
#: melt at 1 atm, are given their melting points under nitrogen pressure (GaN: Utsumi et al.,
#: Nature Materials 2, 735 (2003), about 2500 K; AlN and InN recalled, rounded down).
MELTING_POINT_K = {
    "Si": 1687.0, "Ge": 1211.0, "GaAs": 1511.0, "AlAs": 2013.0, "InAs": 1215.0,
    "InP": 1335.0, "GaP": 1730.0, "GaN": 2500.0, "AlN": 3000.0, "InN": 1373.0,
}


def melting_point(material) -> float | None:
    """Melting point of a material, K: an alloy takes its lower member's (a safe bound).

    Parameters
    ----------
    material : Material
        As :func:`mesastrain.physics.materials.get_material` returns it.

    Returns
    -------
    float or None
        None for a material without a tabulated melting point.
    """
    names = tuple(material.members) or (material.name,)
    points = [MELTING_POINT_K.get(n) for n in names]
    if any(p is None for p in points):
        return None
    return min(points)


def fitted_materials() -> list[str]:
    """Names of the materials that have a temperature-dependent alpha fit.

    Returns
    -------
    list of str
    """
    return sorted(_FITS)


def expansion_fit(material_name: str) -> ExpansionFit | None:
    """The published alpha(T) fit of a material, or None if there is none.

    Parameters
    ----------
    material_name : str
        Name as in the materials table (``"Si"``).

    Returns
    -------
    ExpansionFit or None
    """
    return _FITS.get(material_name)


# --------------------------------------------------------------------------
# input checks
# --------------------------------------------------------------------------
def _check_mode(fit: str) -> None:
    if fit not in FIT_MODES:
        raise MesastrainError(f"fit must be one of {FIT_MODES}, got {fit!r}")


def _check_axis(axis: str) -> None:
    if axis not in AXES:
        raise MesastrainError(f"axis must be one of {AXES} (hexagonal a or c axis), got {axis!r}")


def _temperatures(name: str, T) -> np.ndarray:
    try:
        arr = np.asarray(T, dtype=float)
    except (TypeError, ValueError):
        raise MesastrainError(f"{name} must be a temperature in K, got {T!r}") from None
    if not np.all(np.isfinite(arr)) or np.any(arr <= 0):
        raise MesastrainError(f"{name} must be a finite absolute temperature > 0 K, got {T!r}")
    return arr


def _constant_alpha(material_name: str, alpha_const, axis: str) -> float | None:
    """Pick the constant alpha (ppm/K) for ``axis`` from a number or a Material.alpha tuple."""
    if alpha_const is None:
        return None
    if isinstance(alpha_const, str):
        raise MaterialError(f"{material_name}: alpha must be a number in 1e-6/K, got {alpha_const!r}")
    if isinstance(alpha_const, Sequence) or isinstance(alpha_const, np.ndarray):
        values = [float(v) for v in alpha_const]
        if len(values) == 1:
            value = values[0]
        elif len(values) == 2:
            value = values[AXES.index(axis)]
        else:
            raise MaterialError(
                f"{material_name}: alpha must be one number (cubic) or (alpha_a, alpha_c) "
                f"(hexagonal), got {alpha_const!r}")
    else:
        try:
            value = float(alpha_const)
        except (TypeError, ValueError):
            raise MaterialError(
                f"{material_name}: alpha must be a number in 1e-6/K, got {alpha_const!r}") from None
    if not np.isfinite(value):
        raise MaterialError(f"{material_name}: alpha must be finite, got {alpha_const!r}")
    return value


def _check_range(fit: ExpansionFit, *temps: np.ndarray) -> None:
    for T in temps:
        if np.any((T < fit.t_min) | (T > fit.t_max)):
            raise MaterialError(
                f"{fit.material}: the alpha(T) fit of {fit.source} holds for "
                f"{fit.t_min:g}-{fit.t_max:g} K, got T = {T.min():g}-{T.max():g} K; "
                f"pass fit='never' to use the constant alpha instead")


def _use_fit(material_name: str, alpha: float | None, fit: str) -> ExpansionFit | None:
    law = _FITS.get(material_name) if fit != "never" else None
    if law is None and alpha is None:
        why = "fit='never' was asked" if material_name in _FITS else "it has no alpha(T) fit"
        raise MaterialError(
            f"{material_name}: no constant alpha given and {why}; pass alpha in 1e-6/K")
    return law


# --------------------------------------------------------------------------
# public functions
# --------------------------------------------------------------------------
def expansion_coefficient(material_name: str, alpha_const, T, axis: str = "a",
                          fit: str = "auto"):
    """Linear thermal expansion coefficient at temperature T.

    Parameters
    ----------
    material_name : str
        Name as in the materials table; decides whether a fit exists.
    alpha_const : float, tuple or None
        Constant alpha in 1e-6/K: a number, or ``Material.alpha``
        ((alpha,) cubic, (alpha_a, alpha_c) hexagonal). May be None when a fit
        is used.
    T : float or array
        Temperature, K.
    axis : {"a", "c"}, default: "a"
        Hexagonal axis; ignored for a single cubic value.
    fit : {"auto", "always", "never"}, default: "auto"
        Use the published fit when one exists ("auto", "always") or not.

    Returns
    -------
    float or array
        alpha in 1e-6/K.

    Raises
    ------
    MaterialError
        No fit and no constant, a badly shaped alpha, or T outside the fit's range.
    """
    _check_mode(fit)
    _check_axis(axis)
    T = _temperatures("T", T)
    alpha = _constant_alpha(material_name, alpha_const, axis)
    law = _use_fit(material_name, alpha, fit)
    if law is not None:
        _check_range(law, T)
        return law.alpha(T)[()]
    return np.full(T.shape, alpha)[()]


def thermal_strain(material_name: str, alpha_const, T_from, T_to, axis: str = "a",
                   fit: str = "auto"):
    """Free thermal strain of a material between two temperatures.

    The integral of alpha(T) dT from T_from to T_to, i.e. the logarithmic
    strain ln(a(T_to)/a(T_from)); it equals the engineering strain
    (a(T_to) - a(T_from))/a(T_from) to within eps^2/2 (< 1e-5 here). With a
    fit the integral is done in closed form; with a constant it is
    alpha (T_to - T_from).

    Parameters
    ----------
    material_name : str
        Name as in the materials table (``"Si"`` has a fit).
    alpha_const : float, tuple or None
        Constant alpha in 1e-6/K (a number or ``Material.alpha``).
    T_from, T_to : float or array
        Temperatures, K. Negative result on cooling.
    axis : {"a", "c"}, default: "a"
        Hexagonal axis; ignored for a single cubic value.
    fit : {"auto", "always", "never"}, default: "auto"

    Returns
    -------
    float or array
        Dimensionless strain.

    Raises
    ------
    MaterialError
        No fit and no constant, a badly shaped alpha, or a temperature outside
        the fit's range.
    """
    _check_mode(fit)
    _check_axis(axis)
    T1 = _temperatures("T_from", T_from)
    T2 = _temperatures("T_to", T_to)
    alpha = _constant_alpha(material_name, alpha_const, axis)
    law = _use_fit(material_name, alpha, fit)
    if law is not None:
        _check_range(law, T1, T2)
        return law.integral(T1, T2)[()]
    return (alpha * 1e-6 * (T2 - T1))[()]


def thermal_strain_tensor(material_name: str, alpha_const, T_from: float, T_to: float,
                          system: str = "cubic", fit: str = "auto") -> np.ndarray:
    """Free thermal strain tensor of a crystal in its crystal axes.

    Parameters
    ----------
    material_name : str
        Name as in the materials table.
    alpha_const : float, tuple or None
        Constant alpha in 1e-6/K; (alpha_a, alpha_c) for hexagonal crystals.
    T_from, T_to : float
        Temperatures, K.
    system : {"cubic", "hexagonal"}, default: "cubic"
        Cubic: eps I. Hexagonal (c along crystal z): diag(eps_a, eps_a, eps_c).
    fit : {"auto", "always", "never"}, default: "auto"

    Returns
    -------
    array (3, 3)
        Dimensionless strain in crystal Cartesian axes; rotate it with
        ``Frame.to_sample``.
    """
    if system == "cubic":
        return thermal_strain(material_name, alpha_const, T_from, T_to, "a", fit) * np.eye(3)
    if system == "hexagonal":
        ea = thermal_strain(material_name, alpha_const, T_from, T_to, "a", fit)
        ec = thermal_strain(material_name, alpha_const, T_from, T_to, "c", fit)
        return np.diag([ea, ea, ec]).astype(float)
    raise MesastrainError(f"system must be 'cubic' or 'hexagonal', got {system!r}")


def _member(what: str, item) -> tuple[str, object]:
    """(name, alpha) from a number, a (name, alpha) pair or a Material-like object."""
    if hasattr(item, "name") and hasattr(item, "alpha"):
        return str(item.name), item.alpha
    if isinstance(item, tuple) and len(item) == 2 and isinstance(item[0], str):
        return item
    if isinstance(item, (int, float, np.floating, np.integer)):
        return f"<{what}>", float(item)
    raise MesastrainError(
        f"{what} must be an alpha in 1e-6/K, a (name, alpha) pair or a Material, got {item!r}")


def thermal_mismatch_strain(layer, reference, T_growth, T_final, axis: str = "a",
                            fit: str = "auto"):
    """Thermal eigenstrain of a layer relative to the reference (substrate) lattice.

    Sign convention: the result is the layer's **stress-free** in-plane strain
    relative to the reference lattice, gathered between T_growth (where the
    layer is taken as thermally unstrained relative to the reference) and
    T_final::

        eps0 = int_{T_growth}^{T_final} (alpha_layer - alpha_ref) dT.

    It enters the stress as sigma = C : (eps - eps0) when strain is measured
    from the reference lattice. On cooling, a layer that contracts *more* than
    the substrate (alpha_layer > alpha_ref, e.g. Ge or GaN on Si) gets
    eps0 < 0: it would like to be smaller than the substrate, so held
    coherent it is stretched, elastic in-plane strain -eps0 > 0 (tension). A
    layer that contracts *less* than the substrate (GaN on sapphire) gets
    eps0 > 0 and ends in compression. Lattice misfit in the same convention
    is (a_layer - a_ref)/a_ref, i.e. minus the eps_par of
    :func:`mesastrain.physics.thinfilm.in_plane_misfit` to first order.

    Parameters
    ----------
    layer, reference : float, (name, alpha) or Material
        A constant alpha in 1e-6/K; a pair such as ``("Si", 2.6)``; or any
        object with ``name`` and ``alpha`` attributes (``Material``). A
        number has no fit.
    T_growth, T_final : float or array
        Temperatures, K (e.g. growth or anneal 1073.15 K, room 293.15 K).
    axis : {"a", "c"}, default: "a"
        Axis of hexagonal members that lies in the interface (``"a"`` for
        c-plane growth); cubic members ignore it.
    fit : {"auto", "always", "never"}, default: "auto"
        "auto" uses alpha(T) fits only if both members have one, else the
        constants of both (see the module notes); "always" uses every fit
        available; "never" constants only.

    Returns
    -------
    float or array
        eps0, dimensionless.

    Raises
    ------
    MaterialError
        A member without a usable alpha, or a temperature outside a fit's range.
    """
    _check_mode(fit)
    _check_axis(axis)
    name_l, alpha_l = _member("layer", layer)
    name_r, alpha_r = _member("reference", reference)
    mode_l = mode_r = fit
    if fit == "auto":
        both = name_l in _FITS and name_r in _FITS
        mode_l = mode_r = "always" if both else "never"
        # a member with a fit but no constant keeps its fit
        for name, alpha, side in ((name_l, alpha_l, "l"), (name_r, alpha_r, "r")):
            if not both and name in _FITS and alpha is None:
                log.warning("%s has no constant alpha; using its alpha(T) fit against a constant", name)
                if side == "l":
                    mode_l = "always"
                else:
                    mode_r = "always"
    e_l = thermal_strain(name_l, alpha_l, T_growth, T_final, axis, mode_l)
    e_r = thermal_strain(name_r, alpha_r, T_growth, T_final, axis, mode_r)
    return e_l - e_r
