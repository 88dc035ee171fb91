"""Elastic energy per unit area of each layer and the critical thickness of pseudomorphic layers.

Critical thickness: Matthews and Blakeslee (single layer on a thick
substrate, 8 pi form) for cubic layers and, for SiGe or Ge grown on Si,
People and Bean (:mod:`mesastrain.physics.thinfilm`).

Units: energy per area J/m^2, lengths nm.
"""

from __future__ import annotations

import numpy as np

from mesastrain.physics.critical_thickness import (
    matthews_blakeslee_thickness,
    people_bean_thickness,
)

__all__ = [
    "PB_BURGERS_NM",
    "PB_LATTICE_NM",
    "critical_thickness",
    "crack_warning",
    "critical_warning",
    "CRACK_STRESS_MPA",
    "layer_energy",
    "poisson_ratio_100",
]


#: MPa * nm -> J/m^2 (1e6 Pa * 1e-9 m).
_MPA_NM_TO_J_M2 = 1e-3


#: People & Bean (1985) took a Burgers vector of 0.4 nm and the Si lattice constant in their
#: energy balance [M] (People & Bean, Appl. Phys. Lett. 47, 322, 1985; see REFERENCES.md 5c).
PB_BURGERS_NM = 0.4


PB_LATTICE_NM = 0.5431


# --------------------------------------------------------------------------
# energy and critical thickness
# --------------------------------------------------------------------------
def layer_energy(res, lm, blanket_stress, blanket_strain) -> dict:
    """Elastic energy per unit area of a layer, blanket and patterned, J/m^2.

    Patterned: the sum over the layer's elements of (1/2) sigma:eps V from
    element averages, divided by the layer's plan area (its volume over its
    thickness).
    """
    h = lm.z_top - lm.z_bottom
    w_blanket = 0.5 * float(np.einsum("ij,ij->", blanket_stress, blanket_strain))   # MPa
    out = {"blanket": w_blanket * h * _MPA_NM_TO_J_M2}
    m = res.mesh.layer == lm.index
    if np.any(m):
        vol = res.fields.cell_volume[m]
        w = 0.5 * np.einsum("nij,nij->n", res.fields.cell_stress[m], res.fields.cell_strain[m])
        area = vol.sum() / h
        out["patterned"] = float(np.sum(w * vol) / area) * _MPA_NM_TO_J_M2
        out["plan_area"] = float(area)
        out["patterned_over_blanket"] = (out["patterned"] / out["blanket"]
                                         if out["blanket"] > 0 else None)
    return out


def poisson_ratio_100(mat) -> float | None:
    """nu = C12/(C11 + C12) of a cubic material (the <100> value; common practice in MB)."""
    if mat.system != "cubic":
        return None
    c = mat.constants
    return float(c["C12"] / (c["C11"] + c["C12"]))


