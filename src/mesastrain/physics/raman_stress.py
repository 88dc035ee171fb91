"""The stress implied by a measured Raman shift (the ``raman-stress`` command's physics).

The everyday inverse of :mod:`mesastrain.physics.raman`: a micro-Raman tool reports the
shift of the Si (or Ge) optical-phonon line from its unstrained position; under
a stated assumption about the stress state that shift fixes the stress. The
factor comes from the phonon deformation potentials and the material's
compliance (:func:`mesastrain.physics.raman.stress_factor`) for backscattering from the
given surface, so it is exact within the model and follows the PDP set chosen.

Example (Si, (001) surface, default PDP set)::

    $ mesastrain raman-stress -1.5 --kind biaxial
    ...
    conversion factor  -216.9 MPa per cm^-1 (each in-plane component)  (...)
    implied stress     +325.3 MPa in each in-plane direction (tensile); ...
"""

from __future__ import annotations

import json

import numpy as np

from mesastrain.physics.crystal import format_indices, sample_frame
from mesastrain.errors import CaseError, MaterialError, OrientationError
from mesastrain.physics.materials import get_material
from mesastrain.physics.raman import pdp_sets, raman_parameters, stress_factor

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
    if len(vals) != 3 or not any(vals):
        raise CaseError(option, f"expected three integers, not all zero, e.g. 0,0,1, got "
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
                   along=None, pdp_set: str | None = None) -> dict:
    """Stress implied by a backscattering Raman shift, with the factor used.

    Parameters
    ----------
    shift : float
        Measured shift from the unstrained line, cm^-1 (negative = lower
        frequency).
    kind : {"uniaxial", "biaxial"}
        ``"uniaxial"``: a single stress along ``along``; ``"biaxial"``: equal
        stresses along every in-plane direction.
    material : str
        A material with phonon deformation potentials (Si, Ge).
    normal : sequence of int
        Surface plane (hkl) the laser enters through.
    along : sequence of int, optional
        In-plane crystal direction of the uniaxial stress (and sample x);
        default :func:`default_in_plane`.
    pdp_set : str, optional
        PDP set (default: the material's default set).

    Returns
    -------
    dict
        ``stress`` (MPa; per component for biaxial), ``factor`` (MPa per
        cm^-1), ``per_gpa`` (cm^-1 per GPa), and the inputs resolved
        (``normal``, ``along``, ``pdp_set``, ``omega0``, ``sources``,
        ``constants``).

    Raises
    ------
    CaseError
        Bad kind, material, orientation or set, naming the option.
    """
    if kind not in ("uniaxial", "biaxial"):
        raise CaseError("--kind", f"{kind!r} is not allowed; allowed: uniaxial, biaxial")
    try:
        params = raman_parameters(material, pdp_set)
    except MaterialError as err:
        raise CaseError("--pdp" if pdp_set is not None and "PDP" in str(err) else "--material",
                        str(err)) from None
    mat = get_material(material)
    along = tuple(along) if along is not None else default_in_plane(normal)
    try:
        frame = sample_frame(normal, along, mat.system)
    except OrientationError as err:
        raise CaseError("--along", str(err)) from None
    factor = stress_factor(kind, params, mat.stiffness, frame.R)
    return {"shift": float(shift), "kind": kind, "material": material,
            "normal": format_indices(normal, "()"), "along": format_indices(along),
            "pdp_set": params.pdp_set, "omega0": params.omega0,
            "p": params.p, "q": params.q, "r": params.r,
            "constants": dict(mat.constants),
            "factor": factor, "per_gpa": 1000.0 / factor, "stress": factor * float(shift),
            "sources": list(params.sources) + [s for s in mat.sources if "stiffness" in s]}


def raman_materials() -> list[str]:
    from mesastrain.physics.bands import device_parameters

    return list(device_parameters()["raman"])
