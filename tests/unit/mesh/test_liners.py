"""Liners: conformal films over the etched feature ([[liner]]), on every mesh kind.

Checks (our own scenarios, small meshes):
- the liner elements fill exactly the space between the feature surface and its offset: the
  meshed liner volume equals the closed-form volume of the offset solids (square offsets of
  a rectangle, exact offsets of a disk) minus the feature;
- over a wide mesa the liner at the centre of the top carries its blanket stress (Stoney,
  Proc. R. Soc. Lond. A 82, 172 (1909): a thin film on a thick substrate keeps its biaxial
  stress; the substrate takes no strain);
- statics (exact for the continuum; met to discretisation error by the finite-element
  solution): a horizontal cut through a stripe's fin and its sidewall liners above the floor
  liner carries no net vertical force, since nothing above it is loaded; so tensile sidewall
  liners put the fin in net vertical compression. The horizontal force across any vertical
  cut of the section is the same, the reaction of the side rollers, which far from the fin
  is the floor liner's blanket tension times its thickness;
- each shape runs with a liner.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived.sampling import sample_inside
from mesastrain.mesh.kinds import build_mesh
from mesastrain.run.pipeline import run_case

SIGMA = 1200.0          # MPa, the liners' built-in stress (tensile SiN, common practice)


def _case(pattern: dict, liners=None, mesh=None, layer=40.0) -> object:
    return parse_case({
        "title": "liner",
        "substrate": {"material": "Si", "thickness": "50 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "Si", "thickness": layer}],
        "liner": liners if liners is not None else [
            {"material": "SiN-PECVD", "thickness": 10, "stress": f"{SIGMA} MPa"}],
        "pattern": {"etch_depth": 60, **pattern},
        "mesh": mesh or {},
    })


def _volumes(sm) -> tuple[np.ndarray, np.ndarray]:
    """Element volumes (nm^3) and regions of a 3-D mesh (exact for the element maps)."""
    from skfem import CellBasis, ElementHex1, ElementTetP1

    mesh = sm.mesh
    elem = ElementHex1() if mesh.t.shape[0] == 8 else ElementTetP1()
    basis = CellBasis(mesh, elem, intorder=4)
    return np.asarray(basis.dx).sum(axis=1), np.asarray(sm.region)


def _simpson(f, a, b) -> float:
    """Simpson's rule: exact for the quadratic cross-section areas integrated here."""
    return (b - a) / 6.0 * (f(a) + 4.0 * f(0.5 * (a + b)) + f(b))


