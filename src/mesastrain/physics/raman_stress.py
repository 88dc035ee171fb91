"""The stress implied by a measured Raman shift (the ``raman-stress`` command's physics).

The everyday inverse of :mod:`mesastrain.physics.raman`: a micro-Raman tool reports the
shift of the Si (or Ge) optical-phonon line from its unstrained position; under
a stated assumption about the stress state that shift fixes the stress. The
factor comes from the phonon deformation potentials and the material's
compliance (:func:`mesastrain.physics.raman.stress_factor`) for backscattering from the
given surface, so it is exact within the model and follows the PDP set chosen.

The line read is the observable one: the intensity-weighted mean of the optical
modes allowed by the Raman tensors (Loudon 1964) in backscattering along the
surface normal, unpolarised unless incident/scattered polarisations are given.
On (001) this is the single z-polarised mode; on (110) and (111) it mixes the
allowed modes (:func:`mesastrain.physics.raman.observable_shift`).

Besides Si and Ge: the Si-Si line of SiGe (needs the Ge fraction ``x``; the
shift is from the relaxed-alloy line) and the GaN E2(high) line (biaxial
c-plane stress only, a single published coefficient).

Example (Si, (001) surface, default PDP set)::

    $ mesastrain raman-stress -1.5 --kind biaxial
    ...
    conversion factor  -216.9 MPa per cm^-1 (each in-plane component)  (...)
    implied stress     +325.3 MPa in each in-plane direction (tensile); ...
"""

from __future__ import annotations

import numpy as np

from mesastrain.errors import CaseError, MaterialError, MesastrainError, OrientationError
from mesastrain.physics.bands import device_parameters
from mesastrain.physics.crystal import format_indices, sample_frame
from mesastrain.physics.materials import get_material
from mesastrain.physics.raman import biaxial_line, raman_parameters, stress_factor

__all__ = ["default_in_plane", "implied_stress", "parse_indices", "raman_materials"]

#: Candidate in-plane directions, tried in this order when ``--along`` is not given.
_CANDIDATES = ((1, 0, 0), (0, 1, 0), (0, 0, 1), (1, -1, 0), (1, 0, -1), (0, 1, -1),
               (1, 1, 0), (1, 0, 1), (0, 1, 1), (1, 1, -2), (1, -2, 1), (-2, 1, 1),
               (1, 1, -1), (1, -1, 1), (-1, 1, 1), (1, 1, 1))


def parse_indices(text: str, option: str) -> tuple:
    try:
        vals = tuple(int(v) for v in text.replace(" ", "").split(","))
    except ValueError:
        raise CaseError(option, f"expected three integers separated by commas, e.g. 0,0,1, got "
                                f"{text!r}") from None
    if len(vals) != 3 or not any(vals) or max(abs(v) for v in vals) > 999:
        raise CaseError(option, f"expected three integers from -999 to 999 (the bound of "
                                f"case-file Miller indices), not all zero, e.g. 0,0,1, got "
                                f"{text!r}")
    return vals


def default_in_plane(normal) -> tuple:
    """A short crystal direction in the plane ``normal`` (first of a fixed list).

    Raises
    ------
    CaseError
        None of the candidates lies in the plane (then ``--along`` is needed).
    """
    n = np.asarray(normal, dtype=float)
    for c in _CANDIDATES:
        if abs(np.dot(c, n)) < 1e-12:
            return c
    raise CaseError("--along", f"give the in-plane stress direction for the surface "
                               f"{format_indices(normal, '()')}")


