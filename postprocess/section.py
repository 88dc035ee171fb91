"""Picture of a result's cross-section, coloured by one stress or strain component.

Usage::

    python postprocess/section.py RESULT_DIR [--quantity stress] [--component XX]
                                  [--y 0] [--out section.png]

Works on any mesastrain result folder (it reads RESULT_DIR/fields.vtu) and
renders offscreen, so it needs no display.
"""

import argparse
import sys
from pathlib import Path

from mesastrain.io.render import render_section


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("result", type=Path, help="result folder holding fields.vtu")
    p.add_argument("--quantity", default="stress",
                   help="cell array: stress, strain, total_strain, stress_crystal, von_mises ...")
    p.add_argument("--component", default="XX", help="XX, YY, ZZ, XY, YZ or XZ")
    p.add_argument("--y", type=float, default=0.0, help="section plane y, nm")
    p.add_argument("--out", type=Path, help="PNG to write (default RESULT/section_<q>_<c>.png)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"section.py: error: {vtu} not found", file=sys.stderr)
        return 2
    out = a.out or a.result / f"section_{a.quantity}_{a.component}.png"
    render_section(vtu, out, a.quantity, a.component, y=a.y)
    print(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
