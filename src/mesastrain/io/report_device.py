"""The device readouts of a run in words: the report section and a plain-text summary.

Both read ``summary.json`` ``device`` (:mod:`mesastrain.derived.device`) and
the ``device_map_*.png`` and ``cut_*_device.csv`` files of the result folder.
Units: band energies eV (shown in meV where they are changes), Raman shift
cm^-1, piezoresistance percent.
"""

from __future__ import annotations

import re
from pathlib import Path

from mesastrain.io.markup import esc, image, num, table
from mesastrain.physics.bands import device_parameters
from mesastrain.physics.quantities import describe, parameter_words, pdp_words, valley_words
from mesastrain.units import fmt

__all__ = ["parameter_rows", "report_text", "section_device"]

#: Flags of the device parameters (``physics/data/device_parameters.toml``).
FLAGS = {"C": "confirmed in a public source",
         "M": "from memory of the cited publication: check the decimals against the original",
         "D": "derived by computation from other entries or published formulas"}


def _limit(summary: dict) -> float:
    return float(((summary.get("device") or {}).get("piezo_linear_limit") or {})
                 .get("percent", 20.0))


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
             "100 Δρ/ρ; element averages: mean [min, max] per region; 'beyond' = outside "
             "the linear range of the piezoresistance model)"]
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
                         f"(phonon deformation potentials: {pdp_words(rm['pdp_set'])}"
                         + (f"; {factor:.0f} MPa per cm⁻¹ if equi-biaxial)" if factor else ")"))
        if "band_gap_shift" in f:
            g = f["band_gap_shift"]
            valley = valley_words(f.get("conduction_valleys", []))
            parts.append(f"gap change {_mev(g['mean'])} meV [{_mev(g['min'])}, {_mev(g['max'])}]"
                         + (f", conduction edge in {valley}" if valley else ""))
            if "band_shift_delta_z" in f and "band_shift_delta_x" in f:
                split = f["band_shift_delta_z"]["mean"] - f["band_shift_delta_x"]["mean"]
                parts.append(f"Δ[001] − Δ[100] {_mev(split)} meV")
        for ch in dev.get("channels", []):
            key = f"piezo_{ch['field']}_long"
            if key in f:
                lim = _limit(summary)
                a, t = f[key], f[f"piezo_{ch['field']}_trans"]

                def pc(v, lim=lim):
                    return f"{v:+.1f}" if abs(v) <= lim else f"beyond ±{lim:g}"
                parts.append(f"{ch['name']} ({ch['carrier']}-type): along {pc(a['mean'])} % "
                             f"[{pc(a['min'])}, {pc(a['max'])}], across {pc(t['mean'])} %")
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
                            f"{valley_words(be['conduction_valleys'])})")
            for name, item in (p.get("piezoresistance") or {}).items():
                if item and item.get("longitudinal") is not None:
                    val = (f"beyond ±{_limit(summary):g} %" if "longitudinal" in
                           item.get("out_of_range", ()) else f"{item['longitudinal']:+.1f} %")
                    bits.append(f"{name} {val} along {item['direction_crystal']}")
            lines.append(f"    {p['name']}: " + ("; ".join(bits) if bits else "-"))
    maps = sorted(folder.glob("device_map_*.png")) if folder.is_dir() else []
    cuts = sorted(folder.glob("cut_*_device.csv")) if folder.is_dir() else []
    if maps or cuts:
        lines.append("  files: " + ", ".join(p.name for p in maps + cuts))
    lines.append("  parameters: deformation potentials, phonon deformation potentials and "
                 "piezoresistance coefficients with sources in summary.json device.sources")
    return "\n".join(lines)


