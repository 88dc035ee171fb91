"""Case-file keys of the patterned shapes: what is accepted, what is refused, round trips."""

import json

import pytest

from mesastrain.case.outline import Outline, offset_polygon, polygon_area, polygon_problem
from mesastrain.case.parse import parse_case
from mesastrain.errors import CaseError


def base(pattern, mesh=None, probes=()):
    d = {"substrate": {"material": "Si", "thickness": "0.5 mm", "normal": [0, 0, 1],
                       "x_axis": [1, 1, 0]},
         "layer": [{"material": "SiGe", "x": 0.2, "thickness": 40}],
         "pattern": pattern}
    if mesh:
        d["mesh"] = mesh
    if probes:
        d["probe"] = [{"name": f"p{k}", "at": list(p)} for k, p in enumerate(probes)]
    return d


def err(d) -> CaseError:
    with pytest.raises(CaseError) as info:
        parse_case(d)
    return info.value


@pytest.mark.parametrize("pattern", [
    {"shape": "stripe", "width": "1 um"},
    {"shape": "stripe", "width": "1 um", "pitch": "3 um", "sidewall_angle": 70},
    {"shape": "disk", "diameter": "500 nm", "etch_depth": 60},
    {"shape": "disk", "diameter": "500 nm", "pitch": [800, 900], "symmetry": "full"},
    {"shape": "rectangle", "width": 400, "length": 300, "corner_radius": 50,
     "sidewall_angle": 80},
    {"shape": "rectangle", "width": 400, "pitch": 400},
    {"shape": "polygon", "vertices": [[0, 0], ["0.5 um", 0], [0, 300]]},
])
def test_shapes_parse_and_round_trip(pattern):
    case = parse_case(base(pattern))
    echoed = json.loads(json.dumps(case.to_dict()))
    assert parse_case(echoed) == case


@pytest.mark.parametrize("pattern, key, fragment", [
    ({"shape": "stripe", "width": 100, "length": 200}, "pattern.length", "runs along y"),
    ({"shape": "disk", "width": 100}, "pattern.width", 'not a key of shape = "disk"'),
    ({"shape": "disk"}, "pattern.diameter", "required key is missing"),
    ({"shape": "polygon", "vertices": [[0, 0], [1, 1], [1, 0], [0, 1]]}, "pattern.vertices",
     "cross"),
    ({"shape": "polygon", "vertices": [[0, 0], [1, 1]]}, "pattern.vertices", "at least 3"),
    ({"shape": "rectangle", "width": 100, "corner_radius": 60}, "pattern.corner_radius",
     "more than half"),
    ({"shape": "rectangle", "width": 100, "sidewall_angle": 5}, "pattern.sidewall_angle",
     "10 to 170"),
    ({"shape": "rectangle", "width": 100, "etch_depth": 80, "sidewall_angle": 135},
     "pattern.sidewall_angle", "no valid outline"),
    ({"shape": "rectangle", "width": 100, "pitch": 90}, "pattern.pitch", "shorter than"),
    ({"shape": "disk", "diameter": 100, "pitch": 100}, "pattern.pitch", "more than 100"),
    ({"shape": "rectangle", "width": 100, "etch_depth": 40, "sidewall_angle": 45,
      "pitch": 150}, "pattern.pitch", "sidewall slope included"),
    ({"shape": "stripe", "width": 100, "pitch": [200, 300]}, "pattern.pitch", "along x only"),
    ({"shape": "rectangle", "width": 100, "pitch": 200, "margin": 30}, "pattern.margin",
     "remove margin or pitch"),
    ({"shape": "rectangle", "width": 100, "symmetry": "half"}, "pattern.symmetry", '"auto"'),
    ({"shape": "mesh", "file": "x.msh"}, "pattern.groups", "required key is missing"),
])
def test_bad_pattern_keys(pattern, key, fragment):
    e = err(base(pattern))
    assert e.key == key
    assert fragment in str(e)


def test_mesh_refine_and_convergence_keys():
    case = parse_case(base({"shape": "none"}, mesh={"refine": 1.5, "convergence": True}))
    assert case.mesh.refine == 1.5 and case.mesh.convergence is True
    e = err(base({"shape": "none"}, mesh={"refine": 100}))
    assert e.key == "mesh.refine"


