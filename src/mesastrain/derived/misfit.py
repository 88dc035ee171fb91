"""Misfit dislocations in a solved model: their contribution, the closed-form overlay, relaxation.

The lines of a case's ``[[dislocations]]`` are planned into the model by
:mod:`mesastrain.model.dislocation_plan` (eigenstrain sheets, see
:mod:`mesastrain.model.volterra`) and solved with the rest of the load by
:func:`mesastrain.run.pipeline.run_case`. :func:`derive` reads the result:
it solves the same model once more with only the sheets as load (the
finite-element dislocation contribution, images at free surfaces and layers
included), evaluates the closed-form infinite-medium field of the same lines
(:mod:`mesastrain.physics.dislocations`) as an overlay and check, and reports
per family the lines placed and the relaxation expected and found.

Files: ``dislocations_section.png`` (a section normal to the lines) and,
along each ``[[cut]]``, ``cut_<name>_dislocations.csv`` and ``.png``.

Units: lengths nm, stress MPa (GPa inside the closed-form helpers).
"""

from __future__ import annotations

import csv

import numpy as np

from mesastrain.fem.assembly import SymbolicCache, assemble
from mesastrain.fem.fields import recover, to_vtk6
from mesastrain.fem.solve import solve_model
from mesastrain.model.dislocation_plan import case_families, families_of
from mesastrain.model.volterra import lines_eigenstrain
from mesastrain.physics.dislocations import anisotropic_fields, array_fields
from mesastrain.physics.quantities import nice_limit
from mesastrain.run.result import Derived
from mesastrain.units import fmt, safe_name

__all__ = ["derive", "overlay_stress"]


# --------------------------------------------------------------------------
# closed-form overlay
# --------------------------------------------------------------------------
def overlay_stress(families, layers, points) -> np.ndarray:
    """Infinite-medium stress of the lines of ``families`` at points (closed form).

    Each family uses the anisotropic (Stroh) field with the sample-frame
    stiffness of the layer above its interface, the same for every point (an
    infinite homogeneous medium: no free surface, no other layers). In a model
    that repeats along the normal to the lines, each line stands for its
    infinite periodic row (closed-form sum, :func:`mesastrain.physics.dislocations.array_fields`).
    Points within one Burgers vector of a line get NaN.

    Parameters
    ----------
    families : list of LineFamily
    layers : list of LayerModel
    points : array (npts, 3), nm

    Returns
    -------
    ndarray (npts, 3, 3)
        MPa, sample frame.
    """
    pts = np.atleast_2d(np.asarray(points, dtype=float))
    out = np.zeros((len(pts), 3, 3))
    for fam in families:
        c6 = layers[fam.region].stiffness_sample
        core = float(np.linalg.norm(fam.template.b))
        for p in fam.positions:
            d = fam.template.shifted(p * fam.across)
            if fam.period is not None:
                s, _ = array_fields(d, fam.period, None, pts, c6=c6, direction=fam.across,
                                    core_radius=core)
            else:
                s, _ = anisotropic_fields(d, pts, c6, core_radius=core)
            out += s
    return out * 1000.0


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def _dislocation_solution(res, eig_cells):
    """FE displacement of the dislocation sheets alone (no mismatch), same model and supports."""
    stiff = res.stiffness
    zero = np.zeros((len(stiff), 3, 3))
    cache = SymbolicCache(res.disc)
    K, f = assemble(res.disc, res.mesh.region, stiff, zero, eig_cells, cache=cache)
    u, _ = solve_model(K, f, res.disc, res.mesh.boundary(), res.case.solver,
                       spaces=cache.deferred_spaces(res.mesh.region))
    return u


