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

__all__ = ["FieldSource", "draw_map", "nice_limit", "quantity_label", "standard_maps"]

_GREEK = {"stress": "σ", "strain": "ε"}
#: Quantities whose colour scale is centred on zero.
SIGNED = ("stress", "strain", "total_strain", "stress_crystal", "strain_crystal", "hydrostatic",
          "displacement", "raman_shift", "band_gap_shift")
SIGNED_PREFIXES = ("band_shift_", "piezo_")
_NAMED = {"von_mises": ("von Mises stress", "MPa"), "hydrostatic": ("hydrostatic stress", "MPa"),
          "principal_max": ("largest principal stress", "MPa"),
          "principal_min": ("smallest principal stress", "MPa"),
          "raman_shift": ("Raman shift", "cm⁻¹"), "band_gap_shift": ("band-gap change", "eV")}


def quantity_label(name: str) -> str:
    """Words and unit of a map quantity, e.g. ``stress σxx (MPa)``."""
    parts = name.split("_")
    if parts[0] in _GREEK and len(parts) == 2 and len(parts[1]) == 2:
        unit = " (MPa)" if parts[0] == "stress" else ""
        return f"{parts[0]} {_GREEK[parts[0]]}{parts[1]}{unit}"
    if name.startswith("displacement_"):
        return f"displacement u{name[-1]} (nm)"
    if name in _NAMED:
        words, unit = _NAMED[name]
        return f"{words} ({unit})"
    if name.startswith("piezo_") and name.endswith("_long"):
        return f"resistivity change, channel {name[6:-5]} (%)"
    if name.startswith("band_shift_"):
        return f"band-edge shift {name[11:].replace('_', ' ')} (eV)"
    return name.replace("_", " ")


def nice_limit(v: float) -> float:
    """The smallest round number (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 x 10^k) not below ``v`` > 0."""
    if not np.isfinite(v) or v <= 0:
        return 1.0
    mag = 10.0 ** np.floor(np.log10(v))
    for m in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0):
        if m * mag >= v * (1 - 1e-9):
            return float(m * mag)
    return float(10 * mag)


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
        """Values of a quantity at a section's points, its label and whether it is signed.

        Parameters
        ----------
        sec : Section
        name : str
            ``stress_xx`` ... ``strain_xy``, ``displacement_x|y|z``,
            ``von_mises``, ``hydrostatic``, ``principal_max|min`` or the name
            of any element quantity in ``cell_data``.
        """
        parts = name.split("_")
        label = quantity_label(name)
        if parts[0] in ("stress", "strain") and len(parts) == 2 and len(parts[1]) == 2:
            k = VTK_TENSOR_ORDER.index(parts[1].upper())
            return to_vtk6(self._cell(sec, parts[0]))[:, k], label, True
        if name.startswith("displacement_"):
            u = sec.point_values(np.asarray(self.point_data["displacement"]))
            return u[:, "xyz".index(name[-1])], label, True
        if name in ("von_mises", "hydrostatic", "principal_max", "principal_min"):
            sig = self._cell(sec, "stress")
            if name == "von_mises":
                return von_mises(sig), label, False
            if name == "hydrostatic":
                return hydrostatic(sig), label, True
            ev = np.linalg.eigvalsh(sig)
            return (ev[:, -1] if name == "principal_max" else ev[:, 0]), label, True
        v = self._cell(sec, name)
        signed = name in SIGNED or name.startswith(SIGNED_PREFIXES)
        return v, label, signed

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


def draw_map(src: FieldSource, png: Path, name: str, view: str = "section",
             position: float | None = None, depth: float | None = None,
             percentile: float = 99.0, note: str | None = None,
             title: str | None = None) -> Path:
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
        Replaces the default caption.

    Returns
    -------
    Path
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
    tri = sec.triangles[_inside(sec, xl, yl)]
    # colour limits from the grown layers' points in the window
    pts = np.unique(tri)
    sel = vals[pts][sec.region[pts] > 0] if np.any(sec.region[pts] > 0) else vals[pts]
    sel = sel[np.isfinite(sel)]
    if signed:
        vmax = nice_limit(float(np.percentile(np.abs(sel), percentile)) if sel.size else 1.0)
        clim = (-vmax, vmax)
    else:
        hi = nice_limit(float(np.percentile(sel, percentile)) if sel.size else 1.0)
        lo = float(np.percentile(sel, 100 - percentile)) if sel.size else 0.0
        clim = (0.0 if lo >= 0 else -nice_limit(-lo), hi)
    finite = np.all(np.isfinite(vals[tri]), axis=1)
    aspect = (yl[1] - yl[0]) / max(xl[1] - xl[0], 1e-12)
    axw = 6.2 if aspect < 0.8 else 5.0
    axh = min(axw * aspect, 5.5)
    axw = axh / aspect if axw * aspect > axh else axw
    to_scale = axh >= 1.2       # a thin slab seen from above: stretched, and said so
    axh = max(axh, 1.2)
    caption = title or f"{label}, {where_text}" + ("" if to_scale else " (not to scale)")
    clip = (f"colour scale centred on zero; limits: {percentile:g}th percentile of the "
            f"magnitude in the layers, rounded up (corner peaks beyond it)" if signed else
            f"colour limits: {percentile:g}th percentile in the layers, rounded up "
            f"(corner peaks beyond it)")
    foot = _wrap(clip + "; black lines: region boundaries" + (f"\n{note}" if note else ""),
                 int((axw + 1.9) * 14.5))
    nfoot = foot.count("\n") + 1
    left, right, top, bottom = 0.85, 1.05, 0.4, 0.55 + 0.16 * nfoot
    fw, fh = left + axw + right, bottom + axh + top
    fig = Figure(figsize=(fw, fh), dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((left / fw, bottom / fh, axw / fw, axh / fh))
    cax = fig.add_axes(((left + axw + 0.12) / fw, bottom / fh, 0.14 / fw, axh / fh))
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
    ax.set_xlabel(xlab)
    ax.set_ylabel(ylab)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=7, steps=[1, 2, 2.5, 5, 10]))
    ax.yaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    ax.tick_params(labelsize=9)
    if im is not None:
        data = vals[np.unique(tri[finite])]
        extend = ("both" if signed or clim[0] < 0 else "max")
        if data.size and np.nanmax(data) <= clim[1] and np.nanmin(data) >= clim[0]:
            extend = "neither"
        cb = fig.colorbar(im, cax=cax, extend=extend)
        cb.locator = MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10], symmetric=signed)
        cb.update_ticks()
        cb.ax.tick_params(labelsize=9)
    else:
        cax.set_visible(False)
    ax.set_title(caption, fontsize=11, loc="left")
    fig.text(0.12 / fw, (bottom - 0.5) / fh, foot, va="top", fontsize=8,
             color="0.25")
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
