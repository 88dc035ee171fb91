"""The figures an engineer decides on, derived from a solved result.

:func:`derive` is a derived-quantity provider (``derive(res) -> Derived``, see
:mod:`mesastrain.run.pipeline`). For every grown layer it reports

* the blanket stress (exact laterally constrained film,
  :func:`mesastrain.physics.thinfilm.biaxial_response`) next to the stress at the
  feature centre, and the **relaxation length** along each in-plane axis: the
  distance from the sidewall inside which the stress component normal to that
  sidewall is below 90 % of its centre value;
* **peaks** of von Mises, principal and hydrostatic stress per region with
  their locations (element averages; at sharp corners these grow without bound
  under mesh refinement);
* the stress at a stated **stand-off** distance from every edge where an
  interface meets the sidewall and from the reentrant corner where the sidewall
  meets the etch floor (and from the vertical corners of a rectangle), with the
  word "singular" where linear elasticity gives an unbounded stress;
* the **interface tractions** (peel sigma_zz and shear) along every interface
  that reaches the sidewall: profiles (written to ``interface_tractions.csv``
  and ``interface_tractions.png``), peaks, and the force balance of the
  interface plane (a free mesa carries no net force across it);
* the elastic **strain energy per unit area** of each layer, blanket and
  patterned;
* the **critical thickness** of each pseudomorphic cubic layer: Matthews and
  Blakeslee (single layer on a thick substrate, 8 pi form) and, for SiGe or Ge
  grown on Si, People and Bean; a warning when the layer is thicker.

The pieces: :mod:`~mesastrain.derived.sampling`,
:mod:`~mesastrain.derived.relaxation`, :mod:`~mesastrain.derived.corners`,
:mod:`~mesastrain.derived.tractions` and :mod:`~mesastrain.derived.energy`.

Units: stress MPa, lengths nm, energy per area J/m^2. Sample frame throughout.
Everything is evaluated with ``res.sample`` (exact finite-element fields at
points) or from the element averages in ``res.fields``.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from mesastrain.derived.corners import (
    SINGULAR_NOTE,
    default_standoff,
    edge_features,
    free_edge_interfaces,
    nearest_feature,
    region_peaks,
    standoff_values,
    standoff_warnings,
)
from mesastrain.derived.energy import (
    crack_warning,
    critical_thickness,
    critical_warning,
    layer_energy,
)
from mesastrain.derived.relaxation import RECOVERY, blanket_state, edge_relaxation, plot_relaxation
from mesastrain.derived.sampling import etch_floor, sample_inside
from mesastrain.derived.tractions import interface_balance, plot_tractions, traction_profiles
from mesastrain.run.result import Derived
from mesastrain.units import fmt

__all__ = ["convergence_figures", "derive"]


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def derive(res) -> Derived:
    """Edge relaxation, peaks, stand-off stresses, interface tractions, energy, h_c.

    Parameters
    ----------
    res : mesastrain.run.result.Result

    Returns
    -------
    Derived
        ``summary["readouts"]``, warnings, and the files
        ``edge_relaxation.csv``, ``interface_tractions.csv`` and their PNG
        plots (patterned features only).
    """
    case = res.case
    standoff = case.readouts.standoff if case.readouts.standoff else default_standoff(case)
    floor = etch_floor(res)
    warnings = []
    feats = standoff_values(res, edge_features(res, standoff)) if floor is not None else []
    warnings.extend(standoff_warnings(feats, standoff))

    layers_out, relax_rows = {}, []
    for lm in res.layers:
        entry = {"region": lm.index, "label": lm.material.label,
                 "z_bottom": lm.z_bottom, "z_top": lm.z_top}
        peaks = region_peaks(res, lm.index)
        for pk in peaks.values():
            name, dist = nearest_feature(pk["at"], feats)
            if name is not None:
                pk["nearest_feature"], pk["distance_to_feature"] = name, dist
                # a peak within two elements of a singular edge grows without bound under
                # refinement: marked, and given no error bar
                sing = next(f["singular"] for f in feats if f["name"] == name)
                pk["singular"] = bool(sing and dist < 2.0 * np.sqrt(3.0) * _size_at(res, pk["at"]))
        entry["peaks"] = peaks
        if lm.index > 0:
            b_sig, b_eps = blanket_state(lm)
            entry["blanket_stress"] = b_sig
            lo = lm.z_bottom if floor is None else max(lm.z_bottom, floor)
            zmid = 0.5 * (lo + lm.z_top)
            _, c_sig, _, c_reg = sample_inside(res, [[0.0, 0.0, zmid]])
            if c_reg[0] >= 0:
                c = c_sig[0]
                entry["centre_at"] = [0.0, 0.0, zmid]
                entry["centre_stress"] = c
                entry["centre_over_blanket"] = {
                    ax: (float(c[i, i] / b_sig[i, i]) if abs(b_sig[i, i]) > 1e-9 else None)
                    for ax, i in (("xx", 0), ("yy", 1))}
                if floor is not None and lm.z_top > floor and not lm.liner:
                    rl, rows = edge_relaxation(res, lm, zmid, c)
                    entry["relaxation"] = rl
                    relax_rows.extend(rows)
            entry["energy_per_area"] = layer_energy(res, lm, b_sig, b_eps)
            w = crack_warning(lm, b_sig)
            if w:
                warnings.append(w)
            ct = critical_thickness(res, lm)
            if ct is not None:
                entry["critical_thickness"] = ct
                w = critical_warning(lm, ct)
                if w:
                    warnings.append(w)
        layers_out[lm.name] = entry

    interfaces, traction_rows = [], []
    for k, z in free_edge_interfaces(res):
        prof, rows = traction_profiles(res, k, z)
        traction_rows.extend(rows)
        below, above = res.layers[k].name, res.layers[k + 1].name
        item = {"name": f"{above}/{below}", "z": z, "between": [below, above],
                "sides": prof, "balance": interface_balance(res, z)}
        if prof:
            pk = max(prof.values(), key=lambda v: abs(v["peel_peak"]))
            sk = max(prof.values(), key=lambda v: abs(v["shear_peak"]))
            item["peel_peak"] = pk["peel_peak"]
            item["shear_peak"] = sk["shear_peak"]
            # the traction next to a sharp edge is singular: its peak has no error bar
            item["peak_singular"] = any(f["singular"] for f in feats
                                        if f.get("z") == z and "edge" in f["name"])
            item["traction_jump_max"] = max(v["traction_jump_max"] for v in prof.values())
        interfaces.append(item)

    summary = {"readouts": {
        "units": {"stress": "MPa", "length": "nm", "energy_per_area": "J/m^2",
                  "thickness": "nm", "matthews_blakeslee": "nm", "people_bean": "nm",
                  "b": "nm", "a": "nm", "alpha": "deg", "lambda": "deg",
                  "plan_area": "nm^2"},
        "standoff": standoff,
        "standoff_rule": ("[readouts] standoff" if case.readouts.standoff
                          else "half the thinnest layer (default)"),
        "relaxation_definition": (f"distance from the sidewall beyond which the stress normal "
                                  f"to that sidewall stays within {1 - RECOVERY:.0%} of its "
                                  f"value at the feature centre (above or below), at mid-height "
                                  f"of the layer; overshoot: the largest stress over the centre "
                                  f"value where it exceeds {2 - RECOVERY:.0%}, and its distance "
                                  f"from the sidewall"),
        "traction_definition": ("peel: the normal stress σzz on the interface plane "
                                "(positive opens it); shear: the traction component pointing "
                                "toward the sidewall; both the mean of the tractions on the two "
                                "sides of the interface, recovered by superconvergent patch "
                                "recovery in each region (Zienkiewicz & Zhu 1992), at "
                                "element-boundary points along the interface; the largest "
                                "difference between the two sides is zero "
                                "for the exact solution"),
        "recovery": ("stand-off and interface values: superconvergent patch recovery "
                     "(Zienkiewicz & Zhu, Int. J. Numer. Meth. Eng. 33, 1331 (1992)) per "
                     "region, patch polynomials blended with the vertex shape functions; "
                     "one-sided on an interface (the side named), never averaged across it"),
        "error_estimate_definition": (
            "beside each stand-off figure: |figure(recovered stress) - figure(finite-element "
            "stress)| at the point, MPa (Zienkiewicz & Zhu, Int. J. Numer. Meth. Eng. 24, "
            "337 (1987)): the estimated error of the finite-element value, a conservative "
            "bar for the recovered one; resolved = at least 3 elements between the edge and "
            "the point. Peaks and traction peaks at singular edges are marked singular and "
            "have no error bar"),
        "balance_definition": ("net force across each interface plane relative to the "
                               "integral of |traction|: an equilibrium check of the solve; "
                               "on brick meshes it vanishes identically whatever the mesh, "
                               "so it is not an estimate of the discretisation error"),
        "peaks_definition": "element-average stresses; location = element centre",
        "singular_note": SINGULAR_NOTE,
        "layers": layers_out,
        "edges": feats,
        "interfaces": interfaces,
    }}
    files = {}
    if relax_rows:
        named = [(res.layers[r[0]].name, *r[1:]) for r in relax_rows]
        files["edge_relaxation.csv"] = lambda p, rows=named: _write_csv(
            p, ("region", "side", "distance_from_sidewall_nm", "normal_stress_MPa",
                "along_edge_stress_MPa", "centre_normal_stress_MPa"), rows)
        files["edge_relaxation.png"] = lambda p, rows=relax_rows: plot_relaxation(
            p, rows, res.layers, layers_out)
    if traction_rows:
        named = [(f"{res.layers[r[0] + 1].name}/{res.layers[r[0]].name}", *r[1:])
                 for r in traction_rows]
        files["interface_tractions.csv"] = lambda p, rows=named: _write_csv(
            p, ("interface", "z_nm", "side", "distance_from_sidewall_nm", "peel_MPa",
                "shear_toward_sidewall_MPa", "shear_along_edge_MPa"), rows)
        files["interface_tractions.png"] = lambda p, rows=traction_rows: plot_tractions(
            p, rows, res.layers, standoff)
    return Derived(summary=summary, warnings=warnings, files=files)


def convergence_figures(res) -> dict:
    """Readout figures to follow under mesh refinement, by name.

    For a mesh-convergence study (:mod:`mesastrain.run.convergence` follows
    ``headline_figures``): von Mises stress at every stand-off point (MPa),
    peak peel and shear traction of every interface (MPa) and the relaxation
    length of every layer along +x and +y (names end in ``(nm)``). Stand-off
    values should settle as the mesh is refined; the traction peaks next to a
    sharp edge should not (they are singular).

    Returns
    -------
    dict of str -> float
    """
    case = res.case
    standoff = case.readouts.standoff or default_standoff(case)
    out = {}
    if etch_floor(res) is None:
        return out
    for f in standoff_values(res, edge_features(res, standoff)):
        for region, v in f["values"].items():
            out[f"{f['name']} in {region}: von_mises at {standoff:g} nm"] = v["von_mises"]
    for k, z in free_edge_interfaces(res):
        prof, _ = traction_profiles(res, k, z)
        for side in ("+x", "+y"):
            if side in prof:
                out[f"interface z={z:g} {side}: peak peel"] = prof[side]["peel_peak"]
                out[f"interface z={z:g} {side}: peak shear"] = prof[side]["shear_peak"]
    floor = etch_floor(res)
    for lm in res.layers[1:]:
        if lm.z_top <= floor or lm.liner:
            continue
        zmid = 0.5 * (max(lm.z_bottom, floor) + lm.z_top)
        _, c_sig, _, c_reg = sample_inside(res, [[0.0, 0.0, zmid]])
        if c_reg[0] < 0:
            continue
        rl, _ = edge_relaxation(res, lm, zmid, c_sig[0])
        for side in ("+x", "+y"):
            if rl.get(side):
                out[f"{lm.name} relaxation length {side} (nm)"] = rl[side]["length"]
    return out


def _size_at(res, point) -> float:
    """Cube root of the volume of the element holding a point, nm (0 outside)."""
    from mesastrain.derived.sampling import element_size_at

    h = element_size_at(res, np.atleast_2d(point))[0]
    return float(h) if np.isfinite(h) else 0.0


def _write_csv(path: Path, header, rows) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([fmt(v, ".9g") if isinstance(v, float) else v for v in r])


derive.weight = 2   # relative cost: started early among the stage-0 providers
