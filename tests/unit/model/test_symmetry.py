"""Half and quarter models: used only where geometry and crystal share the mirror.

Mirror planes of the cubic point group m-3m are the {100} and {110} planes
(Nye, Physical Properties of Crystals, 1957, from memory). So on (001) with x
along [110] both sample planes x = 0 ((110)) and y = 0 ((1-10)) are mirrors;
with x along [310] neither (310) nor (-130) is one; on (111) with x along
[1-10], x = 0 is the (1-10) mirror but y = 0 is (11-2), not a mirror.
The c-plane of a wurtzite crystal is transversely isotropic (REFERENCES.md
section 4), so both planes are mirrors for any in-plane x.
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.model.regions import build_layers
from mesastrain.model.symmetry import decide, material_has_mirror, polygon_has_mirror
from mesastrain.physics.crystal import sample_frame
from mesastrain.physics.materials import get_material
from mesastrain.run.pipeline import run_case


def _mirrors(normal, x_axis, material="Si"):
    m = get_material(material)
    f = sample_frame(normal, x_axis, m.system, m.c_over_a)
    C = f.stiffness_to_sample(m.stiffness)[None]
    e = f.to_sample(np.diag([0.01, 0.01, 0.02]) if m.system == "hexagonal"
                    else 0.01 * np.eye(3))[None]
    return tuple(a for a in (0, 1) if material_has_mirror(C, e, a))


@pytest.mark.parametrize("normal, x_axis, expected", [
    ([0, 0, 1], [1, 1, 0], (0, 1)),
    ([0, 0, 1], [1, 0, 0], (0, 1)),
    ([0, 0, 1], [3, 1, 0], ()),
    ([1, 1, 1], [1, -1, 0], (0,)),
    ([1, 1, 0], [1, -1, 0], (0, 1)),
])
def test_cubic_mirror_planes(normal, x_axis, expected):
    assert _mirrors(normal, x_axis) == expected


def test_wurtzite_c_plane_has_both_mirrors_for_any_x():
    assert _mirrors([0, 0, 0, 1], [2, -1, -1, 0], "GaN") == (0, 1)
    assert _mirrors([0, 0, 0, 1], [1, 0, -1, 0], "GaN") == (0, 1)


def test_polygon_mirror():
    square = [[-1, -1], [1, -1], [1, 1], [-1, 1]]
    ell = [[-1, -1], [1, -1], [1, 0], [0, 0], [0, 1], [-1, 1]]
    arrow = [[-2, -1], [2, -1], [3, 0], [2, 1], [-2, 1]]      # mirror y = 0 only
    assert polygon_has_mirror(square, 0) and polygon_has_mirror(square, 1)
    assert not polygon_has_mirror(ell, 0) and not polygon_has_mirror(ell, 1)
    assert polygon_has_mirror(arrow, 1) and not polygon_has_mirror(arrow, 0)


def mesa(x_axis, normal=(0, 0, 1), symmetry=None, probes=None):
    pat = {"shape": "rectangle", "width": 160, "length": 120, "etch_depth": 30, "margin": 60}
    if symmetry:
        pat["symmetry"] = symmetry
    return parse_case({
        "substrate": {"material": "Si", "thickness": "50 um", "normal": list(normal),
                      "x_axis": list(x_axis)},
        "layer": [{"material": "SiGe", "x": 0.3, "thickness": 20}],
        "pattern": pat,
        "mesh": {"order": 1, "size": 15, "edge_size": 7.5, "substrate_depth": 120},
        "probe": probes or [{"name": "centre", "at": [0, 0, 10]},
                            {"name": "a", "at": [50, 30, 10]},
                            {"name": "b", "at": [-50, 30, 10]},
                            {"name": "c", "at": [-50, -30, 10]},
                            {"name": "edge", "at": [80, 10, 15]}],
    })


def test_decision_follows_geometry_and_crystal():
    for x_axis, normal, name in (([1, 1, 0], [0, 0, 1], "quarter"), ([3, 1, 0], [0, 0, 1], "full"),
                                 ([1, -1, 0], [1, 1, 1], "half")):
        case = mesa(x_axis, normal)
        assert decide(case, build_layers(case)).name == name
    forced = mesa([1, 1, 0], symmetry="full")
    assert decide(forced, build_layers(forced)).name == "full"


def test_quarter_model_matches_full_model():
    quarter = run_case(mesa([1, 1, 0]))
    full = run_case(mesa([1, 1, 0], symmetry="full"))
    assert quarter.derived[0].summary["model"]["symmetry"] == "quarter"
    assert full.derived[0].summary["model"]["symmetry"] == "full"
    # the unfolded quarter covers the whole body
    assert quarter.fields.cell_volume.sum() == pytest.approx(full.fields.cell_volume.sum(),
                                                             rel=1e-9)
    scale = abs(full.probes[0]["stress"][0, 0])
    for pq, pf in zip(quarter.probes, full.probes):
        assert np.max(np.abs(pq["stress"] - pf["stress"])) < 5e-3 * scale
    # mirror images of a point carry mirrored tensors (S sigma S)
    a, b, c = (quarter.probes[k]["stress"] for k in (1, 2, 3))
    assert a[0, 1] == pytest.approx(-b[0, 1], rel=1e-9) and a[0, 0] == pytest.approx(b[0, 0])
    assert a[0, 1] == pytest.approx(c[0, 1], rel=1e-9)


def test_orientation_without_mirror_is_solved_whole():
    res = run_case(mesa([3, 1, 0]))
    assert res.derived[0].summary["model"]["symmetry"] == "full"
    a, b = res.probes[1]["stress"], res.probes[2]["stress"]
    # the field is not mirror symmetric: a half model would have forced it to be
    scale = abs(res.probes[0]["stress"][0, 0])
    assert abs(a[0, 0] - b[0, 0]) > 1e-3 * scale or abs(a[0, 1] + b[0, 1]) > 1e-3 * scale


def test_half_model_on_111():
    half = run_case(mesa([1, -1, 0], normal=[1, 1, 1]))
    full = run_case(mesa([1, -1, 0], normal=[1, 1, 1], symmetry="full"))
    assert half.derived[0].summary["model"]["symmetry"] == "half"
    scale = abs(full.probes[0]["stress"][0, 0])
    for ph, pf in zip(half.probes, full.probes):
        assert np.max(np.abs(ph["stress"] - pf["stress"])) < 5e-3 * scale


@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.parametrize("x_axis, normal", [([1, 1, 0], [0, 0, 1]), ([1, -1, 0], [1, 1, 1])],
                         ids=["quarter", "half"])
def test_sensitivities_unfold_like_the_displacement(x_axis, normal, order):
    # the material-scatter du of the solved part are reflected through the element
    # connectivity of the unfolded model: the same vector as unfolding it as a displacement
    # (merged dofs on the mirror planes included), for both orders and both mirror counts
    from mesastrain.mesh.unfold import unfold_model
    from mesastrain.run.pipeline import build_model_mesh
    from mesastrain.run.sensitivity import unfold_sensitivities

    case = mesa(x_axis, normal)
    layers = build_layers(case)
    sym = decide(case, layers)
    sm = build_model_mesh(case, layers, sym)
    disc = sm.discretise(order)
    u = np.random.default_rng(order).normal(size=disc.ndofs)
    _, full, want = unfold_model(sm, disc, u)
    got = unfold_sensitivities(full, {"g": u})["g"]
    assert got.shape == want.shape and full.ndofs > disc.ndofs
    np.testing.assert_array_equal(np.abs(got), np.abs(want))
    # signs differ only where a dof on a mirror plane was written by another image: there
    # the component normal to that plane changes sign, and a solved u holds it at zero
    on = got != want
    planes = np.isclose(full.doflocs[np.arange(full.ndofs) % 3, np.arange(full.ndofs) // 3], 0)
    assert np.all(planes[on])
