"""What devices feel and what instruments measure: band edges, Raman shift, piezoresistance.

A derived-quantity provider (:func:`derive`, listed in
:data:`mesastrain.derived.PROVIDERS`) that turns the solved strain and stress into

band edges
    Deformation-potential shifts of every band and valley (eV) from the
    elastic strain in each layer's **crystal** axes (:mod:`mesastrain.physics.bands`):
    Delta valleys along the cube axes and the four L valleys for Si, Ge and
    SiGe; the Gamma conduction band for the zinc-blende III-V binaries; the
    three valence Kramers pairs (6x6 Bir-Pikus with spin-orbit) for all of
    them. Also the lowest conduction edge, the top valence edge and the gap,
    from the material's own unstrained valence-band maximum, and (Si, Ge,
    SiGe) on the common model-solid scale whose zero is E_v,av of unstrained
    Si, which gives band offsets between layers.
Raman shift
    The strain shift of the zone-centre optical phonon line (cm^-1) seen in
    backscattering along the wafer normal: the three modes of the secular
    equation (:mod:`mesastrain.physics.raman`) weighted by their Raman
    intensity from the Raman tensors (Loudon 1964), unpolarised or with the
    ``[device] raman_polarisation`` directions. On (001) this is the single
    z-polarised mode; on (110) the two in-plane modes. Si and Ge (tabulated
    phonon deformation potentials; the PDP set per material can be chosen with
    ``[device] raman_pdp``), the Si-Si line of SiGe (shift from the relaxed
    alloy's line) and the GaN E2(high) line (biaxial basal-plane coefficient).
piezoresistance
    For each ``[[channel]]`` (an in-plane current direction in the SAMPLE
    frame, i.e. on the mask, and a carrier type) the relative resistivity
    change along the channel, ``longitudinal`` = l.(d rho/rho).l, and across
    it in the wafer plane, ``transverse`` = t.(d rho/rho).t with t = z x l
    (the same device turned by 90 degrees), in percent (100 d rho/rho). Both
    use the full stress tensor with Smith's (1954) tensor rotated from the
    layer's crystal axes into the sample frame (:mod:`mesastrain.physics.piezo`);
    the coefficients pi_l and pi_t of the channel direction are reported
    beside them. Data exist for n- and p-type Si; other layers get no value.
    Without any ``[[channel]]`` the case gets two default channels along
    sample x, ``n_x`` and ``p_x``.

Where the values go
-------------------
- ``fields.vtu`` cell data (element averages of strain and stress; NaN in
  layers without parameters): ``raman_shift``; ``band_shift_<band>`` (``-``
  in valley names written as ``m``: ``band_shift_L_m111``),
  ``band_conduction_edge``, ``band_valence_edge``, ``band_gap``,
  ``band_gap_shift``, ``band_conduction_edge_common``,
  ``band_valence_edge_common``, ``band_conduction_valleys`` (integer bit
  mask of the valleys that form the conduction edge, i.e. lie within
  :data:`VALLEY_TIE_EV` of the lowest: bit i = :data:`CONDUCTION_VALLEYS`
  [i], so 4 = Delta along [001] only, 3 = the four in-plane Delta valleys of
  (001), 7 = all six; 0 where there is no band data); ``piezo_<channel>_long``
  and ``piezo_<channel>_trans``.
- ``summary.json``: a top-level ``device`` entry (units, parameters and
  sources per layer, Raman stress-per-shift factors for each layer's frame,
  channels, per-layer means and ranges) and, at each probe, ``raman_shift``
  (with ``raman_modes``: each mode's shift, polarisation and intensity share),
  ``band_edges`` and ``piezoresistance``.
- ``cut_<name>_device.csv`` along each ``[[cut]]``.
- ``device_map_<field>.png``: sections y = 0 of the main fields.

The per-element physics is :mod:`mesastrain.derived.device_physics`, the cut
files and maps :mod:`mesastrain.derived.device_maps`, the report section
:mod:`mesastrain.io.report_device`.

Units: energies eV, Raman shift cm^-1, piezoresistance percent,
coefficients 1e-11/Pa, stress MPa.
"""

from __future__ import annotations

import numpy as np

from mesastrain.derived.device_maps import cut_writer, section_maps
from mesastrain.derived.device_physics import (
    CONDUCTION_VALLEYS,
    VALLEY_TIE_EV,
    ChannelSpec,
    Plan,
    RegionPlan,
    band_keys,
    channels_of,
    direction_label,
    evaluate,
    evaluate_cells,
    plan_of,
    valley_names,
    vtu_band,
)
from mesastrain.errors import MesastrainError
from mesastrain.physics.crystal import format_indices
from mesastrain.physics.piezo import (
    LINEAR_LIMIT_PERCENT,
    LINEAR_LIMIT_REASON,
    pi_longitudinal,
    pi_transverse,
)
from mesastrain.physics.raman import BiaxialLine, stress_factor
from mesastrain.run.result import Derived
from mesastrain.units import safe_name

