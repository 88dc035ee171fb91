"""``mesastrain view DIR``: look at a result.

Where a display exists (``DISPLAY`` or ``WAYLAND_DISPLAY`` set, or forced with
``--window``) it opens an interactive pyvista window: the body cut open on the
section y = 0, coloured by the chosen component on a zero-centred scale, with
the layer boundaries drawn. Otherwise (or with ``--pictures``) it writes the
standard maps of :func:`mesastrain.io.maps.standard_maps` (matplotlib, no OpenGL
needed; also where a display exists but no GL library does) into the
result folder (or ``--out``) and prints their paths.
"""

from __future__ import annotations

import os
from pathlib import Path

from mesastrain.errors import CaseError


def has_display() -> bool:
    """True when an interactive window can be opened (X11 or Wayland display set)."""
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def result_vtu(folder: Path) -> Path:
    """``fields.vtu`` of a result folder; a CaseError naming the problem otherwise."""
    folder = Path(folder)
    if not folder.is_dir():
        raise CaseError("DIR", f"{folder} is not a result folder (no such directory)")
    vtu = folder / "fields.vtu"
    if not vtu.is_file():
        raise CaseError("DIR", f"{folder} holds no fields.vtu (was it written with "
                               f"output.vtu = false?)")
    check_fields(vtu)
    return vtu


#: Arrays every ``fields.vtu`` written by mesastrain carries: (where, name, components).
REQUIRED_ARRAYS = (("cell", "region", 1), ("cell", "stress", 6), ("point", "displacement", 3))


def check_fields(vtu: Path) -> None:
    """Refuse a ``fields.vtu`` that is truncated, unreadable or not a mesastrain result.

    It is parsed with meshio (pure Python, so a broken file gives an exception rather
    than VTK's messages on stderr) and must hold cells and the arrays of
    :data:`REQUIRED_ARRAYS` with one value per cell or point.
    """
    import numpy as np

    def refuse(why: str) -> CaseError:
        return CaseError("DIR", f"{vtu}: {why}; it is not a readable mesastrain fields.vtu "
                                f"(run the case again to rewrite it)")

    try:
        from meshio import vtu as vtu_format  # the reader itself: meshio.read prints and
                                                # calls sys.exit on a file it cannot parse
        m = vtu_format.read(vtu)
    except (Exception, SystemExit) as exc:
        why = " ".join(str(exc).split())[:200] or type(exc).__name__
        raise refuse(f"cannot be read ({why})") from None
    ncells = sum(len(b.data) for b in m.cells)
    if ncells == 0 or len(m.points) == 0:
        raise refuse("holds no cells")
    for where, name, ncomp in REQUIRED_ARRAYS:
        if where == "cell":
            blocks = m.cell_data.get(name)
            if blocks is None and name == "region":     # results of earlier versions
                blocks = m.cell_data.get("layer")
            data = None if blocks is None else [np.asarray(b) for b in blocks]
            ok = data is not None and sum(len(b) for b in data) == ncells and all(
                (b.ndim == 1 and ncomp == 1) or (b.ndim == 2 and b.shape[1] == ncomp)
                for b in data)
        else:
            data = m.point_data.get(name)
            data = None if data is None else np.asarray(data)
            ok = data is not None and data.ndim == 2 and data.shape == (len(m.points), ncomp)
        if not ok:
            raise refuse(f"lacks the {where} array '{name}' ({ncomp} component(s) per {where})")


def interactive(vtu: Path, name: str = "stress_xx") -> None:
    """Open a pyvista window on the result (blocks until it is closed)."""
    import numpy as np
    import pyvista as pv

    from mesastrain.io.gl import quiet_vtk

    quiet_vtk()

    from mesastrain.io.render import _limits, load, map_values

    mesh = load(vtu)
    values, where, label, signed = map_values(mesh, name)
    (mesh.cell_data if where == "cell" else mesh.point_data)["_shown"] = values
    layer = np.asarray(mesh.cell_data["region"])
    clim = _limits(values, layer, signed, 99.0)
    half = mesh.clip(normal=(0, -1, 0), origin=(0, 0, 0))
    pl = pv.Plotter(title=f"mesastrain - {vtu.parent.name}")
    pl.set_background("white")
    _ = pl.add_mesh(half, scalars="_shown", cmap="RdBu_r" if signed else "viridis", clim=clim,
                    preference=where, scalar_bar_args={"title": label, "color": "black",
                                                       "fmt": "%.4g"})
    for k in np.unique(layer):
        part = half.threshold((k - 0.5, k + 0.5), scalars="region")
        if part.n_cells:
            _ = pl.add_mesh(part.extract_feature_edges(feature_angle=60), color="black",
                            line_width=1)
    pl.add_text(f"{label}; cut open at y = 0; colour limits at the 99th percentile",
                font_size=9, color="black")
    pl.show_bounds(xtitle="x (nm)", ytitle="y (nm)", ztitle="z (nm)", color="black")
    pl.show()


def cmd_view(args) -> int:
    import sys

    from mesastrain.io.gl import gl_library, no_gl_note
    from mesastrain.io.maps import FieldSource, standard_maps

    vtu = result_vtu(args.result)
    if (args.window or has_display()) and not args.pictures:
        if gl_library() is not None:
            interactive(vtu, args.component[0])
            return 0
        print(no_gl_note("the 3-D window"), "- writing the 2-D pictures instead",
              file=sys.stderr)
    out = Path(args.out) if args.out else vtu.parent
    out.mkdir(parents=True, exist_ok=True)
    for p in standard_maps(FieldSource.from_vtu(vtu), out, tuple(args.component)):
        print(p)
    return 0


def add_command(subparsers) -> None:
    """``mesastrain view DIR [--component NAME ...] [--pictures] [--out DIR]``."""
    from mesastrain.case.schema import FIELD_COMPONENTS

    p = subparsers.add_parser("view", help="open a result in a 3-D window, or write its "
                                           "standard pictures when there is no display")
    p.add_argument("result", type=Path, help="result folder (holding fields.vtu)")
    p.add_argument("--component", nargs="+", default=["stress_xx", "von_mises"],
                   choices=FIELD_COMPONENTS, metavar="NAME",
                   help="components to show (stress_xx ... strain_xy, displacement_z, "
                        "von_mises, hydrostatic, principal_max, principal_min)")
    p.add_argument("--pictures", action="store_true",
                   help="write the standard pictures even when a display exists")
    p.add_argument("--window", action="store_true",
                   help="open the window even when no display variable is set")
    p.add_argument("--out", help="folder for the pictures (default: the result folder)")
    p.set_defaults(func=cmd_view)
