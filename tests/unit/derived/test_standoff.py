"""Stand-off and interface readouts from the recovered stress; robust point evaluation.

Issue #13 parts 3-4 and issue #14 item 4. The exact stress at a finite distance from a singular
edge is finite, so the stand-off values must converge under refinement (common practice of
fracture and interface mechanics, e.g. Bogy, J. Appl. Mech. 38, 377 (1971), from memory, for
the singular fields at a bimaterial edge that make the edge value itself meaningless).
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.derived.sampling import recovered_stress
from mesastrain.io.export import jsonable
from mesastrain.run.pipeline import run_case

SI = {"material": "Si", "thickness": "725 um", "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
QUIET = {"report": False, "vtu": False}
FILM = [{"material": "SiGe", "x": 0.3, "thickness": 20}]


def _case(pattern, mesh=None, layers=FILM, substrate=SI, **extra):
    d = {"substrate": substrate, "layer": layers, "pattern": pattern,
         "mesh": mesh or {"order": 1}, "readouts": {"standoff": 5, "bow": False},
         "output": QUIET, **extra}
    return parse_case(d)


def _readouts(res) -> dict:
    return jsonable(next(d.summary["readouts"] for d in res.derived if "readouts" in d.summary))


def _mesa(refine, order=1, **pat):
    return _case({"shape": "rectangle", "width": 100, "etch_depth": 40, "margin": 50, **pat},
                 {"order": order, "refine": refine, "substrate_depth": 150})


def _vertex(name: str) -> bool:
    """A 3-D vertex (mesa corner at an interface or at the etch floor)."""
    return " corner (" in name or " vertex (" in name


def _values(r):
    return {(f["name"], side): v for f in r["edges"] for side, v in f["values"].items()}


@pytest.mark.slow
def test_standoff_values_converge_on_a_trilinear_mesa():
    # 20 nm Si0.7Ge0.3 on Si(001), 5 nm stand-off: all 24 values (edges, floor corners, mesa
    # corners, floor vertices) move less than 5 % from refine 1 (the default mesh) to 2; before
    # the recovery they moved 20-37 % and sigma_xz at the +x edge went 96 -> 398 MPa
    r1, r2 = (_readouts(solve_and_derive(_mesa(r))) for r in (1, 2))
    v1, v2 = _values(r1), _values(r2)
    assert len(v1) == 24 and v1.keys() == v2.keys()
    worst = {}
    for k in v1:
        a, b = v1[k]["von_mises"], v2[k]["von_mises"]
        assert abs(a - b) < 0.05 * abs(b), (k, a, b)
        # every reported figure, relative to the stress magnitude there (hydrostatic and peel
        # may pass through zero)
        for fig in ("principal_max", "principal_min", "hydrostatic", "peel"):
            worst[k, fig] = abs(v1[k][fig] - v2[k][fig]) / b
        s1, s2 = np.array(v1[k]["stress"]), np.array(v2[k]["stress"])
        worst[k, "tensor"] = np.max(np.abs(s1 - s2)) / np.max(np.abs(s2))
    # every figure at the straight edges and floor corners within 5 %; at the 3-D mesa corners
    # and floor vertices (3-D vertices, the strongest singularities) the von Mises figure is
    # within 5 % and the other figures within 7 % (measured 6.1 %; tensor 7.3 %): the 3-D
    # vertex needs a finer mesh than the edge grading gives (noted in the report)
    edge = [v for (k, fig), v in worst.items() if not _vertex(k[0]) and fig != "tensor"]
    assert max(edge) < 0.05
    assert max(worst.values()) < 0.08
    for k in v1:
        assert v1[k]["resolved"] and v1[k]["elements_to_edge"] >= 3
        assert v2[k]["elements_to_edge"] > v1[k]["elements_to_edge"]
    # traction continuity across the interface from the two one-sided recovered fields: the
    # exact traction is continuous; the jump is small against the traction there and shrinks
    for f1, f2 in zip(r1["edges"], r2["edges"]):
        if "traction_jump" in f1:
            t = np.linalg.norm(np.array(next(iter(f2["values"].values()))["stress"])[:, 2])
            assert f1["traction_jump"] < 0.15 * t and f2["traction_jump"] < 0.05 * t
            assert f2["traction_jump"] < f1["traction_jump"]
    # the error bar is there, finite and of the size of the change under refinement
    for k in v1:
        est = v1[k]["error_estimate"]["von_mises"]
        assert np.isfinite(est) and est < 0.1 * v1[k]["von_mises"]
    assert not any("stand-off" in w for w in r1.get("warnings", []))


@pytest.mark.slow
def test_standoff_values_quadratic_agree_with_trilinear():
    # both element orders converge to the same stand-off stress (within 5 %)
    lin = _values(_readouts(solve_and_derive(_mesa(1.5))))
    quad = _values(_readouts(solve_and_derive(_mesa(1, order=2))))
    for k in lin:
        a, b = lin[k]["von_mises"], quad[k]["von_mises"]
        # 5 % at the straight edges and floor corners, 10 % at the 3-D vertices (measured 7 %)
        assert abs(a - b) < (0.10 if _vertex(k[0]) else 0.05) * abs(a), (k, a, b)


@pytest.mark.slow
def test_coarse_edge_mesh_warns_with_numbers():
    res = solve_and_derive(_case({"shape": "rectangle", "width": 100, "etch_depth": 40,
                                  "margin": 50},
                                 {"order": 1, "edge_size": 5, "size": 10,
                                  "substrate_depth": 100}))
    w = [m for m in res.warnings if "stand-off" in m]
    assert len(w) == 1 and "elements between the edge and the point" in w[0]
    assert "mesh.edge_size <= 1.25 nm" in w[0]
    r = _readouts(res)
    assert any(not v["resolved"] for f in r["edges"] for v in f["values"].values())


@pytest.mark.slow
def test_sloped_sidewall_interfaces_sample_inside():
    # 70 degree sidewalls: the interface tractions and both force balances are numbers (the
    # old sampling above/below the plane left the body and gave peel_force null)
    res = solve_and_derive(_case({"shape": "rectangle", "width": 100, "etch_depth": 40,
                                  "margin": 40, "sidewall_angle": 70},
                                 {"order": 1, "size": 10, "edge_size": 2.5,
                                  "substrate_depth": 100}))
    r = _readouts(res)
    for it in r["interfaces"]:
        b = it["balance"]
        for v in (b["peel_force"], b["peel_force_relative"], b["recovered"]["peel_force"],
                  it["peel_peak"], it["shear_peak"]):
            assert v is not None and np.isfinite(v)
        assert abs(b["peel_force_relative"]) < 1e-2        # discrete equilibrium
    for f in r["edges"]:
        assert f["values"], f["name"]


@pytest.fixture(scope="module")
def sym_mesa():
    return run_case(_case({"shape": "rectangle", "width": 80, "etch_depth": 30, "margin": 40},
                          {"order": 1, "size": 10, "edge_size": 2.5, "substrate_depth": 80}))


@pytest.mark.slow
def test_probe_on_mirror_plane_and_faces_has_zero_shear(sym_mesa):
    res = sym_mesa
    # the centre of a symmetric mesa lies on both mirror planes (element faces): sigma_xz and
    # sigma_yz vanish there exactly by symmetry; a one-sided element value gave ~3 MPa
    pts = np.array([[0.0, 0.0, 10.0], [0.0, 0.0, 0.0], [0.0, 0.0, -5.0], [0.0, 13.0, 7.0],
                    [21.0, 0.0, 3.0]])
    _, sig, _, region = res.sample(pts)
    scale = np.abs(sig).max()
    np.testing.assert_allclose(sig[:3, 0, 2], 0.0, atol=1e-12 * scale)
    np.testing.assert_allclose(sig[:3, 1, 2], 0.0, atol=1e-12 * scale)
    np.testing.assert_allclose(sig[3, 0, 2], 0.0, atol=1e-12 * scale)     # on x = 0
    np.testing.assert_allclose(sig[4, 1, 2], 0.0, atol=1e-12 * scale)     # on y = 0
    # the interface point belongs to the region below (the documented rule)
    assert region[1] == 0 and region[0] == 1
    # the recovered value on the mirror planes is zero too
    rec, _, _, _ = recovered_stress(res, pts[:2], [1, 1])
    np.testing.assert_allclose(rec[:, 0, 2], 0.0, atol=1e-9 * scale)


@pytest.mark.slow
def test_probe_on_an_element_face_is_the_average_of_both_elements(sym_mesa):
    res = sym_mesa
    xs = res.mesh.xs
    x = xs[np.argmin(np.abs(xs - 17.0))]                   # a grid plane inside the mesa
    h = 1e-7
    _, on, _, _ = res.sample([[x, 5.3, 4.1]])
    _, left, _, _ = res.sample([[x - h, 5.3, 4.1]])
    _, right, _, _ = res.sample([[x + h, 5.3, 4.1]])
    assert np.max(np.abs(left - right)) > 1.0              # the FE stress jumps across the face
    np.testing.assert_allclose(on[0], 0.5 * (left[0] + right[0]), atol=1e-4)


@pytest.mark.slow
def test_interface_one_sided_recovery_names_the_side(sym_mesa):
    # on the interface the recovered sigma_xx differs between the film and the substrate (the
    # in-plane stress jumps), the traction columns agree closely
    rec_f, _, _, _ = recovered_stress(sym_mesa, [[20.0, 0.0, 0.0]], 1)
    rec_s, _, _, _ = recovered_stress(sym_mesa, [[20.0, 0.0, 0.0]], 0)
    assert rec_f[0, 0, 0] < rec_s[0, 0, 0] - 500.0
    t = np.linalg.norm(rec_f[0, :, 2])
    assert np.linalg.norm(rec_f[0, :, 2] - rec_s[0, :, 2]) < 0.2 * max(t, 100.0)


# --------------------------------------------------------------------------
# aspect ratios and the cases of issue #14 item 4
# --------------------------------------------------------------------------
@pytest.mark.slow
def test_stripe_16um_on_725um_runs():
    # an interface offset of 1e-6 x stack thickness was below the old locator tolerance
    # (1e-9 x model depth): "All-NaN slice encountered"
    res = solve_and_derive(_case({"shape": "stripe", "width": "16 um", "etch_depth": 30}))
    r = _readouts(res)
    it = r["interfaces"][0]
    assert np.isfinite(it["peel_peak"]) and np.isfinite(it["shear_peak"])
    assert all(f["values"] for f in r["edges"])


@pytest.mark.slow
@pytest.mark.parametrize("pattern", [
    {"shape": "stripe", "width": 200, "etch_depth": 30, "pitch": "1 mm"},   # sparse array
    {"shape": "rectangle", "width": 200, "etch_depth": 1e-9},               # 1e-9 nm etch
    {"shape": "rectangle", "width": 200, "etch_depth": 725020},             # through the wafer
])
def test_issue14_point_sampling_cases_solve(pattern):
    res = solve_and_derive(_case(pattern, probe=[{"name": "c", "at": [0, 0, 10]}]))
    assert np.all(np.isfinite(res.probes[0]["stress"]))


def test_issue14_sparse_rectangle_array_point_sampling():
    # pitch = 1 mm around a rectangle: coordinates of 5e5 nm next to nm elements (the full
    # case meshes a million elements; the point map is what failed, tested on its result mesh)
    from skfem import MeshHex

    from mesastrain.fem.fields import reference_coordinates

    m = MeshHex.init_tensor(np.array([0.0, 50.0, 5e5]), np.array([0.0, 1.0]),
                            np.array([-1.0, 0.0, 1e-3]))
    X = reference_coordinates(m.mapping(), np.array([[4e5], [0.5], [5e-4]])[:, :, None],
                              np.array([3]))
    back = m.mapping().F(X, tind=np.array([3]))[:, 0, 0]
    np.testing.assert_allclose(back, [4e5, 0.5, 5e-4], rtol=0, atol=1e-9)


@pytest.mark.slow
def test_issue14_thin_layer_on_thick_substrate():
    # a 0.001 nm layer on a 1 mm substrate (aspect ratio 1e6): solves, probe in the layer
    sub = dict(SI, thickness="1 mm")
    res = solve_and_derive(_case({"shape": "rectangle", "width": 200, "etch_depth": 30},
                                 {"order": 1, "size": 20, "edge_size": 5},
                                 layers=[{"material": "SiGe", "x": 0.2, "thickness": 0.001}],
                                 substrate=sub, probe=[{"name": "c", "at": [0, 0, 0.0005]}]))
    s = res.probes[0]["stress"]
    assert np.all(np.isfinite(s)) and s[0][0] < -500.0      # the compressed SiGe film


@pytest.mark.slow
def test_gmsh_disk_standoff_values_and_centre_shear():
    # quadratic tetrahedra (gmsh disk): stand-off values from the recovered field on both sides
    # of the interface, each with an error bar, and zero shear on the mirror planes at the centre
    res = solve_and_derive(_case({"shape": "disk", "diameter": 100, "etch_depth": 30},
                                 {"order": 2}))
    assert type(res.mesh).__name__ == "UnstructuredMesh"
    r = _readouts(res)
    edge = next(f for f in r["edges"] if f["name"] == "SiGe/substrate edge +x")
    assert set(edge["values"]) == {"SiGe", "substrate"}
    for v in edge["values"].values():
        assert np.isfinite(v["von_mises"]) and v["error_estimate"]["von_mises"] < \
            0.1 * v["von_mises"]
    t = np.linalg.norm(np.array(edge["values"]["SiGe"]["stress"])[:, 2])
    assert edge["traction_jump"] < 0.15 * t
    _, sig, _, region = res.sample([[0.0, 0.0, 10.0], [0.0, 0.0, 0.0]])
    np.testing.assert_allclose(sig[:, [0, 1], 2], 0.0, atol=1e-12 * np.abs(sig).max())
    assert list(region) == [1, 0]
