"""2-D maps of a result held in memory, drawn with matplotlib (no OpenGL needed).

Sections, plan views, the sidewall close-up and the device maps are cut from
the mesh in memory (:mod:`mesastrain.io.slices`), shaded per vertex with the
field smoothed within each region, and drawn with ``tripcolor`` (Gouraud
shading). Colour limits are round numbers; signed quantities get a scale
centred on zero; the limits are a high percentile of the magnitude in the
grown layers, so that singular corner values do not wash out the picture, and
the colour bar's arrows say that values beyond them exist.

Nothing here touches VTK: the maps are drawn in the solving process on any
machine, with or without a display or GL library.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain.fem.fields import VTK_TENSOR_ORDER, from_vtk6, hydrostatic, to_vtk6, von_mises
from mesastrain.io.slices import Section, cut
from mesastrain.physics.quantities import describe, nice_limit

__all__ = ["FieldSource", "build_map", "draw_map", "nice_limit", "quantity_label", "standard_maps"]



def quantity_label(name: str, words: str | None = None) -> str:
    """Words and unit of a map quantity, e.g. ``stress σxx (MPa)`` (:mod:`mesastrain.physics.quantities`)."""
    q = describe(name)
    if words:
        return f"{words} ({q.unit})" if q.unit else words
    return q.title


class FieldSource:
    """The fields of a result in memory, named as the maps name them.

    Parameters
    ----------
    p : ndarray (3, nnodes)
    t : ndarray of int (nv, nelems)
    region, volume : ndarray (nelems,)
    point_data : dict of str -> ndarray (nnodes, ...)
        ``displacement`` (nnodes, 3).
    cell_data : dict of str -> ndarray (nelems, ...)
        ``stress`` and ``strain`` as (nelems, 3, 3) tensors; any other
        element quantity (device fields ...) as (nelems,) arrays.
    """

    def __init__(self, p, t, region, volume, point_data: dict, cell_data: dict):
        self.p, self.t = p, t
        self.region = np.asarray(region)
        self.volume = np.asarray(volume, dtype=float)
        self.point_data, self.cell_data = point_data, cell_data
        self._sections: dict = {}
        grown = self.region > 0
        nv = 8 if t.shape[0] >= 8 else 4
        verts = np.unique(t[:nv, grown]) if np.any(grown) else np.arange(p.shape[1])
        gp = p[:, verts]
        self.grown = np.stack([gp.min(axis=1), gp.max(axis=1)], axis=1)   # (3, 2)
        self.model = np.stack([p.min(axis=1), p.max(axis=1)], axis=1)
        self.top = float(self.grown[2, 1])
        # height of the grown stack (for a buried region, its depth below the top)
        self.stack = max(self.top, self.top - float(self.grown[2, 0]), 1e-9)
        first = self.region == 1
        if np.any(first):
            z1 = p[2, np.unique(t[:nv, first])]
            self.first_mid = 0.5 * float(z1.min() + z1.max())
        else:
            self.first_mid = 0.5 * (self.grown[2, 0] + self.grown[2, 1])

    @classmethod
    def from_result(cls, res, extra_cells: dict | None = None) -> FieldSource:
        """The fields of a :class:`mesastrain.run.result.Result` (plus derived cell data)."""
        fl = res.fields
        cells = {"stress": fl.cell_stress, "strain": fl.cell_strain}
        for k, v in (extra_cells or {}).items():
            cells.setdefault(k, v)
        return cls(res.mesh.mesh.p, res.mesh.mesh.t, res.mesh.layer, fl.cell_volume,
                   {"displacement": fl.displacement}, cells)

    @classmethod
    def from_vtu(cls, vtu) -> FieldSource:
        """The fields of a result's ``fields.vtu`` (read with meshio, no VTK).

        Element values are smoothed with equal weights (the file holds no volumes).
        """
        import meshio
        from skfem.io.meshio import INV_HEX_MAPPING

        m = meshio.read(str(vtu))
        block = m.cells[0]
        t = np.asarray(block.data).T
        if block.type == "hexahedron":
            t = t[INV_HEX_MAPPING[:8]]
        elif block.type == "hexahedron27":
            t = t[INV_HEX_MAPPING]
        cells = {k: np.asarray(v[0]) for k, v in m.cell_data.items()}
        points = {k: np.asarray(v) for k, v in m.point_data.items()}
        for q in ("stress", "strain"):
            if q not in cells and q in points:      # nodal only: average to the elements
                cells[q] = points[q][t[:4 if t.shape[0] < 8 else 8]].mean(axis=0)
        region = cells.pop("region" if "region" in cells else "layer").astype(int)
        return cls(np.asarray(m.points, dtype=float).T, t, region, np.ones(t.shape[1]),
                   points, cells)

    @property
    def patterned(self) -> bool:
        return bool(self.grown[0, 1] < self.model[0, 1] * (1 - 1e-9))

    def section(self, axis: int, position: float) -> Section:
        """The section on ``p[axis] = position``, cut once and kept."""
        key = (axis, round(float(position), 9))
        if key not in self._sections:
            self._sections[key] = cut(self.p, self.t, self.region, axis, position)
        return self._sections[key]

    def _cell(self, sec: Section, name: str) -> np.ndarray:
        ck = ("cell", name)
        if ck not in sec._cache:
            data = np.asarray(self.cell_data[name])
            if data.ndim == 2 and data.shape[1] == 6:
                data = from_vtk6(data)
            sec._cache[ck] = sec.cell_values(data, self.t, self.region, self.volume)
        return sec._cache[ck]

    def values(self, sec: Section, name: str) -> tuple[np.ndarray, str, bool]:
        """Values of a quantity at a section's points (display unit), its title and sign.

        Parameters
        ----------
        sec : Section
        name : str
            ``stress_xx`` ... ``strain_xy``, ``displacement_x|y|z``,
            ``von_mises``, ``hydrostatic``, ``principal_max|min`` or the name
            of any element quantity in ``cell_data``.

        Returns
        -------
        values : ndarray (npts,)
            In the unit of :func:`mesastrain.physics.quantities.describe`
            (band energies in meV ...).
        title : str
            Words and unit.
        signed : bool
        """
        q = describe(name)
        return q.scale * self._raw(sec, name), q.title, q.signed

    def _raw(self, sec: Section, name: str) -> np.ndarray:
        parts = name.split("_")
        if parts[0] in ("stress", "strain") and len(parts) == 2 and len(parts[1]) == 2:
            k = VTK_TENSOR_ORDER.index(parts[1].upper())
            return to_vtk6(self._cell(sec, parts[0]))[:, k]
        if name.startswith("displacement_"):
            u = sec.point_values(np.asarray(self.point_data["displacement"]))
            return u[:, "xyz".index(name[-1])]
        if name in ("von_mises", "hydrostatic", "principal_max", "principal_min"):
            sig = self._cell(sec, "stress")
            if name == "von_mises":
                return von_mises(sig)
            if name == "hydrostatic":
                return hydrostatic(sig)
            ev = np.linalg.eigvalsh(sig)
            return ev[:, -1] if name == "principal_max" else ev[:, 0]
        return self._cell(sec, name)

    def view(self, view: str, position: float | None = None,
             depth: float | None = None) -> tuple[Section, tuple, tuple, str, tuple]:
        """Section, x and y limits, words and axis names of a standard view.

        ``section``: y = ``position`` (0), the feature and ``depth`` (three stack
        heights) of substrate; ``section_x``: the same on x = const; ``plan``:
        z = ``position`` (mid-height of the first grown layer) from above;
        ``edge``: the section y = 0 close to the +x sidewall.
        """
        gb = self.grown
        half_w = max(abs(gb[0, 0]), abs(gb[0, 1]))
        half_l = max(abs(gb[1, 0]), abs(gb[1, 1]))
        depth = 3.0 * self.stack if depth is None else depth
        if view == "plan":
            z = self.first_mid if position is None else position
            sec = self.section(2, z)
            xl, yl = tuple(self.model[0]), tuple(self.model[1])
            return sec, xl, yl, f"plan view at z = {z:.4g} nm", ("x (nm)", "y (nm)")
        if view == "section_x":
            x = 0.0 if position is None else position
            sec = self.section(0, x)
            return (sec, (-1.25 * half_l, 1.25 * half_l), (-depth, self.top),
                    f"section x = {x:.4g} nm", ("y (nm)", "z (nm)"))
        y = 0.0 if position is None else position
        sec = self.section(1, y)
        if view == "edge":
            w = 4.0 * max(self.stack, self.top - gb[2, 0])
            return (sec, (half_w - 0.8 * w, half_w + 0.25 * w), (self.top - 0.66 * w, self.top),
                    f"section y = {y:.4g} nm, close to the +x sidewall", ("x (nm)", "z (nm)"))
        return (sec, (-1.25 * half_w, 1.25 * half_w), (-depth, self.top),
                f"section y = {y:.4g} nm", ("x (nm)", "z (nm)"))


DPI = 120


def _wrap(text: str, width: int) -> str:
    import textwrap

    return "\n".join(textwrap.fill(line, width) for line in text.split("\n"))


def _inside(sec: Section, xl, yl) -> np.ndarray:
    """Triangles with a corner inside the window (a margin of 2 %)."""
    mx, my = 0.02 * (xl[1] - xl[0]), 0.02 * (yl[1] - yl[0])
    xy = sec.xy[sec.triangles]
    lo, hi = xy.min(axis=1), xy.max(axis=1)
    return ((hi[:, 0] >= xl[0] - mx) & (lo[:, 0] <= xl[1] + mx)
            & (hi[:, 1] >= yl[0] - my) & (lo[:, 1] <= yl[1] + my))


def build_map(src: FieldSource, name: str, view: str = "section",
              position: float | None = None, depth: float | None = None,
              percentile: float = 99.0, note: str | None = None,
              title: str | None = None, words: str | None = None,
              valid: float | None = None):
    """The figure of one quantity on a standard view (not saved): see :func:`draw_map`.

    Returns
    -------
    matplotlib.figure.Figure
        With an Agg canvas, so that text extents can be measured before saving.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import LineCollection, PolyCollection
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    sec, xl, yl, where_text, (xlab, ylab) = src.view(view, position, depth)
    if len(sec.triangles) == 0:
        raise ValueError(f"nothing of the body lies on the {where_text}")
    vals, label, signed = src.values(sec, name)
    if words:
        label = quantity_label(name, words)
    tri = sec.triangles[_inside(sec, xl, yl)]
    # colour limits from the grown layers' points in the window
    pts = np.unique(tri)
    sel = vals[pts][sec.region[pts] > 0]
    sel = sel[np.isfinite(sel)]
    if sel.size == 0:       # nothing (or nothing defined) in the layers: the whole window
        sel = vals[pts][np.isfinite(vals[pts])]
    if signed:
        vmax = nice_limit(float(np.percentile(np.abs(sel), percentile)) if sel.size else 1.0)
        if valid is not None:       # the model holds up to ±valid: the colours stop there
            vmax = min(vmax, nice_limit(valid))
        clim = (-vmax, vmax)
    else:
        hi = nice_limit(float(np.percentile(sel, percentile)) if sel.size else 1.0)
        lo = float(np.percentile(sel, 100 - percentile)) if sel.size else 0.0
        clim = (0.0 if lo >= 0 else -nice_limit(-lo), hi)
    finite = np.all(np.isfinite(vals[tri]), axis=1)
    data = vals[np.unique(tri[finite])]
    above = bool(data.size and np.nanmax(data) > clim[1])
    below = bool(data.size and np.nanmin(data) < clim[0])
    extend = {(True, True): "both", (True, False): "max", (False, True): "min",
              (False, False): "neither"}[(above, below)]
    aspect = (yl[1] - yl[0]) / max(xl[1] - xl[0], 1e-12)
    axw = 6.2 if aspect < 0.8 else 5.0
    axh = min(axw * aspect, 5.5)
    axw = axh / aspect if axw * aspect > axh else axw
    to_scale = axh >= 1.2       # a thin slab seen from above: stretched, and said so
    axh = max(axh, 1.2)
    caption = title or f"{label}, {where_text}" + ("" if to_scale else " (not to scale)")
    where = "in the layers" if np.any(np.isfinite(vals[pts][sec.region[pts] > 0])) else \
        "in the picture"
    clip = ("Colour scale centred on zero, limits rounded up from the "
            f"{percentile:g}th percentile of |value| {where}" if signed else
            f"Colour limits rounded up from the {percentile:g}th percentile {where}")
    if valid is not None and clim[1] <= nice_limit(valid):
        clip = (f"Colour scale centred on zero, limited to ±{clim[1]:g} {describe(name).unit}, "
                f"the range where the model holds"
                + ("; arrow ends: values beyond it, out of range" if extend != "neither" else ""))
    elif extend != "neither":
        clip += "; arrow ends: values beyond them exist (singular corners)"
    clip += ". Black lines: region boundaries."
    left, right, top = 0.95, 1.3, 0.25
    fw = left + axw + right
    note = note[:1].upper() + note[1:] if note else note
    foot = _wrap(clip + (f"\n{note}" if note else ""), int((fw - 0.3) * 12.5))
    head = _wrap(caption, int((fw - 0.4) * 10.0))
    nfoot, nhead = foot.count("\n") + 1, head.count("\n") + 1
    top += 0.24 * nhead
    bottom = 0.7 + 0.19 * nfoot
    fh = bottom + axh + top
    fig = Figure(figsize=(fw, fh), dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((left / fw, bottom / fh, axw / fw, axh / fh))
    cax = fig.add_axes(((left + axw + 0.32) / fw, bottom / fh, 0.16 / fw, axh / fh))
    cmap = "RdBu_r" if signed else "viridis"
    if np.any(finite):
        im = ax.tripcolor(sec.xy[:, 0], sec.xy[:, 1], tri[finite], np.nan_to_num(vals),
                          shading="gouraud", cmap=cmap, vmin=clim[0], vmax=clim[1],
                          rasterized=True)
    else:
        im = None
    if not np.all(finite):
        ax.add_collection(PolyCollection(sec.xy[tri[~finite]], facecolors="0.78",
                                         edgecolors="face", linewidths=0.2))
    seg = sec.boundary_segments()
    ax.add_collection(LineCollection(seg, colors="k", linewidths=0.9))
    ax.set_xlim(*xl)
    ax.set_ylim(*yl)
    ax.set_aspect("equal" if to_scale else "auto")
    ax.set_xlabel(xlab, fontsize=11)
    ax.set_ylabel(ylab, fontsize=11, labelpad=2)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=6 if axw > 5.5 else 5,
                                           steps=[1, 2, 2.5, 5, 10]))
    ax.yaxis.set_major_locator(MaxNLocator(nbins=max(2, min(5, int(axh / 0.45))),
                                           steps=[1, 2, 2.5, 5, 10]))
    ax.tick_params(labelsize=10)
    if im is not None:
        cb = fig.colorbar(im, cax=cax, extend=extend)
        cb.locator = MaxNLocator(nbins=max(3, min(6, int(axh / 0.35))),
                                 steps=[1, 2, 2.5, 5, 10], symmetric=signed)
        cb.update_ticks()
        cb.ax.tick_params(labelsize=10)
    else:
        cax.set_visible(False)
    fig.text(0.1 / fw, 1 - 0.1 / fh, head, fontsize=12, va="top", ha="left")
    fig.text(0.1 / fw, (bottom - 0.62) / fh, foot, va="top", fontsize=9, color="0.2")
    return fig