def implied_stress(shift: float, kind: str, material: str = "Si", normal=(0, 0, 1),
                   along=None, pdp_set: str | None = None, x: float | None = None,
                   incident=None, scattered=None) -> dict:
    """Stress implied by a backscattering Raman shift, with the factor used.

    Parameters
    ----------
    shift : float
        Measured shift from the unstrained line, cm^-1 (negative = lower
        frequency). For SiGe: from the relaxed alloy's Si-Si line omega0(x).
    kind : {"uniaxial", "biaxial"}
        ``"uniaxial"``: a single stress along ``along``; ``"biaxial"``: equal
        stresses along every in-plane direction.
    material : str
        Si, Ge, SiGe (Si-Si line; needs ``x``) or GaN (E2(high); biaxial on
        the c-plane only).
    normal : sequence of int
        Surface plane (hkl) the laser enters through.
    along : sequence of int, optional
        In-plane crystal direction of the uniaxial stress (and sample x);
        default :func:`default_in_plane`.
    pdp_set : str, optional
        PDP set (default: the material's default set; SiGe: the Si set whose
        ratios are scaled).
    x : float, optional
        Ge fraction of SiGe.
    incident, scattered : sequence of float, optional
        Polarisations in the sample frame ([x, y] or [x, y, z]; x along
        ``along``); unpolarised when omitted.

    Returns
    -------
    dict
        ``stress`` (MPa; per component for biaxial), ``factor`` (MPa per
        cm^-1), ``per_gpa`` (cm^-1 per GPa), ``geometry`` (what is read) and
        the inputs resolved (``normal``, ``along``, ``pdp_set``, ``omega0``,
        ``sources``, ``constants``).

    Raises
    ------
    CaseError
        Bad kind, material, orientation or set, naming the option.
    """
    if kind not in ("uniaxial", "biaxial"):
        raise CaseError("--kind", f"{kind!r} is not allowed; allowed: uniaxial, biaxial")
    if material in _BIAXIAL_LINES:
        return _biaxial_line_stress(shift, kind, material, normal)
    try:
        params = raman_parameters(material, pdp_set, x)
    except MaterialError as err:
        opt = ("--x" if material == "SiGe" and "fraction" in str(err) else
               "--pdp" if pdp_set is not None and "PDP" in str(err) else "--material")
        raise CaseError(opt, str(err)) from None
    mat = get_material(material, x) if material == "SiGe" else get_material(material)
    along = tuple(along) if along is not None else default_in_plane(normal)
    try:
        frame = sample_frame(normal, along, mat.system)
    except OrientationError as err:
        raise CaseError("--along", str(err)) from None
    try:
        factor = stress_factor(kind, params, mat.stiffness, frame.R, incident, scattered)
    except MesastrainError as err:
        raise CaseError("--incident/--scattered", str(err)) from None
    pol = ("unpolarised (in-plane x and y summed for incident and scattered light)"
           if incident is None and scattered is None else
           f"incident {_vec(incident)}, scattered {_vec(scattered)} (sample frame, x along "
           f"{format_indices(along)})")
    return {"shift": float(shift), "kind": kind, "material": mat.label,
            "normal": format_indices(normal, "()"), "along": format_indices(along),
            "pdp_set": params.pdp_set, "omega0": params.omega0,
            "p": params.p, "q": params.q, "r": params.r,
            "constants": dict(mat.constants),
            "geometry": (f"backscattering along the {format_indices(normal, '()')} normal, "
                         f"{pol}; the intensity-weighted mean of the Raman-allowed optical "
                         f"modes is read"),
            "factor": factor, "per_gpa": 1000.0 / factor, "stress": factor * float(shift),
            "sources": list(params.sources) + [s for s in mat.sources if "stiffness" in s]}


#: Lines with a single biaxial coefficient (no PDPs, no selection rules).
_BIAXIAL_LINES = ("GaN",)


def _vec(v) -> str:
    return "unpolarised" if v is None else "[" + ", ".join(f"{float(c):g}" for c in v) + "]"


def _biaxial_line_stress(shift: float, kind: str, material: str, normal) -> dict:
    if kind != "biaxial":
        raise CaseError("--kind", f"the {material} line has a biaxial coefficient only; use "
                                  f"--kind biaxial")
    n = np.asarray(normal, dtype=float)
    if n.size != 3 or np.any(n[:2] != 0) or n[2] == 0:
        raise CaseError("--normal", f"the {material} coefficient is for c-plane stress; use "
                                    f"--normal 0,0,1 (the (0001) surface)")
    line = biaxial_line(material)
    factor = 1000.0 / line.per_gpa
    return {"shift": float(shift), "kind": kind, "material": material, "normal": "(0001)",
            "along": None, "pdp_set": None, "omega0": line.omega0, "mode": line.mode,
            "geometry": f"{line.mode} line, backscattering along c",
            "constants": {}, "factor": factor, "per_gpa": line.per_gpa,
            "stress": factor * float(shift), "sources": list(line.sources)}


def raman_materials() -> list[str]:
    """Materials ``implied_stress`` accepts: PDP materials, SiGe (Si-Si) and biaxial lines."""
    d = device_parameters()
    return list(d["raman"]) + list(d.get("raman_alloy", {})) + list(d.get("raman_biaxial", {}))
