"""Device physics per element and per point: which parameters apply where, and their evaluation.

The plan (:func:`plan_of`) picks, per region, the band deformation
potentials (:mod:`mesastrain.physics.bands`), the phonon deformation
potentials (:mod:`mesastrain.physics.raman`) and the piezoresistance
coefficients of each channel (:mod:`mesastrain.physics.piezo`) that the
case's ``[device]`` switches ask for; :func:`evaluate` turns elastic strain
and stress into band-edge shifts, the Raman shift and the resistivity
changes. What the provider reports and writes is in
:mod:`mesastrain.derived.device`.

Units: energies eV, Raman shift cm^-1, piezoresistance percent, stress MPa.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError
from mesastrain.physics.bands import BandParameters, band_edge_shifts, band_parameters, band_summary
from mesastrain.physics.crystal import format_indices
from mesastrain.physics.piezo import PiezoCoefficients, longitudinal_transverse, piezo_coefficients
from mesastrain.physics.raman import (
    BiaxialLine,
    RamanParameters,
    biaxial_line,
    observable_shift,
    raman_modes,
    raman_parameters,
)
from mesastrain.units import safe_name

__all__ = [
    "CHUNK",
    "CONDUCTION_VALLEYS",
    "VALLEY_TIE_EV",
    "ChannelSpec",
    "Plan",
    "RegionPlan",
    "band_keys",
    "channels_of",
    "direction_label",
    "evaluate",
    "evaluate_cells",
    "field_names",
    "plan_of",
    "valley_names",
    "vtu_band",
]


#: Conduction valleys; bit i of ``band_conduction_valleys`` stands for entry i.
CONDUCTION_VALLEYS = ("delta_x", "delta_y", "delta_z", "L_111", "L_-111", "L_1-11", "L_11-1",
                      "gamma_c")


_VALENCE = ("hh", "lh", "so")


_BAND_SHIFT_KEYS = CONDUCTION_VALLEYS + _VALENCE


#: Conduction valleys within this energy (eV) of the lowest one all count as the edge.
VALLEY_TIE_EV = 1e-3


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
        base = field = safe_name(name, default="channel")
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
    name : str
        The region's name (:attr:`mesastrain.model.regions.LayerModel.name`).
    """

    index: int
    label: str
    R: np.ndarray
    bands: BandParameters | None
    raman: RamanParameters | BiaxialLine | None
    piezo: dict
    missing: dict
    name: str = ""


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
                                  missing, name=lm.name))
    regions = tuple(regions)
    return Plan(bands=any(rp.bands is not None for rp in regions),
                raman=any(rp.raman is not None for rp in regions), piezo=dev.piezo,
                channels=channels, regions=regions,
                switches={"bands": dev.bands, "raman": dev.raman, "piezo": dev.piezo},
                raman_polarisation=tuple(getattr(dev, "raman_polarisation", ()) or ()))


# --------------------------------------------------------------------------
# evaluation
# --------------------------------------------------------------------------
def vtu_band(key: str) -> str:
    return "band_shift_" + key.replace("-", "m")


def field_names(plan: Plan) -> list[str]:
    """Names of the arrays :func:`evaluate` returns for this plan, in order."""
    names = []
    if plan.raman:
        names.append("raman_shift")
    if plan.bands:
        keys = band_keys(plan)
        names += [vtu_band(k) for k in keys]
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


def band_keys(plan: Plan) -> list[str]:
    present = set()
    for rp in plan.regions:
        if rp.bands is not None:
            present.update(band_edge_shifts(np.zeros((3, 3)), rp.bands))
    return [k for k in _BAND_SHIFT_KEYS if k in present]


def evaluate(plan: Plan, region, strain, stress, detail: bool = True) -> dict[str, np.ndarray]:
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
    detail : bool
        Also the per-mode Raman detail below (an eigen-decomposition per point).
        Without it the Raman shift is the same linear observable tr(W K) / tr(W)
        (:func:`mesastrain.physics.raman.observable_shift`), computed without the
        modes: what the cell fields need.

    Returns
    -------
    dict of str -> ndarray (n,)
        Every name of :func:`field_names` (float; ``band_conduction_valleys``
        int32), NaN (0) where the region has no parameters. With ``detail``,
        extra entries with a leading underscore carry per-point detail for
        probes: ``_raman_modes`` (n, 3), ``_raman_share`` (n, 3) and
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
    if plan.raman and detail:
        out["_raman_modes"] = np.full((n, 3), np.nan)
        out["_raman_share"] = np.full((n, 3), np.nan)
        out["_raman_polarisation"] = np.full((n, 3, 3), np.nan)
    for rp in plan.regions:
        m = np.flatnonzero(region == rp.index)
        if m.size == 0:
            continue
        R = rp.R
        eps_c = R.T @ strain[m] @ R                              # T_c = R^T T_s R
        if isinstance(rp.raman, BiaxialLine):
            out["raman_shift"][m] = rp.raman.shift(R.T @ stress[m] @ R)
        elif rp.raman is not None and not detail:
            p = rp.raman
            out["raman_shift"][m] = observable_shift(eps_c, p.p, p.q, p.r, p.omega0, R,
                                                     **plan.raman_geometry)
        elif rp.raman is not None:
            p = rp.raman
            rm = raman_modes(eps_c, p.p, p.q, p.r, p.omega0, R, **plan.raman_geometry)
            out["raman_shift"][m] = rm.observable
            out["_raman_modes"][m] = rm.shifts
            out["_raman_share"][m] = rm.share
            out["_raman_polarisation"][m] = R @ rm.polarisation
        if rp.bands is not None:
            b = rp.bands
            s = band_edge_shifts(eps_c, b)
            for k, v in s.items():
                out[vtu_band(k)][m] = v
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


def evaluate_cells(plan: Plan, region, strain, stress) -> dict:
    """:func:`evaluate` over all elements (without the per-mode Raman detail), in blocks
    of :data:`CHUNK`."""
    n = len(region)
    if n <= CHUNK:
        return evaluate(plan, region, strain, stress, detail=False)
    parts = [evaluate(plan, region[a:a + CHUNK], strain[a:a + CHUNK], stress[a:a + CHUNK],
                      detail=False)
             for a in range(0, n, CHUNK)]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


# --------------------------------------------------------------------------
# directions in words
# --------------------------------------------------------------------------
def direction_label(v) -> str:
    """A direction as small Miller indices ``[110]`` when it is one, else its cosines."""
    v = np.asarray(v, dtype=float)
    u = v / np.abs(v).max()
    for mult in range(1, 13):
        w = u * mult
        if np.allclose(w, np.round(w), atol=1e-6):
            return format_indices(np.round(w).astype(int) + 0)
    unit = v / np.linalg.norm(v)
    return "[" + ", ".join(f"{c:.4f}" for c in unit) + "] (unit vector)"