def derive(res):
    """Derived-quantity provider: dislocation contribution, overlay and relaxation figures.

    Solves the model once more with only the dislocation sheets as load (the
    finite-element dislocation contribution, images included; the total
    field is the run's own), evaluates the closed-form infinite-medium field
    of the same lines, and reports per family the lines placed, the expected
    relaxation b_edge / S and the relaxation the finite-element field shows.

    Parameters
    ----------
    res : mesastrain.run.result.Result

    Returns
    -------
    mesastrain.run.result.Derived
        Empty for a case without ``[[dislocations]]``.
    """
    case = res.case
    if not case_families(case):
        return Derived()
    sm = res.mesh
    layers = res.layers
    fams, lo, hi = families_of(case, layers, sm)
    eig_cells = lines_eigenstrain([ln for f in fams for ln in f.lines], lo, hi)
    u_d = _dislocation_solution(res, eig_cells)
    stiff = res.stiffness
    zero = np.zeros((len(stiff), 3, 3))
    fl_d = recover(res.disc, u_d, sm.region, stiff, zero, sm.solve_nnodes, sm.solve_mesh.t,
                   eig_cells)
    fl_d = sm.expand_fields(fl_d)
    centres = 0.5 * (np.where(np.isfinite(lo), lo, 0.0) + np.where(np.isfinite(hi), hi, 0.0))
    over = overlay_stress(fams, layers, centres)
    warnings = []
    fam_out = []
    vol = fl_d.cell_volume
    for fam in fams:
        info = fam.to_dict()
        widths = sorted({round(ln.width, 9) for ln in fam.lines})
        info["sheet_width"] = widths[0] if len(widths) == 1 else widths
        e = fam.across
        above = sm.layer == fam.region
        v = vol[above] / vol[above].sum()
        mean_d = np.einsum("n,nij->ij", v, fl_d.cell_strain[above])
        mean_t = np.einsum("n,nij->ij", v, res.fields.cell_strain[above])
        change = float(e @ mean_d @ e)
        info["mean_strain_change_along_normal_fe"] = change
        info["mean_strain_along_normal_total_fe"] = float(e @ mean_t @ e)
        info["relaxation_fraction_fe"] = None if fam.misfit == 0 else change / -fam.misfit
        fam_out.append(info)
        lm = layers[fam.region]
        if lm.relaxed > 0:
            warnings.append(f"{fam.key}: layer[{fam.region - 1}] is already relaxed "
                            f"{lm.relaxed:g} uniformly (its 'relaxed' key); the dislocations "
                            f"relax it further")
        w = max(ln.width for ln in fam.lines)
        gap = fam.spacing if fam.spacing is not None else (
            np.min(np.diff(sorted(fam.positions))) if len(fam.positions) > 1 else None)
        if gap is not None and w > 0.25 * gap:
            warnings.append(f"{fam.key}: the dislocation sheets are {w:.3g} nm wide (the local "
                            f"element width), more than a quarter of the {gap:.3g} nm between "
                            f"lines; fields near the lines are smeared: lower mesh.size")
        held = _roller_ends(fam, sm, lo, hi)
        if held and abs(fam.b_screw) > 1e-9 * np.linalg.norm(fam.template.b):
            warnings.append(f"{fam.key}: the lines end on the model's side faces at {held}, "
                            f"which are held normal to themselves: the displacement along the "
                            f"lines is held there, so the screw part of b is constrained near "
                            f"those faces (etch through the interface, or model a blanket film "
                            f"or a stripe)")
        if fam.period is not None and fam.spacing is not None:
            n = fam.period / fam.spacing
            if abs(n - round(n)) > 1e-3 * max(n, 1.0):
                warnings.append(
                    f"{fam.key}: the periodic cell ({fam.period:.6g} nm) is not a whole number "
                    f"of spacings ({fam.spacing:.6g} nm): the model holds {len(fam.positions)} "
                    f"lines per cell and relaxes {len(fam.positions) * fam.b_edge / fam.period:.4g}"
                    f" instead of b_edge/S = {fam.b_edge / fam.spacing:.4g}")
    summary = {"dislocations": {
        "representation": ("each line is a plastic eigenstrain sheet sym(J x nu)/w (J = -b) "
                           "from the line up to the free surface; the finite-element "
                           "dislocation contribution includes free surfaces and layers, the "
                           "closed-form overlay is the infinite homogeneous medium (Stroh, "
                           "stiffness of the layer above the interface)"),
        "units": {"lengths": "nm", "stress": "MPa"},
        "families": fam_out,
        "lines": int(sum(len(f.positions) for f in fams)),
    }}
    # probes
    probe_entries = {}
    if case.probes:
        pts = np.array([p.at for p in case.probes], dtype=float)
        s_fe = _sample(res, u_d, eig_cells, pts)
        probe_entries["dislocation_stress"] = list(s_fe)
        probe_entries["dislocation_stress_infinite_medium"] = list(overlay_stress(fams, layers,
                                                                                  pts))
    cell_data = {"dislocation_stress": to_vtk6(fl_d.cell_stress),
                 "dislocation_stress_infinite_medium": to_vtk6(over),
                 "stress_without_dislocations": to_vtk6(res.fields.cell_stress
                                                        - fl_d.cell_stress)}
    files = {}
    if np.max(np.abs(fams[0].template.xi[:2])) > 1 - 1e-9:    # lines along a grid axis
        files["dislocations_section.png"] = (
            lambda path: _section_map(path, res, fams, lo, hi, fl_d.cell_stress, over))
    for cut in getattr(case, "cuts", ()):
        files.update(_cut_file(res, cut, fams, fl_d.cell_stress))
    return Derived(summary=summary, probe_entries=probe_entries, cell_data=cell_data,
                   warnings=warnings, files=files)


