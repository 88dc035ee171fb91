"""Layer tilt relative to the substrate lattice, per layer, for ``summary.json`` (``layer_tilt``).

Each grown layer's lattice rotation and the tilt of the wafer's nominal (hkl)
planes, from the closed-form blanket state of the coherent layer
(:mod:`mesastrain.physics.tilt`), in arcsec. For a blanket stack the same
figures are also computed from the finite-element layer (volume average of
its total strain): the two agree when the lateral faces let the film shear.
On a vicinal wafer (``[substrate] miscut``) the tilt of Nagai (1974, from
memory) is given next to the computed plane tilt: it neglects the shear, so
the two differ by the shear's share on anisotropic wafers.
"""

from __future__ import annotations

import numpy as np

from mesastrain.model.regions import stack_of
from mesastrain.physics.crystal import plane_normal
from mesastrain.physics.tilt import (
    ARCSEC_PER_RAD,
    blanket_gradient,
    gradient_from_strain,
    lattice_rotation,
    nagai_tilt,
    plane_tilt,
)
from mesastrain.run.result import Derived, Result


def _arcsec(x: float) -> float:
    return round(float(x) * ARCSEC_PER_RAD, 3)


def _figures(H: np.ndarray, e0: np.ndarray, nominal: np.ndarray | None) -> dict:
    omega = lattice_rotation(H, e0)
    out = {"lattice_rotation": _arcsec(np.linalg.norm(omega)),
           "lattice_rotation_vector": [_arcsec(w) for w in omega]}
    if nominal is not None:
        ang, axis = plane_tilt(H, nominal)
        out["plane_tilt"] = _arcsec(ang)
        out["plane_tilt_axis"] = [round(float(a), 6) for a in axis]
    return out


def layer_tilts(res: Result) -> list[dict]:
    """Per-layer tilt figures (arcsec) of a result; see the module notes."""
    case = res.case
    sub = res.layers[0]
    n_cr = plane_normal(case.substrate.normal, sub.material.system, sub.material.c_over_a)
    nominal_sub = sub.frame.R @ (n_cr / np.linalg.norm(n_cr))
    miscut = case.substrate.miscut
    blanket = not case.pattern.patterned
    fl = res.fields
    out = []
    for lm in stack_of(res.layers)[1:]:
        same = lm.material.system == sub.material.system
        nominal = nominal_sub if same else None
        H, _ = blanket_gradient(lm.stiffness_sample, lm.eigenstrain_sample)
        item = {"name": lm.name, "region": lm.index, "label": lm.material.label,
                "closed_form": _figures(H, lm.eigenstrain_sample, nominal)}
        if nominal is None:
            item["note"] = "plane tilt not given: the layer's crystal system differs from the substrate's"
        if miscut is not None and same:
            alpha = np.radians(miscut[0])
            item["nagai_tilt"] = _arcsec(nagai_tilt(H[2, 2], alpha))
        m = res.mesh.layer == lm.index
        if blanket and np.any(m):
            vol = fl.cell_volume[m]
            tot = np.einsum("n,nij->ij", vol, fl.cell_total_strain[m]) / vol.sum()
            item["finite_element"] = _figures(gradient_from_strain(tot), lm.eigenstrain_sample,
                                              nominal)
        out.append(item)
    return out


def derive(res: Result) -> Derived:
    """``layer_tilt`` in ``summary.json``."""
    return Derived(summary={"layer_tilt": {
        "units": {"lattice_rotation": "arcsec", "lattice_rotation_vector": "arcsec",
                  "plane_tilt": "arcsec", "nagai_tilt": "arcsec", "plane_tilt_axis": "1"},
        "convention": ("relative to the substrate lattice; lattice_rotation: rotation of the "
                       "layer's lattice (polar decomposition of its elastic deformation), "
                       "first order (-e_yz, e_xz, 0) of the total strain; plane_tilt: tilt of "
                       "the wafer's nominal (hkl) planes (0 on an exact orientation: planes "
                       "parallel to a coherent interface stay parallel); nagai_tilt: Nagai, "
                       "J. Appl. Phys. 45, 3789 (1974), tan(d_alpha) = e_zz tan(miscut); "
                       "closed_form: coherent blanket layer; finite_element: the blanket "
                       "model's layer average"),
        "layers": {t.pop("name"): t for t in layer_tilts(res)}}})
