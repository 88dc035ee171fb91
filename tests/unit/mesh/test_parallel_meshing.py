"""Large shapes are meshed with gmsh's HXT and size fields: valid tetrahedra, right regions.

Independent fact: the volume of each region is that of its solid (an L-shaped
prism of the film, the etched substrate), computed by hand from the outline.
"""

import tomllib
from pathlib import Path

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.mesh import shapes

PAD = Path(__file__).resolve().parents[3] / "cases" / "sige_l_pad.toml"


@pytest.mark.slow
def test_parallel_path_gives_valid_tagged_tetrahedra(monkeypatch):
    data = tomllib.loads(PAD.read_text())
    data["mesh"]["size"], data["mesh"]["edge_size"] = 24.0, 12.0
    spec = shapes.shape_spec(parse_case(data))
    monkeypatch.setattr(shapes, "PARALLEL_TETS", 0)
    p, t, region = shapes.mesh_shape(spec)
    v = p[:, t]
    vol = np.einsum("in,in->n", v[:, 1] - v[:, 0],
                    np.cross(v[:, 2] - v[:, 0], v[:, 3] - v[:, 0], axis=0)) / 6.0
    assert np.all(np.abs(vol) > 1e-6 * np.abs(vol).max())
    area_l = 400.0 ** 2 - 200.0 ** 2                   # the L: a 400 nm square minus a quarter
    film = area_l * 25.0
    x0, x1, y0, y1 = spec.box
    body = (x1 - x0) * (y1 - y0) * (spec.floor + spec.depth) + area_l * (spec.top - spec.floor)
    assert np.isclose(np.abs(vol[region == 1]).sum(), film, rtol=1e-9)
    assert np.isclose(np.abs(vol).sum(), body, rtol=1e-9)