__all__ = [
    "CONDUCTION_VALLEYS",
    "PIEZO_WARN_PERCENT",
    "VALLEY_TIE_EV",
    "ChannelSpec",
    "channels_of",
    "derive",
    "evaluate",
    "plan_of",
    "probe_readouts",
    "valley_names",
]


_UNITS = {"band": "eV", "raman_shift": "cm^-1", "piezo": "%",
          "pi": "1e-11/Pa", "stress": "MPa", "stress_per_shift": "MPa/cm^-1"}


#: |100 d rho/rho| (%) beyond which the linear piezoresistance model is flagged
#: (:data:`mesastrain.physics.piezo.LINEAR_LIMIT_PERCENT`, with its sources).
PIEZO_WARN_PERCENT = LINEAR_LIMIT_PERCENT


# --------------------------------------------------------------------------
# summary pieces
# --------------------------------------------------------------------------
def _piezo_coefficients_along(ch: ChannelSpec, R, coeffs) -> dict:
    lc, tc = R.T @ ch.direction, R.T @ ch.across         # crystal axes
    return {"coefficients": coeffs.kind,
            "direction_crystal": direction_label(lc),
            "across_crystal": direction_label(tc),
            "pi_l": float(pi_longitudinal(lc, coeffs)),
            "pi_t": float(pi_transverse(lc, tc, coeffs)),
            "pi_normal": float(pi_transverse(lc, R[2], coeffs))}


def _factor(kind: str, params, stiffness, R, geometry: dict) -> float | None:
    if isinstance(params, BiaxialLine):     # c-plane biaxial coefficient only
        return 1000.0 / params.per_gpa if kind == "biaxial" and abs(R[2, 2]) > 1 - 1e-9 else None
    try:
        return stress_factor(kind, params, stiffness, R, **geometry)
    except MesastrainError:        # this stress does not move the line seen here
        return None


def _region_entry(rp: RegionPlan, plan: Plan, layer_model) -> dict:
    entry = {"region": rp.index, "label": rp.label, "not_computed": dict(rp.missing)}
    if rp.bands is not None:
        entry["bands"] = {"parameters": rp.bands.name, "composition": rp.bands.x,
                          "structure": rp.bands.structure, "scale": rp.bands.scale,
                          "xi_u_delta": rp.bands.xi_u_delta, "b": rp.bands.b, "d": rp.bands.d,
                          "a_v": rp.bands.a_v, "a_c": rp.bands.a_c,
                          "delta_so": rp.bands.delta_so}
    if rp.raman is not None:
        p = rp.raman
        stiff = layer_model.material.stiffness
        geo = plan.raman_geometry
        pol = (f"incident {list(geo['incident'])}, scattered {list(geo['scattered'])} "
               f"(sample frame)" if geo else "unpolarised")
        entry["raman"] = {
            "pdp_set": p.pdp_set, "omega0": p.omega0,
            **({"line": p.mode, "per_gpa_biaxial": p.per_gpa} if isinstance(p, BiaxialLine)
               else {"p": p.p, "q": p.q, "r": p.r}),
            "mode_seen": ("intensity-weighted mean of the Raman-allowed optical modes "
                          "(Loudon 1964), backscattering along the normal "
                          + format_indices(layer_model.frame.normal, "()") + ", " + pol
                          if not isinstance(p, BiaxialLine) else
                          f"{p.mode} line; mean basal-plane stress times the biaxial "
                          f"coefficient"),
            "stress_per_shift_uniaxial_x": _factor("uniaxial", p, stiff, rp.R, geo),
            "stress_per_shift_biaxial": _factor("biaxial", p, stiff, rp.R, geo),
        }
    pz = {}
    for ch in plan.channels:
        coeffs = rp.piezo.get(ch.field)
        pz[ch.name] = None if coeffs is None else _piezo_coefficients_along(ch, rp.R, coeffs)
    if pz:
        entry["piezo"] = pz
    return entry


def _sources(plan: Plan) -> list[str]:
    seen = []
    for rp in plan.regions:
        lines = []
        if rp.bands is not None:
            lines += rp.bands.sources
        if rp.raman is not None:
            lines += rp.raman.sources
        for c in rp.piezo.values():
            if c is not None:
                lines += c.sources
        for line in lines:
            if line not in seen:
                seen.append(line)
    return seen