def _stat(f: dict, key: str, scale: float = 1.0, digits: str = ".3g",
          limit: float | None = None) -> str:
    """``mean [min, max]`` of a layer figure as HTML, '-' when absent.

    With ``limit``, an entry beyond ±limit is not shown as a number: it reads
    ``<−limit`` or ``>+limit`` and the cell is marked with a dagger, since the
    model does not give it.
    """
    if key not in f:
        return "-"
    r = f[key]

    beyond = False

    def one(k):
        nonlocal beyond
        v = scale * r[k]
        if limit is not None and abs(v) > limit:
            beyond = True
            return f"&lt;&minus;{limit:g}" if v < 0 else f"&gt;+{limit:g}"
        return esc(fmt(v, digits))
    text = f"{one('mean')} [{one('min')}, {one('max')}]"
    return f'<span class="oor">{text}&nbsp;&dagger;</span>' if beyond else text


def parameter_rows(sources: list[str]) -> list[tuple[str, str, str, str, str]]:
    """The device parameters of a run as rows: group, quantity, value, source, flag.

    Parameters
    ----------
    sources : list of str
        ``summary.json`` ``device.sources``: ``"<dotted key>: <source> [<flag>]"``
        lines (a derived line may have no key).

    Returns
    -------
    list of tuple of str
        The value is read from ``device_parameters.toml`` by the dotted key,
        with its unit ('-' where the line names no entry).
    """
    data = device_parameters()
    rows = []
    for line in sources:
        m = re.match(r"^([A-Za-z0-9_.\-]+): (.*?)(?: \[([CMD])\])?$", line)
        flag = ""
        if m and "." in m.group(1):
            key, src, flag = m.group(1), m.group(2), m.group(3) or ""
            group, words, unit = parameter_words(key)
            entry = data
            for part in key.split("."):
                entry = entry.get(part) if isinstance(entry, dict) else None
            value = entry.get("value") if isinstance(entry, dict) else entry
            shown = (f"{value:g}" + (f" {unit}" if unit else "")
                     if isinstance(value, (int, float)) else "-")
        else:
            text = line
            tail = re.search(r" \[([CMD])\]$", text)
            if tail:
                flag, text = tail.group(1), text[:tail.start()]
            group, words, shown, src = "derived", text, "-", "computed by mesastrain"
        rows.append((group, words, shown, src, flag))
    return rows


