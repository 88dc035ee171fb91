"""Offscreen pictures of a result's ``fields.vtu`` (pyvista).

This is the only package module that imports pyvista; the solver core never
does. Colour scales for signed quantities are centred on zero and clipped at
a high percentile, so that a singular corner does not wash out the picture;
the clipping is written on the colour bar.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain.io.export import VTK_TENSOR_ORDER, from_vtk6
from mesastrain.physics.quantities import describe

#: Quantities whose colour scale is centred on zero.
SIGNED = ("stress", "strain", "total_strain", "stress_crystal", "strain_crystal", "hydrostatic",
          "displacement", "raman_shift", "band_gap_shift")
#: Name prefixes of signed quantities named per band or per channel (mesastrain.derived.device).
SIGNED_PREFIXES = ("band_shift_", "piezo_")


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
                   depth: float | None = None, note: str | None = None) -> Path:
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
    note : str, optional
        A second line under the picture's caption (e.g. what grey cells mean).

    Returns
    -------
    Path
        ``png``.
    """
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    pv.OFF_SCREEN = True
    mesh = load(vtu)
    values, comp = _component(mesh, quantity, component, "cell")
    q = describe(f"{quantity}_{comp.lower()}" if comp and len(comp) == 2 else quantity)
    values = values * (q.scale if not comp else 1.0)
    label, unit = q.words, q.unit
    mesh.cell_data["_shown"] = values
    layer = np.asarray(mesh.cell_data["region"])
    grown = mesh.extract_cells(np.flatnonzero(layer > 0)) if np.any(layer > 0) else mesh
    gb = np.array(grown.bounds).reshape(3, 2)
    top = gb[2, 1]
    stack = max(top - 0.0, 1e-9)
    depth = depth if depth is not None else 3.0 * stack
    half_w = max(abs(gb[0, 0]), abs(gb[0, 1]))
    box = (-1.25 * half_w, 1.25 * half_w, y - 1.0, y + 1.0, -depth, top + 1e-6)
    section = mesh.slice(normal=(0, 1, 0), origin=(0, y, 0)).clip_box(box, invert=False)
    sel = np.abs(values[layer > 0]) if np.any(layer > 0) else np.abs(values)
    sel = sel[np.isfinite(sel)]          # NaN = not defined in that material
    vmax = float(np.percentile(sel, percentile)) if sel.size else 1.0
    vmax = vmax if vmax > 0 else 1.0
    signed = quantity in SIGNED or quantity.startswith(SIGNED_PREFIXES)
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
        part = section.threshold((k - 0.5, k + 0.5), scalars="region")
        if part.n_cells:
            _ = pl.add_mesh(part.extract_feature_edges(boundary_edges=True, feature_edges=False,
                                                       manifold_edges=False, non_manifold_edges=False),
                            color="black", line_width=2)
    pl.show_bounds(xtitle="x (nm)", ytitle="y (nm)", ztitle="z (nm)", color="black",
                   grid=False, location="outer", font_size=12, show_yaxis=False, n_zlabels=3)
    pl.add_text(f"{label} on the section y = {y:g} nm; colour limits at the {percentile:g}th "
                f"percentile of the magnitude in the layers (corner peaks clipped)"
                + (f"\n{note}" if note else ""),
                font_size=10, color="black", position="upper_left")
    pl.view_xz()
    pl.enable_parallel_projection()
    pl.reset_camera()
    pl.camera.zoom(1.1)
    png = Path(png)
    pl.screenshot(str(png))
    pl.close()
    return png


# --------------------------------------------------------------------------
# maps: plan view, cross-section and sidewall close-up of any field component
# --------------------------------------------------------------------------
#: Principal-stress names computed from the cell stress tensor.
_PRINCIPAL = ("principal_max", "principal_min")


def load(vtu) -> pyvista.UnstructuredGrid:  # noqa: F821
    """Read a result's ``fields.vtu`` (or pass a pyvista mesh through)."""
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    if isinstance(vtu, (str, Path)):
        vtu = pv.read(str(vtu))
    if "region" not in vtu.cell_data and "layer" in vtu.cell_data:   # results of earlier versions
        vtu.cell_data["region"] = vtu.cell_data["layer"]
    return vtu