def _roller_ends(fam, sm, lo, hi) -> str:
    """Side faces with rollers that the family's lines reach ('' if none)."""
    at = (sm.region == fam.region) & (np.abs(lo[:, 2] - fam.z) <= 1e-9 * (1.0 + abs(fam.z)))
    if not np.any(at):
        return ""
    tied = {a for a, _, _ in sm.boundary().periodic}
    faces = []
    for a in (0, 1):
        if abs(fam.template.xi[a]) < 1e-9 or a in tied or not np.all(np.isfinite(hi[:, a])):
            continue
        span = hi[:, a].max() - lo[:, a].min()
        if (abs(lo[at, a].min() - lo[:, a].min()) <= 1e-9 * span
                or abs(hi[at, a].max() - hi[:, a].max()) <= 1e-9 * span):
            faces.append(f"{'xy'[a]} = {lo[:, a].min():.6g} / {hi[:, a].max():.6g} nm")
    return ", ".join(faces)


def _sample(res, u_d, eig_cells, pts) -> np.ndarray:
    """FE dislocation-only stress (MPa) at points; NaN outside the body."""
    sm = res.mesh
    elems = sm.locate(pts)
    out = np.full((len(pts), 3, 3), np.nan)
    ok = elems >= 0
    if np.any(ok):
        stiff = res.stiffness
        _, sig, _ = sm.evaluate(res.disc, u_d, elems[ok], pts[ok], sm.region, stiff,
                                np.zeros((len(stiff), 3, 3)), eig_cells)
        out[ok] = sig
    return out


# --------------------------------------------------------------------------
# line cuts and the section picture
# --------------------------------------------------------------------------
_PAIRS = (("xx", 0, 0), ("yy", 1, 1), ("zz", 2, 2), ("yz", 1, 2), ("xz", 0, 2), ("xy", 0, 1))