@pytest.mark.parametrize("pattern, probe, ok", [
    ({"shape": "disk", "diameter": 200}, (70, 70, 20), True),
    ({"shape": "disk", "diameter": 200}, (80, 80, 20), False),         # outside the circle
    ({"shape": "stripe", "width": 200}, (90, 5000, 20), True),          # any y on a stripe
    ({"shape": "polygon", "vertices": [[-100, -100], [100, -100], [100, 0], [0, 0], [0, 100],
                                       [-100, 100]]}, (50, 50, 20), False),   # in the notch
    ({"shape": "rectangle", "width": 200, "sidewall_angle": 45, "etch_depth": 40},
     (110, 0, 5), True),                                                # on the sloped foot
    ({"shape": "rectangle", "width": 200, "sidewall_angle": 45, "etch_depth": 40},
     (110, 0, 39), False),
    ({"shape": "rectangle", "width": 200, "corner_radius": 50}, (98, 98, 20), False),
    ({"shape": "rectangle", "width": 200, "pitch": 300}, (140, 0, -10), True),
    ({"shape": "rectangle", "width": 200, "pitch": 300}, (160, 0, -10), False),   # next cell
])
def test_probe_inside_the_shape(pattern, probe, ok):
    d = base(pattern, probes=[probe])
    if ok:
        parse_case(d)
    else:
        assert err(d).key == "probe[0].at"


def test_outline_geometry():
    # shoelace area and mitred offsets of a square (plane geometry)
    sq = [[0, 0], [2, 0], [2, 2], [0, 2]]
    assert polygon_area(sq) == 4.0 and polygon_area(sq[::-1]) == -4.0
    assert offset_polygon(sq, 1.0).tolist() == [[-1, -1], [3, -1], [3, 3], [-1, 3]]
    assert offset_polygon(sq[::-1], 1.0).tolist() == [[-1, 3], [3, 3], [3, -1], [-1, -1]]
    assert polygon_problem([[0, 0], [1, 1], [1, 0], [0, 1]]) is not None
    r = Outline("rectangle", 2.0, 1.0, 0.5)
    assert r.signed_distance(0, 0) == -1.0
    assert r.signed_distance(3, 0) == 1.0
    # the rounded corner: distance from the corner centre (1.5, 0.5) minus the radius
    assert r.signed_distance(2.5, 1.5) == pytest.approx(2 ** 0.5 - 0.5)
    assert Outline("disk", 1, 1, 1).offset(0.5).radius == 1.5


DEMOS = ["sige_line_grating", "algan_pillar_array", "sige_l_pad", "ingaas_rounded_mesa",
         "embedded_stressor"]


@pytest.mark.parametrize("name", DEMOS)
def test_shape_demos_load_and_estimate(name):
    from pathlib import Path

    from mesastrain.case.parse import load_case
    from mesastrain.mesh.kinds import mesh_kind
    from mesastrain.run.resources import estimate

    root = Path(__file__).resolve().parents[3]
    case = load_case(root / "cases" / f"{name}.toml")
    assert mesh_kind(case) in ("structured", "section", "gmsh", "file")
    est = estimate(case)
    assert 0 < est.unknowns < 1_000_000 and est.memory_gb < 4
    assert (root / "cases" / "pictures" / f"{name}.png").stat().st_size > 10_000


def test_polygon_distance_of_one_point_equals_the_vectorised_one():
    # gmsh's size callback asks one point at a time: the plain-float path must agree with
    # the array path (inside and outside, on edges, at a reflex corner, offset outlines)
    import numpy as np

    ell = Outline("polygon", vertices=((-100, -50), (100, -50), (100, 0), (20, 0), (20, 80),
                                       (-100, 80)))
    rng = np.random.default_rng(5)
    pts = np.vstack([rng.uniform(-150, 150, (400, 2)), [[20, 0], [100, -20], [0, 80],
                                                        [20.0, 40.0], [-100, -50]]])
    for o in (ell, ell.offset(7.5), ell.offset(-12.0)):
        want = o.signed_distance(pts[:, 0], pts[:, 1])
        got = [o.signed_distance(np.float64(x), np.float64(y)) for x, y in pts]
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-9)
        assert np.any(want < 0) and np.any(want > 0)