def map_values(mesh, name: str):
    """Cell (or point) values of a component name and how to draw them.

    Parameters
    ----------
    mesh : pyvista.UnstructuredGrid
        A result's fields.
    name : str
        ``stress_xx`` ... ``strain_xy``, ``displacement_x|y|z``, ``von_mises``,
        ``hydrostatic``, ``principal_max``, ``principal_min`` (the names of
        :data:`mesastrain.case.schema.FIELD_COMPONENTS`), or any cell-data name.

    Returns
    -------
    values : ndarray
    where : {"cell", "point"}
    label : str
        Colour-bar title with the unit.
    signed : bool
        True for a zero-centred diverging scale.
    """
    if name.startswith(("stress_", "strain_")) and len(name.split("_")[1]) == 2:
        q, c = name.split("_")
        where = "cell" if q in mesh.cell_data.keys() else "point"
        values, _ = _component(mesh, q, c.upper(), where)
        return values, where, describe(f"{q}_{c.lower()}").title, True
    if name.startswith("displacement_"):
        values, c = _component(mesh, "displacement", name[-1].upper(), "point")
        return values, "point", describe(name).title, True
    if name in _PRINCIPAL:
        sig = from_vtk6(np.asarray(mesh.cell_data["stress"]))
        ev = np.linalg.eigvalsh(sig)
        values = ev[:, -1] if name == "principal_max" else ev[:, 0]
        return values, "cell", describe(name).title, True
    if name in ("von_mises", "hydrostatic"):
        label = describe(name).title
        if name in mesh.cell_data.keys():
            return _component(mesh, name, None, "cell")[0], "cell", label, name == "hydrostatic"
        if name in mesh.point_data.keys():
            return _component(mesh, name, None, "point")[0], "point", label, name == "hydrostatic"
        sig = from_vtk6(np.asarray(mesh.cell_data["stress"]))
        tr = np.trace(sig, axis1=1, axis2=2) / 3.0
        if name == "hydrostatic":
            return tr, "cell", label, True
        dev = sig - tr[:, None, None] * np.eye(3)
        return np.sqrt(1.5 * np.einsum("nij,nij->n", dev, dev)), "cell", label, False
    values, comp = _component(mesh, name, None, "cell")
    q = describe(f"{name}_{comp.lower()}" if comp and len(comp) == 2 else name)
    if not comp:
        values = values * q.scale
    signed = name in SIGNED or name.startswith(SIGNED_PREFIXES)
    return values, "cell", q.title, signed


def _layout(mesh):
    """Top of the stack, grown-layer extent, etch floor and layer interfaces (nm)."""
    layer = np.asarray(mesh.cell_data["region"])
    grown = mesh.extract_cells(np.flatnonzero(layer > 0)) if np.any(layer > 0) else mesh
    gb = np.array(grown.bounds).reshape(3, 2)
    mb = np.array(mesh.bounds).reshape(3, 2)
    return {"top": gb[2, 1], "bottom_of_layers": gb[2, 0], "grown": gb, "model": mb,
            "stack": max(gb[2, 1] - 0.0, 1e-9), "layers": np.unique(layer)}


def _limits(values, layer, signed: bool, percentile: float):
    sel = values[layer > 0] if np.any(layer > 0) and values.size == layer.size else values
    sel = np.abs(sel[np.isfinite(sel)]) if signed else sel[np.isfinite(sel)]
    if not sel.size:
        return (-1.0, 1.0) if signed else (0.0, 1.0)
    if signed:
        vmax = float(np.percentile(sel, percentile)) or 1.0
        return (-vmax, vmax)
    lo = min(float(np.percentile(sel, 100 - percentile)), 0.0)
    hi = float(np.percentile(sel, percentile))
    return (lo, hi if hi > lo else lo + 1.0)


def nice_range(lo: float, hi: float, max_labels: int = 7) -> tuple[float, float, int]:
    """Axis bounds on a round step (1, 2, 2.5 or 5 x 10^k) covering [lo, hi], and the label count."""
    span = max(hi - lo, 1e-12)
    for n in range(max_labels - 1, 1, -1):
        raw = span / n
        mag = 10.0 ** np.floor(np.log10(raw))
        for m in (1.0, 2.0, 2.5, 5.0, 10.0):
            step = m * mag
            a, b = np.floor(lo / step + 1e-9) * step, np.ceil(hi / step - 1e-9) * step
            k = int(round((b - a) / step)) + 1
            if k <= max_labels and (b - a) <= 1.35 * span:
                return float(a), float(b), k
    return float(lo), float(hi), 3


