"""``mesastrain raman-stress SHIFT``: the stress implied by a measured Raman shift.

The everyday inverse of :mod:`mesastrain.raman`: a micro-Raman tool reports the
shift of the Si (or Ge) optical-phonon line from its unstrained position; under
a stated assumption about the stress state that shift fixes the stress. The
factor comes from the phonon deformation potentials and the material's
compliance (:func:`mesastrain.raman.stress_factor`) for backscattering from the
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

from .crystal import format_indices, sample_frame
from .errors import CaseError, MaterialError, OrientationError
from .materials import get_material
from .raman import pdp_sets, raman_parameters, stress_factor

__all__ = ["add_command", "default_in_plane", "implied_stress"]

#: Candidate in-plane directions, tried in this order when ``--along`` is not given.
_CANDIDATES = ((1, 0, 0), (0, 1, 0), (0, 0, 1), (1, -1, 0), (1, 0, -1), (0, 1, -1),
               (1, 1, 0), (1, 0, 1), (0, 1, 1), (1, 1, -2), (1, -2, 1), (-2, 1, 1),
               (1, 1, -1), (1, -1, 1), (-1, 1, 1), (1, 1, 1))


def _indices(text: str, option: str) -> tuple:
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


def _sign_word(v: float) -> str:
    return "tensile" if v > 0 else ("compressive" if v < 0 else "no stress")


def _run(args) -> int:
    d = implied_stress(args.shift, args.kind, args.material, _indices(args.normal, "--normal"),
                       None if args.along is None else _indices(args.along, "--along"),
                       args.pdp)
    if args.json:
        print(json.dumps(d))
        return 0
    c = d["constants"]
    consts = ", ".join(f"{k} = {v:g}" for k, v in c.items())
    s, f = d["stress"], d["factor"]
    if d["kind"] == "uniaxial":
        assumption = (f"uniaxial stress along {d['along']} (in the surface); every other "
                      f"stress component zero")
        per = ""
        result = f"{s:+.1f} MPa along {d['along']} ({_sign_word(s)})"
    else:
        assumption = ("equi-biaxial in-plane stress (equal in every in-plane direction), "
                      "no stress along the normal")
        per = " (each in-plane component)"
        result = (f"{s:+.1f} MPa in each in-plane direction ({_sign_word(s)}); "
                  f"sum of the two {2 * s:+.1f} MPa")
    print(f"measured shift     {d['shift']:+.3f} cm^-1 from omega0 = {d['omega0']:g} cm^-1 "
          f"({d['material']})")
    print(f"geometry           backscattering from the {d['normal']} surface; the phonon "
          f"polarised closest to the normal is the one read")
    print(f"assumption         {assumption}")
    print(f"PDPs               set {d['pdp_set']}: p = {d['p']:g}, q = {d['q']:g}, "
          f"r = {d['r']:g} (omega0^2 units)")
    print(f"stiffness          {d['material']} {consts} GPa")
    print(f"conversion factor  {f:.1f} MPa per cm^-1{per}  "
          f"(1 GPa{' in each' if per else ''} shifts the line by {d['per_gpa']:+.3f} cm^-1)")
    print(f"implied stress     {result}")
    print("sources            " + "\n                   ".join(d["sources"]))
    print("Linear estimate under the stated assumption; another stress state gives another "
          "answer for the same shift.")
    return 0


def add_command(subparsers) -> None:
    """Add ``raman-stress`` to the ``mesastrain`` command line."""
    p = subparsers.add_parser(
        "raman-stress", help="stress implied by a measured Raman shift (uniaxial or biaxial)",
        description="Stress implied by a backscattering Raman shift, with the conversion "
                    "factor from the phonon deformation potentials, e.g. "
                    "mesastrain raman-stress -1.2 --kind biaxial")
    p.add_argument("shift", type=float, help="measured shift from the unstrained line, cm^-1")
    p.add_argument("--kind", required=True, choices=("uniaxial", "biaxial"),
                   help="assumed stress state")
    p.add_argument("--material", default="Si",
                   help="material of the line: " + ", ".join(_raman_materials())
                        + " (default Si)")
    p.add_argument("--normal", default="0,0,1", metavar="H,K,L",
                   help="surface plane the laser enters through (default 0,0,1)")
    p.add_argument("--along", metavar="U,V,W",
                   help="in-plane direction of a uniaxial stress (default: [100] on (001), "
                        "[1-10] on (111), [001] on (110))")
    p.add_argument("--pdp", metavar="SET",
                   help="phonon-deformation-potential set (Si: " + ", ".join(pdp_sets("Si"))
                        + "; default the first)")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=_run)


def _raman_materials() -> list[str]:
    from .bands import device_parameters

    return list(device_parameters()["raman"])
