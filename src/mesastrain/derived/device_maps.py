"""Device fields along line cuts (CSV) and as section maps.

Units: band energies eV (1 ueV steps), Raman shift cm^-1 and
piezoresistance percent (1e-4 steps); lengths nm.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from mesastrain.derived.device_physics import Plan, direction_label, evaluate, field_names
from mesastrain.derived.sampling import sample_inside
from mesastrain.physics.piezo import LINEAR_LIMIT_PERCENT
from mesastrain.physics.quantities import pdp_words
from mesastrain.units import fmt

__all__ = ["PIEZO_LINEAR_LIMIT", "cut_writer", "map_fields", "map_words", "section_maps"]


PIEZO_LINEAR_LIMIT = LINEAR_LIMIT_PERCENT


# --------------------------------------------------------------------------
# line cuts (CSV)
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
    return fmt(v, ".6f") if name.startswith("band") else fmt(v, ".4f")


def cut_writer(res, plan: Plan, cut):
    """Writer of ``cut_<name>_device.csv``: every device field along a ``[[cut]]``."""
    def write(path: Path) -> None:
        pts = np.linspace(cut.start, cut.end, cut.points)
        strain, stress, _, region = sample_inside(res, pts)   # region -1 outside: empty row
        values = evaluate(plan, region, strain, stress, detail=False)
        names = field_names(plan)
        names_of = [lm.name for lm in res.layers]
        dist = np.linalg.norm(pts - pts[0], axis=1)
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["distance_nm", "x_nm", "y_nm", "z_nm", "region"]
                       + [_csv_header(k) for k in names])
            for i in range(len(pts)):
                row = [fmt(dist[i], ".6g"), *(fmt(c, ".6g") for c in pts[i]),
                       names_of[int(region[i])] if region[i] >= 0 else "outside"]
                for k in names:
                    row.append(_csv_value(k, values[k][i]))
                w.writerow(row)
    return write


# --------------------------------------------------------------------------
# section maps
# --------------------------------------------------------------------------
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
        sets = "; ".join(sorted({f"{rp.label}: {pdp_words(rp.raman.pdp_set)}"
                                 for rp in with_raman}))
        maps["raman_shift"] = (f"optical-phonon line shift seen in backscattering (Raman-allowed "
                               f"modes, intensity-weighted; phonon deformation potentials of "
                               f"{sets}); grey: no Raman data")
    if plan.bands and any(rp.bands is not None for rp in plan.regions):
        maps["band_gap_shift"] = ("strained minus unstrained gap (lowest modelled conduction "
                                  "valley to top valence band); grey: no deformation potentials")
    for ch in plan.channels:
        have = [rp for rp in plan.regions if rp.piezo.get(ch.field) is not None]
        if have:
            rp = have[0]
            # no square brackets: the caption font draws them like round ones
            crystal = direction_label(rp.R.T @ ch.direction).strip("[]")
            maps[f"piezo_{ch.field}_long"] = (
                f"channel {ch.name}: {ch.carrier}-type, current along sample x, y = "
                f"{ch.direction[0]:.3g}, {ch.direction[1]:.3g}, crystal direction {crystal} in "
                f"{rp.label}; linear coefficients of Smith (1954), valid for |Δρ/ρ| up to about "
                f"{PIEZO_LINEAR_LIMIT:g} %; grey: no coefficients")
    return maps


def section_maps(case, plan: Plan) -> dict:
    """The ``device_map_<field>.png`` pictures, drawn from ``fields.vtu`` by the output folder.

    Parameters
    ----------
    case : Case
    plan : Plan

    Returns
    -------
    dict of str -> dict
        PNG name -> keyword arguments of
        :func:`mesastrain.io.render.render_section` (see
        :attr:`mesastrain.run.result.Derived.section_maps`); empty unless
        ``[device] maps`` and ``output.vtu``.
    """
    if not (case.device.maps and case.output.vtu):
        return {}
    # show the etched floor and some substrate below the feature, not only the layers
    etch = case.pattern.etch_depth or 0.0
    depth = max(3.0 * case.stack_thickness, 1.5 * etch - case.stack_thickness)
    return {f"device_map_{q}.png": {"quantity": q, "component": None, "note": note,
                                    "depth": depth, "words": map_words(plan).get(q),
                                    "valid": (PIEZO_LINEAR_LIMIT if q.startswith("piezo_")
                                              else None)}
            for q, note in map_fields(plan).items()}


def map_words(plan: Plan) -> dict[str, str]:
    """Caption words of the channel maps: carrier and crystal direction, not the field name."""
    out = {}
    for ch in plan.channels:
        have = [rp for rp in plan.regions if rp.piezo.get(ch.field) is not None]
        if have:
            crystal = direction_label(have[0].R.T @ ch.direction)
            out[f"piezo_{ch.field}_long"] = (f"resistivity change Δρ/ρ along the current, "
                                             f"{ch.carrier}-type channel {ch.name} along "
                                             f"{crystal}")
    return out