def render_map(vtu, png: Path, name: str = "stress_xx", view: str = "section",
               position: float | None = None, percentile: float = 99.0,
               window_size=None, title: str | None = None) -> Path:
    """Picture of one component on a plane, offscreen.

    Parameters
    ----------
    vtu : Path or pyvista mesh
        A result's ``fields.vtu``.
    png : Path
        Picture to write.
    name : str
        Component (see :func:`map_values`).
    view : {"section", "section_x", "plan", "edge"}
        ``section``: the plane y = ``position`` (default 0) seen face on, the
        feature and a substrate depth of three stack heights below it;
        ``section_x``: the same on the plane x = ``position``;
        ``plan``: the plane z = ``position`` (default mid-height of the first
        grown layer) seen from above; ``edge``: the section y = 0 close to the
        +x sidewall (four stack heights wide).
    position : float, optional
        Plane position, nm.
    percentile : float
        Colour limits: this percentile of |value| in the grown layers (signed
        quantities, scale centred on zero), so that singular corner peaks do
        not wash out the picture; the caption says so.
    window_size : (int, int), optional
        Default (1200, 560) for sections, (900, 820) for plan views.
    title : str, optional
        Caption; a default one says what is shown.

    Returns
    -------
    Path
    """
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    pv.OFF_SCREEN = True
    mesh = load(vtu).copy(deep=False)
    values, where, label, signed = map_values(mesh, name)
    lay = _layout(mesh)
    if where == "cell":
        mesh.cell_data["_shown"] = values
    else:
        mesh.point_data["_shown"] = values
    layer = np.asarray(mesh.cell_data["region"])
    top, gb = lay["top"], lay["grown"]
    half_w = max(abs(gb[0, 0]), abs(gb[0, 1]))
    half_l = max(abs(gb[1, 0]), abs(gb[1, 1]))
    if view == "plan":
        if position is None:
            z1 = mesh.extract_cells(np.flatnonzero(layer == 1)) if np.any(layer == 1) else mesh
            b1 = np.array(z1.bounds).reshape(3, 2)
            position = 0.5 * (b1[2, 0] + b1[2, 1])
        plane = mesh.slice(normal=(0, 0, 1), origin=(0, 0, position))
        where_text = f"plan view at z = {position:.4g} nm"
    elif view == "section_x":
        x = 0.0 if position is None else position
        depth = 3.0 * lay["stack"]
        plane = mesh.slice(normal=(1, 0, 0), origin=(x, 0, 0)).clip_box(
            (x - 1.0, x + 1.0, -1.25 * half_l, 1.25 * half_l, -depth, top + 1e-6), invert=False)
        where_text = f"section x = {x:.4g} nm"
    else:
        y = 0.0 if position is None else position
        full = mesh.slice(normal=(0, 1, 0), origin=(0, y, 0))
        depth = 3.0 * lay["stack"]
        if view == "edge":
            w = 4.0 * max(lay["stack"], top - gb[2, 0])
            box = (half_w - 0.8 * w, half_w + 0.25 * w, y - 1.0, y + 1.0,
                   top - 1.1 * w * 0.6, top + 1e-6)
            where_text = f"section y = {y:.4g} nm, close to the +x sidewall"
        else:
            box = (-1.25 * half_w, 1.25 * half_w, y - 1.0, y + 1.0, -depth, top + 1e-6)
            where_text = f"section y = {y:.4g} nm"
        plane = full.clip_box(box, invert=False)
    if plane.n_cells == 0:
        raise ValueError(f"nothing of the body lies on the {where_text}")
    clim = _limits(values, layer, signed, percentile)
    cmap = "RdBu_r" if signed else "viridis"
    if window_size is None:
        window_size = (1000, 820) if view == "plan" else (1200, 560)
    pl = pv.Plotter(off_screen=True, window_size=list(window_size))
    pl.set_background("white")
    _ = pl.add_mesh(plane, scalars="_shown", cmap=cmap, clim=clim, lighting=False,
                    preference=where,
                    scalar_bar_args={"title": label, "color": "black", "fmt": "%.4g",
                                     "vertical": True, "position_x": 0.84, "position_y": 0.12,
                                     "height": 0.7, "width": 0.05, "title_font_size": 18,
                                     "label_font_size": 15, "n_labels": 5})
    for k in np.unique(np.asarray(plane.cell_data["region"])):
        part = plane.threshold((k - 0.5, k + 0.5), scalars="region")
        if part.n_cells:
            edges = part.extract_feature_edges(boundary_edges=True, feature_edges=False,
                                               manifold_edges=False, non_manifold_edges=False)
            if edges.n_cells:
                _ = pl.add_mesh(edges, color="black", line_width=2)
    b = np.array(plane.bounds).reshape(3, 2)
    x0, x1, nx = nice_range(b[0, 0], b[0, 1])
    if view == "plan":
        y0, y1, ny = nice_range(b[1, 0], b[1, 1])
        pl.show_bounds(bounds=[x0, x1, y0, y1, b[2, 0], b[2, 1]], xtitle="x (nm)",
                       ytitle="y (nm)", ztitle=" ", color="black", grid=False, location="outer",
                       font_size=14, show_zaxis=False, n_xlabels=nx, n_ylabels=ny, fmt="%.4g")
        pl.view_xy()
    elif view == "section_x":
        y0, y1, ny = nice_range(b[1, 0], b[1, 1])
        z0, z1, nz = nice_range(b[2, 0], b[2, 1], 4)
        pl.show_bounds(bounds=[b[0, 0], b[0, 1], y0, y1, z0, z1], xtitle=" ", ytitle="y (nm)",
                       ztitle="z (nm)", color="black", grid=False, location="outer",
                       font_size=14, show_xaxis=False, n_ylabels=ny, n_zlabels=nz, fmt="%.4g")
        pl.view_yz()
    else:
        z0, z1, nz = nice_range(b[2, 0], b[2, 1], 4 if view == "section" else 6)
        pl.show_bounds(bounds=[x0, x1, b[1, 0], b[1, 1], z0, z1], xtitle="x (nm)", ytitle=" ",
                       ztitle="z (nm)", color="black", grid=False, location="outer",
                       font_size=14, show_yaxis=False, n_xlabels=nx, n_zlabels=nz, fmt="%.4g")
        pl.view_xz()
    clip_note = (f"colour scale centred on zero, limits at the {percentile:g}th percentile of "
                 f"the magnitude in the layers (singular corner peaks clipped)" if signed else
                 f"colour limits from 0 to the {percentile:g}th percentile in the layers "
                 f"(corner peaks clipped)")
    caption = title or f"{label} - {where_text}; black lines: layer boundaries"
    pl.add_text(caption + "\n" + clip_note, font_size=10 if view != "plan" else 9,
                color="black", position="upper_left")
    pl.enable_parallel_projection()
    pl.reset_camera()
    pl.camera.zoom({"section": 1.25, "section_x": 1.25, "plan": 0.9}.get(view, 1.0))
    png = Path(png)
    img = pl.screenshot(return_img=True)
    pl.close()
    save_trimmed(img, png)
    return png


