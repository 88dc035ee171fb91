"""3-D picture of a result cut open at y = 0 and warped by its (magnified) displacement.

Usage::

    python postprocess/warp.py RESULT_DIR [--component von_mises] [--scale S] [--out warp.png]

The default magnification draws the largest displacement as 5 % of the
feature size; the picture states the factor. Works on any mesastrain result
folder (RESULT_DIR/fields.vtu), offscreen.
"""

import argparse
import sys
from pathlib import Path

from mesastrain.case.schema import FIELD_COMPONENTS
from mesastrain.io.render import render_warped


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("result", type=Path, help="result folder holding fields.vtu")
    p.add_argument("--component", default="von_mises", choices=FIELD_COMPONENTS,
                   metavar="NAME", help="colour: e.g. von_mises, stress_xx, displacement_z")
    p.add_argument("--scale", type=float, help="displacement magnification (default: automatic)")
    p.add_argument("--out", type=Path, help="PNG to write (default RESULT/warp_<c>.png)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"warp.py: error: {vtu} not found", file=sys.stderr)
        return 2
    out = a.out or a.result / f"warp_{a.component}.png"
    png, scale = render_warped(vtu, out, a.component, a.scale)
    print(f"{png} (displacement x {scale:.3g})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