def _layer_figures(values: dict, region, volume, plan: Plan) -> dict:
    """Volume means and ranges of each device field per region (element averages), by name."""
    out = {}
    for rp in plan.regions:
        m = region == rp.index
        if not np.any(m):
            continue
        vol = volume[m]
        figs = {}
        for name, v in values.items():
            if name.startswith("_") or name == "band_conduction_valleys":
                continue
            x = v[m]
            if not np.all(np.isfinite(x)):
                continue
            figs[name] = {"mean": float(np.dot(vol, x) / vol.sum()),
                          "min": float(x.min()), "max": float(x.max())}
            if name.startswith("piezo_"):
                beyond = [k for k in ("mean", "min", "max")
                          if abs(figs[name][k]) > PIEZO_WARN_PERCENT]
                if beyond:      # these entries are outside the model: said so, not shown
                    figs[name]["out_of_range"] = beyond
        if "band_conduction_valleys" in values:
            masks = values["band_conduction_valleys"][m]
            if np.any(masks > 0):       # the valley set holding the largest volume
                kinds, where = np.unique(masks, return_inverse=True)
                share = np.bincount(where, weights=vol)
                figs["conduction_valleys"] = valley_names(int(kinds[np.argmax(share)]))
        out[rp.name] = {"region": rp.index, "label": rp.label, **figs}
    return out


def _probe_entries(plan: Plan, values: dict, probes: list) -> dict:
    n = len(probes)
    bands, raman, modes, piezo = [None] * n, [None] * n, [None] * n, [None] * n
    regions = {rp.name: rp for rp in plan.regions}
    for k, pr in enumerate(probes):
        rp = regions[pr["region"]]
        if plan.raman and rp.raman is not None:
            raman[k] = float(values["raman_shift"][k])
            modes[k] = ({"line": rp.raman.mode, "pdp_set": rp.raman.pdp_set,
                         "omega0": rp.raman.omega0}
                        if isinstance(rp.raman, BiaxialLine) else
                        {"shifts": values["_raman_modes"][k],
                         "share": values["_raman_share"][k],
                         "polarisation_sample": values["_raman_polarisation"][k].T,
                         "pdp_set": rp.raman.pdp_set, "omega0": rp.raman.omega0})
        if plan.bands and rp.bands is not None:
            shifts = {key: float(values[vtu_band(key)][k]) for key in band_keys(plan)
                      if np.isfinite(values[vtu_band(key)][k])}
            valleys = valley_names(int(values["band_conduction_valleys"][k]))
            entry = {"parameters": rp.label, "shifts": shifts,
                     "conduction_edge": float(values["band_conduction_edge"][k]),
                     "conduction_valleys": valleys,
                     "valence_edge": float(values["band_valence_edge"][k]),
                     "gap": float(values["band_gap"][k]),
                     "gap_shift": float(values["band_gap_shift"][k]),
                     "reference": "edges from the unstrained valence-band maximum of the same "
                                  "material; shifts from each band's unstrained energy"}
            if np.isfinite(values.get("band_valence_edge_common", [np.nan] * n)[k]):
                entry["conduction_edge_common"] = float(values["band_conduction_edge_common"][k])
                entry["valence_edge_common"] = float(values["band_valence_edge_common"][k])
                entry["scale"] = rp.bands.scale
            bands[k] = entry
        if plan.channels:
            per = {}
            stress = np.asarray(pr["stress"])
            for ch in plan.channels:
                coeffs = rp.piezo.get(ch.field)
                item = {"carrier": ch.carrier, "direction_sample": ch.direction}
                if coeffs is None:
                    item.update(longitudinal=None, transverse=None,
                                note=f"no coefficients for {ch.carrier}-type {rp.label}")
                else:
                    item.update(_piezo_coefficients_along(ch, rp.R, coeffs))
                    item.update(longitudinal=float(values[f"piezo_{ch.field}_long"][k]),
                                transverse=float(values[f"piezo_{ch.field}_trans"][k]),
                                stress_along=float(ch.direction @ stress @ ch.direction),
                                stress_across=float(ch.across @ stress @ ch.across))
                    big = [w for w in ("longitudinal", "transverse")
                           if abs(item[w]) > PIEZO_WARN_PERCENT]
                    if big:
                        item["out_of_range"] = big
                per[ch.name] = item
            piezo[k] = per
    out = {}
    if plan.raman:
        out["raman_shift"] = raman
        out["raman_modes"] = modes
    if plan.bands:
        out["band_edges"] = bands
    if plan.channels:
        out["piezoresistance"] = piezo
    return out