def save_trimmed(img: np.ndarray, png: Path, margin: int = 12) -> Path:
    """Save an RGB(A) screenshot as PNG without its empty white border."""
    from PIL import Image

    rgb = np.asarray(img)[..., :3]
    ink = np.any(rgb < 245, axis=2)
    rows, cols = np.flatnonzero(ink.any(axis=1)), np.flatnonzero(ink.any(axis=0))
    if rows.size and cols.size:
        r0, r1 = max(rows[0] - margin, 0), min(rows[-1] + margin + 1, rgb.shape[0])
        c0, c1 = max(cols[0] - margin, 0), min(cols[-1] + margin + 1, rgb.shape[1])
        rgb = rgb[r0:r1, c0:c1]
    Image.fromarray(np.ascontiguousarray(rgb)).save(str(png))
    return Path(png)


def standard_pictures(vtu, out_dir: Path, maps=("stress_xx", "stress_zz", "von_mises"),
                      edge: bool = True) -> list[Path]:
    """The standard maps of a result: for each component a section and a plan view.

    Parameters
    ----------
    vtu : Path or pyvista mesh
        ``fields.vtu`` of a result.
    out_dir : Path
        Where the pictures go (``map_section_<name>.png``, ``map_plan_<name>.png``
        and, for the first component of a patterned result, ``map_edge_<name>.png``).
    maps : sequence of str
        Component names (see :func:`map_values`).
    edge : bool
        Also draw the sidewall close-up of the first component.

    Returns
    -------
    list of Path
        The pictures written, in order.
    """
    mesh = load(vtu)
    out_dir = Path(out_dir)
    lay = _layout(mesh)
    patterned = (lay["grown"][0, 1] < lay["model"][0, 1] * (1 - 1e-9))
    written = []
    for i, name in enumerate(maps):
        written.append(render_map(mesh, out_dir / f"map_section_{name}.png", name, "section"))
        written.append(render_map(mesh, out_dir / f"map_plan_{name}.png", name, "plan"))
        if edge and i == 0 and patterned:
            written.append(render_map(mesh, out_dir / f"map_edge_{name}.png", name, "edge"))
    return written


