"""The material-data scatter of the headline figures, to first order.

Published material constants scatter: two standard sources of GaAs's C12 differ by
5.4 %, deposited-film moduli by tens of percent, the SiGe lattice law (Dismukes
fit or Vegard) moves the misfit by several percent. Each material quantity of the
database may carry its published spread
(:class:`mesastrain.physics.material_record.Spread`); this provider propagates the
spreads of the run's constant groups (:func:`mesastrain.run.sensitivity.groups_of`)
to every headline figure (:func:`mesastrain.derived.headline.headline_figures`).

Method
------
For a group moved along its spread, p(t) = p + t dp, the pipeline solved one
extra right-hand side, K du = dF/dt - (dK/dt) u, with the main solve's
factorisation or multigrid hierarchy (:mod:`mesastrain.run.sensitivity`). Each
figure is then evaluated on the state u + t du with the varied constants at
t = +-h (:data:`mesastrain.run.sensitivity.STEP`), the way its readout
evaluates it (exact finite-element stress at the centre and the probes; patch
recovery at the stand-off points; the relaxation-length profile; the device
readouts at the probes), and its derivative is the central difference
dF/dt = (F(h) - F(-h)) / 2h: the displacement derivative comes from the linear
solve, only the cheap figure evaluation is differenced. The contribution of the
group is |dF/dt| (one spread moves the figure by that much), the band the
root-sum-square over groups (the groups taken as independent), and the dominant
group the largest contribution.

Three groups are not linearised this way: the Raman phonon deformation potential
set (``raman``) is a choice between published sets, so its contribution is the
largest change of the Raman figures over the other tabulated sets (no re-solve:
the PDPs do not change the stress); the band deformation potentials (``bands``)
move the band-gap figures by the change to their second published values
(``second`` entries of ``device_parameters.toml``, e.g. the theory values of Van
de Walle 1989 against the adopted experimental b, d of Laude et al. 1971); and the wafer bow of the separate
free-plate solve is scaled by the relative change of its closed-form laminate
value (classical lamination theory, Timoshenko 1925), which the plate solve
reproduces for a blanket stack.

Limits: first order (a spread of tens of percent in a film modulus is not
small); independent groups (no correlation between, e.g., the Si members of
the SiGe stiffness and the Si substrate); singular figures get no band.
"""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from mesastrain.derived.bow import blanket_stack, laminate_curvature
from mesastrain.derived.device_physics import evaluate as device_evaluate
from mesastrain.derived.device_physics import plan_of
from mesastrain.derived.headline import headline_figures, merged_summary
from mesastrain.derived.relaxation import relaxation_length
from mesastrain.derived.sampling import column_profile, recovered_stress, sample_inside
from mesastrain.fem.fields import von_mises
from mesastrain.physics.bands import band_parameters, has_second_source
from mesastrain.physics.raman_data import pdp_sets
from mesastrain.run.result import Derived
from mesastrain.run.sensitivity import STEP, varied_result

__all__ = ["METHOD", "derive", "figure_values"]

METHOD = ("first-order sensitivities: one extra right-hand side per constant group on the "
          "main solve's operator (K du = dF/dt - dK/dt u), each headline figure evaluated at "
          "u +- h du with the varied constants (central difference of the figure evaluation); "
          "contribution = |change of the figure for one published spread of the group|; "
          "band = root-sum-square over the groups (taken as independent); the Raman PDP set "
          "as the largest change over the other published sets, the band deformation potentials "
          "as the change to their second published values; the FE wafer bow scaled by "
          "the laminate closed form")

_COMPONENT = {"sxx": 0, "syy": 1, "szz": 2}


def _layer_index(res, name: str) -> int | None:
    return next((lm.index for lm in res.layers if lm.name == name), None)


def evaluation_plan(res, figs, base) -> dict:
    """Where each figure is evaluated: points, regions and relaxation rays (geometry only).

    Computed once on the unvaried result; the geometry does not move with the
    material data.
    """
    layers_entry = (base.get("readouts") or {}).get("layers", {})
    point_idx = [i for i, f in enumerate(figs) if f.kind in ("centre", "probe", "raman", "band")]
    so = [i for i, f in enumerate(figs) if f.kind == "standoff"]
    rays = {}
    for i, f in enumerate(figs):
        if f.kind != "relaxation":
            continue
        entry = layers_entry.get(f.region) or {}
        label = "+" + f.name.rsplit(" ", 1)[-1]
        rl = (entry.get("relaxation") or {}).get(label)
        if not rl or entry.get("centre_at") is None:
            continue
        d, comp = {"+x": (np.array([1.0, 0.0]), 0), "+y": (np.array([0.0, 1.0]), 1)}[label]
        zmid = float(entry["centre_at"][2])
        ext = float(rl["sidewall_at"])
        dist, _ = column_profile(res, d, ext, zmid)
        pts = np.column_stack([d[0] * (ext - dist), d[1] * (ext - dist), np.full_like(dist, zmid)])
        rays[i] = (dist, pts, comp, np.asarray(entry["centre_at"], dtype=float))
    return {"points": point_idx, "standoff": so, "rays": rays,
            "standoff_regions": np.array([_layer_index(res, figs[i].region) for i in so]),
            "device": any(figs[i].kind in ("raman", "band") for i in point_idx)}


