"""The device readouts of a run in words: the report section and a plain-text summary.

Both read ``summary.json`` ``device`` (:mod:`mesastrain.derived.device`) and
the ``device_map_*.png`` and ``cut_*_device.csv`` files of the result folder.
Units: band energies eV (shown in meV where they are changes), Raman shift
cm^-1, piezoresistance percent.
"""

from __future__ import annotations

from pathlib import Path

from mesastrain.io.markup import esc, image, num, table
from mesastrain.units import fmt

__all__ = ["report_text", "section_device"]


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
    lines = ["Device readouts (band edges eV, Raman shift cm⁻¹, piezoresistance % = "
             "100 d rho/rho; element averages: mean [min, max] per region)"]
    figs = dev.get("layer_figures", {})
    for name, reg in dev["regions"].items():
        f = figs.get(name, {})
        head = f"  {name} ({reg['label']}):"
        parts = []
        if "raman_shift" in f:
            r, rm = f["raman_shift"], reg["raman"]
            factor = rm.get("stress_per_shift_biaxial")
            parts.append(f"Raman {fmt(r['mean'], '+.2f')} [{fmt(r['min'], '+.2f')}, "
                         f"{fmt(r['max'], '+.2f')}] cm⁻¹ "
                         f"(PDP {rm['pdp_set']}"
                         + (f"; {factor:.0f} MPa per cm⁻¹ if equi-biaxial)" if factor else ")"))
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
                bits.append(f"Raman {p['raman_shift']:+.2f} cm⁻¹")
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


def section_device(summary: dict, folder) -> str | None:
    """Device section of ``report.html`` (in :data:`mesastrain.io.report.SECTIONS`).

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
    dev = summary.get("device")
    if not dev:
        return None
    folder = Path(folder)
    figs = dev.get("layer_figures", {})
    rows = []
    for name, reg in dev["regions"].items():
        f = figs.get(name, {})
        rm = reg.get("raman") or {}
        valleys = "+".join(f.get("conduction_valleys", [])) or "-"
        split = "-"
        if "band_shift_delta_z" in f and "band_shift_delta_x" in f:
            split = _mev(f["band_shift_delta_z"]["mean"] - f["band_shift_delta_x"]["mean"])
        rows.append([esc(name), esc(reg["label"]),
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
        for name, reg in dev["regions"].items():
            c = (reg.get("piezo") or {}).get(ch["name"])
            if not c:
                continue
            f = figs.get(name, {})
            d = ch["direction_sample"]
            chan_rows.append([esc(ch["name"]) + (" (default)" if ch.get("default") else ""),
                              esc(ch["carrier"]), esc(f"{d[0]:.3g}, {d[1]:.3g}"),
                              esc(f"{name} ({reg['label']})"),
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