def _cut_file(res, cut, fams, fe_cells) -> dict:
    """Total, FE dislocation part and overlay along a cut: CSV and PNG.

    The finite-element values are those of the element each point lies in
    (element averages = values at the element centres, where linear
    elements are most accurate; point values of linear elements zigzag
    from element to element near a singular field).
    """
    start = np.asarray(cut.start, dtype=float)
    end = np.asarray(cut.end, dtype=float)
    s = np.linspace(0.0, 1.0, int(cut.points))
    pts = start + s[:, None] * (end - start)
    dist = s * float(np.linalg.norm(end - start))
    elems = res.mesh.locate(pts)
    total = np.full((len(pts), 3, 3), np.nan)
    fe = np.full((len(pts), 3, 3), np.nan)
    ok = elems >= 0
    total[ok] = res.fields.cell_stress[elems[ok]]
    fe[ok] = fe_cells[elems[ok]]
    inf = overlay_stress(fams, res.layers, pts)

    def write(path):
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            head = ["distance_nm", "x_nm", "y_nm", "z_nm"]
            for what in ("total_element", "dislocation_fe_element", "dislocation_infinite_medium"):
                head += [f"{what}_stress_{c}_MPa" for c, _, _ in _PAIRS]
            w.writerow(head)
            for k in range(len(pts)):
                row = [fmt(dist[k], ".6g"), *(fmt(v, ".6g") for v in pts[k])]
                for arr in (total, fe, inf):
                    row += ["" if not np.isfinite(arr[k, i, j]) else fmt(arr[k, i, j], ".6g")
                            for _, i, j in _PAIRS]
                w.writerow(row)

    chosen = [c[7:] for c in getattr(cut, "components", ()) if c.startswith("stress_")
              and c[7:] in {n for n, _, _ in _PAIRS}] or ["xx", "zz", "xz"]
    # where the cut crosses the vertical plane through a line (above or below it)
    marks = []
    for fam in fams:
        for p in fam.positions:
            se = (pts - fam.template.shifted(p * fam.across).point) @ fam.across
            for k in np.flatnonzero(se[:-1] * se[1:] <= 0):
                if se[k] != se[k + 1]:
                    marks.append(dist[k] + (dist[k + 1] - dist[k]) * se[k] / (se[k] - se[k + 1]))
    title = (f"cut {cut.name}: ({', '.join(f'{v:g}' for v in cut.start)}) to "
             f"({', '.join(f'{v:g}' for v in cut.end)}) nm")

    def plot(path):
        _plot_cut(path, title, dist, total, fe, inf, chosen, marks)

    base = f"cut_{safe_name(cut.name)}_dislocations"
    return {f"{base}.csv": write, f"{base}.png": plot}


