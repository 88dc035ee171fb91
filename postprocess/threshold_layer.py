"""One layer of a result on its own: a VTU with only that region and a 3-D picture.

Usage::

    python postprocess/threshold_layer.py RESULT_DIR LAYER [--component stress_xx]
                                          [--out-dir DIR]

LAYER is the region id of the cell data ``layer``: 0 the substrate, 1 the
first grown layer, ... Writes ``layer_<LAYER>.vtu`` (all the result's arrays,
only that region's cells) and ``layer_<LAYER>_<component>.png``. Works on any
mesastrain result folder, offscreen.
"""

import argparse
import sys
from pathlib import Path

import numpy as np

from mesastrain.case.schema import FIELD_COMPONENTS
from mesastrain.io.render import load, render_layer


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("result", type=Path, help="result folder holding fields.vtu")
    p.add_argument("layer", type=int, help="region id: 0 substrate, 1.. grown layers")
    p.add_argument("--component", default="stress_xx", choices=FIELD_COMPONENTS,
                   metavar="NAME", help="colour of the picture")
    p.add_argument("--out-dir", type=Path, help="where to write (default: the result folder)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"threshold_layer.py: error: {vtu} not found", file=sys.stderr)
        return 2
    mesh = load(vtu)
    ids = np.unique(np.asarray(mesh.cell_data["layer"]))
    if a.layer not in ids:
        print(f"threshold_layer.py: error: no layer {a.layer}; this result has "
              f"{', '.join(str(int(i)) for i in ids)}", file=sys.stderr)
        return 2
    out = a.out_dir or a.result
    out.mkdir(parents=True, exist_ok=True)
    part = mesh.threshold((a.layer - 0.5, a.layer + 0.5), scalars="layer")
    part.save(str(out / f"layer_{a.layer}.vtu"))
    png = render_layer(mesh, out / f"layer_{a.layer}_{a.component}.png", a.layer, a.component)
    print(out / f"layer_{a.layer}.vtu")
    print(png)
    return 0


if __name__ == "__main__":
    sys.exit(main())
