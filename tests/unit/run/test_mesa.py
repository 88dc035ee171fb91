"""A free rectangular mesa: equilibrium and traction-free surfaces.

Checks that follow from statics alone (no closed form exists for the mesa):
the part of a free mesa above any horizontal cut carries no net force, so the
integral of sigma_zz, sigma_xz and sigma_yz over the cut vanishes; the sidewall
is traction free, so sigma_xx on an x-facing sidewall vanishes (a weak condition
in the finite-element solution, met to discretisation error).
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive

W, H = 400.0, 40.0


@pytest.fixture(scope="module")
def mesa():
    case = parse_case({
        "title": "mesa",
        "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.3, "thickness": H}],
        "pattern": {"shape": "rectangle", "width": W, "length": W, "etch_depth": 80},
        "mesh": {"order": 1},
        "probe": [{"name": "centre", "at": [0, 0, H / 2]},
                  {"name": "sidewall", "at": [W / 2, 0, H / 2]},
                  {"name": "sidewall_y", "at": [0, W / 2, H / 2]},
                  {"name": "mirror", "at": [100, -60, H / 2]},
                  {"name": "mirror_t", "at": [-60, 100, H / 2]}],
    })
    return solve_and_derive(case)


def _cut_rows(res, z):
    sm = res.mesh
    k = np.searchsorted(sm.zs, z) - 1
    cells = sm.cell_of_grid[:, :, k]
    cells = cells[cells >= 0]
    area = res.fields.cell_volume[cells] / np.diff(sm.zs)[k]
    return cells, area


@pytest.mark.parametrize("z", [5.0, 20.0, 35.0, -20.0])
def test_no_net_force_on_horizontal_cut(mesa, z):
    cells, area = _cut_rows(mesa, z)
    sig = mesa.fields.cell_stress[cells]
    scale = np.sum(np.abs(sig[:, 0, 0]) * area)
    for i, j in ((2, 2), (0, 2), (1, 2)):
        assert abs(np.sum(sig[:, i, j] * area)) < 2e-3 * scale


def test_sidewall_traction_free(mesa):
    centre, side, side_y = mesa.probes[:3]
    s0 = abs(centre["stress"][0, 0])
    assert s0 > 500            # a strongly strained film (MPa)
    assert abs(side["stress"][0, 0]) < 0.05 * s0
    assert abs(side_y["stress"][1, 1]) < 0.05 * s0


def test_edges_relax_the_film(mesa):
    # the centre keeps most of the compression; the sidewall relaxes the normal component
    centre, side = mesa.probes[:2]
    assert centre["stress"][0, 0] < 0 and side["stress"][1, 1] < 0
    assert abs(side["stress"][0, 0]) < abs(centre["stress"][0, 0])


def test_square_mesa_on_001_has_fourfold_symmetry(mesa):
    # a square <110>-edged mesa on (001): rotating by 90 degrees about z maps the body and
    # the crystal onto themselves, so sigma_xx(x, y) = sigma_yy(-y, x)
    a, b = mesa.probes[3], mesa.probes[4]
    assert a["stress"][0, 0] == pytest.approx(b["stress"][1, 1], rel=1e-6)
    assert a["stress"][1, 1] == pytest.approx(b["stress"][0, 0], rel=1e-6)