def _parameters_table(sources: list[str]) -> str:
    rows = [[esc(g), esc(w), esc(v), esc(src), esc(flag) or "-"]
            for g, w, v, src, flag in parameter_rows(sources)]
    legend = "".join(f"<dt>{k}</dt><dd>{esc(v)}</dd>" for k, v in FLAGS.items())
    return ("<h3>Device parameters used</h3>"
            + table(["group", "quantity", "value", "source", "flag"], rows, 4)
            + f'<dl class="legend">{legend}</dl>')


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
    lim = _limit(summary)
    figs = dev.get("layer_figures", {})
    rows = []
    for name, reg in dev["regions"].items():
        f = figs.get(name, {})
        rm = reg.get("raman") or {}
        split = "-"
        if "band_shift_delta_z" in f and "band_shift_delta_x" in f:
            split = _mev(f["band_shift_delta_z"]["mean"] - f["band_shift_delta_x"]["mean"])
        rows.append([esc(name), esc(reg["label"]),
                     _stat(f, "raman_shift", 1.0, "+.2f"),
                     esc(pdp_words(rm["pdp_set"])) if rm.get("pdp_set") else "-",
                     num(rm.get("stress_per_shift_uniaxial_x"), 4),
                     num(rm.get("stress_per_shift_biaxial"), 4),
                     _stat(f, "band_gap_shift", 1000.0, "+.0f"),
                     esc(valley_words(f.get("conduction_valleys", []))), esc(split)])
    parts = ["<h2>Device readouts: band edges, Raman shift, piezoresistance</h2>",
             table(["region", "material", "Raman shift (cm<sup>&minus;1</sup>)",
                    "phonon deformation potentials",
                    "&sigma; per &Delta;&omega;, uniaxial x (MPa per cm<sup>&minus;1</sup>)",
                    "&sigma; per &Delta;&omega;, biaxial (MPa per cm<sup>&minus;1</sup>)",
                    "gap change (meV)", "lowest conduction valleys",
                    "&Delta;[001] &minus; &Delta;[100] (meV)"], rows, 2),
             '<p class="note">Element averages per region: mean [min, max]. Raman: the '
             'optical-phonon line seen in backscattering (Raman-allowed modes, intensity-'
             'weighted; negative = softer line); &sigma; per &Delta;&omega; is the stress a '
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
                              esc(f"{ch['carrier']}-type"), esc(f"{d[0]:.3g}, {d[1]:.3g}"),
                              esc(f"{name} ({reg['label']})"),
                              esc(c["direction_crystal"]), num(c["pi_l"], 4), num(c["pi_t"], 4),
                              _stat(f, f"piezo_{ch['field']}_long", 1.0, "+.1f", lim),
                              _stat(f, f"piezo_{ch['field']}_trans", 1.0, "+.1f", lim)])
    reason = (dev.get("piezo_linear_limit") or {}).get("reason", "")
    if chan_rows:
        parts.append("<h3>Piezoresistance of the channels</h3>")
        parts.append(table(["channel", "carrier", "direction (sample x, y)", "region",
                            "crystal direction", "&pi;<sub>l</sub> (10<sup>&minus;11</sup>/Pa)",
                            "&pi;<sub>t</sub> (10<sup>&minus;11</sup>/Pa)",
                            "&Delta;&rho;/&rho; along (%)", "&Delta;&rho;/&rho; across (%)"],
                           chan_rows, 5))
        parts.append('<p class="note">100 &Delta;&rho;/&rho; for current along the channel '
                     'and across it in the wafer plane, from the full stress tensor and '
                     "Smith's (1954) coefficients rotated into the sample frame. "
                     f'&dagger; Out of range: &lt;&minus;{lim:g} or &gt;+{lim:g} stands for a '
                     f'value {esc(reason)}.</p>')
    probe_rows = []
    for p in summary.get("probes") or []:
        if not any(k in p for k in ("raman_shift", "band_edges", "piezoresistance")):
            continue
        be = p.get("band_edges") or {}
        along = []
        for name, item in (p.get("piezoresistance") or {}).items():
            if item and item.get("longitudinal") is not None:
                oor = item.get("out_of_range", ())
                vals = [(f'<span class="oor">{"&lt;&minus;" if item[w] < 0 else "&gt;+"}{lim:g}'
                         f'&nbsp;&dagger;</span>') if w in oor else esc(f"{item[w]:+.1f}")
                        for w in ("longitudinal", "transverse")]
                along.append(f"{esc(name)} {vals[0]} / {vals[1]}")
        probe_rows.append([esc(p["name"]), esc(p.get("material", "")),
                           num(p.get("raman_shift"), 4),
                           num(be.get("gap"), 4),
                           esc(_mev(be["gap_shift"])) if be else "-",
                           esc(valley_words(be.get("conduction_valleys", []))),
                           "; ".join(along) or "-"])
    if probe_rows:
        parts.append("<h3>At the probes</h3>")
        parts.append(table(["probe", "material", "Raman shift (cm<sup>&minus;1</sup>)",
                            "gap (eV)", "gap change (meV)", "lowest conduction valleys",
                            "channels: &Delta;&rho;/&rho; along / across (%)"], probe_rows, 2))
    for png in sorted(folder.glob("device_map_*.png")):
        field = png.stem[len("device_map_"):]
        q = describe(field)
        parts.append(image(png, f"{esc(q.words[:1].upper() + q.words[1:])} ({esc(q.unit)}) on "
                                f"the cross-section y = 0; grey: no parameters for that "
                                f"material."
                                + (f" Values beyond &plusmn;{lim:g} % are outside the linear "
                                   f"model (&dagger;)." if field.startswith("piezo_") else "")))
    cuts = sorted(folder.glob("cut_*_device.csv"))
    if cuts:
        parts.append('<p class="note">Along the line cuts: '
                     + ", ".join(esc(c.name) for c in cuts) + ".</p>")
    src = dev.get("sources") or []
    if src:
        parts.append(_parameters_table(src))
    return "\n".join(parts)
