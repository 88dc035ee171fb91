"""A line cut through any result folder: CSV of every component and a PNG plot.

Usage::

    python postprocess/line_cut.py RESULT_DIR --from X Y Z --to X Y Z [--points 201]
                                   [--component stress_xx stress_zz ...] [--out-dir DIR]

Coordinates in nm. The values are interpolated from the smoothed nodal fields
of RESULT_DIR/fields.vtu (element averages spread to the nodes), so they are
slightly smoothed across interfaces; a ``[[cut]]`` in the case file gives the
exact element values instead.
"""

import argparse
import sys
from pathlib import Path

import numpy as np

from mesastrain.case.schema import DEFAULT_CUT_COMPONENTS, FIELD_COMPONENTS
from mesastrain.derived.cuts import components, plot_cut, write_cut_csv
from mesastrain.io.export import from_vtk6
from mesastrain.io.render import load


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("result", type=Path, help="result folder holding fields.vtu")
    p.add_argument("--from", dest="start", type=float, nargs=3, required=True, metavar="C",
                   help="start point x y z, nm")
    p.add_argument("--to", dest="end", type=float, nargs=3, required=True, metavar="C",
                   help="end point x y z, nm")
    p.add_argument("--points", type=int, default=201, help="sample points (>= 2)")
    p.add_argument("--component", nargs="+", default=list(DEFAULT_CUT_COMPONENTS),
                   choices=FIELD_COMPONENTS, metavar="NAME", help="components to plot")
    p.add_argument("--name", default="line", help="file name stem (cut_<name>.csv/.png)")
    p.add_argument("--out-dir", type=Path, help="where to write (default: the result folder)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"line_cut.py: error: {vtu} not found", file=sys.stderr)
        return 2
    if a.points < 2 or a.start == a.end:
        print("line_cut.py: error: need at least 2 points and from != to", file=sys.stderr)
        return 2
    mesh = load(vtu)
    line = mesh.sample_over_line(a.start, a.end, resolution=a.points - 1)
    valid = np.asarray(line["vtkValidPointMask"]).astype(bool)
    # region at each point from the cell the point lies in
    cells = mesh.find_containing_cell(np.asarray(line.points))
    layer = np.asarray(mesh.cell_data["region"])
    region = np.where((cells >= 0) & valid, layer[np.maximum(cells, 0)], -1)
    nan = ~valid
    stress = from_vtk6(np.asarray(line["stress"], dtype=float))
    strain = from_vtk6(np.asarray(line["strain"], dtype=float))
    disp = np.asarray(line["displacement"], dtype=float).copy()
    stress[nan], strain[nan], disp[nan] = np.nan, np.nan, np.nan
    comps = components(strain, stress, disp)
    dist = np.linalg.norm(np.asarray(line.points) - np.asarray(a.start), axis=1)
    names = {int(np.asarray(mesh.field_data[k]).ravel()[0]): k.removeprefix("region ")
             for k in mesh.field_data.keys() if k.startswith("region ")}
    labels = {int(k): names.get(int(k), f"region {int(k)}") for k in np.unique(layer)}
    out = a.out_dir or a.result
    out.mkdir(parents=True, exist_ok=True)
    csv_path, png_path = out / f"cut_{a.name}.csv", out / f"cut_{a.name}.png"
    write_cut_csv(csv_path, dist, np.asarray(line.points), region, labels, comps)
    title = (f"line cut ({', '.join(f'{v:g}' for v in a.start)}) to "
             f"({', '.join(f'{v:g}' for v in a.end)}) nm; smoothed nodal values, sample frame")
    plot_cut(png_path, title, dist, region, labels, comps, a.component)
    print(csv_path)
    print(png_path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
