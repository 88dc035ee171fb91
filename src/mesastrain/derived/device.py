"""What devices feel and what instruments measure: band edges, Raman shift, piezoresistance.

A derived-quantity provider (:func:`derive`, registered in
:mod:`mesastrain.derived.providers`) that turns the solved strain and stress into

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

Units: energies eV, Raman shift cm^-1, piezoresistance percent,
coefficients 1e-11/Pa, stress MPa.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from mesastrain.physics.bands import BandParameters, band_edge_shifts, band_parameters, band_summary
from mesastrain.physics.crystal import format_indices
from mesastrain.errors import CaseError, MaterialError, MesastrainError
from mesastrain.physics.piezo import (PiezoCoefficients, longitudinal_transverse, pi_longitudinal, pi_transverse,
                    piezo_coefficients)
from mesastrain.physics.raman import (BiaxialLine, RamanParameters, biaxial_line, raman_modes,
                                     raman_parameters, stress_factor)

__all__ = [
    "CONDUCTION_VALLEYS",
    "PIEZO_WARN_PERCENT",
    "VALLEY_TIE_EV",
    "ChannelSpec",
    "channels_of",
    "derive",
    "evaluate",
    "valley_names",
    "plan_of",
    "report_section",
    "report_text",
]

#: Conduction valleys; bit i of ``band_conduction_valleys`` stands for entry i.
CONDUCTION_VALLEYS = ("delta_x", "delta_y", "delta_z", "L_111", "L_-111", "L_1-11", "L_11-1",
                      "gamma_c")
_VALENCE = ("hh", "lh", "so")
_BAND_SHIFT_KEYS = CONDUCTION_VALLEYS + _VALENCE

#: Conduction valleys within this energy (eV) of the lowest one all count as the edge.
VALLEY_TIE_EV = 1e-3

#: |d rho / rho| (percent) above which the linear piezoresistance model is flagged: the
#: coefficients are small-stress slopes (Smith 1954 measured at tens of MPa); at a few hundred
#: MPa the response of Si becomes visibly non-linear (common practice).
PIEZO_WARN_PERCENT = 20.0

_UNITS = {"band": "eV", "raman_shift": "cm^-1", "piezo": "percent (100 d rho/rho)",
          "pi": "1e-11/Pa", "stress": "MPa", "stress_per_shift": "MPa per cm^-1"}


# --------------------------------------------------------------------------
# channels and per-region parameters
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class ChannelSpec:
    """A piezoresistance channel as evaluated.

    Attributes
    ----------
    name : str
        As in the case (or ``n_x``/``p_x`` for the default channels).
    field : str
        The name used in VTU arrays and CSV columns (letters, digits, ``_``).
    carrier : str
        ``"n"`` or ``"p"``.
    direction : ndarray (3,)
        Unit current direction in the sample frame (z = 0).
    default : bool
        True for the channels added when the case has no ``[[channel]]``.
    """

    name: str
    field: str
    carrier: str
    direction: np.ndarray
    default: bool = False

    @property
    def across(self) -> np.ndarray:
        """The in-plane perpendicular t = z x l (sample frame)."""
        return np.cross([0.0, 0.0, 1.0], self.direction)


def _field_name(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", name)


def channels_of(case) -> list[ChannelSpec]:
    """The channels of a case; ``n_x`` and ``p_x`` along sample x when it has none.

    Parameters
    ----------
    case : Case

    Returns
    -------
    list of ChannelSpec
        Field names are made unique (a suffix ``_2``, ``_3`` ... where two
        names differ only in characters that are replaced).
    """
    given = getattr(case, "channels", ())
    if given:
        raw = [(c.name, c.carrier, np.asarray(c.direction, dtype=float), False) for c in given]
    else:
        raw = [("n_x", "n", np.array([1.0, 0.0, 0.0]), True),
               ("p_x", "p", np.array([1.0, 0.0, 0.0]), True)]
    out, used = [], set()
    for name, carrier, d, default in raw:
        base = field = _field_name(name)
        k = 1
        while field in used:
            k += 1
            field = f"{base}_{k}"
        used.add(field)
        out.append(ChannelSpec(name, field, carrier, d / np.linalg.norm(d), default))
    return out


@dataclass(frozen=True)
class RegionPlan:
    """Which readouts apply to one region, with their parameters.

    Attributes
    ----------
    index : int
    label : str
    R : ndarray (3, 3)
        Sample axes in this region's crystal coordinates.
    bands : BandParameters or None
    raman : RamanParameters or BiaxialLine or None
    piezo : dict of channel field -> PiezoCoefficients or None
    missing : dict of str -> str
        Why a readout does not apply (quantity -> reason).
    """

    index: int
    label: str
    R: np.ndarray
    bands: BandParameters | None
    raman: RamanParameters | BiaxialLine | None
    piezo: dict
    missing: dict


@dataclass(frozen=True)
class Plan:
    """The readouts of a run: what is computed, channels and one :class:`RegionPlan` per region.

    Attributes
    ----------
    bands, raman : bool
        Switched on AND some region has the parameters.
    piezo : bool
        Switched on.
    channels : tuple of ChannelSpec
        Every channel (empty when ``piezo`` is off).
    regions : tuple of RegionPlan
    switches : dict
        The case's ``[device]`` switches as given.
    raman_polarisation : tuple
        ``(incident, scattered)`` sample-frame directions, or ``()`` (unpolarised).
    """

    bands: bool
    raman: bool
    piezo: bool
    channels: tuple
    regions: tuple
    switches: dict
    raman_polarisation: tuple = ()

    @property
    def raman_geometry(self) -> dict:
        """Keyword arguments ``incident``, ``scattered`` of the Raman functions."""
        pol = self.raman_polarisation
        return {"incident": pol[0], "scattered": pol[1]} if pol else {}

    @property
    def any(self) -> bool:
        return self.bands or self.raman or bool(self.channels)

    @property
    def field_channels(self) -> tuple:
        """Channels with coefficients in at least one region (these get fields)."""
        return tuple(ch for ch in self.channels
                     if any(rp.piezo.get(ch.field) is not None for rp in self.regions))


def _band_params(mat) -> BandParameters | None:
    try:
        return band_parameters(mat.name, mat.x)
    except MaterialError:
        return None


def _raman_params(mat, choice: dict) -> RamanParameters | BiaxialLine | None:
    try:
        if mat.name == "SiGe":      # Si-Si line; the Si PDP set chosen gives the ratios
            return raman_parameters("SiGe", choice.get("Si"), x=mat.x)
        if mat.x is not None:
            return None
        if mat.name == "GaN":
            return biaxial_line(mat.name)
        return raman_parameters(mat.name, choice.get(mat.name))
    except MaterialError:
        return None


def _piezo_coeffs(mat, carrier: str) -> PiezoCoefficients | None:
    if mat.x is not None:
        return None
    try:
        return piezo_coefficients(f"{carrier}-{mat.name}")
    except MaterialError:
        return None


def plan_of(case, layers) -> Plan:
    """Decide, per region, which readouts apply and with which parameters.

    Parameters
    ----------
    case : Case
    layers : list of LayerModel
        Substrate first (``Result.layers``).

    Returns
    -------
    Plan
    """
    dev = case.device
    channels = tuple(channels_of(case)) if dev.piezo else ()
    choice = dict(dev.raman_pdp)
    regions = []
    for lm in layers:
        mat = lm.material
        missing = {}
        bp = _band_params(mat) if dev.bands else None
        if dev.bands and bp is None:
            missing["bands"] = f"no deformation potentials for {mat.label}"
        rp = _raman_params(mat, choice) if dev.raman else None
        if dev.raman and rp is None:
            missing["raman"] = f"no phonon deformation potentials for {mat.label}"
        pz = {}
        for ch in channels:
            pz[ch.field] = _piezo_coeffs(mat, ch.carrier)
            if pz[ch.field] is None:
                missing[f"piezo {ch.name}"] = (f"no piezoresistance coefficients for "
                                               f"{ch.carrier}-type {mat.label}")
        regions.append(RegionPlan(lm.index, mat.label, np.asarray(lm.frame.R), bp, rp, pz,
                                  missing))
    regions = tuple(regions)
    return Plan(bands=any(rp.bands is not None for rp in regions),
                raman=any(rp.raman is not None for rp in regions), piezo=dev.piezo,
                channels=channels, regions=regions,
                switches={"bands": dev.bands, "raman": dev.raman, "piezo": dev.piezo},
                raman_polarisation=tuple(getattr(dev, "raman_polarisation", ()) or ()))


# --------------------------------------------------------------------------
# evaluation at many points at once
# --------------------------------------------------------------------------
def _vtu_band(key: str) -> str:
    return "band_shift_" + key.replace("-", "m")


def field_names(plan: Plan) -> list[str]:
    """Names of the arrays :func:`evaluate` returns for this plan, in order."""
    names = []
    if plan.raman:
        names.append("raman_shift")
    if plan.bands:
        keys = _band_keys(plan)
        names += [_vtu_band(k) for k in keys]
        names += ["band_conduction_edge", "band_valence_edge", "band_gap", "band_gap_shift"]
        if any(rp.bands is not None and rp.bands.e_v_av is not None for rp in plan.regions):
            names += ["band_conduction_edge_common", "band_valence_edge_common"]
        names.append("band_conduction_valleys")
    for ch in plan.field_channels:
        names += [f"piezo_{ch.field}_long", f"piezo_{ch.field}_trans"]
    return names


def valley_names(mask: int) -> list[str]:
    """Valley names of a ``band_conduction_valleys`` bit mask."""
    return [v for i, v in enumerate(CONDUCTION_VALLEYS) if mask >> i & 1]


def _unstrained_valley(key: str, params: BandParameters) -> float:
    if key.startswith("delta_"):
        return params.eg_delta
    if key.startswith("L_"):
        return params.eg_L
    return params.eg_gamma


def _band_keys(plan: Plan) -> list[str]:
    present = set()
    for rp in plan.regions:
        if rp.bands is not None:
            present.update(band_edge_shifts(np.zeros((3, 3)), rp.bands))
    return [k for k in _BAND_SHIFT_KEYS if k in present]


def evaluate(plan: Plan, region, strain, stress) -> dict[str, np.ndarray]:
    """All device fields at a set of points or cells.

    Parameters
    ----------
    plan : Plan
    region : array of int (n,)
        Region index of each point (0 substrate, i layer i).
    strain : array (n, 3, 3)
        Elastic strain, sample frame.
    stress : array (n, 3, 3)
        Stress, sample frame, MPa.

    Returns
    -------
    dict of str -> ndarray (n,)
        Every name of :func:`field_names` (float; ``band_conduction_valleys``
        int32), NaN (0) where the region has no parameters. Extra entries
        with a leading underscore carry per-point detail for probes:
        ``_raman_modes`` (n, 3), ``_raman_share`` (n, 3) and
        ``_raman_polarisation`` (n, 3, 3) in the sample frame.
    """
    region = np.asarray(region, dtype=int)
    strain = np.asarray(strain, dtype=float)
    stress = np.asarray(stress, dtype=float)
    n = region.size
    names = field_names(plan)
    out = {k: np.full(n, np.nan) for k in names}
    if "band_conduction_valleys" in out:
        out["band_conduction_valleys"] = np.zeros(n, dtype=np.int32)
    if plan.raman:
        out["_raman_modes"] = np.full((n, 3), np.nan)
        out["_raman_share"] = np.full((n, 3), np.nan)
        out["_raman_polarisation"] = np.full((n, 3, 3), np.nan)
    for rp in plan.regions:
        m = np.flatnonzero(region == rp.index)
        if m.size == 0:
            continue
        R = rp.R
        eps_c = np.einsum("ai,nab,bj->nij", R, strain[m], R)      # T_c = R^T T_s R
        if isinstance(rp.raman, BiaxialLine):
            out["raman_shift"][m] = rp.raman.shift(np.einsum("ai,nab,bj->nij", R, stress[m], R))
        elif rp.raman is not None:
            p = rp.raman
            rm = raman_modes(eps_c, p.p, p.q, p.r, p.omega0, R, **plan.raman_geometry)
            out["raman_shift"][m] = rm.observable
            out["_raman_modes"][m] = rm.shifts
            out["_raman_share"][m] = rm.share
            out["_raman_polarisation"][m] = np.einsum("ia,naj->nij", R, rm.polarisation)
        if rp.bands is not None:
            b = rp.bands
            s = band_edge_shifts(eps_c, b)
            for k, v in s.items():
                out[_vtu_band(k)][m] = v
            summ = band_summary(s, b)
            zero = band_summary(band_edge_shifts(np.zeros((3, 3)), b), b)
            out["band_conduction_edge"][m] = summ.conduction_edge
            out["band_valence_edge"][m] = summ.valence_edge
            out["band_gap"][m] = summ.gap
            out["band_gap_shift"][m] = summ.gap - zero.gap
            if summ.conduction_edge_common is not None and "band_valence_edge_common" in out:
                out["band_conduction_edge_common"][m] = summ.conduction_edge_common
                out["band_valence_edge_common"][m] = summ.valence_edge_common
            bits = np.array([1 << CONDUCTION_VALLEYS.index(v) for v in summ.valley_names])
            edges = np.stack([s[v] + _unstrained_valley(v, b) for v in summ.valley_names],
                             axis=-1)
            low = edges <= summ.conduction_edge[..., None] + VALLEY_TIE_EV
            out["band_conduction_valleys"][m] = (low * bits).sum(axis=-1)
        for ch in plan.field_channels:
            coeffs = rp.piezo.get(ch.field)
            if coeffs is None:
                continue
            dl, dt = longitudinal_transverse(ch.direction, stress[m], R, coeffs)
            out[f"piezo_{ch.field}_long"][m] = 100.0 * dl
            out[f"piezo_{ch.field}_trans"][m] = 100.0 * dt
    return out


#: Elements evaluated per block (bounds the 6x6 complex Hamiltonians held at once: ~40 MB).
CHUNK = 65536


def _evaluate_cells(plan: Plan, region, strain, stress) -> dict:
    """:func:`evaluate` over all elements, in blocks of :data:`CHUNK`."""
    n = len(region)
    if n <= CHUNK:
        return evaluate(plan, region, strain, stress)
    parts = [evaluate(plan, region[a:a + CHUNK], strain[a:a + CHUNK], stress[a:a + CHUNK])
             for a in range(0, n, CHUNK)]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


# --------------------------------------------------------------------------
# summary pieces
# --------------------------------------------------------------------------
def _direction_label(v) -> str:
    """A direction as small Miller indices ``[110]`` when it is one, else its cosines."""
    v = np.asarray(v, dtype=float)
    u = v / np.abs(v).max()
    for mult in range(1, 13):
        w = u * mult
        if np.allclose(w, np.round(w), atol=1e-6):
            return format_indices(np.round(w).astype(int) + 0)
    unit = v / np.linalg.norm(v)
    return "[" + ", ".join(f"{c:.4f}" for c in unit) + "] (unit vector)"


def _piezo_coefficients_along(ch: ChannelSpec, R, coeffs) -> dict:
    lc, tc = R.T @ ch.direction, R.T @ ch.across         # crystal axes
    return {"coefficients": coeffs.kind,
            "direction_crystal": _direction_label(lc),
            "across_crystal": _direction_label(tc),
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
    entry = {"index": rp.index, "label": rp.label, "not_computed": dict(rp.missing)}
    if rp.bands is not None:
        entry["bands"] = {"parameters": rp.bands.name, "x": rp.bands.x,
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


def _layer_figures(values: dict, region, volume, plan: Plan) -> list[dict]:
    """Volume means and ranges of each device field per region (element averages)."""
    out = []
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
        if "band_conduction_valleys" in values:
            masks = values["band_conduction_valleys"][m]
            if np.any(masks > 0):       # the valley set holding the largest volume
                kinds, where = np.unique(masks, return_inverse=True)
                share = np.bincount(where, weights=vol)
                figs["conduction_valleys"] = valley_names(int(kinds[np.argmax(share)]))
        out.append({"index": rp.index, "label": rp.label, **figs})
    return out


def _probe_entries(plan: Plan, values: dict, probes: list) -> dict:
    n = len(probes)
    bands, raman, modes, piezo = [None] * n, [None] * n, [None] * n, [None] * n
    regions = {rp.index: rp for rp in plan.regions}
    for k, pr in enumerate(probes):
        rp = regions[pr["layer"]]
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
            shifts = {key: float(values[_vtu_band(key)][k]) for key in _band_keys(plan)
                      if np.isfinite(values[_vtu_band(key)][k])}
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


def _warnings(plan: Plan, values: dict, region) -> list[str]:
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
                big.append(f"{level:.0f} % in region {rp.index} ({rp.label})")
        if big:
            out.append(f"channel {ch.name}: |d rho/rho| reaches {', '.join(big)} (99th "
                       f"percentile of the elements); the linear piezoresistance coefficients "
                       f"are small-stress values and overstate changes this large")
    return out


# --------------------------------------------------------------------------
# cuts and maps
# --------------------------------------------------------------------------
_CSV_UNITS = {"raman_shift": "cm-1", "band": "eV", "piezo": "percent"}


def _csv_header(name: str) -> str:
    if name == "band_conduction_valleys":
        return name
    for prefix, unit in _CSV_UNITS.items():
        if name.startswith(prefix):
            return f"{name}_{unit}"
    return name


def _csv_value(name: str, v) -> str:
    """Fixed decimals per unit (1 ueV, 1e-4 cm^-1, 1e-4 %); empty where not applicable."""
    if name == "band_conduction_valleys":
        return str(int(v))
    if not np.isfinite(v):
        return ""
    text = f"{v:.6f}" if name.startswith("band") else f"{v:.4f}"
    return text[1:] if text.startswith("-") and float(text) == 0.0 else text


def _sample_or_skip(res, pts: np.ndarray):
    """Strain, stress, region at points; region -1 (empty CSV row) for a point outside the body.

    A point beyond the modelled block (e.g. deeper than the modelled substrate) must not
    fail the whole run; :meth:`Result.sample` raises for it, so such a cut is sampled point
    by point.
    """
    try:
        strain, stress, _, region = res.sample(pts)
        return strain, stress, np.asarray(region)
    except CaseError:
        pass
    n = len(pts)
    strain, stress, region = np.zeros((n, 3, 3)), np.zeros((n, 3, 3)), np.full(n, -1)
    for i in range(n):           # only cuts that leave the body; a few hundred points at most
        try:
            e, s, _, r = res.sample(pts[i:i + 1])
        except CaseError:
            continue
        strain[i], stress[i], region[i] = e[0], s[0], r[0]
    return strain, stress, region


def _cut_writer(res, plan: Plan, cut):
    def write(path: Path) -> None:
        pts = np.linspace(cut.start, cut.end, cut.points)
        strain, stress, region = _sample_or_skip(res, pts)
        values = evaluate(plan, region, strain, stress)
        names = field_names(plan)
        dist = np.linalg.norm(pts - pts[0], axis=1)
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["distance_nm", "x_nm", "y_nm", "z_nm", "region"]
                       + [_csv_header(k) for k in names])
            for i in range(len(pts)):
                row = [f"{dist[i]:.6g}", *(f"{c:.6g}" for c in pts[i]), int(region[i])]
                for k in names:
                    row.append(_csv_value(k, values[k][i]))
                w.writerow(row)
    return write


def map_fields(plan: Plan) -> dict[str, str]:
    """The fields drawn as PNG sections (Raman shift, gap change, each channel along).

    Returns
    -------
    dict of str -> str
        Field name -> the caption line that says what it is and what grey means.
    """
    maps = {}
    with_raman = [rp for rp in plan.regions if rp.raman is not None]
    if plan.raman and with_raman:
        sets = ", ".join(sorted({f"{rp.label} {rp.raman.pdp_set}" for rp in with_raman}))
        maps["raman_shift"] = (f"optical-phonon line shift seen in backscattering (Raman-allowed "
                               f"modes, intensity-weighted; {sets}); grey: no Raman data")
    if plan.bands and any(rp.bands is not None for rp in plan.regions):
        maps["band_gap_shift"] = ("strained minus unstrained gap (lowest modelled conduction "
                                  "valley to top valence band); grey: no deformation potentials")
    for ch in plan.channels:
        have = [rp for rp in plan.regions if rp.piezo.get(ch.field) is not None]
        if have:
            rp = have[0]
            # no square brackets: the caption font draws them like round ones
            crystal = _direction_label(rp.R.T @ ch.direction).strip("[]")
            maps[f"piezo_{ch.field}_long"] = (
                f"channel {ch.name}: {ch.carrier}-type, current along sample x, y = "
                f"{ch.direction[0]:.3g}, {ch.direction[1]:.3g}, crystal direction {crystal} in "
                f"{rp.label}; 100 d rho/rho, Smith's (1954) linear coefficients; grey: no "
                f"coefficients")
    return maps


def _map_writer(quantity: str, note: str, depth: float):
    def write(path: Path) -> None:
        from mesastrain.io.render import render_section

        render_section(path.parent / "fields.vtu", path, quantity=quantity, component=None,
                       note=note, depth=depth)
    return write


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def derive(res):
    """Device readouts of a solved result (a :data:`mesastrain.run.pipeline.DERIVED` provider).

    Parameters
    ----------
    res : pipeline.Result

    Returns
    -------
    pipeline.Derived
        Empty when ``[device]`` switches everything off.
    """
    from mesastrain.run.pipeline import Derived

    case = res.case
    plan = plan_of(case, res.layers)
    if not plan.any:
        return Derived()
    region = res.mesh.layer
    values = _evaluate_cells(plan, region, res.fields.cell_strain, res.fields.cell_stress)
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
        "regions": [_region_entry(rp, plan, lm) for rp, lm in zip(plan.regions, res.layers)],
        "layer_figures": _layer_figures(values, region, res.fields.cell_volume, plan),
        "fields": list(cell_data),
        "sources": _sources(plan),
    }}
    probe_entries = {}
    if res.probes:
        pts = np.array([p["strain"] for p in res.probes])
        sig = np.array([p["stress"] for p in res.probes])
        reg = np.array([p["layer"] for p in res.probes])
        probe_entries = _probe_entries(plan, evaluate(plan, reg, pts, sig), res.probes)
    files = {}
    for cut in getattr(case, "cuts", ()):
        files[f"cut_{_field_name(cut.name)}_device.csv"] = _cut_writer(res, plan, cut)
    if case.device.maps and case.output.vtu:
        # show the etched floor and some substrate below the feature, not only the layers
        etch = case.pattern.etch_depth or 0.0
        depth = max(3.0 * case.stack_thickness, 1.5 * etch - case.stack_thickness)
        for q, note in map_fields(plan).items():
            files[f"device_map_{q}.png"] = _map_writer(q, note, depth)
    return Derived(summary=summary, probe_entries=probe_entries, cell_data=cell_data,
                   warnings=_warnings(plan, values, region), files=files)


# --------------------------------------------------------------------------
# report
# --------------------------------------------------------------------------
def _mev(v: float) -> str:
    """eV -> signed meV text without a negative zero."""
    return f"{round(1000.0 * v) + 0:+d}"


def report_text(summary: dict, folder) -> str:
    """The device-physics readouts of a run as plain text (for a terminal or a log).

    Parameters
    ----------
    summary : dict
        The content of ``summary.json`` (as read back from JSON).
    folder : path-like
        The result folder (to list the maps and cut files that exist).

    Returns
    -------
    str
        Empty when the run has no ``device`` entry.
    """
    dev = summary.get("device")
    if not dev:
        return ""
    folder = Path(folder)
    lines = ["Device readouts (band edges eV, Raman shift cm^-1, piezoresistance % = "
             "100 d rho/rho; element averages: mean [min, max] per region)"]
    figs = {f["index"]: f for f in dev.get("layer_figures", [])}
    for reg in dev["regions"]:
        f = figs.get(reg["index"], {})
        head = f"  region {reg['index']} {reg['label']}:"
        parts = []
        if "raman_shift" in f:
            r, rm = f["raman_shift"], reg["raman"]
            factor = rm.get("stress_per_shift_biaxial")
            parts.append(f"Raman {r['mean']:+.2f} [{r['min']:+.2f}, {r['max']:+.2f}] cm^-1 "
                         f"(PDP {rm['pdp_set']}"
                         + (f"; {factor:.0f} MPa per cm^-1 if equi-biaxial)" if factor else ")"))
        if "band_gap_shift" in f:
            g = f["band_gap_shift"]
            valley = "+".join(f.get("conduction_valleys", []))
            parts.append(f"gap change {_mev(g['mean'])} meV [{_mev(g['min'])}, {_mev(g['max'])}]"
                         + (f", conduction edge in {valley}" if valley else ""))
            if "band_shift_delta_z" in f and "band_shift_delta_x" in f:
                split = f["band_shift_delta_z"]["mean"] - f["band_shift_delta_x"]["mean"]
                parts.append(f"Delta[001] - Delta[100] {_mev(split)} meV")
        for ch in dev.get("channels", []):
            key = f"piezo_{ch['field']}_long"
            if key in f:
                a, t = f[key], f[f"piezo_{ch['field']}_trans"]
                parts.append(f"{ch['name']} ({ch['carrier']}): along {a['mean']:+.1f} % "
                             f"[{a['min']:+.1f}, {a['max']:+.1f}], across {t['mean']:+.1f} %")
        if not parts:
            parts.append("no device parameters (" + "; ".join(reg["not_computed"].values()) + ")"
                         if reg["not_computed"] else "nothing computed")
        lines.append(head + " " + "; ".join(parts))
    probes = [p for p in summary.get("probes", []) if any(
        k in p for k in ("raman_shift", "band_edges", "piezoresistance"))]
    if probes:
        lines.append("  at probes:")
        for p in probes:
            bits = []
            if p.get("raman_shift") is not None:
                bits.append(f"Raman {p['raman_shift']:+.2f} cm^-1")
            be = p.get("band_edges")
            if be:
                bits.append(f"gap {be['gap']:.3f} eV ({_mev(be['gap_shift'])} meV, "
                            f"{'+'.join(be['conduction_valleys'])})")
            for name, item in (p.get("piezoresistance") or {}).items():
                if item and item.get("longitudinal") is not None:
                    bits.append(f"{name} {item['longitudinal']:+.1f} % along "
                                f"{item['direction_crystal']}")
            lines.append(f"    {p['name']}: " + ("; ".join(bits) if bits else "-"))
    maps = sorted(folder.glob("device_map_*.png")) if folder.is_dir() else []
    cuts = sorted(folder.glob("cut_*_device.csv")) if folder.is_dir() else []
    if maps or cuts:
        lines.append("  files: " + ", ".join(p.name for p in maps + cuts))
    lines.append("  parameters: deformation potentials, phonon deformation potentials and "
                 "piezoresistance coefficients with sources in summary.json device.sources")
    return "\n".join(lines)


def _stat(f: dict, key: str, scale: float = 1.0, digits: str = ".3g") -> str:
    """``mean [min, max]`` of a layer figure, '-' when absent."""
    if key not in f:
        return "-"
    r = f[key]
    return (f"{scale * r['mean'] + 0:{digits}} [{scale * r['min'] + 0:{digits}}, "
            f"{scale * r['max'] + 0:{digits}}]")


def report_section(summary: dict, folder) -> str | None:
    """HTML section of ``report.html`` (registered in :data:`mesastrain.io.report.SECTIONS`).

    Parameters
    ----------
    summary : dict
        The content of ``summary.json``.
    folder : path-like
        The result folder; the ``device_map_*.png`` found there are embedded.

    Returns
    -------
    str or None
        None when the run has no device readouts.
    """
    from mesastrain.io.report import esc, image, num, table

    dev = summary.get("device")
    if not dev:
        return None
    folder = Path(folder)
    figs = {f["index"]: f for f in dev.get("layer_figures", [])}
    rows = []
    for reg in dev["regions"]:
        f = figs.get(reg["index"], {})
        rm = reg.get("raman") or {}
        valleys = "+".join(f.get("conduction_valleys", [])) or "-"
        split = "-"
        if "band_shift_delta_z" in f and "band_shift_delta_x" in f:
            split = _mev(f["band_shift_delta_z"]["mean"] - f["band_shift_delta_x"]["mean"])
        rows.append([esc(reg["index"]), esc(reg["label"]),
                     esc(_stat(f, "raman_shift", 1.0, "+.2f")),
                     esc(rm.get("pdp_set", "-")),
                     num(rm.get("stress_per_shift_uniaxial_x"), 4),
                     num(rm.get("stress_per_shift_biaxial"), 4),
                     esc(_stat(f, "band_gap_shift", 1000.0, "+.0f")), esc(valleys), esc(split)])
    parts = ["<h2>Device readouts: band edges, Raman shift, piezoresistance</h2>",
             table(["region", "material", "Raman shift (cm<sup>-1</sup>)", "PDP set",
                    "&sigma; per &Delta;&omega;, uniaxial x", "&sigma; per &Delta;&omega;, "
                    "biaxial", "gap change (meV)", "conduction edge in",
                    "&Delta;[001] &minus; &Delta;[100] (meV)"], rows, 2),
             '<p class="note">Element averages per region: mean [min, max]. Raman: the '
             'optical-phonon line seen in backscattering (Raman-allowed modes, intensity-'
             'weighted; negative = softer '
             'line); &sigma; per &Delta;&omega; in MPa per cm<sup>-1</sup> is the stress a '
             'measured shift implies under that assumption (also <code>mesastrain '
             'raman-stress</code>). Gap: lowest modelled conduction valley to top valence '
             'band, strained minus unstrained.</p>']
    chan_rows = []
    for ch in dev.get("channels", []):
        for reg in dev["regions"]:
            c = (reg.get("piezo") or {}).get(ch["name"])
            if not c:
                continue
            f = figs.get(reg["index"], {})
            d = ch["direction_sample"]
            chan_rows.append([esc(ch["name"]) + (" (default)" if ch.get("default") else ""),
                              esc(ch["carrier"]), esc(f"{d[0]:.3g}, {d[1]:.3g}"),
                              esc(f"{reg['index']} {reg['label']}"),
                              esc(c["direction_crystal"]), num(c["pi_l"], 4), num(c["pi_t"], 4),
                              esc(_stat(f, f"piezo_{ch['field']}_long", 1.0, "+.1f")),
                              esc(_stat(f, f"piezo_{ch['field']}_trans", 1.0, "+.1f"))])
    if chan_rows:
        parts.append("<h3>Piezoresistance of the channels</h3>")
        parts.append(table(["channel", "carrier", "direction (sample x, y)", "region",
                            "crystal direction", "&pi;<sub>l</sub>", "&pi;<sub>t</sub>",
                            "along (%)", "across (%)"], chan_rows, 5))
        parts.append('<p class="note">100 &Delta;&rho;/&rho; for current along the channel '
                     'and across it in the wafer plane, from the full stress tensor and '
                     "Smith's (1954) coefficients rotated into the sample frame; "
                     '&pi; in 10<sup>-11</sup>/Pa. The coefficients are small-stress slopes: '
                     'changes of tens of percent are overstated.</p>')
    probe_rows = []
    for p in summary.get("probes") or []:
        if not any(k in p for k in ("raman_shift", "band_edges", "piezoresistance")):
            continue
        be = p.get("band_edges") or {}
        along = []
        for name, item in (p.get("piezoresistance") or {}).items():
            if item and item.get("longitudinal") is not None:
                along.append(f"{name} {item['longitudinal']:+.1f} / {item['transverse']:+.1f}")
        probe_rows.append([esc(p["name"]), esc(p.get("material", "")),
                           num(p.get("raman_shift"), 4),
                           num(be.get("gap"), 4),
                           esc(_mev(be["gap_shift"])) if be else "-",
                           esc("+".join(be.get("conduction_valleys", [])) or "-"),
                           esc("; ".join(along) or "-")])
    if probe_rows:
        parts.append("<h3>At the probes</h3>")
        parts.append(table(["probe", "material", "Raman shift (cm<sup>-1</sup>)", "gap (eV)",
                            "gap change (meV)", "conduction edge in",
                            "channels: along / across (%)"], probe_rows, 2))
    caption = {"raman_shift": "Raman shift", "band_gap_shift": "Gap change"}
    for png in sorted(folder.glob("device_map_*.png")):
        field = png.stem[len("device_map_"):]
        what = caption.get(field, field.replace("piezo_", "channel ").replace("_long",
                                                                             ": along"))
        parts.append(image(png, f"{esc(what)} on the section y = 0; grey: no parameters for "
                                f"that material."))
    cuts = sorted(folder.glob("cut_*_device.csv"))
    if cuts:
        parts.append('<p class="note">Along the line cuts: '
                     + ", ".join(esc(c.name) for c in cuts) + ".</p>")
    src = dev.get("sources") or []
    if src:
        parts.append('<p class="note">Parameters: ' + "; ".join(esc(x) for x in src) + "</p>")
    return "\n".join(parts)
