"""Offscreen pictures of a result's ``fields.vtu`` (pyvista).

This is the only package module that imports pyvista; the solver core never
does. Colour scales for signed quantities are centred on zero and clipped at
a high percentile, so that a singular corner does not wash out the picture;
the clipping is written on the colour bar.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .export import VTK_TENSOR_ORDER

#: Quantities whose colour scale is centred on zero.
SIGNED = ("stress", "strain", "total_strain", "stress_crystal", "strain_crystal", "hydrostatic",
          "displacement")

UNITS = {"stress": "MPa", "stress_crystal": "MPa", "von_mises": "MPa", "hydrostatic": "MPa",
         "strain": "", "strain_crystal": "", "total_strain": "", "displacement": "nm"}


def _component(mesh, name: str, component: str | None, where: str):
    data = mesh.cell_data[name] if where == "cell" else mesh.point_data[name]
    data = np.asarray(data)
    if data.ndim == 2 and data.shape[1] == 6:
        if component is None:
            component = "XX"
        k = VTK_TENSOR_ORDER.index(component.upper())
        return data[:, k], component.upper()
    if data.ndim == 2 and data.shape[1] == 3:
        k = "XYZ".index((component or "Z").upper())
        return data[:, k], (component or "Z").upper()
    return data, None


def render_section(vtu: Path, png: Path, quantity: str = "stress", component: str | None = "XX",
                   percentile: float = 99.0, window_size=(1400, 700), y: float = 0.0,
                   depth: float | None = None) -> Path:
    """Cross-section on the plane y = const, seen face on, coloured by one component.

    Parameters
    ----------
    vtu : Path
        A result's ``fields.vtu``.
    png : Path
        Picture to write.
    quantity : str
        Cell-data name (``stress``, ``strain``, ``von_mises`` ...).
    component : str or None
        Tensor component (XX, YY, ZZ, XY, YZ, XZ) for 6-component data.
    percentile : float
        Colour limits: this percentile of |value| over the grown layers.
    y : float
        Position of the section plane, nm.
    depth : float, optional
        How far below z = 0 to show, nm (default: three stack heights below
        the lowest free surface).

    Returns
    -------
    Path
        ``png``.
    """
    import pyvista as pv

    pv.OFF_SCREEN = True
    mesh = pv.read(str(vtu))
    values, comp = _component(mesh, quantity, component, "cell")
    label = quantity + (f" {comp}" if comp else "")
    unit = UNITS.get(quantity, "")
    mesh.cell_data["_shown"] = values
    layer = np.asarray(mesh.cell_data["layer"])
    grown = mesh.extract_cells(np.flatnonzero(layer > 0)) if np.any(layer > 0) else mesh
    gb = np.array(grown.bounds).reshape(3, 2)
    top = gb[2, 1]
    stack = max(top - 0.0, 1e-9)
    depth = depth if depth is not None else 3.0 * stack
    half_w = max(abs(gb[0, 0]), abs(gb[0, 1]))
    box = (-1.25 * half_w, 1.25 * half_w, y - 1.0, y + 1.0, -depth, top + 1e-6)
    section = mesh.slice(normal=(0, 1, 0), origin=(0, y, 0)).clip_box(box, invert=False)
    sel = np.abs(values[layer > 0]) if np.any(layer > 0) else np.abs(values)
    vmax = float(np.percentile(sel, percentile)) if sel.size else 1.0
    vmax = vmax if vmax > 0 else 1.0
    signed = quantity in SIGNED
    clim = (-vmax, vmax) if signed else (0.0, vmax)
    cmap = "RdBu_r" if signed else "viridis"
    pl = pv.Plotter(off_screen=True, window_size=list(window_size))
    pl.set_background("white")
    title = f"{label} ({unit})" if unit else label
    _ = pl.add_mesh(section, scalars="_shown", cmap=cmap, clim=clim, lighting=False,
                    scalar_bar_args={"title": title, "color": "black", "fmt": "%.4g",
                                     "vertical": True, "position_x": 0.88, "position_y": 0.2,
                                     "height": 0.6, "width": 0.05, "title_font_size": 16,
                                     "label_font_size": 14})
    for k in np.unique(layer):
        part = section.threshold((k - 0.5, k + 0.5), scalars="layer")
        if part.n_cells:
            _ = pl.add_mesh(part.extract_feature_edges(boundary_edges=True, feature_edges=False,
                                                       manifold_edges=False, non_manifold_edges=False),
                            color="black", line_width=2)
    pl.show_bounds(xtitle="x (nm)", ytitle="y (nm)", ztitle="z (nm)", color="black",
                   grid=False, location="outer", font_size=12, show_yaxis=False, n_zlabels=3)
    pl.add_text(f"{label} on the section y = {y:g} nm; colour limits at the {percentile:g}th "
                f"percentile of the magnitude in the layers (corner peaks clipped)",
                font_size=10, color="black", position="upper_left")
    pl.view_xz()
    pl.enable_parallel_projection()
    pl.reset_camera()
    pl.camera.zoom(1.1)
    png = Path(png)
    pl.screenshot(str(png))
    pl.close()
    return png
