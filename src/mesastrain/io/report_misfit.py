"""The misfit-dislocation section of ``report.html`` (from ``summary.json`` ``dislocations``)."""

from __future__ import annotations

from pathlib import Path

from mesastrain.io.markup import esc, image, mpa, num, table

__all__ = ["section_misfit"]


def section_misfit(summary: dict, folder) -> str | None:
    """Misfit-dislocation section of ``report.html`` (in :data:`mesastrain.io.report.SECTIONS`).

    The families with their Burgers vectors and relaxation (expected and
    finite-element), the probes' total stress beside the dislocation
    contribution (finite elements and infinite-medium overlay), and the
    section and cut pictures found in ``folder``. None without dislocations.
    """
    dis = summary.get("dislocations")
    if not dis:
        return None
    folder = Path(folder)

    def vec(v):
        return esc("[" + ", ".join(f"{x:.3g}" for x in v) + "]")

    rows = []
    for f in dis["families"]:
        w = f.get("sheet_width")
        rows.append([esc(f["name"]), esc(f["layer_above"]), esc(f["burgers"]),
                     vec(f["burgers_sample"]), num(f["character_angle_deg"], 3),
                     num(f["b_edge_in_plane"], 3), num(f["b_screw"], 3), num(f["b_normal"], 3),
                     num(f["spacing"], 4), esc(f["count"]),
                     num(f["relaxation_fraction"], 3), num(f["relaxation_fraction_fe"], 3),
                     num(w if isinstance(w, (int, float)) else max(w), 3)])
    parts = ["<h2>Misfit dislocations</h2>",
             table(["family", "layer above", "b", "b, sample frame (nm)", "angle b-line (deg)",
                    "b<sub>edge</sub> (nm)", "b<sub>screw</sub> (nm)", "b<sub>normal</sub> (nm)",
                    "spacing (nm)", "lines", "relaxation b<sub>edge</sub>/S",
                    "relaxation, FE", "sheet width (nm)"], rows, 2),
             ('<p class="note">Relaxation: change of the mean in-plane strain of the layer above '
              'the interface, normal to the lines, as a fraction of its mismatch; expected '
              'b<sub>edge</sub>/S for an infinite array, finite elements with the free surfaces '
              'and edges of the model. Each line is an eigenstrain sheet one element wide from '
              'the line to the free surface; closer to a line than a few sheet widths its field '
              'is smeared. The infinite-medium overlay is the closed-form (Stroh) field of the '
              'same lines in a homogeneous crystal: no free surface, no other layers.</p>')]
    probes = [p for p in summary.get("probes", []) if "dislocation_stress" in p]
    if probes:
        comps = (("xx", 0, 0), ("zz", 2, 2), ("xz", 0, 2))
        prow = []
        for p in probes:
            row = [esc(p["name"])]
            for key in ("stress", "dislocation_stress", "dislocation_stress_infinite_medium"):
                s = p.get(key)
                row += [num(None) if s is None or s[i][j] is None else mpa(s[i][j], 4)
                        for _, i, j in comps]
            prow.append(row)
        head = ["probe"] + [f"{what} &sigma;<sub>{c}</sub>" for what in
                            ("total", "dislocations FE", "dislocations infinite")
                            for c, _, _ in comps]
        parts += ["<h3>Probes (MPa, sample frame)</h3>", table(head, prow, 1)]
    parts.append(image(folder / "dislocations_section.png",
                       "Dislocation stress in a section normal to the lines: finite elements "
                       "(left) and the infinite-medium overlay (right)."))
    for png in sorted(folder.glob("cut_*_dislocations.png")):
        parts.append(image(png, f"{esc(png.stem)}: total, dislocation part (finite elements) "
                                "and infinite-medium overlay along the cut."))
    return "\n".join(parts)
