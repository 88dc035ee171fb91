"""Map of one field component on a plane through a result, offscreen.

Usage::

    python postprocess/slice.py RESULT_DIR [--normal y] [--at 0] [--component stress_xx]
                                [--out slice.png]

``--normal y`` (default) is the cross-section y = AT seen face on, ``x`` the
cross-section x = AT, ``z`` the plan view at height z = AT (default: mid-height
of the first grown layer). Signed components get a colour scale centred on
zero; units are on the axes and the colour bar. Works on any mesastrain result
folder (it reads RESULT_DIR/fields.vtu).
"""

import argparse
import sys
from pathlib import Path

from mesastrain.case.schema import FIELD_COMPONENTS
from mesastrain.io.render import render_map


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("result", type=Path, help="result folder holding fields.vtu")
    p.add_argument("--normal", choices=("x", "y", "z"), default="y",
                   help="plane normal: x or y for a cross-section, z for a plan view")
    p.add_argument("--at", type=float, help="plane position, nm")
    p.add_argument("--component", default="stress_xx", choices=FIELD_COMPONENTS,
                   metavar="NAME", help="e.g. stress_xx, strain_zz, von_mises, displacement_z")
    p.add_argument("--out", type=Path, help="PNG to write (default RESULT/slice_<n>_<c>.png)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"slice.py: error: {vtu} not found", file=sys.stderr)
        return 2
    view = {"x": "section_x", "y": "section", "z": "plan"}[a.normal]
    out = a.out or a.result / f"slice_{a.normal}_{a.component}.png"
    try:
        render_map(vtu, out, a.component, view, a.at)
    except ValueError as exc:
        print(f"slice.py: error: {exc}", file=sys.stderr)
        return 2
    print(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