def _three_d(pl, mesh, values_name, clim, cmap, label, where):
    _ = pl.add_mesh(mesh, scalars=values_name, cmap=cmap, clim=clim, preference=where,
                    scalar_bar_args={"title": label, "color": "black", "fmt": "%.4g",
                                     "vertical": True, "position_x": 0.86, "position_y": 0.18,
                                     "height": 0.62, "width": 0.045, "title_font_size": 15,
                                     "label_font_size": 13, "n_labels": 5})


def render_warped(vtu, png: Path, name: str = "von_mises", scale: float | None = None,
                  window_size=(1400, 900)) -> tuple[Path, float]:
    """The body cut open on y = 0 and warped by its displacement, offscreen.

    Parameters
    ----------
    vtu : Path or pyvista mesh
    png : Path
    name : str
        Component coloured on the surface (see :func:`map_values`).
    scale : float, optional
        Displacement magnification; default: the largest displacement is drawn
        as 5 % of the stack's lateral size.

    Returns
    -------
    (Path, float)
        The picture and the magnification used.
    """
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    pv.OFF_SCREEN = True
    mesh = load(vtu).copy(deep=False)
    values, where, label, signed = map_values(mesh, name)
    (mesh.cell_data if where == "cell" else mesh.point_data)["_shown"] = values
    lay = _layout(mesh)
    disp = np.asarray(mesh.point_data["displacement"])
    size = float(np.ptp(lay["grown"][0]) or np.ptp(lay["model"][0]))
    umax = float(np.max(np.linalg.norm(disp, axis=1))) or 1.0
    scale = scale if scale is not None else 0.05 * size / umax
    mesh.point_data["_u"] = disp
    gb = lay["grown"]
    hw = 1.25 * max(abs(gb[0, 0]), abs(gb[0, 1]))
    hl = 1.25 * max(abs(gb[1, 0]), abs(gb[1, 1]))
    box = (-hw, hw, -hl, 0.0, -3.0 * lay["stack"], lay["top"] + 1e-6)
    half = mesh.clip_box(box, invert=False).warp_by_vector("_u", factor=scale)
    pl = pv.Plotter(off_screen=True, window_size=list(window_size))
    pl.set_background("white")
    clim = _limits(values, np.asarray(mesh.cell_data["region"]), signed, 99.0)
    _three_d(pl, half, "_shown", clim, "RdBu_r" if signed else "viridis", label, where)
    pl.add_text(f"{label} on the body cut open at y = 0 (y <= 0 shown, substrate to three "
                f"stack heights), displacement magnified {scale:.3g} x"
                f"\ncolour limits at the 99th percentile in the layers", font_size=9,
                color="black", position="upper_left")
    pl.show_bounds(xtitle="x (nm)", ytitle="y (nm)", ztitle="z (nm)", color="black",
                   font_size=10, fmt="%.4g")
    pl.view_isometric()
    img = pl.screenshot(return_img=True)
    pl.close()
    return save_trimmed(img, png), scale


def render_layer(vtu, png: Path, layer: int, name: str = "stress_xx",
                 window_size=(1400, 900)) -> Path:
    """One region (``layer`` id: 0 substrate, 1.. grown layers) in 3-D, offscreen."""
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    pv.OFF_SCREEN = True
    mesh = load(vtu).copy(deep=False)
    values, where, label, signed = map_values(mesh, name)
    (mesh.cell_data if where == "cell" else mesh.point_data)["_shown"] = values
    part = mesh.threshold((layer - 0.5, layer + 0.5), scalars="region")
    if part.n_cells == 0:
        raise ValueError(f"no cells with region = {layer}")
    pl = pv.Plotter(off_screen=True, window_size=list(window_size))
    pl.set_background("white")
    sel = np.asarray(part["_shown"])
    clim = _limits(sel, np.ones(len(sel)), signed, 99.0)
    _three_d(pl, part, "_shown", clim, "RdBu_r" if signed else "viridis", label, where)
    names = {int(np.asarray(mesh.field_data[k]).ravel()[0]): k.removeprefix("region ")
             for k in mesh.field_data.keys() if k.startswith("region ")}
    pl.add_text(f"{label} in {names.get(layer, f'region {layer}')} only; colour limits at "
                f"the 99th percentile",
                font_size=9, color="black", position="upper_left")
    pl.show_bounds(xtitle="x (nm)", ytitle="y (nm)", ztitle="z (nm)", color="black",
                   font_size=10, fmt="%.4g")
    pl.view_isometric()
    img = pl.screenshot(return_img=True)
    pl.close()
    return save_trimmed(img, png)
