"""The standard sections of ``report.html``: inputs, stack, headline figures, bow, probes, ...

Each section is a function ``section(summary: dict, folder: Path) -> str |
None`` returning an HTML fragment (None leaves it out); the order is
:data:`mesastrain.io.report.SECTIONS`.
"""

from __future__ import annotations

import logging
from pathlib import Path

from mesastrain.io.markup import esc, image, mpa, num, table
from mesastrain.physics.quantities import describe
from mesastrain.units import fmt

log = logging.getLogger(__name__)

__all__ = [
    "draw_stack",
    "feature_text",
    "section_bow",
    "section_convergence",
    "section_headline",
    "section_inputs",
    "section_pictures",
    "section_probes",
    "section_stack",
]


def _stress_pair(s) -> str:
    if not s:
        return "-"
    return f"{mpa(s[0][0])} / {mpa(s[1][1])}"


# --------------------------------------------------------------------------
# the stack drawing
# --------------------------------------------------------------------------
def feature_text(pat: dict) -> str:
    """Short description of the pattern's size, e.g. ``rectangle 600 x 600 nm``."""
    shape = pat.get("shape", "none")
    w, ln, d = pat.get("width"), pat.get("length"), pat.get("diameter")
    if shape == "rectangle" and w is not None:
        return f"rectangle {w:g} x {ln if ln is not None else w:g} nm"
    if shape == "stripe" and w is not None:
        return f"stripe {w:g} nm wide (along y)"
    if shape == "disk" and d is not None:
        return f"disk {d:g} nm across"
    return shape + (f" {w:g} nm wide" if w is not None else "")