def _plot_cut(path, title, dist, total, fe, inf, chosen, marks) -> None:
    """Total stress, FE dislocation contribution and closed-form overlay along a cut."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    idx = {n: (i, j) for n, i, j in _PAIRS}
    fig = Figure(figsize=(8.0, 2.6 * len(chosen) + 1.0), dpi=110)
    FigureCanvasAgg(fig)
    axes = fig.subplots(len(chosen), 1, sharex=True, squeeze=False)
    for ax, name in zip(axes[:, 0], chosen):
        i, j = idx[name]
        ax.plot(dist, total[:, i, j], color="0.1", lw=1.4, label="total (finite elements)")
        ax.plot(dist, fe[:, i, j], color="tab:blue", lw=1.2,
                label="dislocations alone, finite elements (free surfaces, layers)")
        ax.plot(dist, inf[:, i, j], color="tab:orange", lw=1.2, ls="--",
                label="dislocations, infinite medium (closed form)")
        for m in marks:
            ax.axvline(m, color="0.6", lw=0.8, ls=":")
        ax.axhline(0.0, color="0.3", lw=0.6)
        ax.set_ylabel(f"stress σ{name} (MPa)", fontsize=10.5)
        ax.tick_params(labelsize=10)
        ax.grid(alpha=0.3)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    axes[-1, 0].set_xlabel("distance along the cut (nm); dotted: above/below a dislocation line",
                           fontsize=10.5)
    fig.suptitle(title + "; sample frame, element averages", fontsize=10.5)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.62 / fig.get_figheight()))
    fig.legend(handles, labels, loc="upper center", ncol=2, fontsize=8.5, frameon=False,
               bbox_to_anchor=(0.5, 1 - 0.3 / fig.get_figheight()))
    fig.savefig(path)


def _section_map(path, res, fams, lo, hi, fe_cells, over_cells) -> None:
    """Vertical section normal to the first family's lines: FE dislocation stress and overlay.

    Two components (normal stress across the lines, sigma_zz), each as the
    finite-element dislocation contribution and as the infinite-medium
    overlay, on a shared colour scale centred on zero (clipped at the 98th
    percentile of the FE values so that the line cores do not set it).
    """
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import PolyCollection
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    fam = fams[0]
    e = fam.across
    xi = fam.template.xi
    # the plane through the model centre containing e and z; elements it cuts
    mid = 0.5 * (np.where(np.isfinite(lo), lo, 0.0) + np.where(np.isfinite(hi), hi, 0.0))
    c0 = np.array([np.median(mid[:, 0]), np.median(mid[:, 1]), 0.0])
    a_line = int(np.argmax(np.abs(xi[:2])))
    a_across = 1 - a_line
    x0 = c0[a_line]
    cut = (lo[:, a_line] <= x0) & (x0 < hi[:, a_line])
    z_top = float(np.max(hi[:, 2]))
    films = [lm for lm in res.layers if lm.index >= fam.region]
    depth = max(z_top - fam.z, 1.0)
    zmin = fam.z - 1.5 * depth
    cut &= hi[:, 2] > zmin
    s_axis = e[a_across]
    x_lo, x_hi = lo[cut, a_across] * s_axis, hi[cut, a_across] * s_axis
    x_lo, x_hi = np.minimum(x_lo, x_hi), np.maximum(x_lo, x_hi)
    z_lo, z_hi = np.maximum(lo[cut, 2], zmin), hi[cut, 2]
    polys = np.stack([np.c_[x_lo, z_lo], np.c_[x_hi, z_lo], np.c_[x_hi, z_hi],
                      np.c_[x_lo, z_hi]], axis=1)
    # show the interface that holds the lines and a margin of 20% around it
    at = np.abs(lo[cut, 2] - fam.z) <= 1e-9 * max(depth, 1.0)
    at &= res.mesh.layer[cut] == fam.region
    span = (x_lo[at].min(), x_hi[at].max()) if np.any(at) else (x_lo.min(), x_hi.max())
    pad = 0.2 * (span[1] - span[0])
    xlim = (max(x_lo.min(), span[0] - pad), min(x_hi.max(), span[1] + pad))
    comps = [(f"σ{'xyz'[a_across] * 2} (across the lines)",
              lambda t: np.einsum("i,nij,j->n", e, t, e)),
             ("σzz", lambda t: t[:, 2, 2])]
    fig = Figure(figsize=(11, 6.6), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, 2, sharex=True, sharey=True)
    for row, (name, pick) in enumerate(comps):
        v_fe = pick(fe_cells[cut])
        v_ov = pick(over_cells[cut])
        lim = nice_limit(float(np.nanpercentile(np.abs(v_fe), 98)))
        panels = ((v_fe, "finite elements (free surfaces, layers)"),
                  (v_ov, "infinite medium (closed form)"))
        for col, (vals, what) in enumerate(panels):
            ax = axes[row, col]
            pc = PolyCollection(polys, array=np.ma.masked_invalid(vals), cmap="RdBu_r",
                                edgecolors="none")
            pc.set_clim(-lim, lim)
            ax.add_collection(pc)
            for lm in films:
                ax.axhline(lm.z_bottom, color="0.25", lw=0.6, ls="--")
            for f in fams:
                if abs(f.template.xi @ xi) > 1 - 1e-9:      # lines normal to this section
                    ax.plot(np.asarray(f.positions) * (f.across @ e), [f.z] * len(f.positions),
                            ls="none", marker="^", color="k", ms=4)
            ax.set_xlim(*xlim)
            ax.set_ylim(zmin, z_top)
            ax.set_title(f"stress {name}, {what}", fontsize=10)
            ax.tick_params(labelsize=9.5)
            if col == 0:
                ax.set_ylabel("z (nm)", fontsize=10.5)
            if row == 1:
                ax.set_xlabel("position across the lines (nm)", fontsize=10.5)
            cb = fig.colorbar(pc, ax=ax, shrink=0.9, extend="both")
            cb.locator = MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10], symmetric=True)
            cb.update_ticks()
            cb.ax.tick_params(labelsize=9.5)
            cb.set_label("MPa", fontsize=10)
    axis_name = "xyz"[a_line]
    fig.suptitle(f"Stress of all dislocations on the section {axis_name} = {x0:.4g} nm, normal "
                 f"to the lines of {fam.name}\ntriangles: lines; dashed: interfaces; colour "
                 "limits rounded up from the 98th percentile of the finite-element values",
                 fontsize=10.5)
    fig.savefig(path)