def _warnings(plan: Plan, values: dict, region, names: dict) -> list[str]:
    """One line per channel whose change leaves the small-stress range of the coefficients.

    The 99th percentile of |d rho/rho| over each region's elements is used, so that a
    singular corner peak alone does not raise the warning.
    """
    out = []
    for ch in plan.channels:
        if ch not in plan.field_channels:
            if not ch.default:     # the default channels stay quiet in a stack without Si
                out.append(f"channel {ch.name}: no layer has piezoresistance coefficients for "
                           f"{ch.carrier}-type material (tabulated: n-Si, p-Si)")
            continue
        big = []
        for rp in plan.regions:
            m = region == rp.index
            if rp.piezo.get(ch.field) is None or not np.any(m):
                continue
            v = np.abs(np.concatenate([values[f"piezo_{ch.field}_long"][m],
                                       values[f"piezo_{ch.field}_trans"][m]]))
            level = float(np.percentile(v, 99.0))
            if level > PIEZO_WARN_PERCENT:
                big.append(f"{level:.0f} % in {rp.name} ({rp.label})")
        if big:
            out.append(f"channel {ch.name}: |Δρ/ρ| reaches {', '.join(big)} (99th "
                       f"percentile of the elements); the linear piezoresistance coefficients "
                       f"are small-stress values and overstate changes this large")
    return out


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def derive(res):
    """Device readouts of a solved result (a provider of :data:`mesastrain.derived.PROVIDERS`).

    Parameters
    ----------
    res : mesastrain.run.result.Result

    Returns
    -------
    mesastrain.run.result.Derived
        Empty when ``[device]`` switches everything off.
    """
    case = res.case
    plan = plan_of(case, res.layers)
    if not plan.any:
        return Derived()
    region = res.mesh.layer
    names = {lm.index: lm.name for lm in res.layers}
    values = evaluate_cells(plan, region, res.fields.cell_strain, res.fields.cell_stress)
    cell_data = {k: v for k, v in values.items() if not k.startswith("_")}
    summary = {"device": {
        "units": dict(_UNITS),
        "switches": dict(plan.switches),
        "conventions": {
            "strain": "elastic (lattice) strain rotated into each layer's crystal axes",
            "band_shifts": "each band's strained minus unstrained energy, electron energies "
                           "(up = higher), hydrostatic a_v included; Delta/L valleys named "
                           "along the layer's crystal axes",
            "band_edges": "conduction/valence edges and gap from the same material's "
                          "unstrained valence-band maximum; *_common on the Si/Ge model-solid "
                          "scale (zero = E_v,av of unstrained Si)",
            "band_conduction_valleys": "bit mask: bit i set when conduction_valleys[i] lies "
                                       "within 1 meV of the lowest conduction edge",
            "raman_shift": "strain shift of the optical-phonon line seen in backscattering along "
                           "the wafer normal: the modes weighted by their Raman-tensor "
                           "intensity (Loudon 1964); modes and shares at each probe; "
                           "negative = softer",
            "piezo": "longitudinal = l.(d rho/rho).l for current along the channel direction "
                     "l; transverse = t.(d rho/rho).t for current along t = z x l in the "
                     "wafer plane; full stress tensor, percent",
            "stress_per_shift": "stress implied by a measured shift: uniaxial along sample x, "
                                "or equi-biaxial per component, in the layer's frame",
        },
        "conduction_valleys": list(CONDUCTION_VALLEYS),
        "channels": [{"name": ch.name, "field": ch.field, "carrier": ch.carrier,
                      "direction_sample": ch.direction, "default": ch.default}
                     for ch in plan.channels],
        "regions": {rp.name: _region_entry(rp, plan, lm)
                    for rp, lm in zip(plan.regions, res.layers)},
        "layer_figures": _layer_figures(values, region, res.fields.cell_volume, plan),
        "fields": list(cell_data),
        "piezo_linear_limit": {"percent": PIEZO_WARN_PERCENT, "reason": LINEAR_LIMIT_REASON},
        "sources": _sources(plan),
    }}
    probe_entries = _probe_values(res, plan) if res.probes else {}
    files = {f"cut_{safe_name(cut.name)}_device.csv": cut_writer(res, plan, cut)
             for cut in getattr(case, "cuts", ())}
    return Derived(summary=summary, probe_entries=probe_entries, cell_data=cell_data,
                   warnings=_warnings(plan, values, region, names), files=files,
                   section_maps=section_maps(case, plan))


def probe_readouts(res):
    """Only the per-probe device entries of :func:`derive` (Raman and band-edge shifts, ...).

    What a second solve needs for the probes' headline figures (see
    :mod:`mesastrain.derived.discretisation`), without the cell fields and maps.
    """
    plan = plan_of(res.case, res.layers)
    if not plan.any or not res.probes:
        return Derived()
    return Derived(probe_entries=_probe_values(res, plan))


def _probe_values(res, plan: Plan) -> dict:
    """Every device readout at the probes (``probe_entries`` of :class:`Derived`)."""
    pts = np.array([p["strain"] for p in res.probes])
    sig = np.array([p["stress"] for p in res.probes])
    index = {lm.name: lm.index for lm in res.layers}
    reg = np.array([index[p["region"]] for p in res.probes])
    return _probe_entries(plan, evaluate(plan, reg, pts, sig), res.probes)


derive.weight = 2   # relative cost: started early among the stage-0 providers