def figure_values(res, figs, plan, device_plan=None) -> np.ndarray:
    """The headline figures re-evaluated on a (varied) result, the way their readouts do.

    Parameters
    ----------
    res : Result
        Possibly from :func:`mesastrain.run.sensitivity.varied_result`.
    figs : list of Figure
        From :func:`headline_figures` of the unvaried result.
    plan : dict
        :func:`evaluation_plan` of the unvaried result.
    device_plan : Plan, optional
        The device readouts' parameters (default: :func:`plan_of` of ``res``).

    Returns
    -------
    ndarray (len(figs),)
        NaN for figures that are not re-evaluated here (singular figures and the
        bow, see the module notes).
    """
    out = np.full(len(figs), np.nan)
    point_idx = plan["points"]
    if point_idx:
        pts = np.array([figs[i].at for i in point_idx], dtype=float)
        strain, stress, _, region = sample_inside(res, pts)
        dev = None
        if plan["device"]:
            dplan = plan_of(res.case, res.layers) if device_plan is None else device_plan
            if dplan.any:
                dev = device_evaluate(dplan, np.maximum(region, 0), strain, stress, detail=False)
        for k, i in enumerate(point_idx):
            f = figs[i]
            comp = f.name.rsplit(" ", 1)[-1]
            if f.kind == "raman":
                out[i] = dev["raman_shift"][k] if dev is not None else np.nan
            elif f.kind == "band":
                out[i] = dev["band_gap_shift"][k] if dev is not None else np.nan
            elif comp == "von_mises":
                out[i] = von_mises(stress[k])
            else:
                c = _COMPONENT[comp]
                out[i] = stress[k][c, c]
    so = plan["standoff"]
    if so:
        pts = np.array([figs[i].at for i in so], dtype=float)
        rec, _, _, _ = recovered_stress(res, pts, plan["standoff_regions"])
        for k, i in enumerate(so):
            out[i] = von_mises(rec[k]) if figs[i].name.endswith("von_mises") else rec[k][2, 2]
    for i, (dist, pts, comp, centre) in plan["rays"].items():
        _, sig, _, _ = sample_inside(res, np.vstack([centre, pts]))
        c = sig[0, comp, comp]
        if abs(c) > 1e-6:
            out[i] = relaxation_length(dist, sig[1:, comp, comp] / c)
    return out


def _laminate_bow(res) -> float:
    stiff, eig, zb, zt = blanket_stack(res)
    return float(laminate_curvature(stiff, eig, zb, zt)["mean"])


def _group_changes(res, figs, plan, group) -> np.ndarray:
    """dF/dt of every figure for one constant group (per spread)."""
    h = STEP
    plus, minus = varied_result(res, group, h), varied_result(res, group, -h)
    d = (figure_values(plus, figs, plan) - figure_values(minus, figs, plan)) / (2 * h)
    for i, f in enumerate(figs):
        if f.kind == "bow":
            lam0 = _laminate_bow(res)
            if lam0 != 0:
                dl = (_laminate_bow(plus) - _laminate_bow(minus)) / (2 * h)
                d[i] = f.value * dl / lam0
    return d


def _raman_changes(res, figs, base) -> tuple[np.ndarray, list]:
    """Largest change of the Raman figures over the other published PDP sets."""
    idx = [i for i, f in enumerate(figs) if f.kind == "raman"]
    best = np.zeros(len(figs))
    used = []
    if not idx:
        return best, used
    sub = [figs[i] for i in idx]
    plan = evaluation_plan(res, sub, base)
    chosen = dict(res.case.device.raman_pdp)
    ref = figure_values(res, sub, plan)
    for mat in ("Si", "Ge"):
        if not any(lm.material.name in (mat, "SiGe" if mat == "Si" else mat)
                   for lm in res.layers):
            continue
        current = chosen.get(mat, pdp_sets(mat)[0])
        for alt in pdp_sets(mat):
            if alt == current:
                continue
            dev = replace(res.case.device, raman_pdp=tuple({**chosen, mat: alt}.items()))
            other = replace(res, case=replace(res.case, device=dev))
            change = figure_values(other, sub, plan) - ref
            used.append(f"{mat} {alt}")
            for k, i in enumerate(idx):
                if np.isfinite(change[k]) and abs(change[k]) > abs(best[i]):
                    best[i] = change[k]
    return best, used