def draw_stack(summary: dict, path: Path) -> Path:
    """Schematic cross-section of the stack and pattern (layers to scale in z, labelled).

    Parameters
    ----------
    summary : dict
        Content of ``summary.json``.
    path : Path
        PNG to write.
    """
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle

    case = summary["case"]
    layers = [lay for lay in summary["layers"] if lay["region"] > 0 and not lay.get("liner")]
    liners = [lay for lay in summary["layers"] if lay.get("liner")]
    top = max(lay["z_top"] for lay in layers)
    pat = case.get("pattern", {"shape": "none"})
    patterned = pat.get("shape", "none") != "none"
    etch = float(pat.get("etch_depth") or 0.0) if patterned else 0.0
    floor = top - etch
    sub_show = max(0.6 * top, -min(floor, 0.0) + 0.5 * top)
    fig = Figure(figsize=(9.0, 3.8), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    # feature drawn over x in [-1, 1] (schematic width), field around it in [-1.6, 1.6]
    xf, xo = 1.0, 1.6
    ax.add_patch(Rectangle((-xo, -sub_show), 2 * xo, sub_show + min(floor, 0.0) if patterned
                           else sub_show, facecolor="#c9ced3", edgecolor="k", lw=0.8))
    if patterned and floor < 0:
        ax.add_patch(Rectangle((-xf, floor), 2 * xf, -floor, facecolor="#c9ced3",
                               edgecolor="k", lw=0.8))
    sub = summary["layers"][0]
    ax.annotate(f"{sub['name']}: {sub['label']} {sub['normal']}, x = {sub['x_axis']}, "
                f"{_written(summary, 'substrate.thickness', case['substrate']['thickness'])} "
                f"(cut)", (xo + 0.05, 0.5 * (min(floor, 0.0) - sub_show)), fontsize=9,
                va="center", annotation_clip=False)
    for i, lay in enumerate(layers):
        zb, zt = lay["z_bottom"], lay["z_top"]
        colour = f"C{i}"
        if patterned and zt > floor:
            lo = max(zb, floor)
            ax.add_patch(Rectangle((-xf, lo), 2 * xf, zt - lo, facecolor=colour, alpha=0.55,
                                   edgecolor="k", lw=0.8))
            if zb < floor:
                ax.add_patch(Rectangle((-xo, zb), 2 * xo, floor - zb, facecolor=colour,
                                       alpha=0.55, edgecolor="k", lw=0.8))
        else:
            ax.add_patch(Rectangle((-xo, zb), 2 * xo, zt - zb, facecolor=colour, alpha=0.55,
                                   edgecolor="k", lw=0.8))
        strain = ""
        if lay.get("misfit"):
            strain = f", lattice strain {100 * lay['misfit']:+.3g} %"
        relaxed = f", relaxed {lay['relaxed']:g}" if lay.get("relaxed") else ""
        ax.annotate(f"{lay['name']}: {lay['label']}, {zt - zb:g} nm{strain}{relaxed}",
                    (xo + 0.05, 0.5 * (zb + zt)), fontsize=9, va="center",
                    annotation_clip=False)
    draw_liners(ax, liners, case.get("liner", []), top, floor, xf, xo, len(layers))
    stack_top, top = top, max([top] + [lay["z_top"] for lay in liners])
    if patterned:
        what = feature_text(pat)
        ax.annotate("", (-xf, top + 0.12 * top), (xf, top + 0.12 * top),
                    arrowprops={"arrowstyle": "<->", "lw": 0.8})
        ax.text(0, top + 0.16 * top, f"{what} (width not to scale)", ha="center", fontsize=9,
                va="bottom")
        ax.annotate("", (xf + 0.12, stack_top), (xf + 0.12, floor),
                    arrowprops={"arrowstyle": "<->", "lw": 0.8, "color": "0.3"})
        ax.text(xf + 0.16, floor + 0.5 * etch, f"etch {etch:g} nm", fontsize=8.5, color="0.3",
                va="center", rotation=90)
    ax.axhline(0.0, color="0.25", lw=0.6, ls=":")
    ax.set_xlim(-xo - 0.05, xo + 3.0)
    ax.set_ylim(-sub_show, top * 1.45)
    ax.set_xticks([])
    ax.set_ylabel("z (nm), to scale")
    ax.spines[["top", "right", "bottom"]].set_visible(False)
    ax.set_title("Stack and pattern (cross-section)", fontsize=11)
    fig.tight_layout()
    fig.savefig(path)
    return path


def draw_liners(ax, liners: list, tables: list, top: float, floor: float, xf: float,
                xo: float, first_colour: int) -> None:
    """Liners over the schematic feature: top and floor to scale in z, sidewalls schematic."""
    from matplotlib.patches import Polygon

    t = f = s = 0.0
    for k, (lay, tab) in enumerate(zip(liners, tables)):
        t2 = t + tab["thickness"]
        f2 = f + tab.get("floor_thickness", tab["thickness"])
        s2 = s + 0.06
        outer = [(-xo, floor + f2), (-xf - s2, floor + f2), (-xf - s2, top + t2),
                 (xf + s2, top + t2), (xf + s2, floor + f2), (xo, floor + f2)]
        inner = [(xo, floor + f), (xf + s, floor + f), (xf + s, top + t), (-xf - s, top + t),
                 (-xf - s, floor + f), (-xo, floor + f)]
        ax.add_patch(Polygon(outer + inner, closed=True, facecolor=f"C{first_colour + k}",
                             alpha=0.55, edgecolor="k", lw=0.8))
        ax.annotate(f"{lay['name']}: {lay['label']}, {t2 - t:g} nm (liner)",
                    (xo + 0.05, 0.5 * (top + t + top + t2)), fontsize=8, va="center",
                    annotation_clip=False)
        t, f, s = t2, f2, s2


def _written(summary: dict, path: str, value) -> str:
    """An input as its author wrote it (``summary.json`` ``case_as_written``), else in nm.

    Lengths without a written form are shown in nm, temperatures (strings in K) as given.
    """
    text = (summary.get("case_as_written") or {}).get(path)
    if text:
        return text
    if isinstance(value, (int, float)):
        return f"{fmt(value, 'g')} nm"
    if isinstance(value, list):
        return ", ".join(f"{fmt(v, 'g')} nm" for v in value)
    return "-" if value is None else str(value)


# --------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------

def total_seconds(timings: dict) -> float:
    """Wall time of a run from its ``timings``: the stages, and the writing as a whole
    (``writing``; its ``write_*`` parts overlap: fields.vtu is written beside the pictures)."""
    writes = [v for k, v in timings.items() if k.startswith("write_")]
    stages = [v for k, v in timings.items() if not k.startswith("write_") and k != "writing"]
    return float(sum(stages) + timings.get("writing", sum(writes)))


def section_inputs(summary: dict, folder: Path) -> str:
    """Inputs: substrate, layers, pattern, thermal history, mesh and solver."""
    case = summary["case"]
    sub = summary["layers"][0]
    rows = [[esc(sub["name"]), esc(sub["label"]),
             esc(_written(summary, "substrate.thickness", case["substrate"]["thickness"])),
             esc(sub["normal"]), esc(sub["x_axis"]), "-", "-", "-"]]
    for i, lay in enumerate(summary["layers"][1:]):
        th = lay.get("thermal_eigenstrain")
        rows.append([esc(lay["name"]), esc(lay["label"]),
                     esc(_written(summary, f"liner[{lay['liner'] - 1}].thickness"
                                  if lay.get("liner") else f"layer[{i}].thickness",
                                  lay["z_top"] - lay["z_bottom"])),
                     esc(lay["normal"]), esc(lay["x_axis"]), num(lay["relaxed"], 3),
                     num(100 * lay["misfit"], 4, "%"),
                     num(-100 * th[0][0], 4, "%") if th else "-"])
    out = ["<h2>Inputs</h2>",
           table(["region", "material", "thickness", "normal", "x axis", "relaxed",
                  "lattice strain (blanket)", "thermal strain (blanket, in-plane)"], rows, 2)]
    pat = case.get("pattern", {})
    bits = [f"shape <b>{esc(pat.get('shape', 'none'))}</b>"]
    for k in ("width", "length", "diameter", "etch_depth", "margin", "corner_radius",
              "sidewall_angle", "pitch"):
        if pat.get(k) is not None:
            shown = (f"{pat[k]:g}°" if k == "sidewall_angle"
                     else _written(summary, f"pattern.{k}", pat[k]))
            bits.append(f"{esc(k.replace('_', ' '))} {esc(shown)}")
    out.append(f"<p><b>Pattern:</b> {', '.join(bits)}.</p>")
    th = case.get("thermal")
    if th:
        grown = _written(summary, "thermal.growth_temperature", th.get("growth_temperature"))
        used = _written(summary, "thermal.final_temperature", th["final_temperature"])
        out.append(f"<p><b>Thermal history:</b> grown at {esc(grown)}, "
                   f"used at {esc(used)}; the thermal eigenstrain "
                   f"(integrated expansion mismatch) is added to the lattice mismatch.</p>")
    mesh, solver = summary.get("mesh", {}), summary.get("solver", {})
    sym = summary.get("model") or {}
    solved, exported = mesh.get("solved", {}), mesh.get("exported", {})
    out.append(f"<p><b>Model:</b> {esc(solved.get('element_type'))}, order "
               f"{esc(solved.get('order'))}; solved system: "
               f"{num(solved.get('unknowns'), 8)} unknowns on {num(solved.get('nodes'), 8)} "
               f"nodes" + (f" ({esc(sym.get('symmetry'))} model)"
                           if sym.get("symmetry") not in (None, "full") else "")
               + f"; exported body: {num(exported.get('nodes'), 8)} nodes, "
               f"{num(exported.get('elements'), 8)} elements"
               + f"; solver {esc(solver.get('method'))}, relative residual "
               f"{num(solver.get('relative_residual'), 2)}; total time "
               f"{num(total_seconds(summary.get('timings', {})), 3, 's')}.</p>")
    out.append('<p class="note">Conventions: sample frame z = wafer normal (up), x = the '
               'substrate x axis; z = 0 at the substrate surface; stress in MPa, positive in '
               'tension; lattice strain = in-plane elastic strain of the blanket layer.</p>')
    return "\n".join(out)


def section_stack(summary: dict, folder: Path) -> str | None:
    """The stack drawing."""
    png = Path(folder) / "stack.png"
    try:
        draw_stack(summary, png)
    except Exception as exc:  # a drawing problem must not lose the report
        log.warning("stack drawing failed: %s", exc)
        return None
    return image(png, "Layers to scale in z; the lateral size is written, not drawn to scale.")


def section_headline(summary: dict, folder: Path) -> str | None:
    """Per-layer headline figures: blanket vs centre, relaxation, peaks, energy, h_c."""
    ro = summary.get("readouts")
    if not ro:
        return None
    rows = []
    for name, e in ro["layers"].items():
        if e["region"] == 0:
            continue
        rl = e.get("relaxation") or {}

        def length(ax, rl=rl):
            vals = [v["length"] for k, v in rl.items() if k.endswith(ax) and v]
            return num(max(vals), 3, "nm") if vals else "-"

        overs = [v["overshoot"] for v in rl.values() if v and v.get("overshoot")]
        if overs:
            ov = max(overs, key=lambda o: o["peak_over_centre"])
            over = (f'<span class="sing">{num(ov["peak_over_centre"], 2)} &times;</span> at '
                    f'{num(ov["at"], 3, "nm")}')
        else:
            over = "none" if rl else "-"
        en = e.get("energy_per_area", {})
        ct = e.get("critical_thickness") or {}
        mb = ct.get("matthews_blakeslee")
        pb = ct.get("people_bean")
        flag = ""
        if ct.get("exceeds_matthews_blakeslee"):
            flag = ' <span class="sing">exceeded</span>'
        vm = (e.get("peaks") or {}).get("von_mises", {})
        rows.append([
            f"{esc(name)}: {esc(e['label'])}",
            _stress_pair(e.get("blanket_stress")),
            _stress_pair(e.get("centre_stress")),
            num((e.get("centre_over_blanket") or {}).get("xx"), 3),
            length("x"), length("y"), over,
            num(vm.get("value"), 4) + (' <span class="sing">singular</span>'
                                       if vm.get("singular") else ""),
            f"{num(en.get('blanket'), 3)} / {num(en.get('patterned'), 3)}",
            (num(mb, 3, "nm") if mb is not None else "-") + flag,
            num(pb, 3, "nm") if pb is not None else "-"])
    out = ["<h2>Layer by layer: centre, edges, peaks, energy, critical thickness</h2>",
           table(["layer", "blanket &sigma;<sub>xx</sub> / &sigma;<sub>yy</sub> (MPa)",
                  "centre &sigma;<sub>xx</sub> / &sigma;<sub>yy</sub> (MPa)", "centre / blanket",
                  "relaxation length x", "relaxation length y",
                  "overshoot near the sidewall (peak / centre, distance)",
                  "peak von Mises (MPa, mesh-dependent)",
                  "energy blanket / patterned (J/m&sup2;)", "critical thickness MB",
                  "critical thickness PB"], rows),
           f'<p class="note">Relaxation length: {esc(ro["relaxation_definition"])}. Energy: '
           f'elastic energy per unit plan area of the layer. MB: Matthews &amp; Blakeslee '
           f'(1974), single layer on a thick substrate (8&pi; form), 60&deg; dislocations; '
           f'PB: People &amp; Bean (1985), for SiGe/Ge on Si only. Peaks are element averages '
           f'at sharp corners: <span class="sing">singular</span>, they grow as the mesh is '
           f'refined.</p>']
    feats = ro.get("edges") or []
    if feats:
        out.append(f"<h3>Corners and edges: stress at a stand-off of "
                   f"{num(ro['standoff'], 3, 'nm')} ({esc(ro['standoff_rule'])})</h3>")
        out.append(_edge_table(feats))
        out.append(f'<p class="note">{esc(ro["singular_note"])}. The element size at each '
                   f'stand-off point is listed so that runs on different meshes can be '
                   f'compared: a value that changes when the mesh is refined is not '
                   f'converged.</p>')
        coarse = [v["element_size"] for f in feats for v in f["values"].values()
                  if v.get("element_size") and v["element_size"] > ro["standoff"]]
        if coarse:
            out.append(f'<p class="warn">The elements holding some stand-off points are larger '
                       f'than the stand-off itself (up to {num(max(coarse), 3, "nm")} against '
                       f'{num(ro["standoff"], 3, "nm")}): these values are not resolved. '
                       f'Refine near the edges (mesh.edge_size) or state a larger stand-off '
                       f'([readouts] standoff) before relying on them.</p>')
    ifs = ro.get("interfaces") or []
    if ifs:
        rows = []
        for it in ifs:
            bal = it.get("balance") or {}
            rows.append([f"{esc(it['between'][1])} on {esc(it['between'][0])}",
                         num(it["z"], 4, "nm"), num(it.get("peel_peak"), 4),
                         num(it.get("shear_peak"), 4),
                         num(bal.get("peel_force_relative"), 2),
                         num(bal.get("shear_force_relative"), 2)])
        out.append("<h3>Interface tractions near the sidewall</h3>")
        out.append(table(["interface", "z", "peak peel &sigma;<sub>zz</sub> (MPa)",
                          "peak shear toward sidewall (MPa)",
                          "net peel force / &int;|&sigma;<sub>zz</sub>|",
                          "net shear force / &int;|&tau;|"], rows))
        out.append(f'<p class="note">{esc(ro["traction_definition"])}. Peaks sit at the '
                   f'sidewall, where the traction of a sharp edge is singular. A free feature '
                   f'carries no net force across an interface; the last two columns are an '
                   f'equilibrium check of the solve (on brick meshes they vanish whatever the '
                   f'mesh), not an estimate of the discretisation error, which the run gives '
                   f'per headline figure (summary.json, discretisation_error).</p>')
    return "\n".join(out)


def _edge_table(feats: list) -> str:
    """Stand-off values; entries equal on all sides (symmetric feature) are shown once."""
    groups = {}
    for f in feats:
        key = (f["kind"], f["name"].split(" edge ")[0].split(" corner ")[0].split(" vertex ")[0],
               round(f["z"], 9))
        groups.setdefault(key, []).append(f)
    rows = []
    for (kind, _name, _z), items in groups.items():
        sides = [next(iter(it["values"].values()), {}).get("von_mises") for it in items]
        same = all(s is not None for s in sides) and (
            max(sides) - min(sides) <= 1e-6 * max(abs(max(sides)), 1.0))
        show = items[:1] if same else items
        for it in show:
            for region, v in it["values"].items():
                where = "all sides" if same and len(items) > 1 else it["side"]
                sing = '<span class="sing">singular</span>' if it["singular"] else "bounded"
                rows.append([esc(it["name"].rsplit(" ", 1)[0]), esc(where), esc(kind), sing,
                             esc(region), num(v["von_mises"], 4), num(v["principal_max"], 4),
                             num(v["principal_min"], 4), num(v["peel"], 4),
                             num(v["element_size"], 3, "nm")])
    return table(["place", "side", "kind", "stress there", "evaluated in", "von Mises (MPa)",
                  "max principal (MPa)", "min principal (MPa)", "&sigma;<sub>zz</sub> (MPa)",
                  "element size"], rows, 5)


def section_bow(summary: dict, folder: Path) -> str | None:
    """Wafer bow: finite elements next to Stoney and the laminate (Timoshenko) result."""
    wb = summary.get("wafer_bow")
    if not wb:
        return None
    rows = []
    names = (("finite_element", "finite elements, free-standing wafer"),
             ("stoney", "Stoney (1909), blanket film stress"),
             ("stoney_with_fe_film_force", "Stoney, film force of the bent wafer"),
             ("laminate", "laminate theory (Timoshenko 1925 for one layer)"),
             ("timoshenko", "Timoshenko (1925) bimetal formula"))
    for key, label in names:
        e = wb.get(key)
        if e:
            rows.append([esc(label), num(e["curvature"], 4), num(e["radius"], 4),
                         num(e["bow_height"], 4)])
    return ("<h2>Wafer bow of the blanket stack</h2>"
            + table(["estimate", "curvature (1/m)", "radius (m)",
                     f"bow over {num(wb['wafer_diameter'], 4)} mm (&micro;m)"], rows)
            + f'<p class="note">{esc(wb["notes"])}. Substrate {num(wb["substrate_thickness"] / 1e3, 5)} '
              f'&micro;m, films {num(wb["film_thickness"], 4)} nm in total.</p>')


def section_probes(summary: dict, folder: Path) -> str | None:
    """Stress at the case's probes."""
    probes = summary.get("probes") or []
    if not probes:
        return None
    rows = []
    for p in probes:
        s = p["stress"]
        rows.append([esc(p["name"]), esc(", ".join(f"{v:g}" for v in p["at"])),
                     esc(p.get("material", "")), mpa(s[0][0]), mpa(s[1][1]),
                     mpa(s[2][2]), mpa(s[1][2], 3), mpa(s[0][2], 3), mpa(s[0][1], 3),
                     mpa(p.get("von_mises"))])
    return ("<h2>Probes</h2>" + table(
        ["probe", "at (nm)", "material", "&sigma;<sub>xx</sub>", "&sigma;<sub>yy</sub>",
         "&sigma;<sub>zz</sub>", "&sigma;<sub>yz</sub>", "&sigma;<sub>xz</sub>",
         "&sigma;<sub>xy</sub>", "von Mises"], rows, 3)
        + '<p class="note">MPa, sample frame, exact finite-element values at the point.</p>')


def _map_caption(summary: dict, kind: str, quantity: str) -> str:
    """Caption of a ``map_<view>_<quantity>.png``: what, where, and how the colours are set."""
    layers = summary.get("layers") or []
    first = layers[1]["name"] if len(layers) > 1 else "the first layer"
    where = {"section": "on the cross-section y = 0",
             "edge": "close to the +x sidewall, on the cross-section y = 0",
             "plan": f"seen from above at mid-height of {first}"}[kind]
    q = describe(quantity)
    return (f"{esc(q.words[:1].upper() + q.words[1:])}"
            f"{f' ({esc(q.unit)})' if q.unit else ''} {where}; the note in the picture says "
            f"how its colour limits are set.")


def section_pictures(summary: dict, folder: Path) -> str | None:
    """Maps, edge relaxation and traction plots, line cuts."""
    folder = Path(folder)
    parts = []
    for kind in ("section", "edge", "plan"):
        for png in sorted(folder.glob(f"map_{kind}_*.png")):
            parts.append(image(png, _map_caption(summary, kind, png.stem.split("_", 2)[2])))
    parts.append(image(folder / "edge_relaxation.png",
                       "Stress normal to each sidewall (blue) and along it (green), in MPa, "
                       "against the distance from the sidewall, at mid-height of each layer; "
                       "dotted: the value at the feature centre, dash-dotted: the blanket film. "
                       "Red line: relaxation length; red triangle: the largest overshoot over "
                       "the centre value (edge_relaxation.csv)."))
    parts.append(image(folder / "interface_tractions.png",
                       "Peel and shear traction along each interface toward the sidewall, in "
                       "MPa (interface_tractions.csv)."))
    for c in summary.get("cuts") or []:
        parts.append(image(folder / c["plot"], f"Line cut {esc(c['name'])} "
                                               f"({esc(c['csv'])})."))
    parts = [p for p in parts if p]
    if not parts:
        return None
    note = summary.get("_pictures_note")
    return "<h2>Pictures</h2>" + (f'<p class="note">{esc(note)}</p>' if note else "") + \
        "\n".join(parts)


def section_convergence(summary: dict, folder: Path) -> str | None:
    """The mesh-convergence study, when the run made one (``--convergence``)."""
    cv = summary.get("convergence")
    if not cv or not cv.get("figures"):
        return None
    rows = []
    for f in cv["figures"]:
        vals = " / ".join(num(v, 5) for v in f.get("values", []))
        last = f.get("relative_changes") or []
        rows.append([esc(f["name"]), vals, num(100 * last[-1], 2, "%") if last else "-",
                     num(f.get("observed_order"), 3), esc(f.get("verdict", ""))])
    done = [x for x in cv.get("levels", []) if "unknowns" in x]
    return ("<h2>Mesh dependence</h2>"
            + f"<p>{len(done)} meshes, element sizes divided by {num(cv.get('ratio'), 3)} per "
              f"level (unknowns {', '.join(num(x['unknowns'], 8) for x in done)}).</p>"
            + table(["figure (MPa)", "values, coarse to fine", "last change", "observed order",
                     "verdict"], rows)
            + '<p class="note">A value at a sharp corner or edge does not converge: it grows '
              'as the mesh is refined. Read stand-off values instead.</p>')