# --------------------------------------------------------------------------
# the mesh conforms: liner volumes against closed forms
# --------------------------------------------------------------------------
@pytest.mark.parametrize("angle", [90.0, 75.0, 100.0])
@pytest.mark.slow
def test_rectangle_liner_volume_is_the_offset_solid_minus_the_feature(angle):
    W, L, H = 200.0, 120.0, 60.0
    liners = [{"material": "SiO2", "thickness": 6, "sidewall_thickness": 4,
               "floor_thickness": 5},
              {"material": "SiN-PECVD", "thickness": 10, "sidewall_thickness": 8,
               "floor_thickness": 12, "stress": "1.2 GPa"}]
    case = _case({"shape": "rectangle", "width": W, "length": L, "sidewall_angle": angle,
                  "symmetry": "full"}, liners, {"order": 1, "size": 15, "edge_size": 4})
    sm = build_mesh(case, mirrors=())
    vol, region = _volumes(sm)
    g = sm.layout
    top, floor = g.top, g.etch_floor
    taper = H / math.tan(math.radians(angle))
    sin_a = math.sin(math.radians(angle))
    cell = 4.0 * (g.half_width + g.margins[0]) * (g.half_length + g.margins[1])

    def body(k):
        """Volume above the floor of the feature plus liners 1..k (square offsets)."""
        if k == 0:
            return _simpson(lambda z: (W + 2 * taper * (top - z) / H)
                            * (L + 2 * taper * (top - z) / H), floor, top)
        t = sum(x["thickness"] for x in liners[:k])
        s = sum(x["sidewall_thickness"] for x in liners[:k]) / sin_a
        f = sum(x["floor_thickness"] for x in liners[:k])

        def area(z):
            grow = 2 * taper * (top - z) / H + 2 * s
            return (W + grow) * (L + grow)
        return cell * f + _simpson(area, floor + f, top + t)

    n = len(case.layers)
    for k in (1, 2):
        meshed = vol[region == n + k].sum()
        assert meshed == pytest.approx(body(k) - body(k - 1), rel=1e-9), k
    # the layer (z from 0 to the top) keeps the volume of the feature's frustum
    layer = _simpson(lambda z: (W + 2 * taper * (top - z) / H) * (L + 2 * taper * (top - z) / H),
                     0.0, top)
    assert vol[region == n].sum() == pytest.approx(layer, rel=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("angle", [90.0, 80.0])
def test_disk_liner_volume_is_the_offset_cylinder_minus_the_disk(angle):
    R, H, T, S, F = 40.0, 60.0, 10.0, 8.0, 6.0
    case = _case({"shape": "disk", "diameter": 2 * R, "sidewall_angle": angle,
                  "pitch": 160, "symmetry": "full"},
                 [{"material": "SiN-PECVD", "thickness": T, "sidewall_thickness": S,
                   "floor_thickness": F}], {"size": 12, "edge_size": 6})
    sm = build_mesh(case, mirrors=())
    vol, region = _volumes(sm)
    top = case.top
    floor = top - H
    taper = H / math.tan(math.radians(angle))
    s = S / math.sin(math.radians(angle))

    def r_feature(z):
        return R + taper * (top - z) / H
    liner = (160.0 ** 2 * F
             + _simpson(lambda z: math.pi * (r_feature(z) + s) ** 2, floor + F, top + T)
             - _simpson(lambda z: math.pi * r_feature(z) ** 2, floor, top))
    # the circles are meshed by flat facets: the mesh tolerance is the chord error (measured
    # -0.3 % at this size for both angles)
    assert vol[region == 2].sum() == pytest.approx(liner, rel=0.01)


# --------------------------------------------------------------------------
# physics
# --------------------------------------------------------------------------
@pytest.mark.slow
def test_liner_over_a_wide_mesa_keeps_its_blanket_stress_at_the_centre():
    # Stoney 1909: a thin film on a thick substrate carries its biaxial stress; 3 um wide
    # against 70 nm of liner-covered stack, the centre of the top is the blanket state
    case = _case({"shape": "rectangle", "width": 3000, "margin": 300},
                 mesh={"order": 1, "size": 150, "edge_size": 5})
    res = run_case(case)
    lm = res.layers[-1]
    assert lm.liner == 1 and lm.name == "SiN-PECVD liner"
    _, sig, _, reg = sample_inside(res, [[0.0, 0.0, 45.0]])
    assert reg[0] == 2
    assert sig[0, 0, 0] == pytest.approx(SIGMA, rel=0.02)
    assert sig[0, 1, 1] == pytest.approx(SIGMA, rel=0.02)
    assert abs(sig[0, 2, 2]) < 0.02 * SIGMA


@pytest.fixture(scope="module")
def fin():
    """A 30 nm Si fin, 40 nm high on 20 nm of etched substrate, under a 10 nm tensile liner."""
    case = _case({"shape": "stripe", "width": 30, "margin": 150, "symmetry": "full"},
                 mesh={"order": 2, "size": 5, "edge_size": 2.5})
    return run_case(case)


def _row(res, z):
    sm = res.mesh
    k = np.searchsorted(sm.zs, z) - 1
    cells = sm.cell_of_grid[:, k]
    keep = cells >= 0
    return cells[keep], np.diff(sm.xs)[keep]


def _column(res, x):
    sm = res.mesh
    i = np.searchsorted(sm.xs, x) - 1
    cells = sm.cell_of_grid[i, :]
    keep = cells >= 0
    return cells[keep], np.diff(sm.zs)[keep]


@pytest.mark.parametrize("z", [-5.0, 25.0])
def test_fin_no_net_vertical_force_and_compression_under_a_tensile_liner(fin, z):
    cells, dx = _row(fin, z)
    sig = fin.fields.cell_stress[cells]
    region = fin.mesh.region[cells]
    force = sig[:, 2, 2] * dx
    liner_force = force[region == 2].sum()
    fin_force = force[region != 2].sum()
    # two 10 nm sidewall liners in tension along z (partly relaxed by the compliant fin)
    assert liner_force > 0.25 * SIGMA * 20.0
    assert fin_force < 0                           # the fin is pushed down: compressed
    # statics: no net force on the cut (element-average stresses of the quadratic section
    # elements integrate the weak equilibrium exactly over a row of the grid)
    assert abs(force.sum()) < 1e-6 * liner_force


def test_fin_horizontal_force_is_the_same_on_every_vertical_cut(fin):
    forces = []
    for x in (0.5, 10.0, 40.0, 140.0):
        cells, dz = _column(fin, x)
        forces.append(float(np.sum(fin.fields.cell_stress[cells, 0, 0] * dz)))
    # the side rollers hold the tensile floor liner: the force is a tension of the order of
    # the blanket value times the floor thickness (the modelled substrate is not deep
    # enough to leave the far field exactly at the blanket state)
    assert forces[0] > 0.5 * SIGMA * 10.0
    for f in forces[1:]:
        assert f == pytest.approx(forces[0], rel=1e-6)


def test_liner_regions_and_summary_names(fin):
    names = [lm.name for lm in fin.layers]
    assert names == ["substrate", "Si", "SiN-PECVD liner"]
    assert set(np.unique(fin.mesh.region).tolist()) == {0, 1, 2}


# --------------------------------------------------------------------------
# every shape runs with a liner
# --------------------------------------------------------------------------
SHAPES = {
    "rectangle quarter": ({"shape": "rectangle", "width": 120}, {"order": 1, "size": 15}),
    "rectangle whole sloped": ({"shape": "rectangle", "width": 80, "length": 60,
                                "sidewall_angle": 80, "symmetry": "full", "margin": 60},
                               {"order": 1, "size": 20, "edge_size": 10}),
    "rectangle array": ({"shape": "rectangle", "width": 120, "pitch": [200, 180]},
                        {"order": 1, "size": 15}),
    "stripe grating sloped": ({"shape": "stripe", "width": 40, "pitch": 100,
                               "sidewall_angle": 85}, {"order": 2, "size": 8}),
    "stripe undercut": ({"shape": "stripe", "width": 40, "sidewall_angle": 95},
                        {"order": 1, "size": 6}),
}
GMSH_SHAPES = {
    "disk": ({"shape": "disk", "diameter": 100}, {"size": 20}),
    "polygon": ({"shape": "polygon", "vertices": [[-50, -40], [60, -30], [0, 50]]},
                {"size": 20}),
    "rounded rectangle sloped": ({"shape": "rectangle", "width": 120, "length": 90,
                                  "corner_radius": 20, "sidewall_angle": 80}, {"size": 20}),
    "disk array": ({"shape": "disk", "diameter": 100, "pitch": 160}, {"size": 20}),
}


def _runs_with_liner(pattern, mesh):
    case = _case(pattern, mesh=mesh)
    res = run_case(case)
    region = np.asarray(res.mesh.region)
    assert np.any(region == 2)
    sig = res.fields.cell_stress
    assert np.all(np.isfinite(sig))
    # the liner on the floor and the top is in tension along x (sidewall parts carry
    # little sigma_xx, which is normal to them)
    liner = sig[region == 2]
    assert np.max(liner[:, 0, 0]) > 0.5 * SIGMA
    assert np.median(liner[:, 1, 1]) > 0.3 * SIGMA
    return res


@pytest.mark.parametrize("name", list(SHAPES))
@pytest.mark.slow
def test_structured_and_section_shapes_run_with_a_liner(name):
    _runs_with_liner(*SHAPES[name])


@pytest.mark.slow
@pytest.mark.parametrize("name", list(GMSH_SHAPES))
def test_gmsh_shapes_run_with_a_liner(name):
    _runs_with_liner(*GMSH_SHAPES[name])


@pytest.mark.slow
def test_disk_with_a_liner_small():
    # one gmsh shape in the fast tests: a coarse disk
    res = _runs_with_liner({"shape": "disk", "diameter": 80}, {"size": 25, "order": 1})
    assert res.mesh.kind == "gmsh"