def _band_changes(res, figs, base) -> tuple[np.ndarray, list]:
    """Change of the band figures with the second published deformation potentials."""
    idx = [i for i, f in enumerate(figs) if f.kind == "band"]
    out = np.zeros(len(figs))
    mats = []
    if not idx:
        return out, mats
    dplan = plan_of(res.case, res.layers)
    regions = []
    for rp in dplan.regions:
        mat = res.layers[rp.index].material
        if rp.bands is not None and has_second_source(mat.name):
            regions.append(replace(rp, bands=band_parameters(mat.name, mat.x, second=True)))
            mats.append(mat.label)
        else:
            regions.append(rp)
    if not mats:
        return out, mats
    sub = [figs[i] for i in idx]
    plan = evaluation_plan(res, sub, base)
    change = (figure_values(res, sub, plan, replace(dplan, regions=tuple(regions)))
              - figure_values(res, sub, plan, dplan))
    for k, i in enumerate(idx):
        if np.isfinite(change[k]):
            out[i] = change[k]
    return out, list(dict.fromkeys(mats))


def derive(res) -> Derived:
    """``summary["material_scatter"]``: each headline figure's band from the material data.

    Runs after the providers whose summaries the headline figures read and
    before :func:`mesastrain.derived.headline.derive`, which attaches the
    ``figures`` entries to ``summary["headline"]``.

    Returns
    -------
    Derived
        Empty when ``[uncertainty] enabled = false``. Otherwise
        ``summary["material_scatter"]`` with ``method``, ``groups`` (name ->
        kind, material, quantity, spreads), ``figures`` (name -> ``error``,
        ``dominant``, ``contributions`` (|change| per group) and ``changes``
        (the signed change of the figure for one spread of each group);
        singular figures ``singular: true`` and no error) and ``seconds``.
    """
    case = res.case
    if not case.uncertainty.enabled:
        return Derived()
    t0 = time.perf_counter()
    figs = headline_figures(res)
    base = merged_summary(res)
    live = [f for f in figs if not f.singular]
    plan = evaluation_plan(res, live, base)
    changes: dict = {}
    groups = {}
    warnings = []
    for g in res.scatter_groups:
        if g.name not in res.sensitivities:      # the solve had no load: nothing to follow up
            warnings.append(f"uncertainty: no sensitivity of the displacement to {g.name} "
                            f"(the model has no load); its contribution is left out")
            continue
        changes[g.name] = _group_changes(res, live, plan, g)
        groups[g.name] = {"kind": g.kind, "material": g.material, "quantity": g.quantity,
                          "spreads": [dict(s) for s in g.spreads]}
    if "raman" in case.uncertainty.groups:
        d, used = _raman_changes(res, live, base)
        if used:
            changes["Raman PDP set"] = d
            groups["Raman PDP set"] = {"kind": "raman", "material": "", "quantity": "PDP set",
                                       "alternatives": used}
    if "bands" in case.uncertainty.groups:
        d, mats = _band_changes(res, live, base)
        if mats:
            changes["deformation potentials"] = d
            groups["deformation potentials"] = {
                "kind": "bands", "material": ", ".join(mats), "quantity": "band deformation "
                "potentials with a second published value (device_parameters.toml)"}
    out_figs = {}
    for i, f in enumerate(live):
        contrib = {g: abs(float(v[i])) for g, v in changes.items() if np.isfinite(v[i])}
        if not contrib:
            continue
        err = float(np.sqrt(sum(c * c for c in contrib.values())))
        dominant = max(contrib, key=contrib.get) if err > 0 else None
        out_figs[f.name] = {"error": err, "dominant": dominant,
                            "contributions": {g: c for g, c in contrib.items() if c > 0},
                            "changes": {g: float(v[i]) for g, v in changes.items()
                                        if np.isfinite(v[i])}}
    for f in figs:
        if f.singular:
            out_figs[f.name] = {"error": None, "singular": True}
    if not changes:
        warnings.append("uncertainty: no material of the stack carries a published spread for "
                        f"the groups {', '.join(case.uncertainty.groups)}; no bands computed")
    return Derived(summary={"material_scatter": {
        "method": METHOD, "combination": "root-sum-square of the group contributions",
        "groups": groups, "figures": out_figs,
        "seconds": {"solves": float(res.timings.get("sensitivities", 0.0)),
                    "figures": time.perf_counter() - t0}}}, warnings=warnings)


derive.stage = 1   # reads the headline figures of the stage-0 providers