def draw_map(src: FieldSource, png: Path, name: str, view: str = "section",
             position: float | None = None, depth: float | None = None,
             percentile: float = 99.0, note: str | None = None,
             title: str | None = None, words: str | None = None,
             valid: float | None = None) -> Path:
    """Draw one quantity on a standard view into a PNG.

    Parameters
    ----------
    src : FieldSource
    png : Path
    name : str
        Quantity (see :meth:`FieldSource.values`).
    view : {"section", "section_x", "plan", "edge"}
    position, depth : float, optional
        Plane position and substrate depth shown (nm), see :meth:`FieldSource.view`.
    percentile : float
        Colour limits: this percentile of the magnitude in the grown layers,
        rounded up to a round number.
    note : str, optional
        A line under the caption (e.g. what grey means).
    title : str, optional
        Replaces the default caption (quantity, unit and plane).
    words : str, optional
        Replaces the quantity's words in the caption (its unit is kept), e.g.
        a channel described by carrier and direction.
    valid : float, optional
        The magnitude up to which the quantity's model holds (display unit):
        the colour scale stops there, and the arrows mark values beyond it.

    Returns
    -------
    Path
    """
    fig = build_map(src, name, view, position, depth, percentile, note, title, words, valid)
    png = Path(png)
    fig.savefig(png, dpi=DPI, facecolor="white")
    return png


def standard_maps(src: FieldSource, out_dir: Path, maps=("stress_xx", "von_mises"),
                  edge: bool = True) -> list[Path]:
    """For each component a section and a plan view (and the sidewall close-up of the first).

    Returns
    -------
    list of Path
        ``map_section_<name>.png``, ``map_plan_<name>.png`` and, for a
        patterned result, ``map_edge_<first name>.png``, in order.
    """
    out_dir = Path(out_dir)
    written = []
    for i, name in enumerate(maps):
        for view in ("section", "plan") + (("edge",) if edge and i == 0 and src.patterned
                                           else ()):
            written.append(draw_map(src, out_dir / f"map_{view}_{name}.png", name, view))
    return written