def critical_thickness(res, lm) -> dict | None:
    """Matthews-Blakeslee and (SiGe/Ge on Si) People-Bean critical thickness of a layer.

    Matthews & Blakeslee, J. Cryst. Growth 27, 118 (1974), single strained
    layer on a thick substrate (8 pi form, REFERENCES.md 5b): 60 degree
    dislocations (alpha = lambda = 60 deg), b = a_layer/sqrt(2),
    nu = C12/(C11 + C12) of the layer, f = the layer's lattice misfit against
    the lattice it is coherent with. People & Bean, Appl. Phys. Lett. 47, 322
    (1985) with their b = 0.4 nm and a = a_Si = 0.5431 nm [M].

    Returns None for relaxed or hexagonal layers.
    """
    mat = lm.material
    if lm.index == 0 or lm.relaxed > 0:
        return None
    if mat.system != "cubic":
        return {"note": "not evaluated: the 60 degree misfit-dislocation form is for cubic "
                        "(diamond, zinc-blende) layers"}
    f = abs(float(lm.misfit))
    h = lm.z_top - lm.z_bottom
    if f < 1e-6:
        return {"misfit": f, "note": "lattice matched: no critical thickness"}
    b = mat.a / 10.0 / np.sqrt(2.0)
    nu = poisson_ratio_100(mat)
    mb = float(matthews_blakeslee_thickness(f, b, nu, 60.0, 60.0, form="single"))
    out = {"misfit": f, "thickness": h,
           "matthews_blakeslee": mb,
           "matthews_blakeslee_parameters": {"b": b, "nu": nu, "alpha": 60.0,
                                             "lambda": 60.0, "form": "single layer, 8 pi"},
           "exceeds_matthews_blakeslee": bool(np.isfinite(mb) and h > mb) or bool(np.isnan(mb))}
    below = res.layers[lm.index - 1].material
    if mat.name in ("SiGe", "Ge") and below.name == "Si" and below.x is None:
        pb = float(people_bean_thickness(f, PB_BURGERS_NM, PB_LATTICE_NM, nu))
        out["people_bean"] = pb
        out["people_bean_parameters"] = {"b": PB_BURGERS_NM, "a": PB_LATTICE_NM, "nu": nu}
        out["exceeds_people_bean"] = bool(np.isfinite(pb) and h > pb) or bool(np.isnan(pb))
    return out


#: Tensile in-plane blanket stress above which a brittle crystalline or ceramic film is
#: flagged as at risk of cracking, MPa. Common practice for GaN on Si(111) and on sapphire
#: (thick GaN on Si cracks on cooling at tensile stresses of the order of 1 GPa; from memory,
#: e.g. Dadgar et al., Jpn. J. Appl. Phys. 39, L1183 (2000) [M]); a rule of thumb, not a
#: fracture criterion (that needs the film thickness and a toughness).
CRACK_STRESS_MPA = 1000.0
#: Material groups checked for cracking (metals yield instead; deposited dielectrics carry
#: their stress by recipe and are not flagged).
_BRITTLE_GROUPS = ("material", "alloy", "substrate", "user")


def crack_warning(lm, blanket_stress) -> str | None:
    """A warning when a brittle layer's largest in-plane blanket stress is tensile beyond
    :data:`CRACK_STRESS_MPA` (common practice, see there)."""
    if lm.material.group not in _BRITTLE_GROUPS or lm.material.system == "isotropic":
        return None
    s = np.asarray(blanket_stress, dtype=float)[:2, :2]
    top = float(np.max(np.linalg.eigvalsh(s)))
    if top <= CRACK_STRESS_MPA:
        return None
    return (f"{lm.name} ({lm.material.label}) carries {top:.0f} MPa tensile in-plane stress "
            f"as a blanket film, above {CRACK_STRESS_MPA:.0f} MPa: at risk of cracking "
            f"(common-practice threshold for GaN-class films; check thickness and growth)")


def critical_warning(lm, ct: dict) -> str | None:
    if not ct or not ct.get("exceeds_matthews_blakeslee"):
        return None
    h, mb = ct["thickness"], ct["matthews_blakeslee"]
    mb_text = f"{mb:.3g} nm" if np.isfinite(mb) else "below one Burgers vector"
    msg = (f"{lm.name} ({lm.material.label}, {h:g} nm, pseudomorphic) is thicker than its "
           f"Matthews-Blakeslee critical thickness ({mb_text}, single-layer form): misfit "
           f"dislocations lower its energy, so the pseudomorphic assumption (relaxed = 0) may "
           f"be wrong")
    if "people_bean" in ct:
        pb = ct["people_bean"]
        if ct["exceeds_people_bean"]:
            msg += (f"; it is also beyond the People-Bean metastable limit ({pb:.3g} nm): expect "
                    f"it to relax (set layer.relaxed)")
        else:
            msg += (f"; it is within the People-Bean metastable limit ({pb:.3g} nm), so it may "
                    f"survive low-temperature growth")
    return msg
