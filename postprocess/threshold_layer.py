"""One layer of a result on its own: a VTU with only that region and a 3-D picture.

Usage::

    python postprocess/threshold_layer.py RESULT_DIR LAYER [--component stress_xx]
                                          [--out-dir DIR]

LAYER is a region's name ("substrate", "SiGe", as summary.json ``layers`` and the
field data ``region <name>`` of fields.vtu give them) or its id in the cell data
``region``: 0 the substrate, 1 the first grown layer, ... Writes
``layer_<id>.vtu`` (all the result's arrays, only that region's cells) and
``layer_<id>_<component>.png``. Works on any mesastrain result folder, offscreen.
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
    p.add_argument("layer", help="region name (substrate, SiGe, ...) or id (0 substrate, 1.. "
                                 "grown layers)")
    p.add_argument("--component", default="stress_xx", choices=FIELD_COMPONENTS,
                   metavar="NAME", help="colour of the picture")
    p.add_argument("--out-dir", type=Path, help="where to write (default: the result folder)")
    a = p.parse_args(argv)
    vtu = a.result / "fields.vtu"
    if not vtu.is_file():
        print(f"threshold_layer.py: error: {vtu} not found", file=sys.stderr)
        return 2
    mesh = load(vtu)
    names = {k.removeprefix("region "): int(np.asarray(mesh.field_data[k]).ravel()[0])
             for k in mesh.field_data.keys() if k.startswith("region ")}
    ids = np.unique(np.asarray(mesh.cell_data["region"]))
    layer = names.get(a.layer, int(a.layer) if a.layer.lstrip("-").isdigit() else None)
    if layer not in ids:
        have = ", ".join(names) or ", ".join(str(int(i)) for i in ids)
        print(f"threshold_layer.py: error: no region {a.layer}; this result has {have}",
              file=sys.stderr)
        return 2
    out = a.out_dir or a.result
    out.mkdir(parents=True, exist_ok=True)
    part = mesh.threshold((layer - 0.5, layer + 0.5), scalars="region")
    part.save(str(out / f"layer_{layer}.vtu"))
    png = render_layer(mesh, out / f"layer_{layer}_{a.component}.png", layer, a.component)
    print(out / f"layer_{layer}.vtu")
    print(png)
    return 0


if __name__ == "__main__":
    sys.exit(main())
