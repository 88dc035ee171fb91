"""``mesastrain raman-stress SHIFT``: the stress implied by a measured Raman shift.

The physics is :func:`mesastrain.physics.raman_stress.implied_stress`; this module
only parses the command line and prints the answer.
"""

from __future__ import annotations

import json
import math

from mesastrain.errors import CaseError
from mesastrain.physics.raman import pdp_sets
from mesastrain.physics.raman_stress import implied_stress, parse_indices, raman_materials


def _sign_word(v: float) -> str:
    return "tensile" if v > 0 else ("compressive" if v < 0 else "no stress")


#: Largest measured shift accepted, cm^-1. The strain-induced shifts of the lines in the
#: tables are about 2 to 4 cm^-1 per GPa (Si: about -2 cm^-1 per GPa of biaxial stress,
#: Anastassakis et al., Phys. Rev. B 41, 7529 (1990)); 100 cm^-1 would mean tens of GPa,
#: beyond the strength of any of these crystals and beyond linear response.
MAX_SHIFT = 100.0


def _shift(value: float) -> float:
    if not math.isfinite(value) or abs(value) > MAX_SHIFT:
        raise CaseError("shift", f"{value!r} cm^-1 is not a usable Raman shift; give a finite "
                                 f"shift from -{MAX_SHIFT:g} to {MAX_SHIFT:g} cm^-1 (strain "
                                 f"shifts are a few cm^-1 per GPa)")
    return value


def _fraction(value):
    if value is not None and not 0.0 <= value <= 1.0:       # also refuses NaN
        raise CaseError("--x", f"{value!r} is not an alloy fraction; give a number from 0 to 1")
    return value


def _vector(text, option):
    if text is None:
        return None
    try:
        v = [float(x) for x in text.replace(" ", "").split(",")]
    except ValueError:
        raise CaseError(option, f"expected numbers x,y in the sample frame, got {text!r}") from None
    norm = math.hypot(*v) if v and all(math.isfinite(x) for x in v) else math.nan
    if len(v) not in (2, 3) or not 1e-150 <= norm <= 1e150:
        raise CaseError(option, f"expected a direction x,y (finite numbers, not all zero, of "
                                f"length 1e-150 to 1e150) in the sample frame, got {text!r}")
    return v


def _run(args) -> int:
    _shift(args.shift)
    _fraction(args.x)
    d = implied_stress(args.shift, args.kind, args.material, parse_indices(args.normal, "--normal"),
                       None if args.along is None else parse_indices(args.along, "--along"),
                       args.pdp, args.x, _vector(args.incident, "--incident"),
                       _vector(args.scattered, "--scattered"))
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
    print(f"geometry           {d['geometry']}")
    print(f"assumption         {assumption}")
    if d["pdp_set"] is not None:
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
                   help="material of the line: " + ", ".join(raman_materials())
                        + " (default Si)")
    p.add_argument("--normal", default="0,0,1", metavar="H,K,L",
                   help="surface plane the laser enters through (default 0,0,1)")
    p.add_argument("--along", metavar="U,V,W",
                   help="in-plane direction of a uniaxial stress (default: [100] on (001), "
                        "[1-10] on (111), [001] on (110))")
    p.add_argument("--pdp", metavar="SET",
                   help="phonon-deformation-potential set (Si: " + ", ".join(pdp_sets("Si"))
                        + "; default the first)")
    p.add_argument("--x", type=float, help="Ge fraction (SiGe: the Si-Si line; the shift is "
                                           "from the relaxed alloy's line)")
    p.add_argument("--incident", metavar="X,Y",
                   help="incident polarisation in the sample frame (x along --along); "
                        "default unpolarised")
    p.add_argument("--scattered", metavar="X,Y",
                   help="scattered (analyser) polarisation in the sample frame; default none")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=_run)
